//! The example training script (`studies/command-example.py`) as a command model, end to end on
//! a Lorenz-96 trajectory: its forecasts, scored by the tool, beat persistence, and the valid
//! times it measures itself (`returns = "skill"`) agree with the tool's.
//!
//! Needs Python 3 with NumPy. Without them the test is skipped with a message, unless the
//! environment variable CI is set (CI installs them; there their absence is a failure).

mod common;
use closure_budget::data::column_stats;
use closure_budget::models::command::{run_command_point, CommandParams, Returns};
use closure_budget::models::family::ExternalPoint;
use closure_budget::models::Persistence;
use closure_budget::skill::{valid_times, IcSkill, SkillSpec};
use closure_budget::systems::{simulate, SimulationSpec, SystemSpec};
use common::repo;
use ndarray::s;
use std::path::Path;

/// Whether `python3` with NumPy can run; panics when it cannot and CI is set.
fn python_with_numpy() -> bool {
    common::python_with(&["numpy"], "command-model", "command_model")
}

fn mean(v: &[IcSkill]) -> f64 {
    v.iter().map(|s| s.valid_time).sum::<f64>() / v.len() as f64
}

#[test]
fn example_script_end_to_end() {
    if !python_with_numpy() {
        return;
    }
    // Lorenz-96 with K = 8 and F = 8, saved every 0.05 time units: a 1000-sample training pool,
    // then 20 test initial conditions 2 time units apart.
    let sim = simulate(
        &SimulationSpec {
            system: SystemSpec::Lorenz96 { k: 8, forcing: 8.0 },
            dt: 0.01,
            sample_interval: 0.05,
            spin_up: 10.0,
            samples: 2000,
            seed: 11,
        },
        None,
    )
    .unwrap();
    let truth = sim.resolved;
    let pool = 1000;
    let ics: Vec<usize> = (0..20).map(|i| pool + 20 + 40 * i).collect();
    let (mean_x, sigma) = column_stats(truth.slice(s![..pool, ..]));
    let skill = SkillSpec {
        threshold: 0.5,
        warm_up: 5,
        max_lead: 80,
        sample_interval: 0.05,
        mean: mean_x,
        sigma,
        unresolved: None,
    };
    let longest = skill.max_lead as f64 * skill.sample_interval;
    let studies = repo("studies");
    let script = studies.join("command-example.py");
    let params = |returns| {
        CommandParams {
            program: "python3".into(),
            args: vec![script.to_string_lossy().into_owned()],
            returns,
            timeout: 120.0,
            workdir: None,
            depends: Vec::new(),
        }
        .check(&studies)
        .unwrap()
    };
    let dir = tempfile::tempdir().unwrap();
    let run = |n: usize, returns| {
        let point_dir = dir.path().join(format!("n{n}-{returns:?}"));
        run_command_point(
            &params(returns),
            &ExternalPoint {
                model: "example",
                n,
                replicate: 0,
                seed: 5,
                train: truth.slice(s![pool - n..pool, ..]),
                truth: truth.view(),
                ics: &ics,
                skill: &skill,
                variables: &sim.resolved_names,
                dir: &point_dir,
            },
        )
        .unwrap_or_else(|e| panic!("{e}"))
    };

    let persistence = mean(&valid_times(&Persistence, truth.view(), &ics, &skill));
    let small = run(60, Returns::Forecasts);
    let large = run(1000, Returns::Forecasts);
    for s in small.iter().chain(&large) {
        assert!(
            s.valid_time.is_finite() && s.valid_time >= 0.0 && s.valid_time <= longest,
            "{s:?}"
        );
    }
    let (small_mean, large_mean) = (mean(&small), mean(&large));
    println!("mean valid time: persistence {persistence:.3}, n = 60 {small_mean:.3}, n = 1000 {large_mean:.3}");
    assert!(
        large_mean > persistence,
        "n = 1000: {large_mean} against persistence {persistence}"
    );
    assert!(
        large_mean >= small_mean,
        "n = 1000: {large_mean} against n = 60: {small_mean}"
    );

    // The script's own valid times follow the definition in the manifest: they agree with the
    // tool's scoring of the same forecasts to within one sample (summation order may differ at a
    // lead whose error sits on the threshold).
    let own = run(1000, Returns::Skill);
    for (a, b) in own.iter().zip(&large) {
        assert!(
            (a.valid_time - b.valid_time).abs() <= skill.sample_interval + 1e-9,
            "script {a:?} against tool {b:?}"
        );
        if a.valid_time == b.valid_time {
            assert_eq!((a.censored, a.blew_up), (b.censored, b.blew_up));
        }
    }
}

