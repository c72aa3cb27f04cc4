//! Fine-tuning a model trained on one regime (the base, e.g. forcing F = 20) with the first k
//! samples of another (the target, e.g. F = 24), for every k of an ascending list in one pass.
//!
//! Every family keeps the base's fixed parts unchanged (reservoir or feature map, and the input
//! standardisation of the base data) and refits only what training fits:
//! * ridge readouts (echo state network, NG-RC, polynomial emulator), by
//!   [`FineTuneMethod::PriorCentred`] — ridge shrinking toward the base readout,
//!   W = argmin ‖Y − WΦ‖² + λ‖W − W₀‖² ([`super::ridge::fit_readout_toward`]) — or
//!   [`FineTuneMethod::Pooled`] — ordinary ridge on the target rows plus the base rows at a
//!   weight chosen on a validation window ([`super::ridge::NormalEquations::pooled`]);
//! * networks, by a warm start from the base weights with a smaller learning rate and the same
//!   early stopping inside the k samples.
//!
//! The family functions are `esn::fine_tune_nested`, `ngrc::fine_tune_nested`,
//! `polynomial::fine_tune_emulator_nested`, `nn::fine_tune_mlp_emulator` and
//! `nn::fine_tune_lstm_emulator`.

use super::ridge::{
    fit_readout, fit_readout_toward, nested_pass, relative_grid, NormalEquations, Penalty,
    RidgeChoice, RidgeSelection, RowSource,
};
use super::{out_of_range, FitSummary, ModelError, RidgeScaling};
use serde::{Deserialize, Serialize};

/// How a ridge readout is adapted to the target regime.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FineTuneMethod {
    /// Ridge toward the base readout: W = argmin ‖Y − WΦ‖² + λ‖W − W₀‖² on the k target pairs
    /// (Tikhonov regularisation with the base readout as the prior mean), λ by `ridge-selection`.
    #[default]
    PriorCentred,
    /// Ordinary ridge on the k target pairs together with the base pairs at weight w (a base
    /// pair counts w times a target pair); w and λ chosen together by the one-step error on the
    /// trailing validation window of the k samples, then refitted on all k samples.
    Pooled,
}

/// How the penalty λ of a prior-centred fine-tuning is chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum FineTuneSelection {
    /// The λ on [`VALIDATION_GRID_DECADES`] with the smallest one-step error on the trailing
    /// validation window of the k samples, fitted on the pairs before it, then refitted on all
    /// k samples.
    #[default]
    Validation,
    /// Generalised cross-validation on the k samples (of the residual targets y − W₀φ).
    Gcv,
    /// The base model's own `ridge` and `ridge-scaling`.
    Fixed,
}

/// Penalties tried by validation selection, relative to the mean eigenvalue trace(G)/F of the
/// fitted equations: 10^−10, 10^−9.5, …, 10^2 (25 values). The top reaches far enough for a
/// prior-centred fit to return practically the base readout.
pub const VALIDATION_GRID_DECADES: (f64, f64, usize) = (-10.0, 2.0, 25);

