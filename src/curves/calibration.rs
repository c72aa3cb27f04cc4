//! Beyond the measured range: the extrapolated n* of a target from the ranked curve families,
//! and its calibration by the study's own hindsight.
//!
//! **Extrapolation.** Every family is fitted to the points and the families are ranked by their
//! backtest weight ([`super::backtest()`]). For a target the measured means do not reach, the
//! first family in that order whose curve agrees with the measured crossing
//! ([`CurveFit::check_crossing`]) and does not cross the target inside the measured range gives
//! n̂; a rejected family is named with the reason.
//!
//! **Hindsight pairs.** For every truncation of a curve to its first j sizes (j ≥
//! [`MIN_HINDSIGHT_SIZES`]) and every later measured size i, the level L = the isotonic mean at
//! i (all data) is kept when it lies clearly beyond the truncated data (better than their best
//! isotonic mean by more than 2 standard errors of the mean at i: above it when higher is
//! better, below it when lower is better). Its measured n* comes from
//! the in-data interpolation on all data ([`super::isotonic`]); its prediction n̂ from the
//! truncated data alone, by the same procedure as a real target. The error is
//! e = ln(n̂ / n_meas) (+∞ when the truncated curve says the level is never reached) at the
//! extrapolation factor f = n_meas / (largest truncated size).
//!
//! **Calibration.** Scores s = e / g(f) with g(f) = ln(1 + f), so that the error may grow with
//! the log-distance of the extrapolation. Pooled over a study's curves (one system, one skill
//! definition), a new extrapolation n̂ at factor F = n̂ / n_max has the predictive distribution
//! ln n* = ln n̂ − s·g(F): point n̂·exp(−median(s)·g(F)), interval from a Student-t prediction
//! interval on s (mean ± t_{k−1}·sd·√(1 + 1/k), k finite scores, at least
//! [`MIN_CALIBRATION_PAIRS`]). An infinite score leaves the upper end unbounded. The support is
//! F_sup = the largest f among the pairs; beyond it, or with too few pairs, the pilot cannot
//! support a number.
//!
//! References: Vovk, Gammerman & Shafer (2005), Algorithmic Learning in a Random World
//! (conformal prediction from exchangeable scores); Lei, G'Sell, Rinaldo, Tibshirani &
//! Wasserman (2018), J. Am. Stat. Assoc. 113, 1094–1111 (split conformal prediction);
//! Adriaensen, Rakotoarison, Müller & Hutter (2023), NeurIPS (learning-curve extrapolation
//! judged by its predictive distribution at held-out larger sizes); Mohr & van Rijn (2022),
//! arXiv:2201.12150 (the learning-curve database protocol: fit on the first anchors, score at
//! the rest); Domhan, Springenberg & Hutter (2015), IJCAI (weighted ensembles of parametric
//! learning curves).

use super::backtest::{backtest_with, Backtest};
use super::fit::{fit_family_with, summarise, CurveFit, CurvePoint, FitOptions, SizeSamples};
use super::isotonic::{first_crossing, isotonic_means, Crossing};
use super::uncertainty::CROSSING_K;
use super::{CurveError, Family, Inversion};
use serde::{Deserialize, Serialize};
use statrs::distribution::{ContinuousCDF, StudentsT};

/// Fewest sizes a truncation keeps before it is used for a hindsight pair.
pub const MIN_HINDSIGHT_SIZES: usize = 4;

/// Fewest finite hindsight scores for a calibrated interval.
pub const MIN_CALIBRATION_PAIRS: usize = 5;

/// Every family fitted to one curve's points and ranked by its backtest weight.
#[derive(Debug)]
pub struct RankedFits {
    /// One entry per family in [`Family::ALL`] order: the fit, or why it failed.
    pub results: Vec<(Family, Result<CurveFit, CurveError>)>,
    pub backtest: Option<Backtest>,
    /// Indices into `results` of the successful fits, by decreasing weight (families without a
    /// weight last, in [`Family::ALL`] order).
    pub order: Vec<usize>,
}

impl RankedFits {
    /// The successful fits.
    pub fn fits(&self) -> Vec<CurveFit> {
        self.results
            .iter()
            .filter_map(|(_, r)| r.as_ref().ok().cloned())
            .collect()
    }

