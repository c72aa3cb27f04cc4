//! The study engine's store: runs killed at several points resume to exactly the results of an
//! uninterrupted run (zero lost, zero duplicated records); Ctrl-C stops cleanly; shards merge to
//! the single-process result bit for bit; appended data reuse every unchanged point.

mod common;
use closure_budget::study::records::{read_records, SkillRecord};
use closure_budget::study::results::PlanDocument;
use common::*;
use std::collections::HashSet;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// A study on single-scale Lorenz-96 data from `data` (a path relative to the study file), or
/// simulated when `data` is `None`: a small echo state network and NG-RC, many sizes, so a run
/// takes a few seconds and has many points to interrupt.
fn study(dir: &Path, data: Option<&str>, sizes: &[usize]) -> std::path::PathBuf {
    let data = match data {
        Some(p) => format!("[data.file]\npath = \"{p}\"\n"),
        None => "[data.simulate]\nsystem = { name = \"lorenz-96\", k = 10, forcing = 8.0 }\n\
                 dt = 0.01\nsample-interval = 0.01\nspin-up = 5.0\ntraining-pool = 9000\n"
            .into(),
    };
    let text = format!(
        "title = \"resume test (invented)\"\nseed = 11\n{data}\n\
         [split]\ninitial-conditions = 24\ngap = 0.5\n\n\
         [skill]\nwarm-up = 1.0\nmax-lead = 3.0\n\n\
         [subsets]\nsizes = {sizes:?}\nreplicates = 3\n\n\
         [[model]]\nname = \"esn\"\nesn = {{ reservoir-size = 80, ridge = 1e-6, washout = 50 }}\n\n\
         [[model]]\nname = \"ngrc\"\nngrc = {{ delays = 2 }}\n\n\
         [plan]\ntargets = [0.5, 1.0]\nbootstrap-draws = 50\n\n\
         [cost]\ncore-hours-per-time-unit = 100.0\n"
    );
    let p = dir.join("study.toml");
    std::fs::write(&p, text).unwrap();
    p
}

const SIZES: [usize; 8] = [500, 700, 1000, 1400, 2000, 2800, 4000, 5600];

fn run(study: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
    let mut args = vec![
        "run",
        study.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--quiet",
    ];
    args.extend_from_slice(extra);
    run_in(study.parent().unwrap(), &args)
}

/// Records without their measured wall-clock times, sorted by key.
fn results(out: &Path) -> Vec<SkillRecord> {
    let mut r = read_records(&out.join("records.jsonl")).unwrap();
    for x in &mut r {
        x.cost = Default::default();
        if let Some(c) = &mut x.closure {
            c.coupled_seconds_per_time_unit = 0.0;
        }
    }
    r.sort_by(|a, b| a.key.cmp(&b.key));
    r
}

/// Asserts two record sets are equal, naming the first difference (not printing them whole).
fn assert_same(a: &[SkillRecord], b: &[SkillRecord]) {
    let ka: Vec<(&str, usize, usize)> = a
        .iter()
        .map(|r| (r.model.as_str(), r.n, r.replicate))
        .collect();
    let kb: Vec<(&str, usize, usize)> = b
        .iter()
        .map(|r| (r.model.as_str(), r.n, r.replicate))
        .collect();
    if a.len() != b.len() || ka != kb {
        let mut sa = ka.clone();
        let mut sb = kb.clone();
        sa.sort();
        sb.sort();
        panic!(
            "different points ({} vs {}):\n{sa:?}\n{sb:?}",
            a.len(),
            b.len()
        );
    }
    for (x, y) in a.iter().zip(b) {
        assert!(
            x == y,
            "{} n = {} replicate {} differs: fit {:?} vs {:?}; mean {} vs {}",
            x.model,
            x.n,
            x.replicate,
            x.fit,
            y.fit,
            x.summary.mean,
            y.summary.mean
        );
    }
}

fn plan(out: &Path) -> PlanDocument {
    let mut d: PlanDocument =
        serde_json::from_slice(&std::fs::read(out.join("budget.json")).unwrap()).unwrap();
    d.clear_measured_times();
    d
}

fn lines(path: &Path) -> usize {
    std::fs::read(path)
        .map(|b| b.iter().filter(|&&c| c == b'\n').count())
        .unwrap_or(0)
}

/// Starts a run and waits until its store holds at least `records` complete lines (or the run
/// ends); returns the running child.
fn start_and_wait(study: &Path, out: &Path, records: usize) -> std::process::Child {
    let mut child = Command::new(env!("CARGO_BIN_EXE_closure-budget"))
        .current_dir(study.parent().unwrap())
        .args([
            "run",
            study.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
            "--quiet",
        ])
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let store = out.join("records.jsonl");
    let deadline = Instant::now() + Duration::from_secs(300);
    while lines(&store) < records {
        if child.try_wait().unwrap().is_some() {
            panic!("the run ended before storing {records} records");
        }
        assert!(Instant::now() < deadline, "no progress");
        std::thread::sleep(Duration::from_millis(2));
    }
    child
}