/// Fine-tuning settings as written in a study file.
///
/// | key | default | meaning | valid |
/// |---|---|---|---|
/// | `method` | prior-centred | ridge readouts: `prior-centred` or `pooled` (see [`FineTuneMethod`]) | prior-centred, pooled |
/// | `ridge-selection` | validation | prior-centred: λ per k by the one-step error on the trailing validation window (`validation`), by generalised cross-validation on the k samples (`gcv`), or the base model's fixed `ridge` and `ridge-scaling` (`fixed`) | validation, gcv, fixed |
/// | `base-weights` | [0, 0.01, 0.03, 0.1, 0.3, 1, 3, 10] | pooled: candidate base weights c, as multiples of k_pairs / base_pairs (c = 1: the base rows count as much as the k target rows together); the weight used is min(1, c·k_pairs/base_pairs) | 1 ..= 32 values, each in [0, 1e6] |
/// | `validation-fraction` | 0.2 | pooled, and prior-centred with `validation`: trailing share of the k samples' pairs that scores the (weight, λ) candidates | (0, 0.5] |
/// | `learning-rate-factor` | 0.1 | networks: the base's `learning-rate` times this for the warm start | (0, 1] |
///
/// Validation selection (pooled, and prior-centred by default) tries the λ of
/// [`VALIDATION_GRID_DECADES`] relative to the mean eigenvalue of each candidate's fit part; the
/// chosen λ keeps its ratio to the mean eigenvalue in the refit on all k samples.
///
/// `ridge-selection` defaults to `validation` by measurement (two-scale Lorenz-96, base F = 20
/// on 20,000 samples, target F = 24, echo state network of 300 units with the default
/// settings, mean valid time over 40 target initial conditions, 3 replicates, k = 600–2000):
/// prior-centred with validation selection reached 0.30–0.42 time units against 0.14–0.21 from
/// scratch and 0.27–0.29 for the base used as it is (it chose λ of about 40–250, i.e. stayed
/// close to the base); GCV chose far too small a penalty (about 10⁻⁷–10⁻³) and lost to training
/// from scratch (0.004–0.16); the base's fixed penalty (10⁻⁵ per pair) tied with training from
/// scratch (0.16–0.20); pooling (validation selection) reached 0.27–0.37. One-step error on a
/// window is a proxy for forecast skill, not the skill itself. The `base-weights` grid is the multiples 0.01–1 of
/// k_pairs/base_pairs plus 3 and 10, which let the base dominate at small k when the regimes are
/// close; the cap at 1 means a base pair never counts more than a target pair.
///
/// The network default `learning-rate-factor` = 0.1 is common practice for fine-tuning, not a
/// measurement here.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields, default)]
pub struct FineTuneParams {
    pub method: FineTuneMethod,
    pub ridge_selection: FineTuneSelection,
    pub base_weights: Vec<f64>,
    pub validation_fraction: f64,
    pub learning_rate_factor: f64,
}

impl Default for FineTuneParams {
    fn default() -> Self {
        Self {
            method: FineTuneMethod::PriorCentred,
            ridge_selection: FineTuneSelection::Validation,
            base_weights: vec![0.0, 0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0],
            validation_fraction: 0.2,
            learning_rate_factor: 0.1,
        }
    }
}

/// Checked fine-tuning settings; only [`FineTuneParams::check`] makes one.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidFineTuneParams(FineTuneParams);

impl ValidFineTuneParams {
    /// The checked settings.
    pub fn get(&self) -> &FineTuneParams {
        &self.0
    }
}

impl FineTuneParams {
    /// The method selects on the trailing validation window.
    fn validates(&self) -> bool {
        self.method == FineTuneMethod::Pooled
            || self.ridge_selection == FineTuneSelection::Validation
    }

    /// Checks every setting against its valid range (see the table on [`FineTuneParams`]).
    pub fn check(self) -> Result<ValidFineTuneParams, ModelError> {
        let mut bad = crate::models::SettingProblems::default();
        let w = &self.base_weights;
        if w.is_empty()
            || w.len() > 32
            || !w.iter().all(|c| c.is_finite() && (0.0..=1e6).contains(c))
        {
            bad.out_of_range(
                "base-weights",
                format!("{w:?}"),
                "1 to 32 values, each from 0 to 1e6",
            );
        }
        let v = self.validation_fraction;
        if !(v.is_finite() && v > 0.0 && v <= 0.5) {
            bad.out_of_range(
                "validation-fraction",
                v.to_string(),
                "greater than 0 and at most 0.5",
            );
        }
        let l = self.learning_rate_factor;
        if !(l.is_finite() && l > 0.0 && l <= 1.0) {
            bad.out_of_range(
                "learning-rate-factor",
                l.to_string(),
                "greater than 0 and at most 1",
            );
        }
        bad.finish(ValidFineTuneParams(self))
    }
}

/// Splits `pairs` time-ordered training pairs into (fit, validation) counts: the validation
/// window is the last ceil(fraction · pairs) pairs, at least 1, and at least 1 pair must remain.
pub(crate) fn validation_split(pairs: usize, fraction: f64) -> Option<(usize, usize)> {
    let val = ((fraction * pairs as f64).ceil() as usize).max(1);
    (pairs > val).then(|| (pairs - val, val))
}

