//! Backtests of learning-curve extrapolation and the family weights derived from them.
//!
//! Protocol (after the learning-curve database work of Mohr & van Rijn 2022 and the review of
//! Viering & Loog 2022): for every k that leaves at least [`MIN_FIT_SIZES`] sizes to fit and at
//! least one to predict, fit each family on the first k sizes only (its own replicate summary,
//! so nothing from the held-out sizes leaks into the weights) and predict every larger size.
//! Scores: the absolute error at the largest measured size, and the mean absolute error over
//! all held-out sizes. The "last observed value" baseline (predict the mean at size k for every
//! larger size) is scored the same way; it cannot be inverted, so it is a yardstick, not a
//! candidate.
//!
//! Family weights: proportional to the inverse mean squared backtest error at the largest size,
//! over the families that could be backtested and fitted to all sizes, w_f ∝ 1 / mean_k e²_{f,k}
//! (the inverse-MSE rule for combining forecasts, Bates & Granger 1969, Oper. Res. Q. 20).
//! When fewer than two families have a backtest score (too few sizes), the weights are Akaike
//! weights from AICc, w_f ∝ exp(−ΔAICc_f / 2) (Burnham & Anderson 2002, ch. 2.9); when AICc
//! is undefined for every family (too few sizes), the fitted families get equal weights.

use super::fit::{fit_family_with, summarise, CurveFit, FitOptions, FitScale, SizeSamples};
use super::Family;
use serde::{Deserialize, Serialize};

/// Sizes a backtest fit needs at least (three, as in the learning-curve database protocol; a
/// family with p parameters needs p + 1).
pub const MIN_FIT_SIZES: usize = 3;

/// One backtest case: one family (or the baseline) fitted on the first `fitted_sizes` sizes.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct BacktestCase {
    /// `None` for the last-observed-value baseline.
    pub family: Option<Family>,
    pub fitted_sizes: usize,
    /// Largest size used in the fit.
    pub fitted_up_to: f64,
    /// Prediction for the largest measured size.
    pub predicted_at_largest: Option<f64>,
    pub error_at_largest: Option<f64>,
    pub mean_abs_error: Option<f64>,
    /// Why the family could not be fitted on these sizes, if it could not.
    pub error: Option<String>,
}

/// A family's (or the baseline's) backtest over all cases.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct BacktestScore {
    pub family: Option<Family>,
    pub cases: usize,
    /// Root mean square of the error at the largest size over the cases.
    pub rms_error_at_largest: Option<f64>,
    /// Mean of the per-case mean absolute errors.
    pub mean_abs_error: Option<f64>,
}

/// How family weights were obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum WeightRule {
    /// Inverse mean squared backtest error at the largest size.
    Backtest,
    /// Akaike weights (too few sizes to backtest).
    Aicc,
    /// Equal weights: too few sizes for AICc either (m ≤ k + 1 for every family).
    Equal,
}

/// Backtest cases, scores, and the family weights.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Backtest {
    pub cases: Vec<BacktestCase>,
    pub scores: Vec<BacktestScore>,
    pub rule: WeightRule,
    /// Weight of each family fitted to all sizes (sums to 1), in `Family::ALL` order.
    pub weights: Vec<(Family, f64)>,
}

/// Runs the backtest for `families` and weights the full-data `fits` (one per family that
/// could be fitted to all sizes). The backtest fits use `scale` and the direction and bound
/// rules of the full-data fits (the defaults when there are none).
pub fn backtest(
    samples: &[SizeSamples],
    families: &[Family],
    fits: &[CurveFit],
    scale: FitScale,
) -> Backtest {
    let options = FitOptions {
        scale,
        direction: fits.first().map(|f| f.direction).unwrap_or_default(),
        bounds: fits.first().map(|f| f.bounds).unwrap_or_default(),
        start: None,
    };
    backtest_with(samples, families, fits, &options)
}

