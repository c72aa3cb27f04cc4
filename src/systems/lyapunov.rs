//! Largest Lyapunov exponent by the tangent-linear (Benettin) method with block standard errors.
//! References: Benettin, Galgani, Giorgilli & Strelcyn (1980), Meccanica 15, 9–20 and 21–30;
//! Sprott (2003), "Chaos and Time-Series Analysis", Oxford University Press.

use rand::RngExt;
use rand_chacha::rand_core::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

use super::rk4::{Dynamics, Rk4};
use super::{check_interval, check_non_negative, check_positive, SystemError, SystemSpec};

/// Number of equal blocks the run is split into for the standard error.
pub const LYAPUNOV_BLOCKS: usize = 20;

/// What to integrate for [`largest_lyapunov`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LyapunovSpec {
    pub system: SystemSpec,
    /// RK4 step (time units), > 0.
    pub dt: f64,
    /// Time integrated (state and tangent) and discarded before averaging, >= 0.
    pub spin_up: f64,
    /// Averaging time; must cover at least 2 renormalisation intervals. Rounded down to a
    /// whole number of blocks of whole intervals (the time actually used is reported).
    pub duration: f64,
    /// Renormalisation interval: a positive whole multiple of `dt`.
    pub renormalise_every: f64,
    /// Seeds the initial state and the initial tangent vector.
    pub seed: u64,
}

/// Result of [`largest_lyapunov`].
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LyapunovEstimate {
    /// Largest Lyapunov exponent (per time unit).
    pub exponent: f64,
    /// Standard error from the spread of the block means: sd(block means) / sqrt(blocks).
    pub standard_error: f64,
    /// Averaging time actually used (time units), after rounding to whole blocks.
    pub duration: f64,
    /// Number of blocks (at most 20).
    pub blocks: usize,
}

impl LyapunovSpec {
    /// Checks the system and every numeric field; returns the first problem found.
    pub fn validate(&self) -> Result<(), SystemError> {
        self.plan().map(|_| ())
    }

    /// (steps per renormalisation, spin-up steps, intervals per block, blocks).
    fn plan(&self) -> Result<(usize, usize, usize, usize), SystemError> {
        self.system.validate()?;
        check_positive("dt", self.dt)?;
        check_non_negative("spin_up", self.spin_up)?;
        check_positive("duration", self.duration)?;
        let m = check_interval("renormalise_every", self.renormalise_every, self.dt)?;
        let interval = m as f64 * self.dt;
        let intervals = (self.duration / interval * (1.0 + 1e-9)).floor();
        if intervals < 2.0 {
            return Err(SystemError::DurationTooShort {
                duration: self.duration,
                renormalise_every: self.renormalise_every,
                min: 2.0 * interval,
            });
        }
        let intervals = intervals.min(usize::MAX as f64) as usize;
        let blocks = LYAPUNOV_BLOCKS.min(intervals);
        let per_block = intervals / blocks;
        let spin_steps = super::spin_up_steps(self.spin_up, self.dt);
        super::check_work(
            "this Lyapunov estimate",
            spin_steps as f64 + intervals as f64 * m as f64,
            0.0,
            "reduce `duration` or `spin_up`, or raise `dt`",
        )?;
        Ok((m, spin_steps, per_block, blocks))
    }
}

/// Largest Lyapunov exponent by the tangent-linear (Benettin) method: evolve state and tangent vector with RK4, renormalise every `renormalise_every` time units, average log growth. Standard error from the spread of block means (e.g. 20 blocks).
///
/// The tangent vector (random unit vector from the seed) is evolved and renormalised during
/// spin-up as well, so it is aligned with the leading direction before averaging starts.
pub fn largest_lyapunov(spec: &LyapunovSpec) -> Result<LyapunovEstimate, SystemError> {
    let (m, spin_steps, per_block, blocks) = spec.plan()?;
    let sys = spec.system.build();
    let dim = sys.dim();
    let dt = spec.dt;
    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    let mut x = spec.system.initial_state_from(&mut rng);
    let mut v: Vec<f64> = (0..dim).map(|_| rng.random_range(-1.0..1.0)).collect();
    normalise(&mut v, 0, dt)?;
    let mut rk = Rk4::new(dim);
    let mut steps_done: u64 = 0;

    // Spin-up: evolve both, renormalising, without accumulating.
    let mut left = spin_steps;
    while left > 0 {
        let n = left.min(m);
        for _ in 0..n {
            rk.step_with_tangent(&sys, &mut x, &mut v, dt);
        }
        steps_done += n as u64;
        left -= n;
        check_state(&x, steps_done, dt)?;
        normalise(&mut v, steps_done, dt)?;
    }

    let interval = m as f64 * dt;
    let block_time = per_block as f64 * interval;
    let mut block_means = Vec::with_capacity(blocks);
    for _ in 0..blocks {
        let mut log_growth = 0.0;
        for _ in 0..per_block {
            for _ in 0..m {
                rk.step_with_tangent(&sys, &mut x, &mut v, dt);
            }
            steps_done += m as u64;
            check_state(&x, steps_done, dt)?;
            log_growth += normalise(&mut v, steps_done, dt)?.ln();
        }
        block_means.push(log_growth / block_time);
    }
    let nb = blocks as f64;
    let mean = block_means.iter().sum::<f64>() / nb;
    let var = block_means.iter().map(|b| (b - mean).powi(2)).sum::<f64>() / (nb - 1.0);
    Ok(LyapunovEstimate {
        exponent: mean,
        standard_error: (var / nb).sqrt(),
        duration: nb * block_time,
        blocks,
    })
}

