//! Bootstrap uncertainty of the training size n* that reaches each target skill, over
//! replicates, over test initial conditions, and over curve families.
//!
//! Each draw resamples, with replacement, the replicate indices and the test-initial-condition
//! indices once, and applies them at every size (the same replicates and the same initial
//! conditions are used at every size, so their errors are shared across sizes and must be
//! resampled together); recomputes every replicate mean; draws a family with probability equal
//! to its weight (backtest or Akaike weights, see [`mod@super::backtest`]); refits that family
//! warm-started from its full-data fit (at most 40 evaluations of the bounded refinement, the
//! global search when that does not end in an interior optimum), under exactly the bounds and
//! rejection rules of the full fit, so that a refit cannot produce a curve the full fit may
//! not (a step function, a parameter at a bound, a flat curve); and inverts every target in
//! the fit's direction.
//!
//! A draw whose curve never reaches a target counts as n* = ∞ for that target, so the
//! interval is taken over all draws. A draw whose refit is rejected or fails is left out and
//! counted, and so is, for one target, a draw whose curve contradicts its own resampled data
//! there ([`CurveFit::check_crossing`] with [`CROSSING_K`] standard errors: inside the
//! measured range the data decide, a curve that crosses the target where the measurements
//! clearly have not is no evidence of n*). Each draw's refit depends only on its own
//! resample, and the draws are collected in order, so the result does not depend on the
//! thread count.
//!
//! Percentile intervals (Efron & Tibshirani 1993, ch. 13); family uncertainty by sampling
//! families in proportion to their weights, as in Bayesian model averaging (Hoeting et al.
//! 1999, Stat. Sci. 14).

use super::fit::{quantile_sorted, refit_warm, summarise, CurveFit, CurvePoint, SizeSamples};
use super::varpro::Workspace;
use super::{Family, Inversion};
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Standard errors by which a measured mean must miss or meet a target before a bootstrap
/// curve that disagrees with it is left out for that target (see [`CurveFit::check_crossing`]).
pub const CROSSING_K: f64 = 3.0;

