//! Coverage of the reported standard errors: for every family, seeded synthetic learning
//! curves from known parameters are summarised and fitted, and the share of data sets whose
//! Wald interval `estimate ± 1.645·se` contains the true value is compared with its nominal
//! level.
//!
//! What is simulated: 8 geometric sizes n = 16·2^i (16 … 2048), 4 replicates per size with
//! independent N(0, σ²) noise, [`summarise`] (replicate means), [`fit_family`] with its
//! default starts. 200 seeds per family; a failed or unconverged fit, or one without standard
//! errors, counts as not covering. Two weightings of the same data sets:
//!
//! - known noise: each point's standard error is the true σ/√4. This isolates the engine, the
//!   families, their reparametrisations and the delta method, and is held to the band below.
//! - replicate standard errors: [`summarise`]'s own s/√4 (with its floors), as the study
//!   runner uses it. With 4 replicates each s has 3 degrees of freedom, so the weights 1/se
//!   are very noisy (1/χ²₃ has no finite variance) and the residual-based scale
//!   RSS_w/(m − k) no longer matches the estimator's actual spread: the intervals are too
//!   narrow for every family, the linear logarithmic one included (measured 66.5–79.5%, see
//!   the test). That is a property of summarise + weighted fit with few replicates, not of a
//!   family; the test asserts it only as a documented regression floor and says so.
//!
//! Expected coverage. The interval uses the normal quantile 1.645 but the standard errors are
//! `sqrt(RSS_w/(m − k) · diag((JᵀWJ)⁻¹))`, i.e. the error scale is estimated from m − k =
//! 8 − k residual degrees of freedom, so even for a linear model with correct weights the
//! coverage is P(|T_{m−k}| ≤ 1.645) < 90% (Student t): 84.9% for k = 2, 83.9% for k = 3,
//! 82.5% for k = 4. This is the known small-sample undercoverage of Wald intervals with an
//! estimated scale (e.g. Seber & Wild 1989, ch. 5). The check is therefore two-sided around
//! that band: coverage ≥ P(|T_{m−k}| ≤ 1.645) − 3·SE and ≤ 0.90 + 3·SE, with
//! SE = sqrt(π(1 − π)/200) the binomial standard error of a proportion from 200 data sets
//! (3·SE ≈ 6.4 points at π = 0.9, 8.1 at π = 0.825).
//!
//! Parameter settings are chosen well conditioned on 16 … 2048 (the rise of every saturating
//! curve happens inside the measured range, the noise is 1–2% of the skill range), because
//! there the linearisation behind the Wald interval holds; near-flat or barely identified
//! settings (e.g. a saturating curve whose asymptote lies far beyond the largest size) are
//! expected to undercover further (not measured here) and are not what this test is about.
//!
//! References: Seber & Wild (1989), Nonlinear Regression, Wiley, ch. 5 (linearisation
//! intervals; cited from memory). The binomial standard error is the normal approximation
//! sqrt(π(1 − π)/N).

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use statrs::distribution::{ContinuousCDF, StudentsT};

use super::{fit_family, summarise, Family, SizeSamples};

/// Standard normal deviate by Box–Muller.
fn normal(rng: &mut ChaCha8Rng) -> f64 {
    let u1: f64 = 1.0 - rng.random::<f64>(); // (0, 1]
    let u2: f64 = rng.random::<f64>();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

const SIZES: usize = 8;
const REPLICATES: usize = 4;
const SEEDS: u64 = 200;
/// Two-sided 90% normal quantile.
const Z90: f64 = 1.645;

fn synthetic(family: Family, p: &[f64], sigma: f64, seed: u64) -> Vec<SizeSamples> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..SIZES)
        .map(|i| {
            let n = 16.0 * 2f64.powi(i as i32);
            let f = family.eval(p, n);
            SizeSamples {
                n,
                replicate_values: (0..REPLICATES)
                    .map(|_| f + sigma * normal(&mut rng))
                    .collect(),
                censored: false,
            }
        })
        .collect()
}

/// (family, true natural parameters, noise σ). Skill ranges roughly 1–10 over the sizes.
fn settings() -> Vec<(Family, Vec<f64>, f64)> {
    vec![
        (Family::PowerLaw, vec![0.5, 0.35], 0.1),
        (Family::SaturatingPowerLaw, vec![10.0, 12.0, 0.5], 0.1),
        (Family::ExponentialSaturation, vec![8.0, 300.0], 0.1),
        (
            Family::ShiftedSaturatingPowerLaw,
            vec![10.0, 40.0, 0.6, 30.0],
            0.05,
        ),
        (Family::MorganMercerFlodin, vec![1.0, 55.0, 9.0, 0.8], 0.1),
        (Family::Weibull, vec![0.02, 8.0, 9.0, 0.7], 0.1),
        (Family::Logarithmic, vec![0.5, 1.2], 0.1),
    ]
}

