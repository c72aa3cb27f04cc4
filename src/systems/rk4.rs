//! The `Dynamics` trait and a classical fixed-step fourth-order Runge–Kutta integrator (`Rk4`)
//! that can also carry a tangent vector through the same stages.
//! References: Kutta (1901), Z. Math. Phys. 46, 435–453; Hairer, Nørsett & Wanner (1993),
//! "Solving Ordinary Differential Equations I", Springer, ch. II.

/// A vector field dx/dt = f(x) with its tangent-linear map.
pub trait Dynamics: Sync {
    /// Size of the state vector.
    fn dim(&self) -> usize;
    /// Writes f(x) into `dxdt` (both of length `dim()`).
    fn rhs(&self, x: &[f64], dxdt: &mut [f64]);
    /// Tangent-linear map: out = J(x) v, J the Jacobian of rhs at x.
    fn tangent(&self, x: &[f64], v: &[f64], out: &mut [f64]);
}

impl<D: Dynamics + ?Sized> Dynamics for Box<D> {
    fn dim(&self) -> usize {
        (**self).dim()
    }
    fn rhs(&self, x: &[f64], dxdt: &mut [f64]) {
        (**self).rhs(x, dxdt)
    }
    fn tangent(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
        (**self).tangent(x, v, out)
    }
}

/// Classical fixed-step RK4 with preallocated stages; `step` allocates nothing.
///
/// The buffers for the tangent stages are allocated up front as well, so
/// [`Rk4::step_with_tangent`] allocates nothing either.
#[derive(Debug, Clone)]
pub struct Rk4 {
    dim: usize,
    k1: Vec<f64>,
    k2: Vec<f64>,
    k3: Vec<f64>,
    k4: Vec<f64>,
    stage: Vec<f64>,
    // Tangent stages.
    l1: Vec<f64>,
    l2: Vec<f64>,
    l3: Vec<f64>,
    l4: Vec<f64>,
    vstage: Vec<f64>,
}

/// `out = x + a * k`, elementwise.
#[inline]
fn axpy_into(out: &mut [f64], x: &[f64], a: f64, k: &[f64]) {
    for ((o, &xi), &ki) in out.iter_mut().zip(x).zip(k) {
        *o = xi + a * ki;
    }
}

/// `x += h6 * (k1 + 2 k2 + 2 k3 + k4)`, elementwise.
#[inline]
fn combine(x: &mut [f64], h6: f64, k1: &[f64], k2: &[f64], k3: &[f64], k4: &[f64]) {
    for ((((xi, &a), &b), &c), &d) in x.iter_mut().zip(k1).zip(k2).zip(k3).zip(k4) {
        *xi += h6 * (a + 2.0 * (b + c) + d);
    }
}

impl Rk4 {
    /// Allocates the stage buffers for a state of size `dim`.
    pub fn new(dim: usize) -> Self {
        let z = || vec![0.0; dim];
        Rk4 {
            dim,
            k1: z(),
            k2: z(),
            k3: z(),
            k4: z(),
            stage: z(),
            l1: z(),
            l2: z(),
            l3: z(),
            l4: z(),
            vstage: z(),
        }
    }

    /// State size this integrator was built for.
    pub fn dim(&self) -> usize {
        self.dim
    }

    /// Advances `x` by one RK4 step of size `dt`.
    ///
    /// # Panics
    /// If `x.len()` differs from the size given to [`Rk4::new`].
    pub fn step<D: Dynamics + ?Sized>(&mut self, sys: &D, x: &mut [f64], dt: f64) {
        assert_eq!(
            x.len(),
            self.dim,
            "state length does not match Rk4::new(dim)"
        );
        let Rk4 {
            k1,
            k2,
            k3,
            k4,
            stage,
            ..
        } = self;
        let half = 0.5 * dt;
        sys.rhs(x, k1);
        axpy_into(stage, x, half, k1);
        sys.rhs(stage, k2);
        axpy_into(stage, x, half, k2);
        sys.rhs(stage, k3);
        axpy_into(stage, x, dt, k3);
        sys.rhs(stage, k4);
        combine(x, dt / 6.0, k1, k2, k3, k4);
    }

