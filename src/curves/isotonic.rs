//! Inside the measured range the data decide: the isotonic (pool-adjacent-violators) regression
//! of the size means, the first size at which it reaches a target, n* interpolated in ln n
//! between the bracketing sizes, and the bootstrap of that interpolation over replicates and
//! test initial conditions.
//!
//! The measured means of a learning curve are noisy; a mean that dips below its predecessor is
//! noise unless it drops by more than its standard error. The isotonic fit (weights 1/se²) is
//! the closest non-decreasing sequence in the weighted least-squares sense, so a target counts
//! as reached where that sequence first reaches it, not where one lucky size happens to. For a
//! metric where lower is better ([`Direction::Decreasing`]) the same holds mirrored: the
//! antitonic (non-increasing) fit, and the first size whose fitted mean is at most the target;
//! both directions run through one code path on the oriented values `sign · mean`.
//!
//! References: Ayer, Brunk, Ewing, Reid & Silverman (1955), Ann. Math. Statist. 26, 641–647
//! (pool-adjacent-violators); Barlow, Bartholomew, Bremner & Brunk (1972), Statistical
//! Inference under Order Restrictions; Efron & Tibshirani (1993), An Introduction to the
//! Bootstrap, ch. 13 (percentile intervals).

use super::families::Direction;
use super::fit::{summarise, CurvePoint, SizeSamples};
use super::uncertainty::SkillGrid;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// The weighted isotonic (non-decreasing) regression of `values` by pool-adjacent-violators.
/// Weights must be finite and positive; a non-finite weight is treated as 1.
pub fn pava(values: &[f64], weights: &[f64]) -> Vec<f64> {
    // Blocks of (pooled mean, total weight, count).
    let mut blocks: Vec<(f64, f64, usize)> = Vec::with_capacity(values.len());
    for (&v, &w) in values.iter().zip(weights) {
        let w = if w.is_finite() && w > 0.0 { w } else { 1.0 };
        blocks.push((v, w, 1));
        while blocks.len() >= 2 {
            let (m2, w2, c2) = blocks[blocks.len() - 1];
            let (m1, w1, c1) = blocks[blocks.len() - 2];
            if m1 <= m2 {
                break;
            }
            blocks.pop();
            let last = blocks.last_mut().expect("two blocks");
            *last = ((m1 * w1 + m2 * w2) / (w1 + w2), w1 + w2, c1 + c2);
        }
    }
    blocks
        .into_iter()
        .flat_map(|(m, _, c)| std::iter::repeat_n(m, c))
        .collect()
}

/// The isotonic means of curve points in the curve's direction (non-decreasing when higher is
/// better, non-increasing when lower is better), weighted by 1/se² (equal weights when the
/// points carry no spread).
pub fn isotonic_means(points: &[CurvePoint], direction: Direction) -> Vec<f64> {
    let sign = direction.sign();
    let oriented: Vec<f64> = points.iter().map(|p| sign * p.mean).collect();
    let weights: Vec<f64> = points
        .iter()
        .map(|p| {
            if p.standard_error > 0.0 {
                1.0 / (p.standard_error * p.standard_error)
            } else {
                1.0
            }
        })
        .collect();
    pava(&oriented, &weights)
        .into_iter()
        .map(|m| sign * m)
        .collect()
}

/// Where a monotone sequence of means first reaches a target.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Crossing {
    /// Already at the smallest size: only "at most the smallest size" is known.
    AtSmallest,
    /// Between the sizes `below` and `below + 1`, at n (interpolated in ln n).
    Between { n: f64, below: usize },
    /// No measured size reaches it.
    NotReached,
}

/// The first crossing of `target` by the isotonic means `iso` at sizes `ns` (ascending), in
/// the curve's direction: linear interpolation of the mean in ln n between the last size that
/// has not met the target and the first that meets it (at or above it when higher is better,
/// at or below it when lower is better).
pub fn first_crossing(ns: &[f64], iso: &[f64], target: f64, direction: Direction) -> Crossing {
    match iso.iter().position(|&m| direction.meets(m, target)) {
        None => Crossing::NotReached,
        Some(0) => Crossing::AtSmallest,
        Some(i) => {
            let (m0, m1) = (iso[i - 1], iso[i]);
            let t = ((target - m0) / (m1 - m0)).clamp(0.0, 1.0);
            let (l0, l1) = (ns[i - 1].ln(), ns[i].ln());
            Crossing::Between {
                n: (l0 + t * (l1 - l0)).exp().clamp(ns[i - 1], ns[i]),
                below: i - 1,
            }
        }
    }
}