fn check_state(x: &[f64], steps_done: u64, dt: f64) -> Result<(), SystemError> {
    if x.iter().all(|v| v.is_finite()) {
        Ok(())
    } else {
        Err(SystemError::NonFiniteState {
            time: steps_done as f64 * dt,
            dt,
        })
    }
}

/// Scales `v` to unit length and returns its previous norm; a zero or non-finite norm is
/// reported as a non-finite trajectory.
fn normalise(v: &mut [f64], steps_done: u64, dt: f64) -> Result<f64, SystemError> {
    let norm = v.iter().map(|a| a * a).sum::<f64>().sqrt();
    if !(norm.is_finite() && norm > 0.0) {
        return Err(SystemError::NonFiniteState {
            time: steps_done as f64 * dt,
            dt,
        });
    }
    let inv = 1.0 / norm;
    v.iter_mut().for_each(|a| *a *= inv);
    Ok(norm)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn l63() -> SystemSpec {
        SystemSpec::Lorenz63 {
            sigma: 10.0,
            rho: 28.0,
            beta: 8.0 / 3.0,
        }
    }

    /// A non-chaotic case with a known answer: Lorenz-63 at ρ = 0.5 has the origin as a
    /// stable node; the largest eigenvalue of the Jacobian there is
    /// (−(σ+1) + sqrt((σ−1)² + 4σρ)) / 2, which the exponent must
    /// reproduce within 1e-3 absolute.
    #[test]
    fn stable_fixed_point_gives_leading_eigenvalue() {
        let (sigma, rho, beta) = (10.0, 0.5, 8.0 / 3.0);
        let est = largest_lyapunov(&LyapunovSpec {
            system: SystemSpec::Lorenz63 { sigma, rho, beta },
            dt: 0.01,
            spin_up: 100.0,
            duration: 20.0,
            renormalise_every: 0.1,
            seed: 2,
        })
        .unwrap();
        let expect = (-(sigma + 1.0) + ((sigma - 1.0f64).powi(2) + 4.0 * sigma * rho).sqrt()) / 2.0;
        assert!(
            (est.exponent - expect).abs() < 1e-3,
            "{est:?} vs eigenvalue {expect}"
        );
    }

    #[test]
    fn reproducible_and_reports_blocks() {
        let spec = LyapunovSpec {
            system: l63(),
            dt: 0.01,
            spin_up: 5.0,
            duration: 10.0,
            renormalise_every: 0.1,
            seed: 9,
        };
        let a = largest_lyapunov(&spec).unwrap();
        let b = largest_lyapunov(&spec).unwrap();
        assert_eq!(a, b);
        assert_eq!(a.blocks, 20);
        assert!((a.duration - 10.0).abs() < 1e-9);
        // Fewer intervals than 20: one interval per block.
        let short = largest_lyapunov(&LyapunovSpec {
            duration: 0.5,
            ..spec.clone()
        })
        .unwrap();
        assert_eq!(short.blocks, 5);
    }

    #[test]
    fn bad_specs_are_rejected() {
        let base = LyapunovSpec {
            system: l63(),
            dt: 0.01,
            spin_up: 5.0,
            duration: 10.0,
            renormalise_every: 0.1,
            seed: 9,
        };
        let err = largest_lyapunov(&LyapunovSpec {
            duration: 0.15,
            ..base.clone()
        })
        .unwrap_err();
        assert!(matches!(err, SystemError::DurationTooShort { .. }), "{err}");
        assert!(err.to_string().contains("at least 0.2"), "{err}");
        let err = largest_lyapunov(&LyapunovSpec {
            renormalise_every: 0.105,
            ..base.clone()
        })
        .unwrap_err();
        assert!(err.to_string().contains("`renormalise_every`"), "{err}");
        // An explosive step size is reported, not panicked on.
        let err = largest_lyapunov(&LyapunovSpec {
            dt: 0.5,
            renormalise_every: 0.5,
            ..base
        })
        .unwrap_err();
        assert!(matches!(err, SystemError::NonFiniteState { .. }), "{err}");
    }
}