/// [`backtest`] with the options of every backtest fit given (`start` is ignored).
pub fn backtest_with(
    samples: &[SizeSamples],
    families: &[Family],
    fits: &[CurveFit],
    options: &FitOptions,
) -> Backtest {
    let options = FitOptions {
        start: None,
        ..options.clone()
    };
    let m = samples.len();
    let observed = summarise(samples);
    let mut cases = Vec::new();
    for k in MIN_FIT_SIZES..m {
        let head = summarise(&samples[..k]);
        let held = &observed[k..];
        let score = |predict: &dyn Fn(f64) -> f64| {
            let errs: Vec<f64> = held.iter().map(|p| (predict(p.n) - p.mean).abs()).collect();
            let last = *errs.last().expect("at least one held-out size");
            (
                predict(samples[m - 1].n),
                last,
                errs.iter().sum::<f64>() / errs.len() as f64,
            )
        };
        let last_seen = head[k - 1].mean;
        let (pred, e_last, mae) = score(&|_| last_seen);
        cases.push(BacktestCase {
            family: None,
            fitted_sizes: k,
            fitted_up_to: samples[k - 1].n,
            predicted_at_largest: Some(pred),
            error_at_largest: Some(e_last),
            mean_abs_error: Some(mae),
            error: None,
        });
        for &family in families {
            let case = match fit_family_with(family, &head, &options) {
                Ok(fit) => {
                    let (pred, e_last, mae) = score(&|n| fit.eval(n));
                    BacktestCase {
                        family: Some(family),
                        fitted_sizes: k,
                        fitted_up_to: samples[k - 1].n,
                        predicted_at_largest: Some(pred),
                        error_at_largest: Some(e_last).filter(|e| e.is_finite()),
                        mean_abs_error: Some(mae).filter(|e| e.is_finite()),
                        error: None,
                    }
                }
                Err(e) => BacktestCase {
                    family: Some(family),
                    fitted_sizes: k,
                    fitted_up_to: samples[k - 1].n,
                    predicted_at_largest: None,
                    error_at_largest: None,
                    mean_abs_error: None,
                    error: Some(e.to_string()),
                },
            };
            cases.push(case);
        }
    }
    let mut scores = Vec::new();
    for family in std::iter::once(None).chain(families.iter().copied().map(Some)) {
        let mine: Vec<&BacktestCase> = cases
            .iter()
            .filter(|c| c.family == family && c.error_at_largest.is_some())
            .collect();
        let n = mine.len();
        let rms = (n > 0).then(|| {
            (mine
                .iter()
                .map(|c| c.error_at_largest.unwrap().powi(2))
                .sum::<f64>()
                / n as f64)
                .sqrt()
        });
        let mae = (n > 0).then(|| {
            mine.iter()
                .map(|c| c.mean_abs_error.unwrap_or(f64::NAN))
                .sum::<f64>()
                / n as f64
        });
        scores.push(BacktestScore {
            family,
            cases: n,
            rms_error_at_largest: rms,
            mean_abs_error: mae,
        });
    }
    let scored: Vec<(Family, f64)> = fits
        .iter()
        .filter_map(|f| {
            scores
                .iter()
                .find(|s| s.family == Some(f.family))
                .and_then(|s| s.rms_error_at_largest)
                .map(|e| (f.family, e))
        })
        .collect();
    let (rule, raw): (WeightRule, Vec<(Family, f64)>) = if scored.len() >= 2 {
        // Floor the error at a tiny fraction of the skill scale so a perfect backtest cannot
        // take every weight by division by zero.
        let scale = observed
            .iter()
            .map(|p| p.mean.abs())
            .fold(0.0, f64::max)
            .max(1e-300);
        (
            WeightRule::Backtest,
            scored
                .iter()
                .map(|&(f, e)| (f, 1.0 / e.max(1e-9 * scale).powi(2)))
                .collect(),
        )
    } else if fits.iter().all(|f| f.aicc.is_none()) {
        (
            WeightRule::Equal,
            fits.iter().map(|f| (f.family, 1.0)).collect(),
        )
    } else {
        let best = fits
            .iter()
            .filter_map(|f| f.aicc)
            .fold(f64::INFINITY, f64::min);
        (
            WeightRule::Aicc,
            fits.iter()
                .filter_map(|f| f.aicc.map(|a| (f.family, (-(a - best) / 2.0).exp())))
                .collect(),
        )
    };
    let total: f64 = raw.iter().map(|(_, w)| w).sum();
    let weights = if total > 0.0 && total.is_finite() {
        raw.into_iter().map(|(f, w)| (f, w / total)).collect()
    } else {
        Vec::new()
    };
    Backtest {
        cases,
        scores,
        rule,
        weights,
    }
}

