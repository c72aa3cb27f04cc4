//! The Lorenz-63 system dx = σ(y−x), dy = x(ρ−z)−y, dz = xy−βz and its tangent-linear map.
//! Reference: Lorenz, E. N. (1963), "Deterministic nonperiodic flow", J. Atmos. Sci. 20, 130–141.

use super::rk4::Dynamics;

/// Lorenz (1963) three-variable convection model; state `[x, y, z]`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Lorenz63 {
    pub sigma: f64,
    pub rho: f64,
    pub beta: f64,
}

impl Lorenz63 {
    pub fn new(sigma: f64, rho: f64, beta: f64) -> Self {
        Lorenz63 { sigma, rho, beta }
    }
}

impl Dynamics for Lorenz63 {
    fn dim(&self) -> usize {
        3
    }

    #[inline]
    fn rhs(&self, s: &[f64], d: &mut [f64]) {
        let (x, y, z) = (s[0], s[1], s[2]);
        d[0] = self.sigma * (y - x);
        d[1] = x * (self.rho - z) - y;
        d[2] = x * y - self.beta * z;
    }

    #[inline]
    fn tangent(&self, s: &[f64], v: &[f64], out: &mut [f64]) {
        let (x, y, z) = (s[0], s[1], s[2]);
        out[0] = self.sigma * (v[1] - v[0]);
        out[1] = (self.rho - z) * v[0] - v[1] - x * v[2];
        out[2] = y * v[0] + x * v[1] - self.beta * v[2];
    }
}

#[cfg(test)]
mod tests {
    use super::super::test_support::assert_tangent_matches_fd;
    use super::super::{largest_lyapunov, LyapunovSpec, SystemSpec};
    use super::*;

    fn classic() -> SystemSpec {
        SystemSpec::Lorenz63 {
            sigma: 10.0,
            rho: 28.0,
            beta: 8.0 / 3.0,
        }
    }

    /// Test 3 (Lorenz-63 part): J(x) v equals a central finite difference of rhs.
    #[test]
    fn tangent_matches_finite_differences() {
        assert_tangent_matches_fd(&Lorenz63::new(10.0, 28.0, 8.0 / 3.0), 20.0, 11);
    }

    /// Test 1: largest Lyapunov exponent of Lorenz-63 at σ=10, ρ=28, β=8/3 is 0.9056
    /// (Sprott 2003, "Chaos and Time-Series Analysis", Oxford University Press).
    /// Tolerance: 3 %.
    #[test]
    fn largest_lyapunov_matches_sprott() {
        let est = largest_lyapunov(&LyapunovSpec {
            system: classic(),
            dt: 0.01,
            spin_up: 50.0,
            duration: 5000.0,
            renormalise_every: 0.1,
            seed: 1,
        })
        .unwrap();
        let reference = 0.9056; // Sprott (2003)
        assert!(
            (est.exponent - reference).abs() <= 0.03 * reference,
            "estimate {est:?} vs {reference}"
        );
        assert_eq!(est.blocks, 20);
        assert!(
            est.standard_error > 0.0 && est.standard_error < 0.02,
            "{est:?}"
        );
    }
}