    /// The fit with the largest weight.
    pub fn selected(&self) -> Option<&CurveFit> {
        let family = self.backtest.as_ref()?.selected()?;
        self.results
            .iter()
            .find(|(f, _)| *f == family)
            .and_then(|(_, r)| r.as_ref().ok())
    }
}

/// Fits every family to `samples` with `options` and ranks them by the backtest.
pub fn fit_and_rank(samples: &[SizeSamples], options: &FitOptions) -> RankedFits {
    let points = summarise(samples);
    let results: Vec<(Family, Result<CurveFit, CurveError>)> = Family::ALL
        .iter()
        .map(|&f| (f, fit_family_with(f, &points, options)))
        .collect();
    let fits: Vec<CurveFit> = results
        .iter()
        .filter_map(|(_, r)| r.as_ref().ok().cloned())
        .collect();
    let backtest = (!fits.is_empty()).then(|| backtest_with(samples, &Family::ALL, &fits, options));
    let weight = |f: Family| {
        backtest
            .as_ref()
            .and_then(|b| b.weights.iter().find(|(g, _)| *g == f).map(|(_, w)| *w))
            .unwrap_or(-1.0)
    };
    let mut order: Vec<usize> = (0..results.len())
        .filter(|&i| results[i].1.is_ok())
        .collect();
    // Stable sort: ties keep Family::ALL order.
    order.sort_by(|&a, &b| weight(results[b].0).total_cmp(&weight(results[a].0)));
    RankedFits {
        results,
        backtest,
        order,
    }
}

/// A family passed over for a target, and why.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RejectedFit {
    pub family: Family,
    pub reason: String,
}

/// What the ranked curves say about a target the measured means do not reach.
#[derive(Debug, Clone, PartialEq)]
pub enum Extrapolation {
    /// The curve of `family` reaches the target at n beyond the largest measured size.
    Reaches { family: Family, n: f64 },
    /// The curve of `family` levels off at or below the target (`asymptote` with its standard
    /// error when the family has one).
    LevelsOff {
        family: Family,
        asymptote: Option<f64>,
        asymptote_se: Option<f64>,
        reason: String,
    },
    /// Every fitted family was rejected, or none could be fitted.
    NoCurve,
}

/// The asymptote of a fit and its standard error (the standard error of the parameter that is
/// the asymptote, when one is).
pub fn asymptote_with_se(fit: &CurveFit) -> (Option<f64>, Option<f64>) {
    let a = fit.asymptote();
    let se = a.and_then(|a| {
        let i = fit.params.iter().position(|&p| p == a)?;
        fit.std_errors.as_ref().and_then(|s| s.get(i).copied())
    });
    (a, se.filter(|s| s.is_finite()))
}

/// The extrapolation for `target` (not reached by the measured means of `points`), from the
/// ranked fits; see the module docs. Also the families passed over and why.
pub fn extrapolate(
    ranked: &RankedFits,
    points: &[CurvePoint],
    target: f64,
) -> (Extrapolation, Vec<RejectedFit>) {
    let largest = points.last().map_or(f64::NAN, |p| p.n);
    let mut rejected = Vec::new();
    for &i in &ranked.order {
        let (family, Ok(fit)) = (&ranked.results[i].0, &ranked.results[i].1) else {
            continue;
        };
        if let Err(d) = fit.check_crossing(points, target, CROSSING_K) {
            rejected.push(RejectedFit {
                family: *family,
                reason: d.reason,
            });
            continue;
        }
        match fit.invert(target) {
            Inversion::Reached { n } if n <= largest => rejected.push(RejectedFit {
                family: *family,
                reason: format!(
                    "the fitted {} curve reaches {target} at {n:.0} samples, inside the measured range, but the measured means do not reach it",
                    family.label()
                ),
            }),
            Inversion::Reached { n } => {
                return (
                    Extrapolation::Reaches {
                        family: *family,
                        n,
                    },
                    rejected,
                )
            }
            Inversion::Unreachable { reason, .. } => {
                let (asymptote, asymptote_se) = asymptote_with_se(fit);
                return (
                    Extrapolation::LevelsOff {
                        family: *family,
                        asymptote,
                        asymptote_se,
                        reason,
                    },
                    rejected,
                );
            }
        }
    }
    (Extrapolation::NoCurve, rejected)
}