/// Fine-tunes one ridge readout per target prefix length k of `ks` in one nested pass over
/// `rows`, the target pairs in the base's feature map: a prefix of k samples holds its first
/// k − 1 − `offset` rows (offset: washout or delay span). `prior` is the base readout, `fixed`
/// the base's own penalty, `base` its normal equations (pooled method only), `available` the
/// target samples. Readouts (outputs × features) and summaries in the order of `ks`, each the
/// same bit for bit whatever other sizes `ks` holds.
#[allow(clippy::too_many_arguments)]
pub(crate) fn fine_tune_readouts(
    tune: &ValidFineTuneParams,
    prior: &[f64],
    fixed: Penalty,
    base: Option<&NormalEquations>,
    offset: usize,
    ks: &[usize],
    available: usize,
    rows: &mut dyn RowSource,
) -> Result<Vec<(Vec<f64>, FitSummary)>, ModelError> {
    let mut tuner = NestedTuner::new(tune, prior, fixed, base, offset, ks, available)?;
    let boundaries = tuner.boundaries();
    let row_counts: Vec<usize> = boundaries.iter().map(|&n| n - 1 - offset).collect();
    nested_pass(rows, &row_counts, &mut |i, ne| tuner.at(boundaries[i], ne))?;
    Ok(tuner.out)
}

/// Fine-tunes one ridge readout per target prefix length k during one nested pass over the
/// target data, for the families whose readouts come from [`NormalEquations`].
///
/// The pass accumulates the target pairs in order and calls [`NestedTuner::at`] at every
/// prefix length of [`NestedTuner::boundaries`] (ascending). A prefix of n samples holds the
/// n − 1 − `offset` pairs t = offset, …, n − 2 (offset: washout or delay span).
struct NestedTuner<'a> {
    tune: &'a FineTuneParams,
    prior: &'a [f64],
    fixed: Penalty,
    base: Option<&'a NormalEquations>,
    offset: usize,
    ks: Vec<usize>,
    /// Pooled: prefix length (samples) ending the fit part of each k.
    fit_end: Vec<usize>,
    /// Pooled: the equations at each fit end, taken when the pass reaches it.
    snapshots: Vec<(usize, NormalEquations)>,
    /// Readouts (outputs × features) and summaries, in the order of `ks`.
    pub out: Vec<(Vec<f64>, FitSummary)>,
}

impl<'a> NestedTuner<'a> {
    /// Checks `ks` (non-empty, ascending, at most `available`, each with a pair, or for
    /// `pooled` a pair to fit and one to validate) and that `pooled` has base equations of the
    /// prior's shape. `fixed` is the base model's own penalty.
    fn new(
        tune: &'a ValidFineTuneParams,
        prior: &'a [f64],
        fixed: Penalty,
        base: Option<&'a NormalEquations>,
        offset: usize,
        ks: &[usize],
        available: usize,
    ) -> Result<Self, ModelError> {
        let tune = tune.get();
        let largest = *ks.last().ok_or(ModelError::NoSizes)?;
        if !ks.windows(2).all(|w| w[0] <= w[1]) {
            return Err(out_of_range(
                "fine-tuning sizes",
                format!("{ks:?}"),
                "ascending prefix lengths",
            ));
        }
        if largest > available {
            return Err(ModelError::SubsetTooLarge {
                size: largest,
                available,
            });
        }
        let mut fit_end = Vec::new();
        for &k in ks {
            if k <= offset + 1 {
                return Err(ModelError::SubsetBelowWashout {
                    size: k,
                    washout: offset,
                });
            }
            if tune.validates() {
                let (fit, _) = validation_split(k - 1 - offset, tune.validation_fraction)
                    .ok_or_else(|| {
                        out_of_range(
                            "fine-tuning size",
                            k.to_string(),
                            &format!(
                                "at least {} samples to select on a validation window (a pair \
                                 to fit and one to validate after the first {offset})",
                                offset + 3
                            ),
                        )
                    })?;
                fit_end.push(offset + 1 + fit);
            }
        }
        if tune.method == FineTuneMethod::Pooled {
            let b = base.ok_or_else(|| {
                out_of_range(
                    "method",
                    "pooled".into(),
                    "prior-centred unless the base model's normal equations are given",
                )
            })?;
            if b.features() * b.outputs() != prior.len() || b.count == 0 {
                return Err(out_of_range(
                    "base equations",
                    format!("{} × {} with {} rows", b.features(), b.outputs(), b.count),
                    "the base model's feature map and outputs, with at least one row",
                ));
            }
        }
        Ok(Self {
            tune,
            prior,
            fixed,
            base,
            offset,
            ks: ks.to_vec(),
            fit_end,
            snapshots: Vec::new(),
            out: Vec::with_capacity(ks.len()),
        })
    }