/// Runs `command-demo.toml` in `dir` into `dir/out` and returns its points (planned, reused,
/// stale) from the JSON summary.
fn point_counts(dir: &Path) -> (u64, u64, u64) {
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_closure-budget"))
        .current_dir(dir)
        .args(["run", "command-demo.toml", "--out", "out", "--json"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let p = &v["points"];
    (
        p["planned"].as_u64().unwrap(),
        p["reused"].as_u64().unwrap(),
        p["stale"].as_u64().unwrap(),
    )
}

/// The demo study with the example script runs through `run`: every point of the script is
/// stored, a rerun reuses them all, and editing the script makes them stale.
#[test]
fn command_study_runs_resumes_and_notices_an_edited_script() {
    if !python_with_numpy() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    for f in ["command-demo.toml", "command-example.py"] {
        std::fs::copy(
            Path::new(env!("CARGO_MANIFEST_DIR"))
                .join("studies")
                .join(f),
            dir.path().join(f),
        )
        .unwrap();
    }
    let out = dir.path().join("out");
    let run = || point_counts(dir.path());
    // Two models × 4 sizes × 2 replicates.
    assert_eq!(run(), (16, 0, 0));
    assert!(
        !out.join("commands").exists()
            || std::fs::read_dir(out.join("commands/lab-script"))
                .map(|d| d.count() == 0)
                .unwrap_or(true),
        "successful points leave no working directory"
    );
    assert_eq!(run(), (16, 16, 0));
    let script = dir.path().join("command-example.py");
    let mut text = std::fs::read_to_string(&script).unwrap();
    text.push_str("\n# edited\n");
    std::fs::write(&script, text).unwrap();
    assert_eq!(run(), (16, 8, 8), "the script's 8 points are stale");
}

/// A file the script depends on but does not name on its command line (a module it imports)
/// enters the point keys once declared in `depends`: editing it makes the script's points stale,
/// and a rerun with it unchanged reuses them.
#[test]
fn declared_dependencies_make_points_stale_when_edited() {
    if !python_with_numpy() {
        return;
    }
    let dir = tempfile::tempdir().unwrap();
    let studies = Path::new(env!("CARGO_MANIFEST_DIR")).join("studies");
    std::fs::copy(
        studies.join("command-example.py"),
        dir.path().join("command-example.py"),
    )
    .unwrap();
    std::fs::create_dir(dir.path().join("lib")).unwrap();
    std::fs::write(dir.path().join("lib/helper.py"), "SCALE = 1.0\n").unwrap();
    let study = std::fs::read_to_string(studies.join("command-demo.toml"))
        .unwrap()
        .replace(
            "timeout = 120.0 }",
            "timeout = 120.0, depends = [\"lib\"] }",
        );
    assert!(study.contains("depends = [\"lib\"]"));
    std::fs::write(dir.path().join("command-demo.toml"), study).unwrap();
    let run = || {
        let (_, reused, stale) = point_counts(dir.path());
        (reused, stale)
    };
    assert_eq!(run(), (0, 0));
    assert_eq!(run(), (16, 0));
    std::fs::write(dir.path().join("lib/helper.py"), "SCALE = 2.0\n").unwrap();
    assert_eq!(run(), (8, 8), "the script's 8 points are stale");
    // A declared dependency that does not exist is refused before any work.
    let text = std::fs::read_to_string(dir.path().join("command-demo.toml"))
        .unwrap()
        .replace("depends = [\"lib\"]", "depends = [\"missing.py\"]");
    std::fs::write(dir.path().join("command-demo.toml"), text).unwrap();
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_closure-budget"))
        .current_dir(dir.path())
        .args(["check", "command-demo.toml"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        !o.status.success() && err.contains("missing.py") && err.contains("depends"),
        "{err}"
    );
}