/// One hindsight pair: a level a truncated curve did not reach, predicted from the truncation
/// and measured on all data.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct HindsightPair {
    /// The curve (model) it comes from.
    pub curve: String,
    /// Largest size of the truncation.
    pub truncated_at: f64,
    /// The level (skill).
    pub level: f64,
    /// n* measured on all data (in-data interpolation).
    pub measured: f64,
    /// n̂ predicted from the truncated data; `null` when the truncated curve never reaches it.
    pub predicted: Option<f64>,
    /// f = measured / truncated-at.
    pub factor: f64,
    /// e = ln(predicted / measured); `null` for +∞ (never reached).
    pub error: Option<f64>,
}

impl HindsightPair {
    /// s = e / ln(1 + f) (+∞ for a prediction that never reaches the level).
    pub fn score(&self) -> f64 {
        self.error.map_or(f64::INFINITY, |e| e / g(self.factor))
    }
}

/// g(f) = ln(1 + f).
fn g(f: f64) -> f64 {
    (1.0 + f).ln()
}

/// The hindsight pairs of one curve (see the module docs).
pub fn hindsight_pairs(
    name: &str,
    samples: &[SizeSamples],
    options: &FitOptions,
) -> Vec<HindsightPair> {
    let full = summarise(samples);
    if full.iter().any(|p| !p.mean.is_finite()) {
        return Vec::new();
    }
    let direction = options.direction;
    // Values oriented so that larger is better (see `Direction::sign`).
    let sign = direction.sign();
    let iso = isotonic_means(&full, direction);
    let ns: Vec<f64> = full.iter().map(|p| p.n).collect();
    let mut out = Vec::new();
    for j in MIN_HINDSIGHT_SIZES..samples.len() {
        let head = &samples[..j];
        let head_points = summarise(head);
        let top = isotonic_means(&head_points, direction)
            .into_iter()
            .map(|m| sign * m)
            .fold(f64::NEG_INFINITY, f64::max);
        let ranked = fit_and_rank(head, options);
        let mut last_level = f64::NAN;
        for i in j..samples.len() {
            let level = iso[i];
            if level == last_level || sign * level <= top + 2.0 * full[i].standard_error {
                continue;
            }
            last_level = level;
            let measured = match first_crossing(&ns, &iso, level, direction) {
                Crossing::Between { n, .. } => n,
                _ => continue,
            };
            let predicted = match extrapolate(&ranked, &head_points, level).0 {
                Extrapolation::Reaches { n, .. } => Some(n),
                Extrapolation::LevelsOff { .. } => None,
                Extrapolation::NoCurve => continue,
            };
            let truncated_at = ns[j - 1];
            out.push(HindsightPair {
                curve: name.to_string(),
                truncated_at,
                level,
                measured,
                predicted,
                factor: measured / truncated_at,
                error: predicted.map(|p| (p / measured).ln()),
            });
        }
    }
    out
}

/// The study's calibration of extrapolation from its hindsight pairs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Calibration {
    pub pairs: Vec<HindsightPair>,
    /// Pairs with a finite score (k) and with an infinite one.
    pub finite: usize,
    pub infinite: usize,
    /// Mean, standard deviation (divisor k − 1) and median of the finite scores.
    pub mean_score: Option<f64>,
    pub sd_score: Option<f64>,
    pub median_score: Option<f64>,
    /// F_sup: the largest extrapolation factor among the pairs.
    pub support: Option<f64>,
    /// Level of the prediction intervals.
    pub level: f64,
}

/// A calibrated extrapolation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Calibrated {
    /// Within the support: point and interval (`None`: unbounded upper end).
    Supported {
        point: f64,
        lower: f64,
        upper: Option<f64>,
    },
    /// Beyond the support, or too few pairs; `lower` is the calibrated lower end when there are
    /// enough pairs to form one.
    Unsupported { lower: Option<f64> },
}

