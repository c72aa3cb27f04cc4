//! The single-scale Lorenz-96 model dX_k/dt = (X_{k+1} − X_{k−2}) X_{k−1} − X_k + F (cyclic in k)
//! and its tangent-linear map. Reference: Lorenz, E. N. (1996), "Predictability: a problem partly
//! solved", Proc. ECMWF Seminar on Predictability, Reading, vol. 1, 1–18.

use super::rk4::Dynamics;

/// Lorenz (1996) single-scale model with `k` cyclic variables and constant forcing.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Lorenz96 {
    pub k: usize,
    pub forcing: f64,
}

impl Lorenz96 {
    /// `k` must be at least 4 (checked by `SystemSpec::validate`; debug-asserted here).
    pub fn new(k: usize, forcing: f64) -> Self {
        debug_assert!(k >= 4);
        Lorenz96 { k, forcing }
    }
}

/// Lorenz-96 tendency `out_k = (x_{k+1} − x_{k−2}) x_{k−1} − x_k + forcing`, cyclic in k.
/// The cyclic ends are written out explicitly so the interior loop has no `%`.
/// Requires `x.len() == out.len() >= 4`.
#[inline]
pub(crate) fn l96_tendency(x: &[f64], forcing: f64, out: &mut [f64]) {
    let n = x.len();
    debug_assert!(n >= 4 && out.len() == n);
    out[0] = (x[1] - x[n - 2]) * x[n - 1] - x[0] + forcing;
    out[1] = (x[2] - x[n - 1]) * x[0] - x[1] + forcing;
    // Interior k = 2..n-1: window w = [x_{k-2}, x_{k-1}, x_k, x_{k+1}].
    for (o, w) in out[2..n - 1].iter_mut().zip(x.windows(4)) {
        *o = (w[3] - w[0]) * w[1] - w[2] + forcing;
    }
    out[n - 1] = (x[0] - x[n - 3]) * x[n - 2] - x[n - 1] + forcing;
}

/// Tangent-linear map of [`l96_tendency`]:
/// `out_k = (v_{k+1} − v_{k−2}) x_{k−1} + (x_{k+1} − x_{k−2}) v_{k−1} − v_k`.
#[inline]
pub(crate) fn l96_tangent(x: &[f64], v: &[f64], out: &mut [f64]) {
    let n = x.len();
    debug_assert!(n >= 4 && out.len() == n && v.len() == n);
    #[inline(always)]
    fn term(xm2: f64, xm1: f64, xp1: f64, vm2: f64, vm1: f64, v0: f64, vp1: f64) -> f64 {
        (vp1 - vm2) * xm1 + (xp1 - xm2) * vm1 - v0
    }
    out[0] = term(x[n - 2], x[n - 1], x[1], v[n - 2], v[n - 1], v[0], v[1]);
    out[1] = term(x[n - 1], x[0], x[2], v[n - 1], v[0], v[1], v[2]);
    for ((o, w), u) in out[2..n - 1].iter_mut().zip(x.windows(4)).zip(v.windows(4)) {
        *o = term(w[0], w[1], w[3], u[0], u[1], u[2], u[3]);
    }
    out[n - 1] = term(x[n - 3], x[n - 2], x[0], v[n - 3], v[n - 2], v[n - 1], v[0]);
}

impl Dynamics for Lorenz96 {
    fn dim(&self) -> usize {
        self.k
    }

    #[inline]
    fn rhs(&self, x: &[f64], dxdt: &mut [f64]) {
        l96_tendency(x, self.forcing, dxdt);
    }

    #[inline]
    fn tangent(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
        l96_tangent(x, v, out);
    }
}

#[cfg(test)]
mod tests {
    use super::super::test_support::assert_tangent_matches_fd;
    use super::super::{largest_lyapunov, LyapunovSpec, SystemSpec};
    use super::*;

    /// The explicit-boundary tendency equals the textbook formula with `%` indexing.
    #[test]
    fn tendency_matches_modular_formula() {
        for n in [4usize, 5, 8, 40] {
            let x: Vec<f64> = (0..n).map(|i| ((i * 7 + 3) as f64).sin() * 5.0).collect();
            let mut out = vec![0.0; n];
            l96_tendency(&x, 8.0, &mut out);
            for k in 0..n {
                let expect =
                    (x[(k + 1) % n] - x[(k + n - 2) % n]) * x[(k + n - 1) % n] - x[k] + 8.0;
                assert_eq!(out[k], expect, "n={n} k={k}");
            }
        }
    }

    /// Test 3 (Lorenz-96 part): J(x) v equals a central finite difference of rhs.
    #[test]
    fn tangent_matches_finite_differences() {
        for k in [4usize, 5, 40] {
            assert_tangent_matches_fd(&Lorenz96::new(k, 8.0), 8.0, k as u64);
        }
    }

    /// Test 6: the largest Lyapunov exponent of Lorenz-96 with K = 40, F = 8 is positive and
    /// about 1.7 (from memory: values of 1.65–1.7 are commonly quoted, e.g. a doubling time of
    /// about 0.4 time units in Lorenz & Emanuel 1998, J. Atmos. Sci. 55, 399–414). Range 1.6–1.8.
    #[test]
    fn largest_lyapunov_k40_f8() {
        let est = largest_lyapunov(&LyapunovSpec {
            system: SystemSpec::Lorenz96 {
                k: 40,
                forcing: 8.0,
            },
            dt: 0.01,
            spin_up: 50.0,
            duration: 1000.0,
            renormalise_every: 0.1,
            seed: 3,
        })
        .unwrap();
        assert!(
            (1.6..=1.8).contains(&est.exponent),
            "estimate {est:?} outside 1.6..=1.8"
        );
    }
}