/// The in-data n* of `target` from curve points: `Some(n)` when the isotonic means cross it
/// between two measured sizes, the smallest size when they reach it there, `None` when they do
/// not reach it.
pub fn measured_n_star(points: &[CurvePoint], target: f64, direction: Direction) -> Option<f64> {
    let ns: Vec<f64> = points.iter().map(|p| p.n).collect();
    match first_crossing(&ns, &isotonic_means(points, direction), target, direction) {
        Crossing::AtSmallest => Some(ns[0]),
        Crossing::Between { n, .. } => Some(n),
        Crossing::NotReached => None,
    }
}

/// The bootstrap distribution of the in-data n* of one target.
#[derive(Debug, Clone, PartialEq)]
pub struct CrossingDraws {
    /// n* per draw, sorted; a draw reaching the target at the smallest size counts as that
    /// size, a draw not reaching it within the data as +∞ ("beyond the largest size").
    pub sorted: Vec<f64>,
}

impl CrossingDraws {
    /// Central interval at `level`: `[lower, upper]`, an end `+∞` when more than (1 − level)/2
    /// of the draws do not cross within the data. `None` without draws.
    pub fn interval(&self, level: f64) -> Option<[f64; 2]> {
        (!self.sorted.is_empty()).then(|| {
            [
                quantile_with_infinity(&self.sorted, (1.0 - level) / 2.0),
                quantile_with_infinity(&self.sorted, (1.0 + level) / 2.0),
            ]
        })
    }

    /// Share of draws that do not cross within the data.
    pub fn beyond_share(&self) -> f64 {
        if self.sorted.is_empty() {
            return 0.0;
        }
        self.sorted.iter().filter(|v| v.is_infinite()).count() as f64 / self.sorted.len() as f64
    }
}

/// Quantile (Hyndman–Fan type 7) of a sorted, non-empty slice that may end in +∞: an
/// interpolation that touches +∞ is +∞.
pub(crate) fn quantile_with_infinity(v: &[f64], prob: f64) -> f64 {
    let h = (v.len() - 1) as f64 * prob;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(v.len() - 1);
    let frac = h - lo as f64;
    if v[lo].is_infinite() || (frac > 0.0 && v[hi].is_infinite()) {
        return f64::INFINITY;
    }
    v[lo] + frac * (v[hi] - v[lo])
}

