//! Built-in chaotic reference systems, a fixed-step RK4 integrator, simulation to saved samples
//! and the largest Lyapunov exponent.
//!
//! # Systems
//!
//! * **Lorenz-63** (Lorenz 1963), state `(x, y, z)`:
//!   dx/dt = σ(y − x), dy/dt = x(ρ − z) − y, dz/dt = xy − βz.
//! * **Lorenz-96** (Lorenz 1996), K ≥ 4 cyclic variables:
//!   dX_k/dt = (X_{k+1} − X_{k−2}) X_{k−1} − X_k + F, indices modulo K.
//! * **Two-scale Lorenz-96** (Lorenz 1996, in the form used by Wilks 2005), K slow X and J fast Y
//!   per X:
//!   dX_k/dt = −X_{k−1}(X_{k−2} − X_{k+1}) − X_k + F − (hc/b) Σ_j Y_{j,k},
//!   dY_{j,k}/dt = −cb Y_{j+1,k}(Y_{j+2,k} − Y_{j−1,k}) − c Y_{j,k} + (hc/b) X_k.
//!   The fast variables form one cyclic chain of length K·J (Y_{J,k} = Y_{0,k+1}, …). Only the X
//!   are "resolved"; the subgrid (coupling) term U_k = −(hc/b) Σ_j Y_{j,k} is recorded at every
//!   saved sample, so that dX_k/dt = [Lorenz-96 tendency of X]_k + U_k exactly.
//!
//! # Numerics
//!
//! Classical fixed-step RK4 ([`Rk4`]); the tangent vector for the Lyapunov exponent is carried
//! through the same stages ([`Rk4::step_with_tangent`]), i.e. it is mapped by the Jacobian of
//! the discrete step. The largest Lyapunov exponent follows Benettin et al. (1980): the tangent
//! vector is renormalised every `renormalise_every` time units and the log growth averaged; the
//! standard error comes from the spread of 20 block means.
//!
//! # Initial conditions
//!
//! Deterministic from `seed` through `ChaCha8Rng::seed_from_u64(seed)`, each draw uniform on
//! [−1, 1): Lorenz-63 `(1, 1, 1) + 0.1·u`; Lorenz-96 `X_k = F + 0.01·u_k`; two-scale: the slow X
//! exactly as for Lorenz-96 (drawn first from the same stream, so h = 0 reproduces Lorenz-96 bit
//! for bit), then `Y = 0.01·u`. Spin-up is integrated and discarded.
//!
//! # References
//!
//! * Lorenz, E. N. (1963). Deterministic nonperiodic flow. J. Atmos. Sci. 20, 130–141.
//! * Lorenz, E. N. (1996). Predictability: a problem partly solved. Proc. ECMWF Seminar on
//!   Predictability, Reading, vol. 1, 1–18.
//! * Wilks, D. S. (2005). Effects of stochastic parametrizations in the Lorenz '96 system.
//!   Q. J. R. Meteorol. Soc. 131, 389–407.
//! * Benettin, G., Galgani, L., Giorgilli, A. & Strelcyn, J.-M. (1980). Lyapunov characteristic
//!   exponents for smooth dynamical systems and for Hamiltonian systems. Meccanica 15, 9–20, 21–30.
//! * Sprott, J. C. (2003). Chaos and Time-Series Analysis. Oxford University Press.
//! * Hairer, E., Nørsett, S. P. & Wanner, G. (1993). Solving Ordinary Differential Equations I.
//!   Springer.

mod lorenz63;
pub(crate) mod lorenz96;
mod lyapunov;
mod rk4;
mod two_scale;

pub use lorenz63::Lorenz63;
pub use lorenz96::Lorenz96;
pub use lyapunov::{largest_lyapunov, LyapunovEstimate, LyapunovSpec, LYAPUNOV_BLOCKS};
pub use rk4::{Dynamics, Rk4};
pub use two_scale::TwoScaleLorenz96;

use std::collections::BTreeMap;

use ndarray::Array2;
use rand::RngExt;
use rand_chacha::rand_core::SeedableRng;
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};

/// Largest integrated state allowed (number of f64 variables).
pub const MAX_STATE_DIM: usize = 1 << 24;

/// Relative tolerance for "a whole multiple of dt".
const MULTIPLE_TOL: f64 = 1e-9;

/// Finite-state check interval (steps) inside long stretches without a saved sample.
const CHECK_EVERY: usize = 64;

