//! Bootstrap uncertainty of the training size n* that reaches each target skill, over
//! replicates, over test initial conditions, and over curve families.
//!
//! Each draw resamples, with replacement, the replicate indices and the test-initial-condition
//! indices once, and applies them at every size (the same replicates and the same initial
//! conditions are used at every size, so their errors are shared across sizes and must be
//! resampled together); recomputes every replicate mean; draws a family with probability equal
//! to its weight (backtest or Akaike weights, see [`mod@super::backtest`]); refits that family
//! starting from its full-data fit; and inverts every target. A draw whose curve levels off
//! below a target counts as n* = ∞ for that target, so the interval is taken over all draws
//! (a draw whose refit fails is left out and counted). Percentile intervals (Efron &
//! Tibshirani 1993, ch. 13); family uncertainty by sampling families in proportion to their
//! weights, as in Bayesian model averaging (Hoeting et al. 1999, Stat. Sci. 14).

use super::fit::{quantile_sorted, refit, summarise, CurveFit, SizeSamples};
use super::{Family, Inversion};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Skill measured at one size: `values[replicate][initial condition]`.
#[derive(Debug, Clone, PartialEq)]
pub struct SkillGrid {
    pub n: f64,
    pub values: Vec<Vec<f64>>,
    /// Some values are lower bounds (forecasts still valid at the maximum lead).
    pub censored: bool,
}

impl SkillGrid {
    /// Replicate means (the curve's input).
    pub fn replicate_means(&self) -> SizeSamples {
        SizeSamples {
            n: self.n,
            replicate_values: self
                .values
                .iter()
                .map(|v| v.iter().sum::<f64>() / v.len().max(1) as f64)
                .collect(),
            censored: self.censored,
        }
    }
}

/// Bootstrap distribution of n* for one target.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TargetDraws {
    pub target: f64,
    pub draws: usize,
    /// Draws whose refit failed (left out of the shares and quantiles).
    pub failed: usize,
    /// Draws whose curve never reaches the target.
    pub unreachable: usize,
    /// Share of usable draws whose curve never reaches the target.
    pub p_unreachable: f64,
    /// Median of n* over usable draws (`None` when it is infinite).
    pub median: Option<f64>,
    /// Central interval at `level`; `None` for an infinite end (then "n* ≥ lower").
    pub lower: Option<f64>,
    pub upper: Option<f64>,
    pub level: f64,
    /// How many draws used each family.
    pub family_draws: Vec<(Family, usize)>,
}

