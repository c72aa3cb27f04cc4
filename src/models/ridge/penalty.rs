//! A solved ridge readout: how its penalty is set ([`RidgeSelection`], [`Penalty`]), the
//! solve by Cholesky at a fixed penalty or from the eigendecomposition at the penalty GCV
//! chooses ([`fit_readout`]), and the same shrunk toward a prior readout instead of zero
//! ([`fit_readout_toward`]).
//!
//! References: Hoerl & Kennard (1970), "Ridge regression", Technometrics 12(1); Golub, Heath &
//! Wahba (1979), Technometrics 21(2); Tikhonov & Arsenin (1977), "Solutions of Ill-Posed
//! Problems" (from memory).

use super::normal::NormalEquations;
use super::RidgeError;
use crate::models::{FitSummary, RidgeScaling};
use serde::{Deserialize, Serialize};

/// How a ridge penalty is chosen (`ridge-selection` in a study file), for every family with a
/// ridge fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RidgeSelection {
    /// The configured `ridge`: scaled by `ridge-scaling` for the streaming readouts; for the
    /// polynomial fit a per-row penalty, 0 meaning plain least squares by QR.
    #[default]
    Fixed,
    /// Generalised cross-validation, separately for every fit (every subset size): on
    /// [`RidgeEigen::default_grid`](super::RidgeEigen::default_grid) for the streaming readouts, where `ridge` and
    /// `ridge-scaling` are not used, and on the polynomial's own grid of per-row penalties
    /// (Golub, Heath & Wahba 1979).
    ///
    /// GCV targets one-step (in-sample) prediction error and assumes independent residuals.
    /// One-step residuals of a time series are autocorrelated, under which GCV tends to choose
    /// too small a penalty (Opsomer, Wang & Yang 2001, "Nonparametric regression with correlated
    /// errors", Statistical Science); and the smallest
    /// one-step error need not give the most stable autonomous forecast (measured for the
    /// next-generation reservoir computer on Lorenz-63, see `ngrc`).
    Gcv,
    /// By forecasts, separately for every fit (every subset size): on
    /// [`FORECAST_GRID_DECADES`](super::FORECAST_GRID_DECADES) relative to the mean eigenvalue
    /// of the Gram matrix, the penalty whose readout forecasts best from the study's validation
    /// initial conditions (the largest mean valid prediction time; on a tie the larger penalty).
    /// The skill the curve reports is what the penalty is tuned for, measured on validation
    /// data that neither the fit nor the test forecasts use; `ridge` and `ridge-scaling` are not
    /// used. A closure's candidates run coupled in the coarse solver.
    ///
    /// Measured (`studies/demo.toml` pilot, 16 validation conditions): a 600-unit ESN emulator
    /// forecast 0.08–0.90 time units from 125 to 8,000 samples against 0.05–0.78 with its fixed
    /// penalty; on the quick demo an ESN closure gained nothing (1.37 against 1.42 at 3,200)
    /// and trained about 200× longer (19 s against 0.09 s over three replicates): with a few
    /// validation conditions the choice among 15 penalties partly follows their noise.
    Forecast,
}

/// A readout's penalty setting, resolved from model parameters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Penalty {
    /// λ (per training pair under [`RidgeScaling::PerSample`]); used by [`RidgeSelection::Fixed`].
    pub ridge: f64,
    /// How λ follows the number of training pairs; used by [`RidgeSelection::Fixed`].
    pub scaling: RidgeScaling,
    /// Fixed penalty or GCV.
    pub selection: RidgeSelection,
}

/// How the penalty of one fit was chosen, as recorded in its fit summary.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RidgeChoice {
    /// Fixed penalty or GCV.
    pub method: RidgeSelection,
    /// GCV score at the chosen penalty (squared target units; GCV only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gcv_score: Option<f64>,
    /// GCV chose the smallest or largest grid penalty: the best may lie beyond the grid.
    #[serde(default)]
    pub at_grid_edge: bool,
    /// Mean valid prediction time of the chosen readout on the validation initial conditions
    /// (model time units; forecast selection only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub validation_valid_time: Option<f64>,
}

/// A solved readout.
#[derive(Debug, Clone, PartialEq)]
pub struct Readout {
    /// Outputs × features, row-major.
    pub weights: Vec<f64>,
    /// Root-mean-square training residual over all outputs.
    pub rmse: f64,
    /// Penalty actually used.
    pub lambda: f64,
    /// How it was chosen.
    pub choice: RidgeChoice,
}