    /// Prefix lengths at which the pass must call [`NestedTuner::at`], ascending, each once.
    fn boundaries(&self) -> Vec<usize> {
        let mut b: Vec<usize> = self.ks.iter().chain(&self.fit_end).copied().collect();
        b.sort_unstable();
        b.dedup();
        b
    }

    /// The pass has accumulated the pairs of the first `n` samples into `ne`.
    fn at(&mut self, n: usize, ne: &NormalEquations) -> Result<(), ModelError> {
        if self.fit_end.contains(&n) {
            self.snapshots.push((n, ne.clone()));
        }
        for i in 0..self.ks.len() {
            if self.ks[i] == n {
                let tuned = self.solve(i, ne)?;
                self.out.push(tuned);
            }
        }
        Ok(())
    }

    fn solve(&self, i: usize, ne: &NormalEquations) -> Result<(Vec<f64>, FitSummary), ModelError> {
        let k = self.ks[i];
        debug_assert_eq!(ne.count, k - 1 - self.offset);
        let ridge = |source| ModelError::Ridge { size: k, source };
        let pooled = self.tune.method == FineTuneMethod::Pooled;
        if !self.tune.validates() {
            let selection = match self.tune.ridge_selection {
                FineTuneSelection::Gcv => RidgeSelection::Gcv,
                _ => RidgeSelection::Fixed,
            };
            let penalty = Penalty {
                selection,
                ..self.fixed
            };
            let r = fit_readout_toward(ne, self.prior, &penalty).map_err(ridge)?;
            return Ok((
                r.weights,
                summary(k, ne.count, r.lambda, r.rmse, Some(r.choice)),
            ));
        }
        let end = self.fit_end[i];
        let fit = &self
            .snapshots
            .iter()
            .find(|(n, _)| *n == end)
            .expect("fit end precedes k")
            .1;
        let val = difference(ne, fit);
        // Candidates: (base weight, equations to solve, prior to add back).
        let candidates: Vec<(f64, NormalEquations)> = if pooled {
            let base = self.base.expect("checked in new");
            let share = ne.count as f64 / base.count as f64;
            self.tune
                .base_weights
                .iter()
                .map(|&c| {
                    let weight = (c * share).min(1.0);
                    (weight, fit.pooled(base, weight))
                })
                .collect()
        } else {
            vec![(0.0, fit.centred_on(self.prior))]
        };
        // (score, weight, λ relative to the mean eigenvalue)
        let mut best: Option<(f64, f64, f64)> = None;
        let grid = relative_grid(VALIDATION_GRID_DECADES);
        for (weight, eq) in &candidates {
            let eig = eq.eigen().map_err(ridge)?;
            let mean = eig.mean_eigenvalue();
            let scale = if mean > 0.0 { mean } else { 1.0 };
            for &relative in &grid {
                let (mut w, _) = eig.solve(relative * scale);
                if !pooled {
                    w.iter_mut().zip(self.prior).for_each(|(a, b)| *a += b);
                }
                let score = val.residual_sum_of_squares(&w);
                if score.is_finite() && best.is_none_or(|b| score < b.0) {
                    best = Some((score, *weight, relative));
                }
            }
        }
        let (_, weight, relative) = best.ok_or(ridge(super::ridge::RidgeError::NoFiniteScore {
            grid: candidates.len() * grid.len(),
        }))?;
        let all = if pooled {
            ne.pooled(self.base.expect("checked in new"), weight)
        } else {
            ne.clone()
        };
        let trace: f64 = (0..all.features()).map(|j| all.gram[(j, j)]).sum();
        let mean = trace / all.features().max(1) as f64;
        let penalty = Penalty {
            ridge: relative * if mean > 0.0 { mean } else { 1.0 },
            scaling: RidgeScaling::Fixed,
            selection: RidgeSelection::Fixed,
        };
        let r = if pooled {
            fit_readout(&all, &penalty)
        } else {
            fit_readout_toward(&all, self.prior, &penalty)
        }
        .map_err(ridge)?;
        let rmse = (ne.residual_sum_of_squares(&r.weights)
            / (ne.count * ne.outputs()).max(1) as f64)
            .sqrt();
        Ok((r.weights, summary(k, ne.count, r.lambda, rmse, None)))
    }
}