impl Calibration {
    /// The calibration from pairs, for intervals at `level`.
    pub fn from_pairs(pairs: Vec<HindsightPair>, level: f64) -> Self {
        let mut scores: Vec<f64> = pairs
            .iter()
            .map(HindsightPair::score)
            .filter(|s| s.is_finite())
            .collect();
        scores.sort_by(f64::total_cmp);
        let k = scores.len();
        let mean = (k > 0).then(|| scores.iter().sum::<f64>() / k as f64);
        let sd = mean
            .filter(|_| k > 1)
            .map(|m| (scores.iter().map(|s| (s - m).powi(2)).sum::<f64>() / (k - 1) as f64).sqrt());
        let median = (k > 0).then(|| {
            if k % 2 == 1 {
                scores[k / 2]
            } else {
                0.5 * (scores[k / 2 - 1] + scores[k / 2])
            }
        });
        let support = pairs
            .iter()
            .map(|p| p.factor)
            .fold(None, |a: Option<f64>, f| Some(a.map_or(f, |a| a.max(f))));
        Calibration {
            infinite: pairs.len() - k,
            finite: k,
            pairs,
            mean_score: mean,
            sd_score: sd,
            median_score: median,
            support,
            level,
        }
    }

    /// Whether there are enough finite scores for an interval.
    pub fn usable(&self) -> bool {
        self.finite >= MIN_CALIBRATION_PAIRS
    }