impl Readout {
    /// The fit summary of this readout as the fit of subset size `n` from `pairs` rows.
    pub fn summary(&self, n: usize, pairs: usize) -> FitSummary {
        FitSummary {
            n,
            training_pairs: pairs,
            ridge_penalty: Some(self.lambda),
            training_rmse: Some(self.rmse),
            ridge_selection: Some(self.choice),
        }
    }
}

/// Solves the readout of `ne` with the penalty `penalty` asks for.
///
/// Fixed: λ (times the number of rows under per-sample scaling), raised tenfold at most 6 times
/// while the penalised Gram matrix is not positive definite (the penalty used is recorded).
/// GCV: one eigendecomposition, the best penalty on the default grid, and the solution from the
/// same decomposition.
pub fn fit_readout(ne: &NormalEquations, penalty: &Penalty) -> Result<Readout, RidgeError> {
    match penalty.selection {
        RidgeSelection::Fixed => {
            let mut lambda = match penalty.scaling {
                RidgeScaling::PerSample => penalty.ridge * ne.count as f64,
                RidgeScaling::Fixed => penalty.ridge,
            };
            let mut attempt = 0;
            let (weights, rmse) = loop {
                match ne.solve(lambda) {
                    Ok(x) => break x,
                    Err(RidgeError::NotPositiveDefinite { .. }) if attempt < 6 => {
                        lambda *= 10.0;
                        attempt += 1;
                    }
                    Err(e) => return Err(e),
                }
            };
            Ok(Readout {
                weights,
                rmse,
                lambda,
                choice: RidgeChoice {
                    method: RidgeSelection::Fixed,
                    gcv_score: None,
                    at_grid_edge: false,
                    validation_valid_time: None,
                },
            })
        }
        RidgeSelection::Gcv => {
            let eig = ne.eigen()?;
            let sel = eig.select(&eig.default_grid())?;
            let (weights, rmse) = eig.solve(sel.lambda);
            Ok(Readout {
                weights,
                rmse,
                lambda: sel.lambda,
                choice: RidgeChoice {
                    method: RidgeSelection::Gcv,
                    gcv_score: Some(sel.score),
                    at_grid_edge: sel.at_grid_edge(),
                    validation_valid_time: None,
                },
            })
        }
        RidgeSelection::Forecast => Err(RidgeError::NoForecasts),
    }
}

/// The readout of `ne` whose forecasts score best: on the forecast grid
/// ([`FORECAST_GRID_DECADES`](super::FORECAST_GRID_DECADES) times the mean eigenvalue), the
/// penalty with the largest `score(weights)` (a mean valid time on validation data; higher is
/// better, the larger penalty on a tie, a non-finite score never wins), then refined by the
/// penalties half a decade either side of it (inside the grid), so the choice is within a
/// quarter decade of the best on the grid's span at the price of two more scores. One
/// eigendecomposition serves every penalty.
pub fn forecast_readout(
    ne: &NormalEquations,
    score: &mut dyn FnMut(&[f64]) -> f64,
) -> Result<Readout, RidgeError> {
    let eig = ne.eigen()?;
    let mean = eig.mean_eigenvalue();
    let scale = if mean > 0.0 { mean } else { 1.0 };
    let grid: Vec<f64> = super::relative_grid(super::FORECAST_GRID_DECADES)
        .into_iter()
        .map(|r| scale * r)
        .collect();
    // Highest score wins: the selection minimises its negative, solving each penalty once.
    let mut solved = Vec::with_capacity(grid.len());
    let sel = super::select(
        &grid,
        |lambda| {
            let (weights, rmse) = eig.solve(lambda);
            let s = score(&weights);
            solved.push((weights, rmse));
            -s
        },
        super::Tie::Larger,
    )?;
    let at_grid_edge = sel.at_grid_edge();
    let (mut lambda, mut best) = (sel.lambda, -sel.score);
    let (mut weights, mut rmse) = solved.swap_remove(sel.index);
    let half = 10f64.sqrt();
    let mut refine = Vec::with_capacity(2);
    if sel.index > 0 {
        refine.push(lambda / half);
    }
    if sel.index + 1 < grid.len() {
        refine.push(lambda * half);
    }
    // Ascending penalties: a tie goes to the later, larger one, as on the grid.
    for l in refine {
        let (w, r) = eig.solve(l);
        let s = score(&w);
        let wins = if l > lambda { s >= best } else { s > best };
        if s.is_finite() && wins {
            (lambda, best, weights, rmse) = (l, s, w, r);
        }
    }
    Ok(Readout {
        weights,
        rmse,
        lambda,
        choice: RidgeChoice {
            method: RidgeSelection::Forecast,
            gcv_score: None,
            at_grid_edge,
            validation_valid_time: Some(best),
        },
    })
}