#[test]
fn killed_runs_resume_to_the_uninterrupted_result() {
    let dir = tempfile::tempdir().unwrap();
    let s = study(dir.path(), None, &SIZES);
    let reference = dir.path().join("reference");
    let o = run(&s, &reference, &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    let planned = 2 * 3 * SIZES.len();
    assert_eq!(results(&reference).len(), planned);

    // Kill (SIGKILL, no chance to clean up) at several points of one run after another.
    let out = dir.path().join("killed");
    let mut seen = Vec::new();
    for at in [1, 9, 25] {
        let mut child = start_and_wait(&s, &out, at);
        child.kill().unwrap();
        let status = child.wait().unwrap();
        assert!(!status.success(), "killed, not finished");
        let stored = read_records(&out.join("records.jsonl")).unwrap();
        assert!(
            stored.len() >= at && stored.len() < planned,
            "{}",
            stored.len()
        );
        seen.push(stored.len());
    }
    assert!(seen.windows(2).all(|w| w[0] <= w[1]), "{seen:?}");
    let o = run(&s, &out, &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    let doc = plan(&out);
    let resumed = results(&out);
    // Zero lost, zero duplicated, and the same values bit for bit.
    let keys: HashSet<&str> = resumed.iter().map(|r| r.key.as_str()).collect();
    assert_eq!(keys.len(), resumed.len(), "no duplicated record");
    assert_same(&resumed, &results(&reference));
    assert_eq!(doc, plan(&reference));
    // The last run computed only what the killed runs had not stored.
    let p: PlanDocument =
        serde_json::from_slice(&std::fs::read(out.join("budget.json")).unwrap()).unwrap();
    let counts = p.points.unwrap();
    assert_eq!(counts.planned, planned);
    assert!(counts.reused >= *seen.last().unwrap(), "{counts:?}");
    assert_eq!(counts.reused + counts.computed, planned);
}

#[test]
fn ctrl_c_stores_the_points_in_flight_and_resumes() {
    let dir = tempfile::tempdir().unwrap();
    let s = study(dir.path(), None, &SIZES);
    let out = dir.path().join("out");
    let child = start_and_wait(&s, &out, 2);
    let pid = child.id().to_string();
    let k = Command::new("kill").args(["-INT", &pid]).status().unwrap();
    assert!(k.success());
    let o = child.wait_with_output().unwrap();
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(130), "{err}");
    assert!(
        err.contains("run the same command again to resume"),
        "{err}"
    );
    // Every stored line is a complete record: nothing to discard on the next start.
    let bytes = std::fs::read(out.join("records.jsonl")).unwrap();
    assert_eq!(bytes.last(), Some(&b'\n'));
    let stored = read_records(&out.join("records.jsonl")).unwrap();
    assert_eq!(stored.len(), lines(&out.join("records.jsonl")));
    assert!(stored.len() < 2 * 3 * SIZES.len(), "stopped early");
    assert!(
        !out.join("budget.json").exists(),
        "no report from a stopped run"
    );

    let o = run(&s, &out, &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    let reference = dir.path().join("reference");
    let o = run(&s, &reference, &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_same(&results(&out), &results(&reference));
    assert_eq!(plan(&out), plan(&reference));
}

#[test]
fn shards_merge_to_the_single_process_result() {
    let dir = tempfile::tempdir().unwrap();
    let s = study(dir.path(), None, &SIZES[..5]);
    let single = dir.path().join("single");
    let o = run(&s, &single, &["-j", "2"]);
    assert!(o.status.success(), "{}", stderr(&o));

    let sharded = dir.path().join("sharded");
    // Two of three shards: merging must refuse, naming what is missing.
    for i in ["1/3", "3/3"] {
        let o = run(&s, &sharded, &["--shard", i, "-j", "1"]);
        assert!(o.status.success(), "{}", stderr(&o));
    }
    let merge = |extra: &[&str]| {
        let mut args = vec![
            "merge",
            s.to_str().unwrap(),
            "--out",
            sharded.to_str().unwrap(),
            "--quiet",
        ];
        args.extend_from_slice(extra);
        run_in(dir.path(), &args)
    };
    let o = merge(&[]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("in no store"), "{}", stderr(&o));
    assert_eq!(
        lines(&sharded.join("records.jsonl")),
        0,
        "a refused merge changes nothing, so the last shard keeps its assignment"
    );
    let o = run(&s, &sharded, &["--shard", "2/3", "-j", "1"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let o = merge(&[]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_same(&results(&sharded), &results(&single));
    assert_eq!(plan(&sharded), plan(&single));
    assert!(
        files_below(&sharded.join("shards")).is_empty(),
        "merged shards removed"
    );

    // A shard that disagrees with the store about a point is refused, naming both files.
    let mut wrong = read_records(&sharded.join("records.jsonl")).unwrap()[3].clone();
    wrong.summary.mean += 0.25;
    std::fs::create_dir_all(sharded.join("shards")).unwrap();
    let mut line = serde_json::to_vec(&wrong).unwrap();
    line.push(b'\n');
    std::fs::write(sharded.join("shards/shard-1-of-1.jsonl"), line).unwrap();
    let o = merge(&[]);
    assert_eq!(o.status.code(), Some(2));
    let err = stderr(&o);
    assert!(
        err.contains("stored twice with different results") && err.contains("shard-1-of-1"),
        "{err}"
    );
}

#[test]
fn appended_data_reuse_every_unchanged_point() {
    let dir = tempfile::tempdir().unwrap();
    let simulate = |samples: usize, name: &str| {
        let o = run_in(
            dir.path(),
            &[
                "simulate",
                "--system",
                "lorenz-96",
                "--set",
                "k=10",
                "--samples",
                &samples.to_string(),
                "--spin-up",
                "5",
                "--sample-interval",
                "0.01",
                "--out",
                name,
            ],
        );
        assert!(o.status.success(), "{}", stderr(&o));
    };
    // The first campaign, then the same run continued: the old samples are unchanged.
    simulate(6000, "first.npy");
    simulate(9000, "grown.npy");
    let out = dir.path().join("out");
    let sizes_first = &SIZES[..5]; // up to 2000: fits a pool of 6000 − test region − gap
    std::fs::copy(dir.path().join("first.npy"), dir.path().join("pilot.npy")).unwrap();
    std::fs::copy(dir.path().join("first.json"), dir.path().join("pilot.json")).unwrap();
    let s = study(dir.path(), Some("pilot.npy"), sizes_first);
    let o = run(&s, &out, &[]);
    assert!(o.status.success(), "{}", stderr(&o));

    // New data arrived: more samples, and two larger sizes to use them.
    std::fs::copy(dir.path().join("grown.npy"), dir.path().join("pilot.npy")).unwrap();
    std::fs::copy(dir.path().join("grown.json"), dir.path().join("pilot.json")).unwrap();
    let s = study(dir.path(), Some("pilot.npy"), &SIZES[..7]);
    let o = run(&s, &out, &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    let p: PlanDocument =
        serde_json::from_slice(&std::fs::read(out.join("budget.json")).unwrap()).unwrap();
    let c = p.points.unwrap();
    assert_eq!(
        (c.planned, c.reused, c.computed, c.stale),
        (2 * 3 * 7, 2 * 3 * 5, 2 * 3 * 2, 0),
        "only the two new sizes are computed"
    );
    // Exactly what a fresh run on the grown data gives.
    let fresh = dir.path().join("fresh");
    let o = run(&s, &fresh, &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_same(&results(&out), &results(&fresh));
    assert_eq!(plan(&out), plan(&fresh));
    // The history holds both runs.
    let history = closure_budget::study::history::read(&out.join("history.jsonl")).unwrap();
    assert_eq!(history.len(), 2);
    assert!(history[1].training_pool > history[0].training_pool);

    // Changed old data: the points trained on it are stale and recomputed, and the report
    // says so.
    let data = p.data.as_ref().unwrap();
    let pool_start = data.samples - data.training_pool;
    let mut traj =
        closure_budget::data::read_trajectory(&dir.path().join("pilot.npy"), None).unwrap();
    // Beyond every prefix used: changes the data but no point.
    let last = traj.samples() - 10;
    traj.values[[last, 0]] += 1.0;
    // Inside replicate 0's prefixes of 2000 samples and more (its window starts the pool), and
    // so inside some of the other replicates' prefixes too; the smaller ones stay valid.
    traj.values[[pool_start + 1800, 1]] += 1.0;
    closure_budget::data::write_trajectory(
        &traj,
        &dir.path().join("pilot.npy"),
        closure_budget::data::OutputFormats {
            npy: true,
            csv: false,
        },
    )
    .unwrap();
    let o = run(&s, &out, &[]);
    assert!(o.status.success(), "{}", stderr(&o));
    let p: PlanDocument =
        serde_json::from_slice(&std::fs::read(out.join("budget.json")).unwrap()).unwrap();
    let c = p.points.unwrap();
    assert!(c.stale > 0 && c.stale == c.computed, "{c:?}");
    assert!(c.reused > 0, "{c:?}");
    assert!(
        p.warnings.iter().any(|w| w.contains("no longer matched")),
        "{:?}",
        p.warnings
    );
}