impl Backtest {
    /// The family with the largest weight (ties to the earlier family).
    pub fn selected(&self) -> Option<Family> {
        self.weights
            .iter()
            .fold(None, |acc: Option<(Family, f64)>, &(f, w)| match acc {
                Some((_, b)) if b >= w => acc,
                _ => Some((f, w)),
            })
            .map(|(f, _)| f)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::curves::fit_family;

    fn samples_from(f: impl Fn(f64) -> f64, sizes: &[f64]) -> Vec<SizeSamples> {
        sizes
            .iter()
            .map(|&n| {
                let y = f(n);
                SizeSamples {
                    n,
                    replicate_values: vec![y * 0.99, y, y * 1.01],
                    censored: false,
                }
            })
            .collect()
    }

    /// A curve that saturates: on the small sizes an unbounded power law fits about as well as
    /// the saturating families, but extrapolates badly; the backtest weights must favour a
    /// saturating family, and the baseline must be scored too.
    #[test]
    fn backtest_prefers_the_better_extrapolator() {
        let sizes: Vec<f64> = (0..8).map(|i| 100.0 * 2f64.powi(i)).collect();
        let truth = |n: f64| 2.0 * (1.0 - (-n / 3000.0).exp());
        let samples = samples_from(truth, &sizes);
        let points = summarise(&samples);
        let fits: Vec<CurveFit> = Family::ALL
            .iter()
            .filter_map(|&f| fit_family(f, &points).ok())
            .collect();
        let bt = backtest(&samples, &Family::ALL, &fits, FitScale::Linear);
        assert_eq!(bt.rule, WeightRule::Backtest);
        let w = |f: Family| {
            bt.weights
                .iter()
                .find(|(g, _)| *g == f)
                .map(|(_, w)| *w)
                .unwrap_or(0.0)
        };
        assert!(
            w(Family::ExponentialSaturation) > w(Family::PowerLaw),
            "weights {:?}",
            bt.weights
        );
        assert_ne!(bt.selected(), Some(Family::PowerLaw));
        let total: f64 = bt.weights.iter().map(|(_, w)| w).sum();
        assert!((total - 1.0).abs() < 1e-12);
        // Cases: k = 3..7 for the baseline and every family.
        let baseline: Vec<_> = bt.cases.iter().filter(|c| c.family.is_none()).collect();
        assert_eq!(baseline.len(), 5);
        assert!(bt.scores[0].family.is_none() && bt.scores[0].cases == 5);
    }

    /// The family that fits best in sample is not the better extrapolator: on a saturating
    /// curve, a power law fits every measured size better than a logarithm (so AICc picks it),
    /// but it overshoots the larger sizes, and the backtest weights pick the logarithm.
    #[test]
    fn backtest_overrules_the_best_in_sample_fit() {
        let sizes: Vec<f64> = (0..8).map(|i| 100.0 * 2f64.powi(i)).collect();
        let samples = samples_from(|n: f64| 2.0 * (1.0 - (-n / 3000.0).exp()), &sizes);
        let points = summarise(&samples);
        let families = [Family::PowerLaw, Family::Logarithmic];
        let fits: Vec<CurveFit> = families
            .iter()
            .map(|&f| fit_family(f, &points).unwrap())
            .collect();
        let by_aicc = crate::curves::select_by_aicc(&fits).map(|i| fits[i].family);
        assert_eq!(by_aicc, Some(Family::PowerLaw));
        let bt = backtest(&samples, &families, &fits, FitScale::Linear);
        assert_eq!(bt.selected(), Some(Family::Logarithmic), "{:?}", bt.weights);
        let rms = |f: Family| {
            bt.scores
                .iter()
                .find(|s| s.family == Some(f))
                .unwrap()
                .rms_error_at_largest
                .unwrap()
        };
        assert!(rms(Family::Logarithmic) < rms(Family::PowerLaw));
    }

    /// With four sizes only two-parameter families can be backtested (k = 3), so a single
    /// family at most has a score and the weights fall back to Akaike weights; with three sizes
    /// AICc is undefined too and the weights are equal.
    #[test]
    fn too_few_sizes_fall_back_to_aicc_then_equal() {
        let sizes = [100.0, 200.0, 400.0, 800.0];
        let samples = samples_from(|n: f64| 0.1 * n.powf(0.4), &sizes);
        let fits: Vec<CurveFit> = [Family::PowerLaw, Family::SaturatingPowerLaw]
            .iter()
            .filter_map(|&f| fit_family(f, &summarise(&samples)).ok())
            .collect();
        let bt = backtest(
            &samples,
            &[Family::PowerLaw, Family::SaturatingPowerLaw],
            &fits,
            FitScale::Linear,
        );
        assert_eq!(bt.rule, WeightRule::Aicc);
        let sizes = [100.0, 200.0, 400.0];
        let samples = samples_from(|n: f64| 0.1 * n.powf(0.4), &sizes);
        let points = summarise(&samples);
        let fits: Vec<CurveFit> = Family::ALL
            .iter()
            .filter_map(|&f| fit_family(f, &points).ok())
            .collect();
        let bt = backtest(&samples, &Family::ALL, &fits, FitScale::Linear);
        assert_eq!(bt.rule, WeightRule::Equal);
        assert!(bt.cases.is_empty());
        let w: Vec<f64> = bt.weights.iter().map(|(_, w)| *w).collect();
        assert!(!w.is_empty() && w.iter().all(|x| (x - w[0]).abs() < 1e-15));
    }
}