    /// The calibrated prediction for a curve's n̂, with n_max the largest measured size.
    pub fn predict(&self, n_hat: f64, largest: f64) -> Calibrated {
        let factor = n_hat / largest;
        let interval = match (
            self.usable(),
            self.mean_score,
            self.sd_score,
            self.median_score,
        ) {
            (true, Some(mean), Some(sd), Some(median)) => {
                let k = self.finite as f64;
                let t = StudentsT::new(0.0, 1.0, k - 1.0)
                    .expect("k ≥ 5 degrees of freedom")
                    .inverse_cdf(0.5 + self.level / 2.0);
                let half = t * sd * (1.0 + 1.0 / k).sqrt();
                let gf = g(factor);
                Some((
                    n_hat * (-median * gf).exp(),
                    n_hat * (-(mean + half) * gf).exp(),
                    n_hat * (-(mean - half) * gf).exp(),
                ))
            }
            _ => None,
        };
        match (interval, self.support) {
            (Some((point, lower, upper)), Some(sup)) if factor <= sup => Calibrated::Supported {
                point,
                lower,
                upper: (self.infinite == 0).then_some(upper),
            },
            (interval, _) => Calibrated::Unsupported {
                lower: interval.map(|(_, l, _)| l),
            },
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pair(factor: f64, error: Option<f64>) -> HindsightPair {
        HindsightPair {
            curve: "m".into(),
            truncated_at: 1000.0,
            level: 1.0,
            measured: 1000.0 * factor,
            predicted: error.map(|e| 1000.0 * factor * e.exp()),
            factor,
            error,
        }
    }

    /// Scores e / ln(1 + f); the Student-t prediction interval by hand: five scores
    /// 0, 0.1, 0.2, 0.3, 0.4 (f = e − 1 so g = 1): mean 0.2, sd 0.158114, t_{4, 0.95} = 2.131847
    /// (statistical tables), half-width 2.131847·0.158114·√1.2 = 0.369247.
    #[test]
    fn the_prediction_interval_follows_the_student_t_rule() {
        let f = std::f64::consts::E - 1.0;
        let pairs: Vec<HindsightPair> = [0.0, 0.1, 0.2, 0.3, 0.4]
            .iter()
            .map(|&e| pair(f, Some(e)))
            .collect();
        let c = Calibration::from_pairs(pairs, 0.9);
        assert_eq!(c.finite, 5);
        assert!((c.mean_score.unwrap() - 0.2).abs() < 1e-12);
        assert!((c.sd_score.unwrap() - 0.158_113_883).abs() < 1e-8);
        assert!((c.support.unwrap() - f).abs() < 1e-12);
        // A prediction at the same factor f = e − 1 (g = 1): ln n* = ln n̂ − s.
        let n_hat = 1000.0 * f;
        let Calibrated::Supported {
            point,
            lower,
            upper,
        } = c.predict(n_hat, 1000.0)
        else {
            panic!("supported")
        };
        let half = 2.131_847 * 0.158_113_883 * 1.2f64.sqrt();
        assert!((point / (n_hat * (-0.2f64).exp()) - 1.0).abs() < 1e-9);
        assert!((lower / (n_hat * (-(0.2 + half)).exp()) - 1.0).abs() < 1e-5);
        assert!((upper.unwrap() / (n_hat * (-(0.2 - half)).exp()) - 1.0).abs() < 1e-5);
    }

    /// Beyond F_sup, with too few pairs, or (for the upper end) with an infinite score.
    #[test]
    fn support_and_infinite_scores_limit_the_answer() {
        let mut pairs: Vec<HindsightPair> =
            (0..5).map(|i| pair(2.0, Some(0.1 * i as f64))).collect();
        let c = Calibration::from_pairs(pairs.clone(), 0.9);
        assert!(matches!(
            c.predict(3000.0, 1000.0),
            Calibrated::Unsupported { lower: Some(_) }
        ));
        assert!(matches!(
            c.predict(1500.0, 1000.0),
            Calibrated::Supported { upper: Some(_), .. }
        ));
        pairs.push(pair(1.5, None));
        let c = Calibration::from_pairs(pairs.clone(), 0.9);
        assert_eq!(c.infinite, 1);
        assert!(matches!(
            c.predict(1500.0, 1000.0),
            Calibrated::Supported { upper: None, .. }
        ));
        let few = Calibration::from_pairs(pairs[..4].to_vec(), 0.9);
        assert!(matches!(
            few.predict(1500.0, 1000.0),
            Calibrated::Unsupported { lower: None }
        ));
    }

    /// A curve measured on a saturating power law with small scatter: hindsight pairs exist
    /// once four sizes are kept; each level lies beyond its truncation and is measured inside
    /// the data, with its factor and error consistent with its sizes.
    #[test]
    fn hindsight_pairs_on_a_well_specified_curve() {
        let samples: Vec<SizeSamples> = (0..8)
            .map(|i| {
                let n = 100.0 * 2f64.sqrt().powi(i);
                let m = 3.0 - 20.0 / n.sqrt();
                SizeSamples {
                    n,
                    replicate_values: vec![m - 0.005, m, m + 0.005],
                    censored: false,
                }
            })
            .collect();
        let pairs = hindsight_pairs("m", &samples, &FitOptions::default());
        assert!(!pairs.is_empty());
        let largest = samples.last().unwrap().n;
        for p in &pairs {
            assert!(
                p.factor > 1.0 && p.measured <= largest * (1.0 + 1e-12),
                "{p:?}"
            );
            assert!(
                (p.factor - p.measured / p.truncated_at).abs() < 1e-12,
                "{p:?}"
            );
            let top = 3.0 - 20.0 / p.truncated_at.sqrt();
            assert!(p.level > top, "{p:?}");
            if let (Some(n), Some(e)) = (p.predicted, p.error) {
                assert!((e - (n / p.measured).ln()).abs() < 1e-12, "{p:?}");
            }
        }
        assert!(pairs.iter().any(|p| p.error.is_some()), "{pairs:?}");
    }

    /// Lower is better: the hindsight pairs of a falling error curve (1 + 20/√n) take levels
    /// clearly below what each truncation measured, predicted by the falling families, and the
    /// mirror image of the rising curve of the test above gives as many pairs.
    #[test]
    fn hindsight_pairs_of_a_falling_curve_look_below_the_truncation() {
        use crate::curves::Direction;
        let curve = |sign: f64| -> Vec<SizeSamples> {
            (0..8)
                .map(|i| {
                    let n = 100.0 * 2f64.sqrt().powi(i);
                    let m = 2.0 + sign * (1.0 - 20.0 / n.sqrt());
                    SizeSamples {
                        n,
                        replicate_values: vec![m - 0.005, m, m + 0.005],
                        censored: false,
                    }
                })
                .collect()
        };
        let falling = FitOptions {
            direction: Direction::Decreasing,
            ..FitOptions::default()
        };
        let down = hindsight_pairs("m", &curve(-1.0), &falling);
        let up = hindsight_pairs("m", &curve(1.0), &FitOptions::default());
        assert!(!down.is_empty());
        assert_eq!(down.len(), up.len(), "{down:?} {up:?}");
        for p in &down {
            let lowest = 1.0 + 20.0 / p.truncated_at.sqrt();
            assert!(p.level < lowest && p.factor > 1.0, "{p:?}");
        }
        assert!(down.iter().any(|p| p.error.is_some()), "{down:?}");
        // Read as higher is better, the same falling data give no pairs: nothing rises.
        assert!(hindsight_pairs("m", &curve(-1.0), &FitOptions::default()).is_empty());
    }
}