/// Runs the bootstrap; see the module docs. `fits` are the full-data fits whose families
/// appear in `weights` (weights sum to 1). Deterministic for a seed.
pub fn bootstrap_targets(
    grid: &[SkillGrid],
    weights: &[(Family, f64)],
    fits: &[CurveFit],
    targets: &[f64],
    draws: usize,
    level: f64,
    seed: u64,
) -> Vec<TargetDraws> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut ns: Vec<Vec<f64>> = vec![Vec::with_capacity(draws); targets.len()];
    let mut failed = 0;
    let mut family_draws: Vec<(Family, usize)> = weights.iter().map(|&(f, _)| (f, 0)).collect();
    let replicates = grid.iter().map(|g| g.values.len()).max().unwrap_or(0);
    let ics = grid
        .iter()
        .flat_map(|g| g.values.iter().map(|v| v.len()))
        .max()
        .unwrap_or(0);
    let usable = !weights.is_empty() && replicates > 0 && ics > 0;
    // The random choices are drawn in sequence (the same stream as a serial loop); the refits,
    // the expensive part, run in parallel and are collected in draw order, so the result does
    // not depend on the thread count.
    let mut choices = Vec::with_capacity(if usable { draws } else { 0 });
    for _ in 0..if usable { draws } else { 0 } {
        let rep_idx: Vec<usize> = (0..replicates)
            .map(|_| rng.random_range(0..replicates))
            .collect();
        let ic_idx: Vec<usize> = (0..ics).map(|_| rng.random_range(0..ics)).collect();
        let u: f64 = rng.random();
        let mut acc = 0.0;
        let pick = weights
            .iter()
            .position(|&(_, w)| {
                acc += w;
                u < acc
            })
            .unwrap_or(weights.len() - 1);
        family_draws[pick].1 += 1;
        choices.push((pick, rep_idx, ic_idx));
    }
    let outcomes: Vec<Option<Vec<f64>>> = choices
        .par_iter()
        .map(|(pick, rep_idx, ic_idx)| {
            let family = weights[*pick].0;
            let resampled: Vec<SizeSamples> = grid
                .iter()
                .map(|g| SizeSamples {
                    n: g.n,
                    replicate_values: rep_idx
                        .iter()
                        .filter_map(|&r| g.values.get(r))
                        .map(|v| {
                            let picked: Vec<f64> =
                                ic_idx.iter().filter_map(|&i| v.get(i).copied()).collect();
                            picked.iter().sum::<f64>() / picked.len().max(1) as f64
                        })
                        .collect(),
                    censored: g.censored,
                })
                .collect();
            let full = fits.iter().find(|f| f.family == family)?;
            let fit = refit(family, &summarise(&resampled), &full.params, full.scale).ok()?;
            Some(
                targets
                    .iter()
                    .map(|t| match fit.invert(*t) {
                        Inversion::Reached { n } => n,
                        Inversion::Unreachable { .. } => f64::INFINITY,
                    })
                    .collect(),
            )
        })
        .collect();
    for outcome in outcomes {
        match outcome {
            Some(values) => {
                for (v, out) in values.into_iter().zip(ns.iter_mut()) {
                    out.push(v);
                }
            }
            None => failed += 1,
        }
    }
    targets
        .iter()
        .zip(ns)
        .map(|(&target, mut v)| {
            v.sort_by(f64::total_cmp);
            let unreachable = v.iter().filter(|x| x.is_infinite()).count();
            let finite = |x: f64| x.is_finite().then_some(x);
            let q = |p: f64| {
                (!v.is_empty())
                    .then(|| quantile_sorted(&v, p))
                    .and_then(finite)
            };
            TargetDraws {
                target,
                draws: if usable { draws } else { 0 },
                failed,
                unreachable,
                p_unreachable: if v.is_empty() {
                    1.0
                } else {
                    unreachable as f64 / v.len() as f64
                },
                median: q(0.5),
                lower: q((1.0 - level) / 2.0),
                upper: q((1.0 + level) / 2.0),
                level,
                family_draws: family_draws.clone(),
            }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::curves::fit_family;

    /// Synthetic grid: skill = c(1 − e^{−n/n0}) plus per-replicate and per-IC noise.
    fn grid(seed: u64, noise: f64) -> Vec<SkillGrid> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..7)
            .map(|i| {
                let n = 250.0 * 2f64.powi(i);
                let mean = 2.0 * (1.0 - (-n / 4000.0).exp());
                SkillGrid {
                    n,
                    values: (0..3)
                        .map(|_| {
                            let rep = noise * rng.random_range(-1.0..1.0);
                            (0..40)
                                .map(|_| mean + rep + 4.0 * noise * rng.random_range(-1.0..1.0))
                                .collect()
                        })
                        .collect(),
                    censored: false,
                }
            })
            .collect()
    }

    fn fits(g: &[SkillGrid]) -> Vec<CurveFit> {
        let pts = summarise(&g.iter().map(|x| x.replicate_means()).collect::<Vec<_>>());
        vec![fit_family(Family::ExponentialSaturation, &pts).unwrap()]
    }

    #[test]
    fn deterministic_and_contains_the_truth() {
        let g = grid(1, 0.02);
        let f = fits(&g);
        let w = [(Family::ExponentialSaturation, 1.0)];
        let a = bootstrap_targets(&g, &w, &f, &[1.0, 2.5], 300, 0.9, 7);
        let b = bootstrap_targets(&g, &w, &f, &[1.0, 2.5], 300, 0.9, 7);
        assert_eq!(a, b);
        // True n* for skill 1.0: n = −4000·ln(1 − 0.5) = 2772.6.
        let t = &a[0];
        let truth = -4000.0 * (0.5f64).ln();
        assert!(
            t.lower.unwrap() < truth && truth < t.upper.unwrap(),
            "{t:?}"
        );
        assert_eq!(t.p_unreachable, 0.0);
        // 2.5 is above the asymptote 2: unreachable in (almost) every draw, no finite median.
        assert!(a[1].p_unreachable > 0.95, "{:?}", a[1]);
        assert!(a[1].median.is_none() && a[1].upper.is_none());
    }

    /// Family draws follow the weights.
    #[test]
    fn families_are_drawn_in_proportion_to_their_weights() {
        let g = grid(2, 0.02);
        let pts = summarise(&g.iter().map(|x| x.replicate_means()).collect::<Vec<_>>());
        let f = vec![
            fit_family(Family::ExponentialSaturation, &pts).unwrap(),
            fit_family(Family::SaturatingPowerLaw, &pts).unwrap(),
        ];
        let w = [
            (Family::ExponentialSaturation, 0.75),
            (Family::SaturatingPowerLaw, 0.25),
        ];
        let r = bootstrap_targets(&g, &w, &f, &[1.0], 400, 0.9, 3);
        let share = r[0].family_draws[0].1 as f64 / 400.0;
        // Binomial sd at p = 0.75, 400 draws: 0.0217; allow 4 sd.
        assert!((share - 0.75).abs() < 0.087, "{share}");
    }
}