/// Everything that can go wrong when validating a spec or integrating.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SystemError {
    /// A parameter is NaN or infinite.
    #[error("`{field}` must be a finite number, got {value}")]
    NonFiniteParameter { field: &'static str, value: f64 },
    /// A parameter that must be strictly positive is not.
    #[error("`{field}` must be greater than 0, got {value}")]
    NotPositive { field: &'static str, value: f64 },
    /// A parameter that must be non-negative is negative.
    #[error("`{field}` must be 0 or more, got {value}")]
    Negative { field: &'static str, value: f64 },
    /// A size parameter is below the system's minimum.
    #[error("`{field}` = {value} is too small for {system}: it must be at least {min}")]
    TooSmall {
        system: &'static str,
        field: &'static str,
        value: usize,
        min: usize,
    },
    /// The integrated state would be too large.
    #[error(
        "{system} with these sizes would integrate {dim} variables, more than the {max} allowed; \
         reduce `k` or `j`"
    )]
    StateTooLarge {
        system: &'static str,
        dim: u128,
        max: usize,
    },
    /// `samples` is zero.
    #[error("`samples` must be at least 1, got 0")]
    NoSamples,
    /// An interval is not a positive whole multiple of `dt`.
    #[error(
        "`{field}` = {value} is not a positive whole multiple of `dt` = {dt} (relative \
         tolerance 1e-9); the nearest valid value is {nearest}"
    )]
    NotMultipleOfDt {
        field: &'static str,
        value: f64,
        dt: f64,
        nearest: f64,
    },
    /// The Lyapunov averaging time is shorter than two renormalisation intervals.
    #[error(
        "`duration` = {duration} is shorter than 2 renormalisation intervals of \
         `renormalise_every` = {renormalise_every}; it must be at least {min}"
    )]
    DurationTooShort {
        duration: f64,
        renormalise_every: f64,
        min: f64,
    },
    /// The trajectory (or tangent vector) turned NaN or infinite.
    #[error(
        "the trajectory became non-finite by t = {time} (time since the start of spin-up) with \
         `dt` = {dt}; the integration is unstable, try a smaller `dt`"
    )]
    NonFiniteState { time: f64, dt: f64 },
    /// The run could not finish: more integrator steps than the ceiling, or more memory for
    /// its saved samples than the machine has available.
    #[error(
        "{what} would take {steps:.3e} integrator steps and {} for its saved values; the limits are {MAX_STEPS:.0e} steps and {} of memory available on this machine: {fix}",
        gigabytes(*bytes),
        available.map(gigabytes).unwrap_or_else(|| "the".into())
    )]
    TooMuchWork {
        what: &'static str,
        steps: f64,
        bytes: f64,
        available: Option<f64>,
        fix: &'static str,
    },
}

/// Ceiling on the RK4 steps of one simulation or Lyapunov estimate (about an hour or more of
/// integration for the larger built-in systems; common practice, from memory).
pub const MAX_STEPS: f64 = 1e9;

/// Bytes as gigabytes, three significant figures.
fn gigabytes(bytes: f64) -> String {
    format!("{:.3} GB", bytes / 1e9)
}

/// Memory the operating system reports available (Linux `MemAvailable` in /proc/meminfo), or
/// `None` where it cannot be read.
pub fn available_memory() -> Option<f64> {
    meminfo("MemAvailable:")
}

/// The machine's memory (Linux `MemTotal` in /proc/meminfo), or `None` where it cannot be read.
pub fn total_memory() -> Option<f64> {
    meminfo("MemTotal:")
}

/// One field of /proc/meminfo in bytes.
fn meminfo(field: &str) -> Option<f64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with(field))?;
    let kb: f64 = line
        .trim_start_matches(field)
        .trim()
        .trim_end_matches("kB")
        .trim()
        .parse()
        .ok()?;
    Some(kb * 1024.0)
}

/// Integrator throughput for the time estimates of `check`, in state variables advanced by one
/// RK4 step per second, and the fixed cost per step counted in variables. Measured on the
/// development machine (2 shared cores, release build, `closure-budget simulate` of 2.0e6 steps):
/// Lorenz-63 0.12 s, Lorenz-96 (K = 40) 0.64 s, two-scale Lorenz-96 (K = 8, J = 32) 3.19 s
/// (process start and writing included), which (variables + 10) / 1.5e8 s per step matches to
/// within 45%, on the high side (0.17, 0.67 and 3.65 s).
pub const VARIABLE_STEPS_PER_SECOND: f64 = 1.5e8;

/// The fixed cost of one RK4 step, in state variables (see [`VARIABLE_STEPS_PER_SECOND`]).
pub const STEP_OVERHEAD_VARIABLES: f64 = 10.0;

/// Refuses work beyond [`MAX_STEPS`] or beyond the available memory.
fn check_work(
    what: &'static str,
    steps: f64,
    bytes: f64,
    fix: &'static str,
) -> Result<(), SystemError> {
    let available = available_memory();
    if steps > MAX_STEPS || available.is_some_and(|a| bytes > a) {
        return Err(SystemError::TooMuchWork {
            what,
            steps,
            bytes,
            available,
            fix,
        });
    }
    Ok(())
}

/// A built-in reference system and its parameters.
///
/// Serialised with a `name` tag equal to [`SystemSpec::label`] (`"lorenz-63"`, `"lorenz-96"`,
/// `"two-scale-lorenz-96"`); serde's own kebab-case spellings (`"lorenz63"`, `"lorenz96"`,
/// `"two-scale-lorenz96"`) are accepted as aliases.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "name", rename_all = "kebab-case", deny_unknown_fields)]
pub enum SystemSpec {
    #[serde(rename = "lorenz-63", alias = "lorenz63")]
    Lorenz63 { sigma: f64, rho: f64, beta: f64 },
    #[serde(rename = "lorenz-96", alias = "lorenz96")]
    Lorenz96 { k: usize, forcing: f64 },
    /// Lorenz (1996) two-scale system: K slow X, J fast Y per X.
    #[serde(rename = "two-scale-lorenz-96", alias = "two-scale-lorenz96")]
    TwoScaleLorenz96 {
        k: usize,
        j: usize,
        h: f64,
        c: f64,
        b: f64,
        forcing: f64,
    },
}