    /// Advances the state `x` and a tangent vector `v` together by one RK4 step.
    ///
    /// The tangent uses the same stages as the state (each stage's tangent is the
    /// tangent-linear map at that stage's state), so `v` is mapped by the exact
    /// Jacobian of the discrete RK4 step.
    ///
    /// # Panics
    /// If `x.len()` or `v.len()` differs from the size given to [`Rk4::new`].
    pub fn step_with_tangent<D: Dynamics + ?Sized>(
        &mut self,
        sys: &D,
        x: &mut [f64],
        v: &mut [f64],
        dt: f64,
    ) {
        assert_eq!(
            x.len(),
            self.dim,
            "state length does not match Rk4::new(dim)"
        );
        assert_eq!(
            v.len(),
            self.dim,
            "tangent length does not match Rk4::new(dim)"
        );
        let Rk4 {
            k1,
            k2,
            k3,
            k4,
            stage,
            l1,
            l2,
            l3,
            l4,
            vstage,
            ..
        } = self;
        let half = 0.5 * dt;
        sys.rhs(x, k1);
        sys.tangent(x, v, l1);
        axpy_into(stage, x, half, k1);
        axpy_into(vstage, v, half, l1);
        sys.rhs(stage, k2);
        sys.tangent(stage, vstage, l2);
        axpy_into(stage, x, half, k2);
        axpy_into(vstage, v, half, l2);
        sys.rhs(stage, k3);
        sys.tangent(stage, vstage, l3);
        axpy_into(stage, x, dt, k3);
        axpy_into(vstage, v, dt, l3);
        sys.rhs(stage, k4);
        sys.tangent(stage, vstage, l4);
        combine(x, dt / 6.0, k1, k2, k3, k4);
        combine(v, dt / 6.0, l1, l2, l3, l4);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Harmonic oscillator x'' = -x as a first-order system; exact solution known.
    struct Oscillator;
    impl Dynamics for Oscillator {
        fn dim(&self) -> usize {
            2
        }
        fn rhs(&self, x: &[f64], d: &mut [f64]) {
            d[0] = x[1];
            d[1] = -x[0];
        }
        fn tangent(&self, _x: &[f64], v: &[f64], out: &mut [f64]) {
            out[0] = v[1];
            out[1] = -v[0];
        }
    }

    /// Logistic growth x' = x (1 - x); exact solution x(t) = 1 / (1 + (1/x0 - 1) e^{-t}).
    struct Logistic;
    impl Dynamics for Logistic {
        fn dim(&self) -> usize {
            1
        }
        fn rhs(&self, x: &[f64], d: &mut [f64]) {
            d[0] = x[0] * (1.0 - x[0]);
        }
        fn tangent(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
            out[0] = (1.0 - 2.0 * x[0]) * v[0];
        }
    }

    fn oscillator_error(dt: f64, t_end: f64) -> f64 {
        let n = (t_end / dt).round() as usize;
        let mut rk = Rk4::new(2);
        let mut x = [1.0, 0.0];
        for _ in 0..n {
            rk.step(&Oscillator, &mut x, dt);
        }
        let t = n as f64 * dt;
        ((x[0] - t.cos()).powi(2) + (x[1] + t.sin()).powi(2)).sqrt()
    }

    fn logistic_error(dt: f64, t_end: f64) -> f64 {
        let n = (t_end / dt).round() as usize;
        let mut rk = Rk4::new(1);
        let x0 = 0.1;
        let mut x = [x0];
        for _ in 0..n {
            rk.step(&Logistic, &mut x, dt);
        }
        let t = n as f64 * dt;
        let exact = 1.0 / (1.0 + (1.0 / x0 - 1.0) * (-t).exp());
        (x[0] - exact).abs()
    }

    /// Test 2: global error of classical RK4 is O(dt^4), so halving dt divides it by
    /// about 16 (Hairer, Nørsett & Wanner 1993, ch. II). Observed order must lie in [3.8, 4.2].
    #[test]
    fn rk4_is_fourth_order() {
        for (name, err) in [
            ("oscillator", oscillator_error as fn(f64, f64) -> f64),
            ("logistic", logistic_error),
        ] {
            let dts = [0.2, 0.1, 0.05, 0.025];
            let errs: Vec<f64> = dts.iter().map(|&dt| err(dt, 10.0)).collect();
            for w in errs.windows(2) {
                let order = (w[0] / w[1]).log2();
                assert!(
                    (3.8..=4.2).contains(&order),
                    "{name}: observed order {order} (errors {errs:?})"
                );
            }
        }
    }

    /// The tangent step is the derivative of the discrete RK4 map: compare with a
    /// central difference of two plain steps (logistic rhs is quadratic, tolerance 1e-8).
    #[test]
    fn tangent_step_is_derivative_of_step() {
        let dt = 0.3;
        let x0 = 0.37;
        let mut rk = Rk4::new(1);
        let mut x = [x0];
        let mut v = [1.0];
        rk.step_with_tangent(&Logistic, &mut x, &mut v, dt);
        let mut plain = [x0];
        rk.step(&Logistic, &mut plain, dt);
        assert_eq!(plain, x, "state part must match the plain step bit for bit");
        let eps = 1e-5;
        let mut xp = [x0 + eps];
        let mut xm = [x0 - eps];
        rk.step(&Logistic, &mut xp, dt);
        rk.step(&Logistic, &mut xm, dt);
        let fd = (xp[0] - xm[0]) / (2.0 * eps);
        assert!(
            (fd - v[0]).abs() <= 1e-8 * fd.abs(),
            "fd {fd} vs tangent {}",
            v[0]
        );
    }
}
