//! Learning curves skill(n): curve families, a weighted nonlinear least-squares engine,
//! AICc, backtests and family weights, inversion for the training-set size n that reaches a
//! target skill, and a bootstrap of that n over replicates, initial conditions and families.
//!
//! Layout:
//! - [`lsq`]: a generic weighted (and optionally one-sided, "censored") nonlinear
//!   least-squares engine on top of the `levenberg-marquardt` crate, with standard errors
//!   `sqrt(RSS/(m−p) · diag((JᵀJ)⁻¹))` computed here; validated on NIST StRD sets.
//! - [`families`]: the seven learning-curve families (power law, saturating and shifted
//!   saturating power laws, exponential saturation, Morgan–Mercer–Flodin, Weibull,
//!   logarithmic), their closed-form inverses and deterministic starting points.
//! - [`fit`]: replicate summaries, multi-start fitting of one family, AICc selection.
//! - [`mod@backtest`]: fit on the smaller sizes, predict the larger; family weights.
//! - [`uncertainty`]: bootstrap of n* over replicates, test initial conditions and families.
//!
//! Censored points: a size at which some forecasts hit the maximum lead time only gives a
//! lower bound on the skill. Such a point contributes the one-sided residual
//! `weight · min(0, f(n) − mean)`: zero (and zero gradient) while the curve lies at or above
//! the bound, and an ordinary weighted residual when the curve falls below it.
//!
//! References: Levenberg (1944), Q. Appl. Math. 2, 164–168; Marquardt (1963), J. SIAM 11,
//! 431–441; Moré (1978), "The Levenberg–Marquardt algorithm: implementation and theory"
//! (MINPACK), Springer LNM 630; Hurvich & Tsai (1989), Biometrika 76, 297–307
//! (AICc); Efron & Tibshirani (1993), An Introduction to the Bootstrap; NIST Statistical
//! Reference Datasets (StRD), nonlinear regression.

pub mod backtest;
#[cfg(test)]
mod coverage;
pub mod families;
pub mod fit;
pub mod lsq;
pub mod uncertainty;

pub use backtest::{backtest, Backtest, BacktestCase, BacktestScore, WeightRule};
pub use families::{Family, Inversion};
pub use fit::{
    aicc, fit_family, fit_family_on, select_by_aicc, summarise, CurveFit, CurvePoint, FitScale,
    SizeSamples,
};
pub use lsq::{least_squares, LsqResult, Model, Observation};
pub use uncertainty::{bootstrap_targets, SkillGrid, TargetDraws};

/// Everything that can go wrong while fitting or using a learning curve.
#[derive(Debug, thiserror::Error)]
pub enum CurveError {
    /// The starting vector does not have one value per model parameter.
    #[error("starting point has {got} values but the model has {expected} parameters; pass one starting value per parameter")]
    StartLength { expected: usize, got: usize },

    /// A starting value is NaN or infinite.
    #[error("starting point {start:?} contains a non-finite value; use finite starting values")]
    NonFiniteStart { start: Vec<f64> },

    /// There are no observations at all.
    #[error("no observations to fit; supply at least one (x, y) pair")]
    NoObservations,

    /// An observation has a non-finite x or y, or a weight that is not finite and positive.
    #[error("observation {index} is invalid (x = {x}, y = {y}, weight = {weight}); x and y must be finite and the weight finite and > 0")]
    InvalidObservation {
        index: usize,
        x: f64,
        y: f64,
        weight: f64,
    },

    /// The model gives a non-finite value or gradient at the starting point.
    #[error("the model is not finite at the starting point {start:?}; choose a starting point inside the model's domain")]
    ModelNotFiniteAtStart { start: Vec<f64> },

    /// Too few training-set sizes for the family.
    #[error("{family} has {params} parameters and needs at least {needed} sizes, but only {got} were given; measure skill at more training-set sizes")]
    TooFewPoints {
        family: &'static str,
        params: usize,
        needed: usize,
        got: usize,
    },

    /// A curve point has a non-finite or non-positive n, a non-finite mean, or a standard
    /// error that is not finite and positive (e.g. a size with no replicate values).
    #[error("curve point at n = {n} is invalid (mean = {mean}, standard error = {standard_error}); n must be finite and > 0, the mean finite and the standard error finite and > 0 (does this size have replicate values?)")]
    InvalidPoint {
        n: f64,
        mean: f64,
        standard_error: f64,
    },

    /// Every start failed (the optimiser stopped on a non-finite value or the model could not
    /// be evaluated at any start).
    #[error("{family}: no start produced a usable fit ({starts} starts tried; last problem: {last_problem}); check the data or try another family")]
    NoFit {
        family: &'static str,
        starts: usize,
        last_problem: String,
    },

    /// A log-scale fit met a mean skill that is not positive.
    #[error("the mean skill at n = {n} is {mean}; fitting on the log scale needs positive skill (use the linear scale)")]
    NonPositiveForLog { n: f64, mean: f64 },

    /// The best fit has non-finite parameters.
    #[error("{family}: the best fit has non-finite parameters {params:?}; the family does not describe these data")]
    NonFiniteParams {
        family: &'static str,
        params: Vec<f64>,
    },

    /// The best fit does not increase over the measured range of n.
    #[error("{family}: the best fit {params:?} is not increasing over n in [{n_min}, {n_max}] (skill should grow with n); check the data or use another family")]
    NotIncreasing {
        family: &'static str,
        params: Vec<f64>,
        n_min: f64,
        n_max: f64,
    },
}
