//! Streaming ridge regression: normal equations G = Σφφᵀ, B = Σφyᵀ accumulated block by block
//! (the feature matrix is never materialised), snapshots at nested-prefix boundaries, the
//! penalised solve (G + λI)W = B by Cholesky, and the penalty chosen by generalised
//! cross-validation from one eigendecomposition of G.
//!
//! * [`normal`]: the normal equations and their Cholesky solve;
//! * [`penalty`]: how the penalty is set ([`RidgeSelection`], [`Penalty`]) and the solved
//!   readout ([`fit_readout`], and [`fit_readout_toward`] a prior readout);
//! * [`selection`]: the eigendecomposition, GCV scores, penalty grids and the one grid search
//!   every ridge fit uses ([`select`]);
//! * [`svd`]: ridge on an explicit design with an unpenalised constant, by SVD (the polynomial
//!   fit);
//! * [`export`]: a solved readout written out for an independent check (the rows of its
//!   problem, its penalty as applied, its weights and the standardisation);
//! * [`nested`]: the one nested pass every ridge-readout family runs ([`nested_pass`]): a
//!   source of feature/target rows, blocks at fixed positions, and the equations of every
//!   prefix, the same bit for bit whatever other prefixes the pass evaluates.
//!
//! Gram updates use faer's lower-triangular matrix product (half the work of a full product);
//! every product and factorisation runs sequentially inside one fit, so results do not depend on
//! the thread count.
//!
//! # Generalised cross-validation from the normal equations
//!
//! With G = VEVᵀ and C = VᵀB, for any λ: W = V diag(1/(e + λ)) C; the residual sum of squares is
//! RSS(λ) = Σy² − Σ_i Σ_k c_ik² (e_i + 2λ)/(e_i + λ)²; the effective degrees of freedom are
//! df(λ) = tr H = Σ_i e_i/(e_i + λ); and GCV(λ) = N·RSS(λ)/(N − df(λ))², summed over outputs
//! (every output shares df). One O(F³) decomposition makes each λ cost O(F·D).
//!
//! References: Hoerl & Kennard (1970), "Ridge regression", Technometrics 12(1); Golub, Heath &
//! Wahba (1979), "Generalized cross-validation as a method for choosing a good ridge parameter",
//! Technometrics 21(2).

pub mod export;
pub mod nested;
pub mod normal;
pub mod penalty;
pub mod selection;
pub mod svd;

pub use nested::{
    nested_pass, nested_readouts, Block, Layout, ReadoutScore, RowSource, Rows, BLOCK_ROWS,
};
pub use normal::NormalEquations;
pub use penalty::{
    fit_readout, fit_readout_toward, forecast_readout, Penalty, Readout, RidgeChoice,
    RidgeSelection,
};
pub use selection::{
    relative_grid, select, RidgeEigen, Selection, Tie, FORECAST_GRID_DECADES, GCV_GRID_DECADES,
};

/// Errors from solving the ridge normal equations.
#[derive(Debug, thiserror::Error)]
pub enum RidgeError {
    #[error("ridge system of size {features} is not positive definite even with penalty {lambda:e}; the features are degenerate (raise `ridge`)")]
    NotPositiveDefinite { features: usize, lambda: f64 },
    #[error("no training pairs: the subset is not longer than the washout")]
    Empty,
    #[error("eigendecomposition of the {features} × {features} Gram matrix failed (non-finite features?); use `ridge-selection = \"fixed\"`")]
    Eigen { features: usize },
    #[error("generalised cross-validation gave no finite score on the penalty grid of {grid} values (non-finite or degenerate features); use `ridge-selection = \"fixed\"`")]
    NoFiniteScore { grid: usize },
    #[error("ridge-selection = \"forecast\" needs validation forecasts, which this fit does not have (emulators of a study only; use \"fixed\" or \"gcv\")")]
    NoForecasts,
}

/// Clears the upper halves of the vector registers after faer's hand-written AVX-512 kernels.
///
/// Measured: without it, every later scalar `exp` on the same thread ran about ten times slower
/// (glibc's SSE code pays for the dirty upper register state), which made reservoir updates after
/// a Gram update dominate the whole study.
#[inline]
pub fn clear_upper_simd_state() {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: `vzeroupper` only zeroes bits 128 and up of the vector registers, which no
            // live Rust value holds across this call boundary; the CPU supports AVX.
            unsafe { std::arch::asm!("vzeroupper", options(nomem, nostack, preserves_flags)) };
        }
    }
}

/// Random least-squares problems shared by the tests of the submodules.
#[cfg(test)]
pub(crate) mod test_problems {
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// `rows` rows of `f` features and `d` targets, entries uniform in ±1, row-major.
    pub fn random_problem(rows: usize, f: usize, d: usize, seed: u64) -> (Vec<f64>, Vec<f64>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let phi: Vec<f64> = (0..rows * f).map(|_| rng.random_range(-1.0..1.0)).collect();
        let y: Vec<f64> = (0..rows * d).map(|_| rng.random_range(-1.0..1.0)).collect();
        (phi, y)
    }

    /// A prior readout of `f` features and `d` outputs, entries uniform in ±`size`.
    pub fn random_prior(f: usize, d: usize, size: f64, seed: u64) -> Vec<f64> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..f * d).map(|_| rng.random_range(-size..size)).collect()
    }
}