/// Concrete dynamics for a [`SystemSpec`], dispatched by `match` (monomorphic inner loops).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum BuiltSystem {
    Lorenz63(Lorenz63),
    Lorenz96(Lorenz96),
    TwoScaleLorenz96(TwoScaleLorenz96),
}

impl Dynamics for BuiltSystem {
    #[inline]
    fn dim(&self) -> usize {
        match self {
            BuiltSystem::Lorenz63(s) => s.dim(),
            BuiltSystem::Lorenz96(s) => s.dim(),
            BuiltSystem::TwoScaleLorenz96(s) => s.dim(),
        }
    }
    #[inline]
    fn rhs(&self, x: &[f64], dxdt: &mut [f64]) {
        match self {
            BuiltSystem::Lorenz63(s) => s.rhs(x, dxdt),
            BuiltSystem::Lorenz96(s) => s.rhs(x, dxdt),
            BuiltSystem::TwoScaleLorenz96(s) => s.rhs(x, dxdt),
        }
    }
    #[inline]
    fn tangent(&self, x: &[f64], v: &[f64], out: &mut [f64]) {
        match self {
            BuiltSystem::Lorenz63(s) => s.tangent(x, v, out),
            BuiltSystem::Lorenz96(s) => s.tangent(x, v, out),
            BuiltSystem::TwoScaleLorenz96(s) => s.tangent(x, v, out),
        }
    }
}

fn check_finite(field: &'static str, value: f64) -> Result<(), SystemError> {
    if value.is_finite() {
        Ok(())
    } else {
        Err(SystemError::NonFiniteParameter { field, value })
    }
}

pub(crate) fn check_positive(field: &'static str, value: f64) -> Result<(), SystemError> {
    check_finite(field, value)?;
    if value > 0.0 {
        Ok(())
    } else {
        Err(SystemError::NotPositive { field, value })
    }
}

pub(crate) fn check_non_negative(field: &'static str, value: f64) -> Result<(), SystemError> {
    check_finite(field, value)?;
    if value >= 0.0 {
        Ok(())
    } else {
        Err(SystemError::Negative { field, value })
    }
}

/// Number of RK4 steps in `value`, which must be a positive whole multiple of `dt` within a
/// relative tolerance of 1e-9. `dt` must already be checked positive.
pub(crate) fn check_interval(
    field: &'static str,
    value: f64,
    dt: f64,
) -> Result<usize, SystemError> {
    check_positive(field, value)?;
    let ratio = value / dt;
    let n = ratio.round();
    if n >= 1.0 && n <= u32::MAX as f64 && (ratio - n).abs() <= MULTIPLE_TOL * ratio {
        Ok(n as usize)
    } else {
        Err(SystemError::NotMultipleOfDt {
            field,
            value,
            dt,
            nearest: n.clamp(1.0, u32::MAX as f64) * dt,
        })
    }
}

/// Spin-up steps: `spin_up / dt` rounded up (a spin-up within 1e-9 of a whole number of steps
/// is not rounded up by one extra step).
pub(crate) fn spin_up_steps(spin_up: f64, dt: f64) -> usize {
    let ratio = spin_up / dt;
    (ratio - MULTIPLE_TOL * ratio).ceil().max(0.0) as usize
}

impl SystemSpec {
    /// Default parameters of a built-in system by label: Lorenz-63 σ=10, ρ=28, β=8/3 (Lorenz
    /// 1963); Lorenz-96 K=40, F=8 (Lorenz 1996); two-scale Lorenz-96 K=8, J=32, h=1, c=10, b=10,
    /// F=20 (the K, J, h, c, b of Wilks 2005 at a forcing where the slow variables are
    /// broadband-chaotic).
    pub fn with_defaults(label: &str) -> Option<SystemSpec> {
        Some(match label {
            "lorenz-63" => SystemSpec::Lorenz63 {
                sigma: 10.0,
                rho: 28.0,
                beta: 8.0 / 3.0,
            },
            "lorenz-96" => SystemSpec::Lorenz96 {
                k: 40,
                forcing: 8.0,
            },
            "two-scale-lorenz-96" => SystemSpec::TwoScaleLorenz96 {
                k: 8,
                j: 32,
                h: 1.0,
                c: 10.0,
                b: 10.0,
                forcing: 20.0,
            },
            _ => return None,
        })
    }

