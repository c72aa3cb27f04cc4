//! Benchmark of the learning-curve analysis of one model on one core: every family fitted to
//! all sizes, the backtest (every family on every leading subset of sizes), and the 400-draw
//! bootstrap of n* over replicates, initial conditions and families — the whole of
//! `study::runner::analyse_curve`, plus each stage on its own.
//!
//! Data: synthetic skill in the shape of a valid prediction time, 7 sizes (1,000 … 64,000,
//! doubling) × 3 replicates × 60 test initial conditions; the replicate mean follows
//! 2.4 − 2.0·(n/1000)^(−0.4), each replicate is shifted by up to ±0.05 and each initial
//! condition scatters by up to ±0.6 (deterministic pseudo-random numbers, so every run and
//! every checkout times the same work). A second set is the accelerating curve whose means
//! are 0.52, 0.45, 0.71, 1.10, 1.57, 2.46 at 1,000 … 32,000.
//!
//! The analysis takes the study's calibration of extrapolation (none here). Run with `cargo bench --bench curves` (add
//! `-- quick` for fewer repetitions).

use closure_budget::curves::calibration::Calibration;
use closure_budget::curves::{self, Family, FitScale, SkillGrid};
use closure_budget::study::analysis::{analyse_curve, CurveContext, CurveSettings};
use std::hint::black_box;
use std::time::Instant;

/// Best wall time of `reps` runs, seconds.
fn best_of<T>(reps: usize, mut f: impl FnMut() -> T) -> f64 {
    (0..reps)
        .map(|_| {
            let t = Instant::now();
            black_box(f());
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

/// Uniform numbers in [−1, 1) from a 64-bit linear congruential generator.
fn pseudo_random(len: usize, seed: u64) -> Vec<f64> {
    let mut s = seed
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    (0..len)
        .map(|_| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((s >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
        })
        .collect()
}

/// Skill grid: `means[i]` at `sizes[i]`, 3 replicates shifted by up to ±`rep_spread`, 60
/// initial conditions scattered by up to ±`ic_spread`.
fn grid(
    sizes: &[f64],
    means: &[f64],
    rep_spread: f64,
    ic_spread: f64,
    seed: u64,
) -> Vec<SkillGrid> {
    let (reps, ics) = (3, 60);
    let noise = pseudo_random(sizes.len() * reps * (ics + 1), seed);
    sizes
        .iter()
        .zip(means)
        .enumerate()
        .map(|(i, (&n, &mean))| SkillGrid {
            n,
            values: (0..reps)
                .map(|r| {
                    let base = (i * reps + r) * (ics + 1);
                    let shift = rep_spread * noise[base];
                    (0..ics)
                        .map(|k| (mean + shift + ic_spread * noise[base + 1 + k]).max(0.01))
                        .collect()
                })
                .collect(),
            censored: false,
        })
        .collect()
}

fn settings(draws: usize) -> CurveSettings {
    CurveSettings {
        scale: FitScale::Linear,
        draws,
        level: 0.9,
        trust_factor: 2.0,
        seed: 5,
        direction: closure_budget::curves::Direction::Increasing,
    }
}

/// Times the whole analysis and its stages for one grid on a one-thread pool, and prints the
/// selected family and the estimates so that runs of different engines can be compared.
fn analysis(label: &str, grid: &[SkillGrid], targets: &[f64], reps: usize) {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    let draws = 400;
    let s = settings(draws);
    pool.install(|| {
        let samples: Vec<_> = grid.iter().map(|g| g.replicate_means()).collect();
        let points = curves::summarise(&samples);
        let fit_all = || -> Vec<curves::CurveFit> {
            Family::ALL
                .iter()
                .filter_map(|&f| curves::fit_family_on(f, &points, s.scale).ok())
                .collect()
        };
        let t_fit = best_of(reps, fit_all);
        let fits = fit_all();
        let t_backtest = best_of(reps, || {
            curves::backtest(&samples, &Family::ALL, &fits, s.scale)
        });
        let bt = curves::backtest(&samples, &Family::ALL, &fits, s.scale);
        let t_boot = best_of(reps, || {
            curves::bootstrap_targets(grid, &bt.weights, &fits, targets, draws, 0.9, 5)
        });
        // No hindsight pairs: targets beyond the data are beyond support.
        let calibration = Calibration::from_pairs(Vec::new(), 0.9);
        let context = CurveContext {
            calibration: &calibration,
            floor: None,
        };
        let t_all = best_of(reps, || analyse_curve(grid, targets, &s, None, &context));
        let a = analyse_curve(grid, targets, &s, None, &context);
        println!(
            "curve analysis {label}: whole analysis {t_all:.4} s on 1 thread \
             (fit all families {t_fit:.4} s, backtest {t_backtest:.4} s, \
             {draws}-draw bootstrap {t_boot:.4} s)"
        );
        println!(
            "  fitted families: {}; selected: {}",
            fits.iter()
                .map(|f| f.family.label())
                .collect::<Vec<_>>()
                .join(", "),
            a.selected.map(|f| f.label()).unwrap_or("none")
        );
        for e in &a.estimates {
            println!(
                "  target {}: n* {:?}, interval {:?}, p(unreachable) {:.3}",
                e.target, e.samples, e.samples_interval, e.p_unreachable
            );
        }
    });
}

fn main() {
    let quick = std::env::args().any(|a| a == "quick");
    let reps = if quick { 1 } else { 3 };
    let sizes: Vec<f64> = (0..7).map(|i| 1000.0 * 2f64.powi(i)).collect();
    let means: Vec<f64> = sizes
        .iter()
        .map(|&n| 2.4 - 2.0 * (n / 1000.0).powf(-0.4))
        .collect();
    analysis(
        "saturating, 7 sizes x 3 replicates x 60 ICs",
        &grid(&sizes, &means, 0.05, 0.6, 11),
        &[1.0, 1.5, 2.0],
        reps,
    );
    let sizes: Vec<f64> = (0..6).map(|i| 1000.0 * 2f64.powi(i)).collect();
    let means = [0.52, 0.45, 0.71, 1.10, 1.57, 2.46];
    analysis(
        "accelerating, 6 sizes x 3 replicates x 60 ICs",
        &grid(&sizes, &means, 0.05, 0.6, 12),
        &[1.0, 1.5, 2.0],
        reps,
    );
}
