//! Adam with the standard bias correction and optional decoupled weight decay.
//!
//! References: Kingma & Ba (2015), "Adam: a method for stochastic optimization", ICLR,
//! Algorithm 1; Loshchilov & Hutter (2019), "Decoupled weight decay regularization", ICLR
//! (AdamW: the decay is applied to the weights directly, not added to the gradient).

/// Adam state for one flat parameter vector.
#[derive(Debug, Clone)]
pub(crate) struct Adam {
    m: Vec<f64>,
    v: Vec<f64>,
    t: i32,
}

/// β₁, β₂ and ε as recommended by Kingma & Ba (2015), Algorithm 1.
const BETA1: f64 = 0.9;
const BETA2: f64 = 0.999;
const EPSILON: f64 = 1e-8;

impl Adam {
    pub fn new(len: usize) -> Self {
        Self {
            m: vec![0.0; len],
            v: vec![0.0; len],
            t: 0,
        }
    }

    /// One update θ ← θ − α·(m̂ / (√v̂ + ε) + λ·θ·[decays]), with m̂ = m / (1 − β₁ᵗ) and
    /// v̂ = v / (1 − β₂ᵗ); `decays[i]` selects the parameters under weight decay λ.
    pub fn step(
        &mut self,
        params: &mut [f64],
        grad: &[f64],
        learning_rate: f64,
        weight_decay: f64,
        decays: &[bool],
    ) {
        self.t = self.t.saturating_add(1);
        let c1 = 1.0 - BETA1.powi(self.t);
        let c2 = 1.0 - BETA2.powi(self.t);
        for ((((p, g), m), v), &d) in params
            .iter_mut()
            .zip(grad)
            .zip(self.m.iter_mut())
            .zip(self.v.iter_mut())
            .zip(decays)
        {
            *m = BETA1 * *m + (1.0 - BETA1) * g;
            *v = BETA2 * *v + (1.0 - BETA2) * g * g;
            let m_hat = *m / c1;
            let v_hat = *v / c2;
            let decay = if d { weight_decay * *p } else { 0.0 };
            *p -= learning_rate * (m_hat / (v_hat.sqrt() + EPSILON) + decay);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// With bias correction the first step is α·g/(|g| + ε) ≈ α·sign(g) whatever |g|
    /// (Kingma & Ba 2015, Section 2.1: the effective step is bounded by α).
    #[test]
    fn first_step_has_magnitude_alpha() {
        let mut adam = Adam::new(3);
        let mut p = vec![1.0, 1.0, 1.0];
        let g = [1e-3, -50.0, 2.0];
        adam.step(&mut p, &g, 0.01, 0.0, &[true; 3]);
        for (pi, gi) in p.iter().zip(g) {
            let expected = 1.0 - 0.01 * gi / (gi.abs() + EPSILON);
            assert!((pi - expected).abs() < 1e-15, "{pi} vs {expected}");
        }
    }

    /// On f(θ) = ½ Σ cᵢθᵢ² with very different curvatures Adam reaches the minimum, and the
    /// decoupled decay shrinks only the selected parameters when the gradient is zero.
    #[test]
    fn minimises_a_badly_scaled_quadratic_and_decays_selected_weights() {
        let c = [1e-2, 1.0, 1e2];
        let mut p = vec![1.0, -2.0, 3.0];
        let mut adam = Adam::new(3);
        for _ in 0..3000 {
            let g: Vec<f64> = p.iter().zip(c).map(|(x, ci)| ci * x).collect();
            adam.step(&mut p, &g, 0.01, 0.0, &[false; 3]);
        }
        assert!(p.iter().all(|x| x.abs() < 0.02), "{p:?}");

        let mut q = vec![1.0, 1.0];
        let mut adam = Adam::new(2);
        adam.step(&mut q, &[0.0, 0.0], 0.1, 0.5, &[true, false]);
        assert!(
            (q[0] - (1.0 - 0.1 * 0.5)).abs() < 1e-15 && q[1] == 1.0,
            "{q:?}"
        );
    }
}