    /// Sets one parameter by name (as spelled in study files); whole-number parameters (`k`,
    /// `j`) must be given as whole numbers. Errors say which names the system has.
    pub fn set(&mut self, key: &str, value: &str) -> Result<(), String> {
        let float = || -> Result<f64, String> {
            value
                .parse::<f64>()
                .map_err(|_| format!("`{key}` = '{value}' is not a number"))
        };
        let whole = || -> Result<usize, String> {
            value
                .parse::<usize>()
                .map_err(|_| format!("`{key}` = '{value}' is not a whole number"))
        };
        let label = self.label();
        match (self, key) {
            (SystemSpec::Lorenz63 { sigma, .. }, "sigma") => *sigma = float()?,
            (SystemSpec::Lorenz63 { rho, .. }, "rho") => *rho = float()?,
            (SystemSpec::Lorenz63 { beta, .. }, "beta") => *beta = float()?,
            (SystemSpec::Lorenz96 { k, .. }, "k") => *k = whole()?,
            (SystemSpec::Lorenz96 { forcing, .. }, "forcing") => *forcing = float()?,
            (SystemSpec::TwoScaleLorenz96 { k, .. }, "k") => *k = whole()?,
            (SystemSpec::TwoScaleLorenz96 { j, .. }, "j") => *j = whole()?,
            (SystemSpec::TwoScaleLorenz96 { h, .. }, "h") => *h = float()?,
            (SystemSpec::TwoScaleLorenz96 { c, .. }, "c") => *c = float()?,
            (SystemSpec::TwoScaleLorenz96 { b, .. }, "b") => *b = float()?,
            (SystemSpec::TwoScaleLorenz96 { forcing, .. }, "forcing") => *forcing = float()?,
            (s, _) => {
                let names: Vec<String> = s.parameters().into_keys().collect();
                return Err(format!(
                    "{label} has no parameter `{key}`; its parameters are {}",
                    names.join(", ")
                ));
            }
        }
        Ok(())
    }
}

impl SystemSpec {
    /// Checks every parameter; errors name the field, the bad value and what is allowed.
    pub fn validate(&self) -> Result<(), SystemError> {
        let system = self.label();
        match *self {
            SystemSpec::Lorenz63 { sigma, rho, beta } => {
                check_positive("sigma", sigma)?;
                check_finite("rho", rho)?;
                check_positive("beta", beta)?;
            }
            SystemSpec::Lorenz96 { k, forcing } => {
                check_k(system, k)?;
                check_finite("forcing", forcing)?;
            }
            SystemSpec::TwoScaleLorenz96 {
                k,
                j,
                h,
                c,
                b,
                forcing,
            } => {
                check_k(system, k)?;
                if j < 1 {
                    return Err(SystemError::TooSmall {
                        system,
                        field: "j",
                        value: j,
                        min: 1,
                    });
                }
                let dim = k as u128 * (j as u128 + 1);
                if dim > MAX_STATE_DIM as u128 {
                    return Err(SystemError::StateTooLarge {
                        system,
                        dim,
                        max: MAX_STATE_DIM,
                    });
                }
                check_finite("h", h)?;
                check_positive("c", c)?;
                check_positive("b", b)?;
                check_finite("forcing", forcing)?;
            }
        }
        Ok(())
    }