/// Solves the readout of `ne` shrunk toward the prior readout `w0` (outputs × features,
/// row-major): W = argmin ‖Y − WΦ‖² + λ‖W − W₀‖², with λ from `penalty` exactly as in
/// [`fit_readout`] (fixed, or GCV on the residual targets y − W₀φ).
///
/// This is ordinary ridge on the residual targets ([`NormalEquations::centred_on`]) with W₀
/// added back: Tikhonov regularisation toward a non-zero prior mean (Tikhonov & Arsenin 1977,
/// "Solutions of Ill-Posed Problems"; from memory), used to fine-tune a readout trained on one
/// regime with a few samples of another. λ → ∞ returns W₀, λ → 0 the least-squares solution.
///
/// The reported `rmse` is the training residual of the returned W on the original targets: the
/// shift leaves the residual unchanged (y − Wφ = y' − (W − W₀)φ). Under GCV, the score and the
/// penalty are those of the residual problem.
pub fn fit_readout_toward(
    ne: &NormalEquations,
    w0: &[f64],
    penalty: &Penalty,
) -> Result<Readout, RidgeError> {
    let mut readout = fit_readout(&ne.centred_on(w0), penalty)?;
    readout
        .weights
        .iter_mut()
        .zip(w0)
        .for_each(|(w, p)| *w += p);
    Ok(readout)
}

#[cfg(test)]
mod tests {
    use super::super::test_problems::{random_prior, random_problem};
    use super::*;

    /// Forecast selection returns the candidate its score ranks first, solved exactly as the
    /// eigendecomposition solves it at that penalty, with the score recorded; a tie goes to the
    /// larger penalty, a non-finite score never wins; without scores the fit refuses.
    #[test]
    fn forecast_selection_keeps_the_best_scored_readout() {
        let (rows, f, d) = (150, 6, 2);
        let (phi, y) = random_problem(rows, f, d, 17);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let eig = ne.eigen().unwrap();
        let grid: Vec<f64> =
            crate::models::ridge::relative_grid(crate::models::ridge::FORECAST_GRID_DECADES)
                .into_iter()
                .map(|r| r * eig.mean_eigenvalue())
                .collect();
        assert_eq!(grid.len(), 13);
        // Score each candidate by how close its weight norm is to that of the 5th penalty: the
        // peak is known in advance and comes from the weights the selection hands over.
        let norm = |w: &[f64]| w.iter().map(|v| v * v).sum::<f64>().sqrt();
        let target = norm(&eig.solve(grid[4]).0);
        let mut calls = 0;
        let r = forecast_readout(&ne, &mut |w: &[f64]| {
            calls += 1;
            -(norm(w) - target).abs()
        })
        .unwrap();
        // 13 on the grid, and half a decade either side of the best.
        assert_eq!(calls, 15);
        assert_eq!(r.lambda, grid[4]);
        assert_eq!(r.weights, eig.solve(grid[4]).0);
        assert_eq!(r.choice.method, RidgeSelection::Forecast);
        assert_eq!(r.choice.validation_valid_time, Some(0.0));
        assert!(!r.choice.at_grid_edge);
        // Equal scores everywhere: the largest penalty, at the grid's edge.
        let flat = forecast_readout(&ne, &mut |_: &[f64]| 1.0).unwrap();
        assert_eq!(flat.lambda, grid[12]);
        assert!(flat.choice.at_grid_edge);
        // A peak between grid values: the refinement finds it (half a decade above grid[7]).
        let between = norm(&eig.solve(grid[7] * 10f64.sqrt()).0);
        let refined = forecast_readout(&ne, &mut |w: &[f64]| -(norm(w) - between).abs()).unwrap();
        assert!(
            (refined.lambda / (grid[7] * 10f64.sqrt()) - 1.0).abs() < 1e-12,
            "{} against {}",
            refined.lambda,
            grid[7] * 10f64.sqrt()
        );
        assert!(refined.choice.validation_valid_time.unwrap() > -1e-9);
        // A candidate that blew up (NaN) never wins over a finite one.
        let mut i = 0;
        let nan_best = forecast_readout(&ne, &mut |_: &[f64]| {
            i += 1;
            if i == 1 {
                f64::NAN
            } else {
                1.0 / i as f64
            }
        })
        .unwrap();
        assert_eq!(nan_best.lambda, grid[1]);
        let refused = fit_readout(
            &ne,
            &Penalty {
                ridge: 1e-3,
                scaling: RidgeScaling::PerSample,
                selection: RidgeSelection::Forecast,
            },
        );
        assert!(matches!(refused, Err(RidgeError::NoForecasts)));
    }

