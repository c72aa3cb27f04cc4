//! Learning curves skill(n): curve families bounded to shapes a learning curve can have, a
//! variable-projection least-squares engine, AICc, backtests and family weights, inversion for
//! the training-set size n that reaches a target, a bootstrap of that n over replicates,
//! initial conditions and families, and checks of a fitted curve against the measured points.
//!
//! Layout:
//! - [`families`]: the seven learning-curve families (power law, saturating and shifted
//!   saturating power laws, exponential saturation, Morgan–Mercer–Flodin, Weibull,
//!   logarithmic) in an increasing (higher is better) and a decreasing (lower is better)
//!   direction, their closed-form inverses and their variable-projection form.
//! - [`bounds`]: the bounds of every nonlinear parameter (no step functions, no overflow), and
//!   why.
//! - [`varpro`]: variable projection — linear parameters in closed form, the at most two
//!   nonlinear ones by a grid and a bounded Levenberg–Marquardt refinement with the exact
//!   Golub–Pereyra Jacobian.
//! - [`fit`]: replicate summaries, fits of one family (weighted by the replicate spread, or
//!   ordinary least squares with the residual variance when there is none), rejection of
//!   fits at a bound, checks against the measured points, AICc selection.
//! - [`mod@backtest`]: fit on the smaller sizes, predict the larger; family weights.
//! - [`isotonic`]: inside the measured range the data decide — isotonic size means, the
//!   first crossing interpolated in ln n, and its bootstrap.
//! - [`calibration`]: beyond it — the extrapolation from the ranked families (a family
//!   crossing inside the measured range where the data do not is passed over), hindsight
//!   pairs and the calibrated predictive interval with its support.
//! - [`uncertainty`]: bootstrap of n* over replicates, test initial conditions and families.
//! - [`lsq`]: a generic weighted nonlinear least-squares engine on top of the
//!   `levenberg-marquardt` crate, for models outside the families; validated on NIST StRD
//!   sets.
//!
//! Censored points: a size at which some forecasts hit the maximum lead time only gives a
//! lower bound on the skill. Such a point contributes the one-sided residual
//! `weight · min(0, f(n) − mean)`: zero (and zero gradient) while the curve lies at or above
//! the bound, and an ordinary weighted residual when the curve falls below it.
//!
//! References: Levenberg (1944), Q. Appl. Math. 2, 164–168; Marquardt (1963), J. SIAM 11,
//! 431–441; Moré (1978), "The Levenberg–Marquardt algorithm: implementation and theory"
//! (MINPACK), Springer LNM 630; Golub & Pereyra (1973), SIAM J. Numer. Anal. 10, 413–432, and
//! (2003), Inverse Problems 19, R1–R26 (variable projection); Hurvich & Tsai (1989),
//! Biometrika 76, 297–307 (AICc); Efron & Tibshirani (1993), An Introduction to the
//! Bootstrap; Hestness et al. (2017), arXiv:1712.00409, and Viering & Loog (2022), IEEE
//! TPAMI (shapes of learning curves, see [`bounds`]); Domhan, Springenberg & Hutter (2015),
//! IJCAI (monotone parametric learning curves); NIST Statistical Reference Datasets (StRD),
//! nonlinear regression.

pub mod backtest;
pub mod bounds;
pub mod calibration;
#[cfg(test)]
mod coverage;
pub mod families;
pub mod fit;
pub mod isotonic;
pub mod lsq;
pub mod uncertainty;
pub mod varpro;

pub use backtest::{backtest, backtest_with, Backtest, BacktestCase, BacktestScore, WeightRule};
pub use bounds::BoundRules;
pub use families::{Direction, Family, Inversion};
pub use fit::{
    aicc, fit_family, fit_family_on, fit_family_with, select_by_aicc, summarise, CurveFit,
    CurvePoint, Disagreement, FitOptions, FitScale, SizeSamples, Weighting,
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
    /// error that is not finite and ≥ 0 (e.g. a size with no replicate values), or the
    /// standard errors mix zero and positive values.
    #[error("curve point at n = {n} is invalid (mean = {mean}, standard error = {standard_error}); n must be finite and > 0, the mean finite, and the standard errors finite and either all > 0 or all 0 (no replicate spread) (does this size have replicate values?)")]
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

    /// The best fit is flat: the data do not move in the curve's direction.
    #[error("{family}: rejected: the best {direction} fit is flat over n in [{n_min}, {n_max}] (the measured values do not move with n in that direction); check the data, or whether higher or lower is better for this metric")]
    NotMonotone {
        family: &'static str,
        direction: &'static str,
        n_min: f64,
        n_max: f64,
    },

    /// The fit ends at a bound of a nonlinear parameter, or the curve is not finite over the
    /// range of n that matters; the reason says which and what the curve degenerates into.
    #[error("{family}: rejected: {reason}")]
    Rejected {
        family: &'static str,
        reason: String,
    },

    /// The bound rules do not define a box of positive values.
    #[error("invalid curve bounds {rules:?}: the exponents need 0 < min-exponent < max-exponent and the location factor must be ≥ 1")]
    InvalidBounds { rules: bounds::BoundRules },
}