    /// `"lorenz-63"`, `"lorenz-96"` or `"two-scale-lorenz-96"` (also the serde `name` tag).
    pub fn label(&self) -> &'static str {
        match self {
            SystemSpec::Lorenz63 { .. } => "lorenz-63",
            SystemSpec::Lorenz96 { .. } => "lorenz-96",
            SystemSpec::TwoScaleLorenz96 { .. } => "two-scale-lorenz-96",
        }
    }

    /// Numeric parameters by field name (sizes as f64), for metadata sidecars.
    pub fn parameters(&self) -> BTreeMap<String, f64> {
        let pairs: Vec<(&str, f64)> = match *self {
            SystemSpec::Lorenz63 { sigma, rho, beta } => {
                vec![("sigma", sigma), ("rho", rho), ("beta", beta)]
            }
            SystemSpec::Lorenz96 { k, forcing } => vec![("k", k as f64), ("forcing", forcing)],
            SystemSpec::TwoScaleLorenz96 {
                k,
                j,
                h,
                c,
                b,
                forcing,
            } => vec![
                ("k", k as f64),
                ("j", j as f64),
                ("h", h),
                ("c", c),
                ("b", b),
                ("forcing", forcing),
            ],
        };
        pairs.into_iter().map(|(n, v)| (n.to_string(), v)).collect()
    }

    /// Integrated state size (two-scale: K + K·J).
    pub fn full_dim(&self) -> usize {
        match *self {
            SystemSpec::Lorenz63 { .. } => 3,
            SystemSpec::Lorenz96 { k, .. } => k,
            SystemSpec::TwoScaleLorenz96 { k, j, .. } => k + k * j,
        }
    }

    /// Number of resolved variables (columns of [`Simulated::resolved`]).
    pub fn resolved_dim(&self) -> usize {
        match *self {
            SystemSpec::Lorenz63 { .. } => 3,
            SystemSpec::Lorenz96 { k, .. } | SystemSpec::TwoScaleLorenz96 { k, .. } => k,
        }
    }

    /// Lorenz-63: `x, y, z`; Lorenz-96: `X0..X{K-1}`; two-scale: `X0..X{K-1}` (slow variables only).
    pub fn resolved_names(&self) -> Vec<String> {
        match *self {
            SystemSpec::Lorenz63 { .. } => vec!["x".into(), "y".into(), "z".into()],
            SystemSpec::Lorenz96 { k, .. } | SystemSpec::TwoScaleLorenz96 { k, .. } => {
                (0..k).map(|i| format!("X{i}")).collect()
            }
        }
    }

    /// Two-scale: `U0..U{K-1}`; other systems: empty.
    pub fn subgrid_names(&self) -> Vec<String> {
        match *self {
            SystemSpec::TwoScaleLorenz96 { k, .. } => (0..k).map(|i| format!("U{i}")).collect(),
            _ => Vec::new(),
        }
    }

    /// Boxed dynamics. Prefer [`SystemSpec::build`] in hot loops (enum dispatch, no box).
    /// Sizes are assumed valid (call [`SystemSpec::validate`] first).
    pub fn dynamics(&self) -> Box<dyn Dynamics> {
        Box::new(self.build())
    }

    /// Concrete dynamics for this spec. Sizes are assumed valid (call `validate` first).
    pub fn build(&self) -> BuiltSystem {
        match *self {
            SystemSpec::Lorenz63 { sigma, rho, beta } => {
                BuiltSystem::Lorenz63(Lorenz63::new(sigma, rho, beta))
            }
            SystemSpec::Lorenz96 { k, forcing } => BuiltSystem::Lorenz96(Lorenz96::new(k, forcing)),
            SystemSpec::TwoScaleLorenz96 {
                k,
                j,
                h,
                c,
                b,
                forcing,
            } => BuiltSystem::TwoScaleLorenz96(TwoScaleLorenz96::new(k, j, h, c, b, forcing)),
        }
    }

    /// Deterministic initial state (length [`SystemSpec::full_dim`]) from `seed`; see the
    /// module docs for the recipe.
    pub fn initial_state(&self, seed: u64) -> Vec<f64> {
        self.initial_state_from(&mut ChaCha8Rng::seed_from_u64(seed))
    }

    pub(crate) fn initial_state_from(&self, rng: &mut ChaCha8Rng) -> Vec<f64> {
        let mut u = || -> f64 { rng.random_range(-1.0..1.0) };
        match *self {
            SystemSpec::Lorenz63 { .. } => (0..3).map(|_| 1.0 + 0.1 * u()).collect(),
            SystemSpec::Lorenz96 { k, forcing } => (0..k).map(|_| forcing + 0.01 * u()).collect(),
            SystemSpec::TwoScaleLorenz96 { k, j, forcing, .. } => {
                let mut s: Vec<f64> = Vec::with_capacity(k + k * j);
                s.extend((0..k).map(|_| forcing + 0.01 * u()));
                s.extend((0..k * j).map(|_| 0.01 * u()));
                s
            }
        }
    }
}

fn check_k(system: &'static str, k: usize) -> Result<(), SystemError> {
    if k < 4 {
        return Err(SystemError::TooSmall {
            system,
            field: "k",
            value: k,
            min: 4,
        });
    }
    if k > MAX_STATE_DIM {
        return Err(SystemError::StateTooLarge {
            system,
            dim: k as u128,
            max: MAX_STATE_DIM,
        });
    }
    Ok(())
}

/// What to simulate and what to save.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimulationSpec {
    pub system: SystemSpec,
    /// RK4 step (time units), > 0.
    pub dt: f64,
    /// Time between saved samples: a positive whole multiple of `dt` (relative tolerance 1e-9).
    pub sample_interval: f64,
    /// Time integrated and discarded before the first sample, >= 0 (rounded up to whole steps).
    pub spin_up: f64,
    /// Number of saved samples, >= 1.
    pub samples: usize,
    /// Seeds the initial condition.
    pub seed: u64,
}

impl SystemSpec {
    /// About how long `steps` RK4 steps of this system take on one core, in seconds (see
    /// [`VARIABLE_STEPS_PER_SECOND`]).
    pub fn integration_seconds(&self, steps: f64) -> f64 {
        steps * (self.full_dim() as f64 + STEP_OVERHEAD_VARIABLES) / VARIABLE_STEPS_PER_SECOND
    }
}

impl SimulationSpec {
    /// RK4 steps of the run: the spin-up and the steps between the saved samples (for fields
    /// already checked: a positive `dt`, a whole multiple for `sample_interval`).
    pub fn integrator_steps(&self) -> f64 {
        let per_sample = (self.sample_interval / self.dt).round();
        spin_up_steps(self.spin_up, self.dt) as f64
            + (self.samples as f64 - 1.0).max(0.0) * per_sample
    }

    /// Bytes of the saved values: the resolved state and, for the two-scale system, the
    /// coupling term of every sample.
    pub fn saved_bytes(&self) -> f64 {
        let subgrid = match self.system {
            SystemSpec::TwoScaleLorenz96 { k, .. } => k,
            _ => 0,
        };
        self.samples as f64 * (self.system.resolved_dim() + subgrid) as f64 * 8.0
    }

