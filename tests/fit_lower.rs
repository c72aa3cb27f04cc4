//! `fit --lower-is-better` end to end: an error that falls with n, written as a CSV, through the
//! command and its `budget.json`; and the wording of a `fit` report, which measures a metric of
//! the user's, not forecasts of a model in model time.
//!
//! The synthetic error is e(n) = 0.05 + 2·n^(−1/2) (a falling saturating power law c + a·n^(−b)
//! with c = 0.05, a = 2, b = 0.5) at n = 100·2^i, i = 0…5, three replicates per size, each
//! perturbed by a fixed relative pattern of at most ±0.4% (no random numbers, so the test is
//! exact to rerun).

mod common;
use closure_budget::curves::{Direction, Family};
use closure_budget::study::results::{EstimateStatus, PlanDocument};
use common::*;
use std::path::Path;

/// The true error curve.
fn error(n: f64) -> f64 {
    0.05 + 2.0 * n.powf(-0.5)
}

/// The CSV of the synthetic error, `value(e)` applied to every measured error.
fn csv(value: impl Fn(f64) -> f64) -> String {
    let mut out = String::from("model,n,replicate,skill\n");
    for i in 0..6 {
        let n = 100.0 * 2f64.powi(i);
        for r in 0..3 {
            let pattern = (((7 * r + 3 * i) % 5) - 2) as f64 / 2.0;
            let e = error(n) * (1.0 + 0.004 * pattern);
            out.push_str(&format!("surrogate,{n},seed{r},{}\n", value(e)));
        }
    }
    out
}

/// Runs `fit` on `text` in `dir` with `args` after the file; returns the terminal output and
/// the `budget.json` written by `--json`.
fn fit(dir: &Path, text: &str, args: &[&str]) -> (String, PlanDocument) {
    std::fs::write(dir.join("errors.csv"), text).unwrap();
    let mut all = vec!["fit", "errors.csv", "--draws", "100", "--json", "fit.json"];
    all.extend_from_slice(args);
    let o = run_in(dir, &all);
    assert!(o.status.success(), "{}", stderr(&o));
    let doc = serde_json::from_slice(&std::fs::read(dir.join("fit.json")).unwrap()).unwrap();
    (stdout(&o), doc)
}

#[test]
fn a_falling_error_is_fitted_and_inverted_where_it_falls_to_the_target() {
    let dir = tempfile::tempdir().unwrap();
    // 0.15 inside the data (e = 0.15 at n = 400 exactly), 0.04 below the floor 0.05, 0.5 above
    // every measured value (the largest is 0.25 at n = 100).
    let (out, doc) = fit(
        dir.path(),
        &csv(|e| e),
        &[
            "--lower-is-better",
            "--target",
            "0.15",
            "--target",
            "0.04",
            "--target",
            "0.5",
        ],
    );
    assert_eq!(doc.study.direction, Direction::Decreasing);
    let m = &doc.models[0];
    let fit = m
        .fits
        .iter()
        .find(|f| f.family == Family::SaturatingPowerLaw)
        .expect("the saturating power law is fitted");
    assert!(fit.error.is_none(), "{:?}", fit.error);
    assert_eq!(fit.formula, "c + a·n^(−b)");
    // Recovered within 2% (c, a) and 0.01 (b), and within three of its own standard errors.
    let se = fit.std_errors.as_ref().expect("standard errors");
    for (name, truth, tolerance) in [("c", 0.05, 0.001), ("a", 2.0, 0.04), ("b", 0.5, 0.01)] {
        let got = fit.params[name];
        assert!(
            (got - truth).abs() < tolerance && (got - truth).abs() < 3.0 * se[name],
            "{name} = {got} ± {} (truth {truth})",
            se[name]
        );
    }
    assert_eq!(fit.asymptote, Some(fit.params["c"]));
    // Estimates come in ascending target order: 0.04, 0.15, 0.5.
    let by_target = |t: f64| {
        m.estimates
            .iter()
            .find(|e| e.target == t)
            .unwrap_or_else(|| panic!("an estimate for {t}"))
    };
    // Inside the data: the first size whose mean is at most 0.15, interpolated in ln n with
    // the size before it (the means fall monotonically, so the antitonic means are the means).
    let means: Vec<(f64, f64)> = m.points.iter().map(|p| (p.n as f64, p.mean)).collect();
    assert!(means.windows(2).all(|w| w[1].1 < w[0].1), "{means:?}");
    let i = means.iter().position(|(_, v)| *v <= 0.15).unwrap();
    let ((n0, m0), (n1, m1)) = (means[i - 1], means[i]);
    let t = (0.15 - m0) / (m1 - m0);
    let expected = (n0.ln() + t * (n1.ln() - n0.ln())).exp();
    let inside = by_target(0.15);
    assert_eq!(inside.status, EstimateStatus::ReachedInData, "{inside:?}");
    let n = inside.samples.unwrap();
    assert!((n / expected - 1.0).abs() < 1e-9, "{n} vs {expected}");
    assert!((n - 400.0).abs() < 8.0, "{n}: the true n* is 400");
    // Its bootstrap interval holds it and stays inside the measured range.
    let [lo, hi] = inside.samples_interval.map(Option::unwrap);
    assert!(
        lo <= n && n <= hi && lo >= 100.0 && hi <= 3200.0,
        "{inside:?}"
    );
    // Below the fitted floor: unreachable, with the floor named.
    let below = by_target(0.04);
    assert_eq!(below.status, EstimateStatus::Unreachable, "{below:?}");
    assert!(
        below.note.contains("clearly above the target"),
        "{}",
        below.note
    );
    assert_eq!(below.samples, None);
    // Above every measured value: met at the smallest size, n* ≤ 100.
    let above = by_target(0.5);
    assert_eq!(above.status, EstimateStatus::AtSmallestSize, "{above:?}");
    assert_eq!(above.samples_interval, [None, Some(100.0)]);
    assert!(
        out.contains("to reach 0.500: surrogate, n* ≤ 100 samples"),
        "{out}"
    );
    assert!(out.contains("(lower is better)"), "{out}");
    assert!(doc.warnings.is_empty(), "{:?}", doc.warnings);
}