    /// Fixed selection reproduces the Cholesky solve at λ·n (per-sample scaling); GCV records its
    /// score and solves at the penalty it chose.
    #[test]
    fn fit_readout_follows_the_selection_setting() {
        let (rows, f, d) = (120, 7, 2);
        let (phi, y) = random_problem(rows, f, d, 61);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let fixed = fit_readout(
            &ne,
            &Penalty {
                ridge: 1e-3,
                scaling: RidgeScaling::PerSample,
                selection: RidgeSelection::Fixed,
            },
        )
        .unwrap();
        assert_eq!(fixed.lambda, 1e-3 * rows as f64);
        assert_eq!(fixed.weights, ne.solve(1e-3 * rows as f64).unwrap().0);
        assert_eq!(fixed.choice.gcv_score, None);
        let gcv = fit_readout(
            &ne,
            &Penalty {
                ridge: 1e-3,
                scaling: RidgeScaling::PerSample,
                selection: RidgeSelection::Gcv,
            },
        )
        .unwrap();
        let eig = ne.eigen().unwrap();
        let sel = eig.select(&eig.default_grid()).unwrap();
        assert_eq!(gcv.lambda, sel.lambda);
        assert_eq!(gcv.choice.gcv_score, Some(sel.score));
        assert_eq!(gcv.weights, eig.solve(sel.lambda).0);
    }

    fn fixed(lambda: f64) -> Penalty {
        Penalty {
            ridge: lambda,
            scaling: RidgeScaling::Fixed,
            selection: RidgeSelection::Fixed,
        }
    }

    /// λ → ∞ (10¹² × trace G) returns the prior W₀; λ → 0 (10⁻¹² × the mean eigenvalue) on
    /// full-rank data returns the least-squares solution by QR whatever the prior.
    /// Tolerances: at λ = 10¹²·tr G the pull away from W₀ is ‖G(W − W₀)‖/λ ≲ 10⁻¹² relative; at
    /// λ = 10⁻¹²·ē the bias is about λ/e_min ≈ 10⁻¹¹ relative and the round-off of the normal
    /// equations ε·cond(G) (about 10⁻¹⁵ here); both bounds are 10⁻⁹ of the largest weight.
    #[test]
    fn extreme_penalties_give_the_prior_and_least_squares() {
        let (rows, f, d) = (400, 15, 2);
        let (phi, y) = random_problem(rows, f, d, 83);
        let w0 = random_prior(f, d, 10.0, 84);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let trace: f64 = (0..f).map(|i| ne.gram[(i, i)]).sum();
        let max_abs = |v: &[f64]| v.iter().fold(0.0f64, |m, x| m.max(x.abs()));
        let stiff = fit_readout_toward(&ne, &w0, &fixed(1e12 * trace)).unwrap();
        let scale = max_abs(&w0);
        for (w, p) in stiff.weights.iter().zip(&w0) {
            assert!((w - p).abs() <= 1e-9 * scale, "{w} vs prior {p}");
        }
        let mean_eig = trace / f as f64;
        let loose = fit_readout_toward(&ne, &w0, &fixed(1e-12 * mean_eig)).unwrap();
        let design = ndarray::Array2::from_shape_vec((rows, f), phi).unwrap();
        let targets = ndarray::Array2::from_shape_vec((rows, d), y).unwrap();
        let ols = crate::models::polynomial::least_squares_qr_multi(design.view(), targets.view())
            .unwrap();
        let ols_w: Vec<f64> = (0..d * f).map(|x| ols[[x % f, x / f]]).collect();
        let scale = max_abs(&ols_w);
        for (w, o) in loose.weights.iter().zip(&ols_w) {
            assert!((w - o).abs() <= 1e-9 * scale, "{w} vs least squares {o}");
        }
    }