/// Evaluations allowed to the warm-started refinement of one bootstrap refit before it falls
/// back to the global search.
const REFIT_MAX_EVALS: usize = 40;

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
    /// Draws left out of the shares and quantiles: the refit was rejected or failed, or its
    /// curve contradicts its own resampled data's crossing of this target (the measured mean
    /// at some size misses or meets the target by more than [`CROSSING_K`] standard errors
    /// while the curve does the opposite there).
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
    let (refits, family_draws) = draw_fits(grid, weights, fits, draws, seed);
    let usable = !refits.is_empty();
    let mut ns: Vec<Vec<f64>> = vec![Vec::with_capacity(refits.len()); targets.len()];
    let mut failed = vec![0; targets.len()];
    for refit in &refits {
        match refit {
            Some((fit, points)) => {
                for (j, t) in targets.iter().enumerate() {
                    if fit.check_crossing(points, *t, CROSSING_K).is_err() {
                        failed[j] += 1;
                        continue;
                    }
                    ns[j].push(match fit.invert(*t) {
                        Inversion::Reached { n } => n,
                        Inversion::Unreachable { .. } => f64::INFINITY,
                    });
                }
            }
            None => failed.iter_mut().for_each(|f| *f += 1),
        }
    }
    targets
        .iter()
        .zip(ns)
        .zip(failed)
        .map(|((&target, mut v), failed)| {
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

/// A bootstrap refit and the resampled points it was fitted to.
pub(crate) type Refit = (CurveFit, Vec<CurvePoint>);

/// The bootstrap refits, one per draw in draw order (`None` where the refit was rejected or
/// failed), and how many draws used each family. No draws when there are no weights or no
/// values.
pub(crate) fn draw_fits(
    grid: &[SkillGrid],
    weights: &[(Family, f64)],
    fits: &[CurveFit],
    draws: usize,
    seed: u64,
) -> (Vec<Option<Refit>>, Vec<(Family, usize)>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut family_draws: Vec<(Family, usize)> = weights.iter().map(|&(f, _)| (f, 0)).collect();
    let replicates = grid.iter().map(|g| g.values.len()).max().unwrap_or(0);
    let ics = grid
        .iter()
        .flat_map(|g| g.values.iter().map(|v| v.len()))
        .max()
        .unwrap_or(0);
    let usable = !weights.is_empty() && replicates > 0 && ics > 0;
    let draws = if usable { draws } else { 0 };
    // The random choices are drawn in sequence (the same stream as a serial loop); the refits,
    // the expensive part, run in parallel and are collected in draw order, so the result does
    // not depend on the thread count.
    let mut choices = Vec::with_capacity(draws);
    for _ in 0..draws {
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
    let refits = choices
        .par_iter()
        .map_init(Workspace::default, |ws, (pick, rep_idx, ic_idx)| {
            let family = weights[*pick].0;
            let full = fits.iter().find(|f| f.family == family)?;
            let resampled: Vec<SizeSamples> = grid
                .iter()
                .map(|g| SizeSamples {
                    n: g.n,
                    replicate_values: rep_idx
                        .iter()
                        .filter_map(|&r| g.values.get(r))
                        .map(|v| {
                            let (sum, count) = ic_idx
                                .iter()
                                .filter_map(|&i| v.get(i))
                                .fold((0.0, 0usize), |(s, c), x| (s + x, c + 1));
                            sum / count.max(1) as f64
                        })
                        .collect(),
                    censored: g.censored,
                })
                .collect();
            let points = summarise(&resampled);
            let fit = refit_warm(full, &points, REFIT_MAX_EVALS, ws).ok()?;
            Some((fit, points))
        })
        .collect();
    (refits, family_draws)
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
            fit_family(Family::Weibull, &pts).unwrap(),
        ];
        let w = [
            (Family::ExponentialSaturation, 0.75),
            (Family::Weibull, 0.25),
        ];
        let r = bootstrap_targets(&g, &w, &f, &[1.0], 400, 0.9, 3);
        let share = r[0].family_draws[0].1 as f64 / 400.0;
        // Binomial sd at p = 0.75, 400 draws: 0.0217; allow 4 sd.
        assert!((share - 0.75).abs() < 0.087, "{share}");
    }

    /// The degenerate study (means 0.52, 0.45, 0.71, 1.10, 1.57, 2.46 at 1,000 … 32,000, 3
    /// replicates spread by about 0.05, 20 initial conditions): every family that fits is
    /// bootstrapped with 400 draws; no draw is a step function or ends at a bound (the refits
    /// obey the full fit's rules), and no draw reaches 2.0 before 16,000 samples.
    #[test]
    fn degenerate_study_bootstrap_has_no_step_and_no_early_crossing() {
        let means = [0.52, 0.45, 0.71, 1.10, 1.57, 2.46];
        let mut rng = ChaCha8Rng::seed_from_u64(17);
        let grid: Vec<SkillGrid> = means
            .iter()
            .enumerate()
            .map(|(i, &m)| SkillGrid {
                n: 1000.0 * 2f64.powi(i as i32),
                values: (0..3)
                    .map(|_| {
                        let rep = m + 0.05 * rng.random_range(-1.0..1.0);
                        (0..20)
                            .map(|_| rep + 0.3 * rng.random_range(-1.0..1.0))
                            .collect()
                    })
                    .collect(),
                censored: false,
            })
            .collect();
        let pts = summarise(&grid.iter().map(|g| g.replicate_means()).collect::<Vec<_>>());
        let fits: Vec<CurveFit> = Family::ALL
            .iter()
            .filter_map(|&f| fit_family(f, &pts).ok())
            .collect();
        assert!(fits.len() >= 2, "{fits:?}");
        for full in &fits {
            let w = [(full.family, 1.0)];
            let (refits, _) = draw_fits(&grid, &w, std::slice::from_ref(full), 400, 3);
            let mut failed = 0;
            for refit in &refits {
                let Some((fit, points)) = refit else {
                    failed += 1;
                    continue;
                };
                if fit.check_crossing(points, 2.0, CROSSING_K).is_err() {
                    continue; // left out for this target by bootstrap_targets
                }
                let u = fit.family.nonlinear_of(&fit.params).unwrap();
                for (j, kind) in fit.family.nonlinear_kinds().iter().enumerate() {
                    let v = u[j].exp();
                    if *kind == crate::curves::bounds::Kind::Exponent {
                        assert!(v > 0.02 && v < 2.0, "{:?}: steepness {v}", fit.family);
                    }
                }
                if let Inversion::Reached { n } = fit.invert(2.0) {
                    assert!(n >= 16_000.0, "{:?} {:?}: n* = {n}", fit.family, fit.params);
                }
            }
            eprintln!(
                "degenerate bootstrap {:?}: {} of 400 refits rejected or failed",
                full.family, failed
            );
            // Through the public bootstrap: every usable draw reaches 2.0 at 16,000 samples
            // or later (or never).
            let r = bootstrap_targets(&grid, &w, std::slice::from_ref(full), &[2.0], 400, 0.9, 3);
            eprintln!("degenerate bootstrap {:?}: {:?}", full.family, r[0]);
            assert!(r[0].lower.is_none_or(|l| l >= 16_000.0), "{:?}", r[0]);
        }
    }

    /// The bootstrap gives bit-identical results on one thread and on two.
    #[test]
    fn independent_of_the_thread_count() {
        let g = grid(4, 0.03);
        let pts = summarise(&g.iter().map(|x| x.replicate_means()).collect::<Vec<_>>());
        let f: Vec<CurveFit> = Family::ALL
            .iter()
            .filter_map(|&fam| fit_family(fam, &pts).ok())
            .collect();
        let w: Vec<(Family, f64)> = f.iter().map(|x| (x.family, 1.0 / f.len() as f64)).collect();
        let run = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| bootstrap_targets(&g, &w, &f, &[1.0, 1.5], 200, 0.9, 9))
        };
        let (one, two) = (run(1), run(2));
        assert_eq!(format!("{one:?}"), format!("{two:?}"));
    }

    /// A falling error curve (lower is better): the bootstrap inverts in the fit's direction,
    /// and its interval contains the true n* at which the error first falls to the target.
    #[test]
    fn decreasing_curves_are_inverted_where_they_fall_to_the_target() {
        use crate::curves::{fit_family_with, Direction, FitOptions};
        let mut rng = ChaCha8Rng::seed_from_u64(8);
        let truth = |n: f64| 0.2 + 3.0 * n.powf(-0.4);
        let g: Vec<SkillGrid> = (0..7)
            .map(|i| {
                let n = 250.0 * 2f64.powi(i);
                SkillGrid {
                    n,
                    values: (0..3)
                        .map(|_| {
                            let rep = 0.003 * rng.random_range(-1.0..1.0);
                            (0..40)
                                .map(|_| truth(n) + rep + 0.01 * rng.random_range(-1.0..1.0))
                                .collect()
                        })
                        .collect(),
                    censored: false,
                }
            })
            .collect();
        let pts = summarise(&g.iter().map(|x| x.replicate_means()).collect::<Vec<_>>());
        let options = FitOptions {
            direction: Direction::Decreasing,
            ..FitOptions::default()
        };
        let fit = fit_family_with(Family::SaturatingPowerLaw, &pts, &options).unwrap();
        let w = [(Family::SaturatingPowerLaw, 1.0)];
        let target = 0.25;
        let r = bootstrap_targets(&g, &w, &[fit], &[target, 0.15], 200, 0.9, 2);
        // True n*: 3·n^(−0.4) = 0.05 → n = 60^(1/0.4) = 27,885.5 (exact arithmetic).
        let n_true = 60f64.powf(2.5);
        assert!(
            r[0].lower.unwrap() < n_true && n_true < r[0].upper.unwrap(),
            "{:?} vs {n_true}",
            r[0]
        );
        // 0.15 is below the asymptote 0.2: unreachable in (almost) every draw.
        assert!(r[1].p_unreachable > 0.95, "{:?}", r[1]);
    }
}