/// The same errors read as higher is better: the command says the values fall with n and
/// names the flag, in one warning rather than one per size.
#[test]
fn errors_fitted_as_skill_are_flagged_with_the_flag_to_use() {
    let dir = tempfile::tempdir().unwrap();
    let (out, doc) = fit(dir.path(), &csv(|e| e), &["--target", "0.15"]);
    assert_eq!(doc.study.direction, Direction::Increasing);
    let about: Vec<&String> = doc
        .warnings
        .iter()
        .filter(|w| w.contains("fall with n"))
        .collect();
    assert_eq!(about.len(), 1, "{:?}", doc.warnings);
    assert!(about[0].contains("give --lower-is-better"), "{}", about[0]);
    assert!(!doc.warnings.iter().any(|w| w.contains("falls from")));
    assert!(out.contains("warning: surrogate: the measured values fall with n"));
}

/// A `fit` report, either way round, speaks of values of the user's metric: no model time, no
/// forecasts, no initial conditions, no persistence; it says which way is better.
#[test]
fn a_fit_report_speaks_of_the_metric_not_of_forecasts() {
    for (flag, value, better) in [
        (Some("--lower-is-better"), 0.15, "lower is better"),
        (None, 0.85, "higher is better"),
    ] {
        let dir = tempfile::tempdir().unwrap();
        let text = csv(|e| if flag.is_some() { e } else { 1.0 - e });
        let mut args = vec!["--target", "0.1", "--report", "out"];
        let target = value.to_string();
        args.extend(["--target", &target]);
        args.extend(flag);
        let (out, _) = fit(dir.path(), &text, &args);
        let page = std::fs::read_to_string(dir.path().join("out/report.html")).unwrap();
        for (what, text) in [("terminal", &out), ("report", &page)] {
            for phrase in [
                "model time units",
                "time units",
                "initial conditions",
                "forecast",
                "persistence",
                "valid prediction time",
            ] {
                assert!(
                    !text.to_lowercase().contains(phrase),
                    "{flag:?}: the {what} says {phrase:?}"
                );
            }
            assert!(
                text.contains(better),
                "{flag:?}: the {what} does not say {better:?}"
            );
        }
        // Ordinary words for the table and the chart.
        assert!(page.contains("<th>Target value</th>"), "{flag:?}");
        assert!(
            page.contains(&format!("measured value ({better})")),
            "{flag:?}"
        );
    }
}