    /// The prior-centred solution satisfies its normal equations (G + λI)(W − W₀)ᵀ = B − GW₀ᵀ to
    /// a size-scaled tolerance, for a fixed penalty and for GCV, and the reported residual is that
    /// of the returned W on the original targets, computed row by row.
    #[test]
    fn prior_centred_solution_satisfies_its_normal_equations() {
        let (rows, f, d) = (250, 18, 2);
        let (phi, y) = random_problem(rows, f, d, 85);
        let w0 = random_prior(f, d, 1.0, 86);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let g = |i: usize, j: usize| ne.gram[(i.max(j), i.min(j))];
        let gcv = Penalty {
            ridge: 1.0,
            scaling: RidgeScaling::Fixed,
            selection: RidgeSelection::Gcv,
        };
        for penalty in [fixed(0.7), gcv] {
            let fit = fit_readout_toward(&ne, &w0, &penalty).unwrap();
            let (w, lambda) = (&fit.weights, fit.lambda);
            let tol = f64::EPSILON * 64.0 * (f * rows) as f64 * (1.0 + w0.len() as f64);
            for k in 0..d {
                for i in 0..f {
                    let mut lhs = lambda * (w[k * f + i] - w0[k * f + i]);
                    let mut rhs = ne.cross[(i, k)];
                    for j in 0..f {
                        lhs += g(i, j) * (w[k * f + j] - w0[k * f + j]);
                        rhs -= g(i, j) * w0[k * f + j];
                    }
                    assert!((lhs - rhs).abs() < tol, "{penalty:?} row {i} output {k}");
                }
            }
            let mut rss = 0.0;
            for r in 0..rows {
                for k in 0..d {
                    let pred: f64 = (0..f).map(|i| phi[r * f + i] * w[k * f + i]).sum();
                    rss += (pred - y[r * d + k]).powi(2);
                }
            }
            let direct = (rss / (rows * d) as f64).sqrt();
            assert!(
                (fit.rmse - direct).abs() < 1e-9 * direct,
                "{penalty:?}: {} vs {direct}",
                fit.rmse
            );
            let from_ne = (ne.residual_sum_of_squares(w) / (rows * d) as f64).sqrt();
            assert!((from_ne - direct).abs() < 1e-9 * direct);
        }
    }

    /// Pooling with weight 0 gives exactly the target-only fit (fixed and GCV); weight 1 gives
    /// the equations of all rows together (to round-off) with the counts added.
    #[test]
    fn pooled_equations_weight_the_base_rows() {
        let (f, d) = (10, 2);
        let (phi_t, y_t) = random_problem(60, f, d, 87);
        let (phi_b, y_b) = random_problem(500, f, d, 88);
        let mut target = NormalEquations::zeros(f, d);
        target.add_rows(&phi_t, &y_t, 60);
        let mut base = NormalEquations::zeros(f, d);
        base.add_rows(&phi_b, &y_b, 500);
        let alone = target.pooled(&base, 0.0);
        assert_eq!(alone.count, 60);
        for selection in [RidgeSelection::Fixed, RidgeSelection::Gcv] {
            let penalty = Penalty {
                ridge: 0.1,
                scaling: RidgeScaling::PerSample,
                selection,
            };
            assert_eq!(
                fit_readout(&alone, &penalty).unwrap(),
                fit_readout(&target, &penalty).unwrap()
            );
        }
        let both = target.pooled(&base, 1.0);
        let mut all = target.clone();
        all.add_rows(&phi_b, &y_b, 500);
        assert_eq!(both.count, 560);
        let tol = 1e-12 * 560.0;
        for i in 0..f {
            for j in 0..=i {
                assert!((both.gram[(i, j)] - all.gram[(i, j)]).abs() < tol);
            }
            for k in 0..d {
                assert!((both.cross[(i, k)] - all.cross[(i, k)]).abs() < tol);
            }
        }
        assert_eq!(target.pooled(&base, 0.1).count, 110);
    }
}