/// Bootstraps the in-data crossing of every target: each draw resamples the replicate indices
/// and the initial-condition indices once (the same at every size, as in
/// [`super::bootstrap_targets`]), recomputes the size means and their standard errors, takes
/// their isotonic regression in `direction` and its first crossing of each target.
/// Deterministic for a seed.
pub fn crossing_draws(
    grid: &[SkillGrid],
    targets: &[f64],
    draws: usize,
    seed: u64,
    direction: Direction,
) -> Vec<CrossingDraws> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let replicates = grid.iter().map(|g| g.values.len()).max().unwrap_or(0);
    let ics = grid
        .iter()
        .flat_map(|g| g.values.iter().map(|v| v.len()))
        .max()
        .unwrap_or(0);
    let mut out: Vec<Vec<f64>> = vec![Vec::with_capacity(draws); targets.len()];
    if replicates == 0 || ics == 0 || grid.is_empty() {
        return out
            .into_iter()
            .map(|sorted| CrossingDraws { sorted })
            .collect();
    }
    let ns: Vec<f64> = grid.iter().map(|g| g.n).collect();
    for _ in 0..draws {
        let rep_idx: Vec<usize> = (0..replicates)
            .map(|_| rng.random_range(0..replicates))
            .collect();
        let ic_idx: Vec<usize> = (0..ics).map(|_| rng.random_range(0..ics)).collect();
        let samples: Vec<SizeSamples> = grid
            .iter()
            .map(|g| SizeSamples {
                n: g.n,
                replicate_values: rep_idx
                    .iter()
                    .filter_map(|&r| g.values.get(r))
                    .map(|v| {
                        let picked: Vec<f64> =
                            ic_idx.iter().filter_map(|&i| v.get(i)).copied().collect();
                        picked.iter().sum::<f64>() / picked.len().max(1) as f64
                    })
                    .collect(),
                censored: g.censored,
            })
            .collect();
        let iso = isotonic_means(&summarise(&samples), direction);
        for (j, &t) in targets.iter().enumerate() {
            out[j].push(match first_crossing(&ns, &iso, t, direction) {
                Crossing::AtSmallest => ns[0],
                Crossing::Between { n, .. } => n,
                Crossing::NotReached => f64::INFINITY,
            });
        }
    }
    out.into_iter()
        .map(|mut sorted| {
            sorted.sort_by(f64::total_cmp);
            CrossingDraws { sorted }
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use Direction::{Decreasing, Increasing};

    /// Hand-computed: 1, 3, 2 with equal weights pools the last two to 2.5; with weight 3 on
    /// the 2 the pool is (3 + 6)/4 = 2.25.
    #[test]
    fn pava_pools_adjacent_violators() {
        assert_eq!(
            pava(&[1.0, 3.0, 2.0], &[1.0, 1.0, 1.0]),
            vec![1.0, 2.5, 2.5]
        );
        assert_eq!(
            pava(&[1.0, 3.0, 2.0], &[1.0, 1.0, 3.0]),
            vec![1.0, 2.25, 2.25]
        );
        // A violation that reaches back two blocks: 4, 5, 1 → all pooled to 10/3.
        let v = pava(&[4.0, 5.0, 1.0], &[1.0, 1.0, 1.0]);
        assert!(v.iter().all(|x| (x - 10.0 / 3.0).abs() < 1e-12), "{v:?}");
        assert_eq!(
            pava(&[1.0, 2.0, 3.0], &[1.0, 1.0, 1.0]),
            vec![1.0, 2.0, 3.0]
        );
    }

    /// The isotonic fit is non-decreasing and keeps the weighted mean (an invariant of PAV).
    #[test]
    fn pava_is_monotone_and_keeps_the_weighted_mean() {
        let v = [0.3, 0.1, 0.7, 0.6, 0.65, 1.2, 0.9, 1.5];
        let w = [1.0, 2.0, 0.5, 4.0, 1.0, 1.0, 3.0, 2.0];
        let iso = pava(&v, &w);
        assert!(iso.windows(2).all(|p| p[0] <= p[1] + 1e-15), "{iso:?}");
        let mean = |x: &[f64]| x.iter().zip(&w).map(|(a, b)| a * b).sum::<f64>();
        assert!((mean(&v) - mean(&iso)).abs() < 1e-12);
    }

    /// Target 1.5 between means 1 at n = 1000 and 2 at n = 4000: halfway in ln n, n = 2000.
    #[test]
    fn crossing_interpolates_in_log_n_between_the_bracketing_sizes() {
        let ns = [500.0, 1000.0, 4000.0];
        let iso = [0.5, 1.0, 2.0];
        match first_crossing(&ns, &iso, 1.5, Increasing) {
            Crossing::Between { n, below } => {
                assert_eq!(below, 1);
                assert!((n - 2000.0).abs() < 1e-9, "{n}");
            }
            c => panic!("{c:?}"),
        }
        assert_eq!(
            first_crossing(&ns, &iso, 0.4, Increasing),
            Crossing::AtSmallest
        );
        assert_eq!(
            first_crossing(&ns, &iso, 2.1, Increasing),
            Crossing::NotReached
        );
        // Exactly at a measured mean: that size.
        match first_crossing(&ns, &iso, 1.0, Increasing) {
            Crossing::Between { n, below: 0 } => assert!((n - 1000.0).abs() < 1e-9, "{n}"),
            c => panic!("{c:?}"),
        }
    }

    /// A dip that is noise (a mean below its predecessor) does not make the first crossing:
    /// 1.0, 1.6, 1.4, 2.0 pools to 1.0, 1.5, 1.5, 2.0, so 1.55 is first reached after the
    /// pooled pair, not at the second size.
    #[test]
    fn a_dip_is_pooled_before_the_crossing_is_read() {
        let ns = [100.0, 200.0, 400.0, 800.0];
        let iso = pava(&[1.0, 1.6, 1.4, 2.0], &[1.0; 4]);
        match first_crossing(&ns, &iso, 1.55, Increasing) {
            Crossing::Between { n, below } => {
                assert_eq!(below, 2);
                assert!(n > 400.0 && n < 800.0, "{n}");
            }
            c => panic!("{c:?}"),
        }
    }

    fn grid(means: &[f64], spread: f64) -> Vec<SkillGrid> {
        means
            .iter()
            .enumerate()
            .map(|(i, &m)| SkillGrid {
                n: 1000.0 * 2f64.powi(i as i32),
                values: (0..3)
                    .map(|r| {
                        (0..20)
                            .map(|ic| m + spread * ((r * 7 + ic * 3) % 11) as f64 / 11.0)
                            .collect()
                    })
                    .collect(),
                censored: false,
            })
            .collect()
    }

    /// Bootstrap draws stay inside the measured range or are +∞; the interval brackets the
    /// full-data crossing; a target above every size gives only +∞.
    #[test]
    fn crossing_draws_stay_in_the_data_or_read_beyond_it() {
        let g = grid(&[0.5, 0.8, 1.2, 1.5, 1.6], 0.2);
        let d = crossing_draws(&g, &[1.0, 5.0], 200, 3, Increasing);
        assert_eq!(d[0].sorted.len(), 200);
        assert!(d[0].sorted.iter().all(|&n| (1000.0..=16000.0).contains(&n)));
        let [lo, hi] = d[0].interval(0.9).unwrap();
        assert!(lo <= hi && lo >= 1000.0 && hi <= 16000.0);
        assert_eq!(d[1].beyond_share(), 1.0);
        assert_eq!(d[1].interval(0.9).unwrap(), [f64::INFINITY; 2]);
        // Deterministic for a seed.
        assert_eq!(
            crossing_draws(&g, &[1.0], 50, 9, Increasing),
            crossing_draws(&g, &[1.0], 50, 9, Increasing)
        );
    }

    /// Lower is better: the antitonic fit pools a rise (noise) instead of a dip, and the first
    /// crossing is the first fitted mean at or below the target. Hand-computed: 2.0, 1.4, 1.6,
    /// 1.0 pools to 2.0, 1.5, 1.5, 1.0; 1.45 lies between 1.5 at n = 400 and 1.0 at n = 800,
    /// a tenth of the way in ln n: n = 400·2^0.1 = 428.7.
    #[test]
    fn lower_is_better_mirrors_the_isotonic_fit_and_the_crossing() {
        let ns = [100.0, 200.0, 400.0, 800.0];
        let points: Vec<CurvePoint> = ns
            .iter()
            .zip([2.0, 1.4, 1.6, 1.0])
            .map(|(&n, mean)| CurvePoint {
                n,
                mean,
                standard_error: 0.0,
                censored: false,
            })
            .collect();
        let close = |a: &[f64], b: &[f64]| a.iter().zip(b).all(|(x, y)| (x - y).abs() < 1e-12);
        let iso = isotonic_means(&points, Decreasing);
        assert!(close(&iso, &[2.0, 1.5, 1.5, 1.0]), "{iso:?}");
        match first_crossing(&ns, &iso, 1.45, Decreasing) {
            Crossing::Between { n, below } => {
                assert_eq!(below, 2);
                assert!((n - 400.0 * 2f64.powf(0.1)).abs() < 1e-9, "{n}");
            }
            c => panic!("{c:?}"),
        }
        // Above every value: met at the smallest size; below every value: not reached.
        assert_eq!(
            first_crossing(&ns, &iso, 2.5, Decreasing),
            Crossing::AtSmallest
        );
        assert_eq!(
            first_crossing(&ns, &iso, 0.5, Decreasing),
            Crossing::NotReached
        );
        assert_eq!(measured_n_star(&points, 2.5, Decreasing), Some(100.0));
        // The same points read as higher-is-better pool the dip instead.
        let rising = isotonic_means(&points, Increasing);
        assert!(close(&rising, &[1.5; 4]), "{rising:?}");
    }
}