/// Coverage per (family, parameter) over [`SEEDS`] data sets, with known-noise or
/// replicate standard errors.
struct Row {
    family: Family,
    param: &'static str,
    coverage: f64,
    /// P(|T_{m−k}| ≤ 1.645).
    t_nominal: f64,
    failed_fits: usize,
}

fn coverage_table(known_noise: bool) -> Vec<Row> {
    let mut rows = Vec::new();
    for (family, truth, sigma) in settings() {
        let k = family.n_params();
        let t = StudentsT::new(0.0, 1.0, (SIZES - k) as f64).unwrap();
        let t_nominal = 2.0 * t.cdf(Z90) - 1.0;
        let mut covered = vec![0usize; k];
        let mut failed_fits = 0usize;
        for seed in 0..SEEDS {
            let mut pts = summarise(&synthetic(family, &truth, sigma, 1000 + seed));
            if known_noise {
                for q in pts.iter_mut() {
                    q.standard_error = sigma / (REPLICATES as f64).sqrt();
                }
            }
            let Ok(fit) = fit_family(family, &pts) else {
                failed_fits += 1;
                continue;
            };
            let Some(se) = fit.std_errors.as_ref().filter(|_| fit.converged) else {
                failed_fits += 1;
                continue;
            };
            for j in 0..k {
                if (fit.params[j] - truth[j]).abs() <= Z90 * se[j] {
                    covered[j] += 1;
                }
            }
        }
        for (j, &param) in family.param_names().iter().enumerate() {
            rows.push(Row {
                family,
                param,
                coverage: covered[j] as f64 / SEEDS as f64,
                t_nominal,
                failed_fits,
            });
        }
    }
    rows
}

/// Binomial standard error of a coverage proportion π estimated from [`SEEDS`] data sets.
fn binomial_se(pi: f64) -> f64 {
    (pi * (1.0 - pi) / SEEDS as f64).sqrt()
}

/// Check every row against [lower(row), 0.90 + 3·SE(0.90)] and report all rows.
fn check(label: &str, rows: &[Row], lower: impl Fn(&Row) -> f64) {
    let upper = 0.9 + 3.0 * binomial_se(0.9);
    let mut off = Vec::new();
    for r in rows {
        let lo = lower(r);
        eprintln!(
            "coverage ({label}) {:<30} {:<3} {:5.1}%  (t-nominal {:4.1}%, accepted [{:4.1}%, {:4.1}%], failed fits {})",
            r.family.label(),
            r.param,
            100.0 * r.coverage,
            100.0 * r.t_nominal,
            100.0 * lo,
            100.0 * upper,
            r.failed_fits
        );
        if !(lo..=upper).contains(&r.coverage) {
            off.push(format!(
                "{} {}: {:.1}% outside [{:.1}%, {:.1}%]",
                r.family.label(),
                r.param,
                100.0 * r.coverage,
                100.0 * lo,
                100.0 * upper
            ));
        }
    }
    assert!(off.is_empty(), "coverage ({label}) off: {off:#?}");
}

/// Known noise: every family and parameter within [P(|T_{m−k}| ≤ 1.645) − 3·SE, 0.90 + 3·SE]
/// (see the module doc). Measured 80.0–88.0% against t-nominal 82.5–84.9%.
#[test]
fn wald_intervals_with_known_noise_cover_at_t_nominal() {
    let rows = coverage_table(true);
    assert_eq!(
        rows.iter().map(|r| r.family).max(),
        Some(Family::Logarithmic)
    );
    check("known noise", &rows, |r| {
        r.t_nominal - 3.0 * binomial_se(r.t_nominal)
    });
}

/// Replicate standard errors from [`summarise`] with 4 replicates: measured 66.5–79.5% for
/// a nominal 90% (t-nominal 82.5–84.9%), i.e. below the tolerance band of the known-noise
/// test for most parameters. This is reported, not hidden: the floor asserted here, 55%, is
/// a regression guard (the lowest measured coverage, 66.5%, less about 3 binomial standard
/// errors, 3·0.033), not a claim that these intervals are honest. Use more replicates per
/// size, or a bootstrap, when calibrated parameter intervals matter.
#[test]
fn wald_intervals_with_replicate_standard_errors_undercover() {
    let rows = coverage_table(false);
    check("replicate se", &rows, |_| 0.55);
    // The undercoverage is systematic: on average below the t-nominal level.
    let mean_gap = rows.iter().map(|r| r.t_nominal - r.coverage).sum::<f64>() / rows.len() as f64;
    eprintln!(
        "coverage (replicate se): mean shortfall below t-nominal {:.1} points",
        100.0 * mean_gap
    );
}
