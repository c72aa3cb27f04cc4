//! Study files: every example validates, every deliberately invalid one fails with its stated
//! message, and the quick demo runs end to end with a complete, consistent set of outputs.

mod common;
use closure_budget::study::records::read_records;
use closure_budget::study::results::{PlanDocument, PLAN_SCHEMA};
use common::*;

#[test]
fn every_example_study_validates() {
    let mut checked = 0;
    for entry in std::fs::read_dir(repo("studies")).unwrap() {
        let p = entry.unwrap().path();
        if p.extension().is_some_and(|e| e == "toml") {
            let o = run_in(&repo("."), &["check", p.to_str().unwrap()]);
            assert!(o.status.success(), "{}: {}", p.display(), stderr(&o));
            assert!(stdout(&o).contains("is valid"), "{}", stdout(&o));
            checked += 1;
        }
    }
    assert!(checked >= 2, "demo.toml and demo-quick.toml at least");
}

/// Each file in studies/invalid/ starts with `# expect: <text>`; checking it must fail with a
/// message containing that text and the file name, and exit with status 2.
#[test]
fn every_invalid_study_fails_with_its_message() {
    let mut checked = 0;
    for entry in std::fs::read_dir(repo("studies/invalid")).unwrap() {
        let p = entry.unwrap().path();
        let text = std::fs::read_to_string(&p).unwrap();
        let expect = text
            .lines()
            .next()
            .and_then(|l| l.strip_prefix("# expect: "))
            .unwrap_or_else(|| panic!("{} lacks an '# expect:' line", p.display()));
        let o = run_in(&repo("."), &["check", p.to_str().unwrap()]);
        assert_eq!(o.status.code(), Some(2), "{}", p.display());
        let err = stderr(&o);
        assert!(
            err.contains(expect),
            "{}: expected '{expect}' in: {err}",
            p.display()
        );
        assert!(
            err.contains(p.file_name().unwrap().to_str().unwrap()),
            "names the file: {err}"
        );
        assert!(err.lines().count() <= 8, "short message: {err}");
        checked += 1;
    }
    assert!(checked >= 6);
}

fn run_quick(dir: &std::path::Path, threads: &str) -> PlanDocument {
    let out = dir.join("out");
    let o = run_in(
        dir,
        &[
            "run",
            repo("studies/demo-quick.toml").to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "-j",
            threads,
            "--quiet",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let text = stdout(&o);
    assert!(
        text.contains("esn-tiny") && text.contains("report.html"),
        "{text}"
    );
    let doc: PlanDocument =
        serde_json::from_slice(&std::fs::read(out.join("plan.json")).unwrap()).unwrap();
    doc
}

#[test]
fn quick_demo_runs_end_to_end() {
    let dir = tempfile::tempdir().unwrap();
    let doc = run_quick(dir.path(), "2");
    let out = dir.path().join("out");
    assert_eq!(
        files_below(&out),
        vec![
            "plan.json",
            "records.jsonl",
            "report.html",
            "skill.csv",
            "tables/runs.csv",
            "tables/runs.md",
            "tables/runs.tex"
        ]
    );
    let md = std::fs::read_to_string(out.join("tables/runs.md")).unwrap();
    assert!(
        md.contains("esn-tiny") && md.to_lowercase().contains("contingency"),
        "{md}"
    );
    assert_eq!(doc.schema, PLAN_SCHEMA);
    // Every stage's wall time is recorded, the report stage included.
    let t = &doc.timings;
    for (stage, secs) in [
        ("data", t.data),
        ("training", t.training),
        ("forecasting", t.forecasting),
        ("fitting", t.fitting),
        ("report", t.report),
    ] {
        assert!(secs > 0.0, "{stage} time {secs}");
    }
    assert!(t.total >= t.data + t.training + t.forecasting + t.fitting + t.report - 1e-9);
    assert_eq!(doc.models.len(), 2);
    // The classical closure, coupled online, beats both floors and stays bounded in free runs.
    let closure = &doc.models[1];
    assert_eq!(closure.role, "closure");
    let last = closure.points.last().unwrap();
    assert!(last.mean > doc.persistence.unwrap().mean);
    let checks = last.closure.as_ref().unwrap();
    assert!(checks.offline_r2 > 0.5, "{checks:?}");
    assert_eq!(checks.stable_share, 1.0);
    let m = &doc.models[0];
    assert_eq!(m.points.len(), 4);
    assert_eq!(m.estimates.len(), 2);
    // Skill grows with the amount of training data on this system (first vs last size).
    assert!(m.points[3].mean > m.points[0].mean, "{:?}", m.points);
    // Beats the persistence floor at the largest size.
    assert!(m.points[3].mean > doc.persistence.unwrap().mean);
    // Every estimate either has a budget consistent with the cost model, or says why not.
    for e in &m.estimates {
        match e.status {
            s if s.has_budget() => {
                let b = e.budget.unwrap();
                let c = doc.cost.as_ref().unwrap();
                let expected_time =
                    b.samples * c.sample_interval + c.runs as f64 * c.spin_up_per_run;
                assert!((b.simulated_time - expected_time).abs() < 1e-9 * expected_time);
            }
            _ => assert!(!e.note.is_empty()),
        }
    }
    // The records store holds one record per (model, replicate, size), each with every IC.
    let records = read_records(&out.join("records.jsonl")).unwrap();
    // Two models (an emulator and a closure), 3 replicates, 4 sizes.
    assert_eq!(records.len(), 2 * 3 * 4);
    assert!(records.iter().all(|r| r.initial_conditions.len() == 16));
    // Closure records carry their offline and free-run checks; emulator records do not.
    for r in &records {
        assert_eq!(
            r.closure.is_some(),
            r.model == "wilks-quartic",
            "{}",
            r.model
        );
    }
    // skill.csv: header + one row per IC per record + persistence and climatology rows.
    let csv = std::fs::read_to_string(out.join("skill.csv")).unwrap();
    assert_eq!(csv.lines().count(), 1 + 2 * 3 * 4 * 16 + 2 * 16);
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("<svg") && html.contains("esn-tiny"));
    for section in [
        "Cost against target skill",
        "Every number and its source",
        "Tables of runs",
        "Decorrelation of the pilot data",
        "Closures: offline against online",
        "id=\"backtest\"",
    ] {
        assert!(html.contains(section), "report lacks {section}");
    }
}

/// Results are bit-for-bit identical whatever the thread count: skill.csv byte for byte, and
/// plan.json equal once the wall-clock timings are set aside.
#[test]
fn results_do_not_depend_on_thread_count() {
    let one = tempfile::tempdir().unwrap();
    let two = tempfile::tempdir().unwrap();
    let mut a = run_quick(one.path(), "1");
    let mut b = run_quick(two.path(), "2");
    assert_eq!(
        std::fs::read(one.path().join("out/skill.csv")).unwrap(),
        std::fs::read(two.path().join("out/skill.csv")).unwrap()
    );
    assert_eq!(a.timings.threads, 1);
    assert_eq!(b.timings.threads, 2);
    a.clear_measured_times();
    b.clear_measured_times();
    assert_eq!(a, b);
}