/// The summary of one fine-tuned readout; the training residual is over the k target pairs.
fn summary(
    n: usize,
    pairs: usize,
    lambda: f64,
    rmse: f64,
    choice: Option<RidgeChoice>,
) -> FitSummary {
    FitSummary {
        n,
        training_pairs: pairs,
        ridge_penalty: Some(lambda),
        training_rmse: Some(rmse),
        ridge_selection: choice,
    }
}

/// The equations of the rows in `all` but not in its prefix `part` (lower triangles).
fn difference(all: &NormalEquations, part: &NormalEquations) -> NormalEquations {
    let (f, d) = (all.features(), all.outputs());
    NormalEquations {
        gram: faer::Mat::from_fn(f, f, |i, j| {
            if i >= j {
                all.gram[(i, j)] - part.gram[(i, j)]
            } else {
                0.0
            }
        }),
        cross: faer::Mat::from_fn(f, d, |i, k| all.cross[(i, k)] - part.cross[(i, k)]),
        target_sq: all
            .target_sq
            .iter()
            .zip(&part.target_sq)
            .map(|(a, b)| (a - b).max(0.0))
            .collect(),
        count: all.count - part.count,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_valid_and_read_from_kebab_case() {
        let p = FineTuneParams::default();
        assert!(p.clone().check().is_ok());
        let text = toml::to_string(&p).unwrap();
        assert!(text.contains("learning-rate-factor") && text.contains("prior-centred"));
        assert_eq!(toml::from_str::<FineTuneParams>(&text).unwrap(), p);
        let q: FineTuneParams =
            toml::from_str("method = \"pooled\"\nridge-selection = \"gcv\"").unwrap();
        assert_eq!(q.method, FineTuneMethod::Pooled);
        assert_eq!(q.ridge_selection, FineTuneSelection::Gcv);
        assert_eq!(q.validation_fraction, 0.2);
        assert!(toml::from_str::<FineTuneParams>("learning-rate = 0.1").is_err());
    }

    #[test]
    fn invalid_settings_name_the_key() {
        let cases = [
            (
                FineTuneParams {
                    base_weights: vec![],
                    ..FineTuneParams::default()
                },
                "base-weights",
            ),
            (
                FineTuneParams {
                    base_weights: vec![0.1, -1.0],
                    ..FineTuneParams::default()
                },
                "base-weights",
            ),
            (
                FineTuneParams {
                    validation_fraction: 0.0,
                    ..FineTuneParams::default()
                },
                "validation-fraction",
            ),
            (
                FineTuneParams {
                    learning_rate_factor: 1.5,
                    ..FineTuneParams::default()
                },
                "learning-rate-factor",
            ),
        ];
        for (p, key) in cases {
            let e = p.check().unwrap_err().to_string();
            assert!(e.contains(&format!("`{key}`")), "{key}: {e}");
        }
    }

    /// The validation window is the last ceil(fraction · pairs) pairs, at least one, and a pair
    /// must remain to fit.
    #[test]
    fn validation_split_follows_the_stated_rule() {
        assert_eq!(validation_split(100, 0.2), Some((80, 20)));
        assert_eq!(validation_split(11, 0.2), Some((8, 3)));
        assert_eq!(validation_split(2, 0.2), Some((1, 1)));
        assert_eq!(validation_split(1, 0.2), None);
    }
}