    /// Checks the system and every numeric field; returns the first problem found.
    pub fn validate(&self) -> Result<(), SystemError> {
        self.plan().map(|_| ())
    }

    /// (steps per sample, spin-up steps).
    fn plan(&self) -> Result<(usize, usize), SystemError> {
        self.system.validate()?;
        check_positive("dt", self.dt)?;
        let per_sample = check_interval("sample_interval", self.sample_interval, self.dt)?;
        check_non_negative("spin_up", self.spin_up)?;
        if self.samples == 0 {
            return Err(SystemError::NoSamples);
        }
        let spin = spin_up_steps(self.spin_up, self.dt);
        check_work(
            "this simulation",
            self.integrator_steps(),
            self.saved_bytes(),
            "reduce `samples` or `spin_up`, or raise `dt`",
        )?;
        Ok((per_sample, spin))
    }
}

/// Saved output of [`simulate`].
#[derive(Debug, Clone, PartialEq)]
pub struct Simulated {
    /// samples × resolved dim (row t = state at time t*sample_interval after spin-up).
    pub resolved: Array2<f64>,
    /// 2-scale only: samples × K, the exact coupling term acting on each X at that saved sample.
    pub subgrid: Option<Array2<f64>>,
    pub resolved_names: Vec<String>,
    pub subgrid_names: Vec<String>,
}

/// Integrates `spec.system` from its seeded initial state: `spin_up` is integrated and
/// discarded, then `samples` states are saved every `sample_interval` (the first one right
/// after spin-up).
///
/// `progress(done, total)` is called every so often (not every step) if given: in units of
/// saved samples, about 100 times over the run and always once with `done == total`.
///
/// The state is checked for NaN/infinity at every saved sample and every 64 steps otherwise; a
/// non-finite state returns [`SystemError::NonFiniteState`].
pub fn simulate(
    spec: &SimulationSpec,
    progress: Option<&(dyn Fn(usize, usize) + Sync)>,
) -> Result<Simulated, SystemError> {
    let (per_sample, spin_steps) = spec.plan()?;
    let sys = spec.system.build();
    let dt = spec.dt;
    let samples = spec.samples;
    let r = spec.system.resolved_dim();
    let mut x = spec.system.initial_state(spec.seed);
    let mut rk = Rk4::new(x.len());
    let mut steps_done: u64 = 0;

    let mut advance = |x: &mut [f64], n: usize| -> Result<(), SystemError> {
        let mut left = n;
        while left > 0 {
            let chunk = left.min(CHECK_EVERY);
            for _ in 0..chunk {
                rk.step(&sys, x, dt);
            }
            steps_done += chunk as u64;
            left -= chunk;
            if !x.iter().all(|v| v.is_finite()) {
                return Err(SystemError::NonFiniteState {
                    time: steps_done as f64 * dt,
                    dt,
                });
            }
        }
        Ok(())
    };

    advance(&mut x, spin_steps)?;

    let mut resolved = Array2::<f64>::zeros((samples, r));
    let mut subgrid = match sys {
        BuiltSystem::TwoScaleLorenz96(s) => Some((s, Array2::<f64>::zeros((samples, s.k)))),
        _ => None,
    };
    let report_every = (samples / 100).max(1);
    for t in 0..samples {
        if t > 0 {
            advance(&mut x, per_sample)?;
        }
        for (dst, &src) in resolved.row_mut(t).iter_mut().zip(&x[..r]) {
            *dst = src;
        }
        if let Some((s, u)) = subgrid.as_mut() {
            let mut row = u.row_mut(t);
            // Rows of a standard-layout array are contiguous.
            if let Some(out) = row.as_slice_mut() {
                s.coupling(&x, out);
            }
        }
        if let Some(p) = progress {
            let done = t + 1;
            if done % report_every == 0 || done == samples {
                p(done, samples);
            }
        }
    }

    Ok(Simulated {
        resolved,
        subgrid: subgrid.map(|(_, u)| u),
        resolved_names: spec.system.resolved_names(),
        subgrid_names: spec.system.subgrid_names(),
    })
}

#[cfg(test)]
pub(crate) mod test_support {
    use super::Dynamics;
    use rand::RngExt;
    use rand_chacha::rand_core::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    /// Test 3 helper: on 5 random states (uniform in ±`scale`) and random directions, J(x) v
    /// must equal the central difference (f(x+εv) − f(x−εv)) / 2ε. All rhs here are quadratic,
    /// so the difference is exact up to round-off; tolerance 1e-6 relative to max(|Jv|, 1).
    pub(crate) fn assert_tangent_matches_fd<D: Dynamics>(sys: &D, scale: f64, seed: u64) {
        let n = sys.dim();
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let eps = 1e-4;
        let (mut fp, mut fm, mut jv) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        for trial in 0..5 {
            let x: Vec<f64> = (0..n)
                .map(|_| scale * rng.random_range(-1.0..1.0))
                .collect();
            let v: Vec<f64> = (0..n).map(|_| rng.random_range(-1.0..1.0)).collect();
            let xp: Vec<f64> = x.iter().zip(&v).map(|(a, b)| a + eps * b).collect();
            let xm: Vec<f64> = x.iter().zip(&v).map(|(a, b)| a - eps * b).collect();
            sys.rhs(&xp, &mut fp);
            sys.rhs(&xm, &mut fm);
            sys.tangent(&x, &v, &mut jv);
            let norm = jv.iter().fold(1.0f64, |m, a| m.max(a.abs()));
            for i in 0..n {
                let fd = (fp[i] - fm[i]) / (2.0 * eps);
                assert!(
                    (fd - jv[i]).abs() <= 1e-6 * norm,
                    "trial {trial}, component {i}: fd {fd} vs tangent {}",
                    jv[i]
                );
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::atomic::{AtomicUsize, Ordering};

    fn l96_spec(seed: u64) -> SimulationSpec {
        SimulationSpec {
            system: SystemSpec::Lorenz96 { k: 8, forcing: 8.0 },
            dt: 0.01,
            sample_interval: 0.05,
            spin_up: 5.0,
            samples: 300,
            seed,
        }
    }

    /// Test 5: bit-for-bit reproducible for a seed, different for another seed.
    #[test]
    fn simulation_is_reproducible() {
        for system in [
            SystemSpec::Lorenz63 {
                sigma: 10.0,
                rho: 28.0,
                beta: 8.0 / 3.0,
            },
            SystemSpec::Lorenz96 { k: 8, forcing: 8.0 },
            SystemSpec::TwoScaleLorenz96 {
                k: 4,
                j: 8,
                h: 1.0,
                c: 10.0,
                b: 10.0,
                forcing: 10.0,
            },
        ] {
            let spec = SimulationSpec {
                system,
                dt: 0.005,
                sample_interval: 0.01,
                spin_up: 1.0,
                samples: 200,
                seed: 42,
            };
            let a = simulate(&spec, None).unwrap();
            let b = simulate(&spec, None).unwrap();
            let bits = |s: &Simulated| s.resolved.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
            assert_eq!(bits(&a), bits(&b));
            assert_eq!(a, b);
            let c = simulate(
                &SimulationSpec {
                    seed: 43,
                    ..spec.clone()
                },
                None,
            )
            .unwrap();
            assert_ne!(a.resolved, c.resolved);
            assert_eq!(a.resolved.dim(), (200, spec.system.resolved_dim()));
            assert_eq!(a.resolved_names, spec.system.resolved_names());
        }
    }

    #[test]
    fn first_row_is_state_after_spin_up() {
        let spec = SimulationSpec {
            spin_up: 0.0,
            ..l96_spec(1)
        };
        let out = simulate(&spec, None).unwrap();
        let x0 = spec.system.initial_state(1);
        assert_eq!(out.resolved.row(0).to_vec(), x0);
        // Row 1 is 5 steps later.
        let sys = spec.system.build();
        let mut x = x0;
        let mut rk = Rk4::new(8);
        for _ in 0..5 {
            rk.step(&sys, &mut x, 0.01);
        }
        assert_eq!(out.resolved.row(1).to_vec(), x);
    }

    #[test]
    fn progress_is_reported_sparingly_and_completes() {
        let calls = AtomicUsize::new(0);
        let last = AtomicUsize::new(0);
        let cb = |done: usize, total: usize| {
            assert_eq!(total, 300);
            calls.fetch_add(1, Ordering::Relaxed);
            last.store(done, Ordering::Relaxed);
        };
        simulate(&l96_spec(1), Some(&cb)).unwrap();
        assert_eq!(last.load(Ordering::Relaxed), 300);
        let n = calls.load(Ordering::Relaxed);
        assert!((1..=101).contains(&n), "{n} calls");
    }

    /// Test 5: bad specs give the documented errors and messages.
    #[test]
    fn bad_specs_are_rejected_with_clear_messages() {
        let err = simulate(
            &SimulationSpec {
                sample_interval: 0.024,
                ..l96_spec(1)
            },
            None,
        )
        .unwrap_err();
        assert_eq!(
            err,
            SystemError::NotMultipleOfDt {
                field: "sample_interval",
                value: 0.024,
                dt: 0.01,
                nearest: 0.02,
            }
        );
        assert_eq!(
            err.to_string(),
            "`sample_interval` = 0.024 is not a positive whole multiple of `dt` = 0.01 (relative \
             tolerance 1e-9); the nearest valid value is 0.02"
        );
        // Within tolerance: 0.1 / 0.01 is not exactly 10 in floating point but is accepted.
        assert!(SimulationSpec {
            sample_interval: 0.1,
            ..l96_spec(1)
        }
        .validate()
        .is_ok());
        // Smaller than dt.
        let err = SimulationSpec {
            sample_interval: 0.001,
            ..l96_spec(1)
        }
        .validate()
        .unwrap_err();
        assert!(
            err.to_string().contains("nearest valid value is 0.01"),
            "{err}"
        );

        let err = SimulationSpec {
            system: SystemSpec::Lorenz96 { k: 3, forcing: 8.0 },
            ..l96_spec(1)
        }
        .validate()
        .unwrap_err();
        assert_eq!(
            err.to_string(),
            "`k` = 3 is too small for lorenz-96: it must be at least 4"
        );

        let two = |j: usize, c: f64| SystemSpec::TwoScaleLorenz96 {
            k: 8,
            j,
            h: 1.0,
            c,
            b: 10.0,
            forcing: 20.0,
        };
        assert!(matches!(
            two(0, 10.0).validate(),
            Err(SystemError::TooSmall {
                field: "j",
                value: 0,
                min: 1,
                ..
            })
        ));
        assert_eq!(
            two(32, -1.0).validate().unwrap_err().to_string(),
            "`c` must be greater than 0, got -1"
        );
        assert!(matches!(
            two(usize::MAX / 4, 10.0).validate(),
            Err(SystemError::StateTooLarge { .. })
        ));
        let err = SystemSpec::Lorenz63 {
            sigma: 10.0,
            rho: f64::NAN,
            beta: 1.0,
        }
        .validate()
        .unwrap_err();
        assert_eq!(err.to_string(), "`rho` must be a finite number, got NaN");

        let bad = |f: fn(&mut SimulationSpec)| {
            let mut s = l96_spec(1);
            f(&mut s);
            s.validate().unwrap_err()
        };
        assert_eq!(
            bad(|s| s.dt = 0.0),
            SystemError::NotPositive {
                field: "dt",
                value: 0.0
            }
        );
        assert_eq!(
            bad(|s| s.spin_up = -1.0).to_string(),
            "`spin_up` must be 0 or more, got -1"
        );
        assert_eq!(bad(|s| s.samples = 0), SystemError::NoSamples);
    }

    /// A blow-up is an error with the time it was detected, never a panic.
    #[test]
    fn blow_up_is_an_error() {
        let spec = SimulationSpec {
            system: SystemSpec::Lorenz63 {
                sigma: 10.0,
                rho: 28.0,
                beta: 8.0 / 3.0,
            },
            dt: 0.5,
            sample_interval: 0.5,
            spin_up: 0.0,
            samples: 1000,
            seed: 1,
        };
        let err = simulate(&spec, None).unwrap_err();
        match err {
            SystemError::NonFiniteState { time, dt } => {
                assert_eq!(dt, 0.5);
                assert!(time > 0.0 && time <= 500.0, "time {time}");
            }
            other => panic!("unexpected {other}"),
        }
        assert!(err.to_string().contains("try a smaller `dt`"), "{err}");
    }

    #[test]
    fn metadata_helpers() {
        let s = SystemSpec::TwoScaleLorenz96 {
            k: 8,
            j: 32,
            h: 1.0,
            c: 10.0,
            b: 10.0,
            forcing: 20.0,
        };
        assert_eq!(s.label(), "two-scale-lorenz-96");
        assert_eq!(s.full_dim(), 8 + 256);
        assert_eq!(s.dynamics().dim(), 264);
        assert_eq!(s.resolved_names().len(), 8);
        assert_eq!(s.subgrid_names()[7], "U7");
        let p = s.parameters();
        assert_eq!(p.len(), 6);
        assert_eq!(p["j"], 32.0);
        let l63 = SystemSpec::Lorenz63 {
            sigma: 10.0,
            rho: 28.0,
            beta: 8.0 / 3.0,
        };
        assert_eq!(l63.resolved_names(), ["x", "y", "z"]);
        assert!(l63.subgrid_names().is_empty());
        assert_eq!(l63.label(), "lorenz-63");
        assert_eq!(
            SystemSpec::Lorenz96 {
                k: 40,
                forcing: 8.0
            }
            .resolved_names()[39],
            "X39"
        );
    }

    #[test]
    fn deserialises_from_toml_and_json() {
        let spec: SimulationSpec = toml::from_str(
            r#"
            dt = 0.005
            sample_interval = 0.01
            spin_up = 10
            samples = 100
            seed = 3
            [system]
            name = "two-scale-lorenz-96"
            k = 8
            j = 32
            h = 1
            c = 10
            b = 10
            forcing = 20
            "#,
        )
        .unwrap();
        assert_eq!(spec.system.label(), "two-scale-lorenz-96");
        assert_eq!(spec.system.full_dim(), 264);
        // Round trip through JSON keeps the label as the tag.
        let json = serde_json::to_string(&spec.system).unwrap();
        assert!(json.contains(r#""name":"two-scale-lorenz-96""#), "{json}");
        let back: SystemSpec = serde_json::from_str(&json).unwrap();
        assert_eq!(back, spec.system);
        // serde's automatic kebab-case spelling is accepted as an alias.
        let l63: SystemSpec =
            serde_json::from_str(r#"{"name":"lorenz63","sigma":10,"rho":28,"beta":2.5}"#).unwrap();
        assert_eq!(l63.label(), "lorenz-63");
        // Unknown fields and names are rejected.
        assert!(serde_json::from_str::<SystemSpec>(
            r#"{"name":"lorenz-96","k":40,"forcing":8,"extra":1}"#
        )
        .is_err());
        assert!(serde_json::from_str::<SystemSpec>(r#"{"name":"rossler"}"#).is_err());
    }
}
