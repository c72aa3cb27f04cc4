//! Bad input gets one clear message, a non-zero exit, and leaves no output behind; user files
//! (CSV and .npy with sidecar) flow through the same pipeline as simulated data.

mod common;
use common::*;
use std::path::Path;

/// A small study over a user file; `extra` replaces the defaults where given.
fn file_study(dir: &Path, data: &str, sizes: &str, ics: usize) -> std::path::PathBuf {
    let text = format!(
        r#"title = "file study"
seed = 3
[data.file]
{data}
[split]
initial-conditions = {ics}
gap = 0.5
[skill]
warm-up = 0.5
max-lead = 1.0
[subsets]
sizes = {sizes}
replicates = 2
[[model]]
name = "esn"
esn = {{ reservoir-size = 40, washout = 20 }}
[plan]
targets = [0.3]
bootstrap-draws = 50
[cost]
core-hours-per-time-unit = 10.0
"#
    );
    let p = dir.join("study.toml");
    std::fs::write(&p, text).unwrap();
    p
}

fn expect_failure(dir: &Path, study: &Path, needles: &[&str]) {
    let (o, out) = run_quietly(dir, study);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    let err = stderr(&o);
    for n in needles {
        assert!(err.contains(n), "expected '{n}' in: {err}");
    }
    assert!(err.starts_with("error: "), "{err}");
    assert!(
        !out.exists(),
        "no output directory is left behind: {:?}",
        files_below(&out)
    );
}

fn lorenz63_csv(rows: usize) -> String {
    let mut s = String::from("x,y,z\n");
    let (mut x, mut y, mut z) = (1.0f64, 1.0f64, 1.0f64);
    for _ in 0..rows {
        // Forward Euler at a small step is enough to make a chaotic-looking test series.
        for _ in 0..5 {
            let (dx, dy, dz) = (10.0 * (y - x), x * (28.0 - z) - y, x * y - 8.0 / 3.0 * z);
            x += 0.002 * dx;
            y += 0.002 * dy;
            z += 0.002 * dz;
        }
        s.push_str(&format!("{x},{y},{z}\n"));
    }
    s
}

#[test]
fn missing_data_file() {
    let dir = tempfile::tempdir().unwrap();
    let study = file_study(
        dir.path(),
        r#"path = "nowhere.csv"
sample-interval = 0.01"#,
        "[100, 200, 400]",
        5,
    );
    expect_failure(dir.path(), &study, &["cannot read", "nowhere.csv"]);
}

#[test]
fn ragged_and_non_numeric_csv() {
    let dir = tempfile::tempdir().unwrap();
    let mut csv = lorenz63_csv(50);
    csv.push_str("1.0,2.0\n");
    std::fs::write(dir.path().join("d.csv"), csv).unwrap();
    let study = file_study(
        dir.path(),
        r#"path = "d.csv"
sample-interval = 0.01"#,
        "[100, 200, 400]",
        5,
    );
    expect_failure(
        dir.path(),
        &study,
        &["d.csv", "line 52", "2 cells", "header has 3"],
    );

    let mut csv = lorenz63_csv(50);
    csv.push_str("1.0,oops,3.0\n");
    std::fs::write(dir.path().join("d.csv"), csv).unwrap();
    expect_failure(dir.path(), &study, &["line 52", "'oops'", "column 'y'"]);
}

#[test]
fn non_finite_values() {
    let dir = tempfile::tempdir().unwrap();
    let mut csv = lorenz63_csv(30);
    csv.push_str("1.0,inf,3.0\n");
    std::fs::write(dir.path().join("d.csv"), csv).unwrap();
    let study = file_study(
        dir.path(),
        r#"path = "d.csv"
sample-interval = 0.01"#,
        "[100, 200, 400]",
        5,
    );
    expect_failure(dir.path(), &study, &["sample 30", "'y'", "finite"]);
}

#[test]
fn sizes_larger_than_the_training_pool_and_too_few_test_samples() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("d.csv"), lorenz63_csv(1000)).unwrap();
    let data = r#"path = "d.csv"
sample-interval = 0.01"#;
    let study = file_study(dir.path(), data, "[100, 200, 4000]", 5);
    expect_failure(
        dir.path(),
        &study,
        &[
            "1000 samples",
            "training pool of 4000",
            "reduce the subset sizes",
        ],
    );
    let study = file_study(dir.path(), data, "[100, 200, 400]", 500);
    expect_failure(
        dir.path(),
        &study,
        &["500 test initial conditions", "needs"],
    );
}

#[test]
fn missing_sampling_interval() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("d.csv"), lorenz63_csv(1000)).unwrap();
    let study = file_study(dir.path(), r#"path = "d.csv""#, "[100, 200, 400]", 5);
    expect_failure(dir.path(), &study, &["sample-interval", "sidecar"]);
}

#[test]
fn unknown_system_and_bad_override_on_the_command_line() {
    let dir = tempfile::tempdir().unwrap();
    let o = run_in(
        dir.path(),
        &[
            "simulate",
            "--system",
            "lorenz-84",
            "--samples",
            "10",
            "--out",
            "x.npy",
        ],
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("unknown system 'lorenz-84'"),
        "{}",
        stderr(&o)
    );
    let o = run_in(
        dir.path(),
        &[
            "simulate",
            "--system",
            "lorenz-96",
            "--set",
            "gamma=2",
            "--samples",
            "10",
            "--out",
            "x.npy",
        ],
    );
    assert!(
        stderr(&o).contains("no parameter `gamma`") && stderr(&o).contains("forcing"),
        "{}",
        stderr(&o)
    );
    assert!(files_below(dir.path()).is_empty());
}

/// `simulate` writes .npy + sidecar (+ CSV); a study over that file runs like a built-in one.
#[test]
fn simulated_file_round_trip_through_a_file_study() {
    let dir = tempfile::tempdir().unwrap();
    let o = run_in(
        dir.path(),
        &[
            "simulate",
            "--system",
            "lorenz-63",
            "--samples",
            "3000",
            "--sample-interval",
            "0.02",
            "--dt",
            "0.01",
            "--out",
            "pilot.npy",
            "--csv",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(
        files_below(dir.path()),
        vec!["pilot.csv", "pilot.json", "pilot.npy"]
    );
    let sidecar: serde_json::Value =
        serde_json::from_slice(&std::fs::read(dir.path().join("pilot.json")).unwrap()).unwrap();
    assert_eq!(sidecar["system"], "lorenz-63");
    assert_eq!(sidecar["sample-interval"], 0.02);
    let study = file_study(
        dir.path(),
        r#"path = "pilot.npy""#,
        "[200, 400, 800, 1600]",
        8,
    );
    let (o, out) = run_quietly(dir.path(), &study);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(out.join("report.html").exists());
}

#[test]
fn lyapunov_command_prints_the_exponent() {
    let o = bin()
        .args([
            "lyapunov",
            "--system",
            "lorenz-63",
            "--duration",
            "200",
            "--json",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    // Sprott (2003), "Chaos and Time-Series Analysis": λ₁ = 0.9056 for σ=10, ρ=28, β=8/3; a
    // 200-time-unit estimate is within 5%.
    let l = v["exponent"].as_f64().unwrap();
    assert!((l - 0.9056).abs() < 0.05 * 0.9056, "{l}");
}

/// `fit` on a hand-written CSV of skill measured elsewhere: the table, JSON and report are
/// written; bad CSVs fail with a clear message and write nothing.
#[test]
fn fit_command_on_a_hand_written_csv() {
    let dir = tempfile::tempdir().unwrap();
    let mut csv = String::from("model,n,replicate,skill,wall_seconds\n");
    for (i, n) in [500, 1000, 2000, 4000, 8000, 16000].iter().enumerate() {
        for (r, wobble) in [-0.02, 0.0, 0.025].iter().enumerate() {
            // A saturating curve 1.5(1 − e^{−n/3000}) with small replicate offsets.
            let skill = 1.5 * (1.0 - (-(*n as f64) / 3000.0).exp()) + wobble;
            csv.push_str(&format!(
                "my-closure,{n},seed{r},{skill:.4},{}\n",
                10 * (i + 1)
            ));
        }
    }
    std::fs::write(dir.path().join("skill.csv"), &csv).unwrap();
    let o = run_in(
        dir.path(),
        &[
            "fit",
            "skill.csv",
            "--target",
            "1.0",
            "--target",
            "2.0",
            "--json",
            "fit.json",
            "--report",
            "rep",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let text = stdout(&o);
    assert!(
        text.contains("my-closure") && text.contains("unreachable"),
        "{text}"
    );
    let doc: closure_budget::study::results::PlanDocument =
        serde_json::from_slice(&std::fs::read(dir.path().join("fit.json")).unwrap()).unwrap();
    let m = &doc.models[0];
    assert_eq!(m.points.len(), 6);
    assert!(doc.data.is_none() && doc.cost.is_none());
    // Target 1.0 lies inside the measured range (n* = −3000 ln(1/3) ≈ 3296 on the true curve).
    let e = &m.estimates[0];
    let n = e.samples.unwrap();
    assert!((2000.0..5000.0).contains(&n), "{e:?}");
    // Target 2.0 is above the asymptote 1.5: refused.
    assert_eq!(
        m.estimates[1].status,
        closure_budget::study::results::EstimateStatus::Unreachable
    );
    assert!(m.estimates[1].p_unreachable > 0.9);
    assert_eq!(
        files_below(&dir.path().join("rep")),
        vec!["budget.json", "report.html"]
    );

    std::fs::write(
        dir.path().join("bad.csv"),
        "model,n,replicate,skill\na,100,1,0.5\na,100,2,0.6\n",
    )
    .unwrap();
    let o = run_in(
        dir.path(),
        &["fit", "bad.csv", "--target", "1", "--report", "bad-rep"],
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("at least 3 distinct sizes"),
        "{}",
        stderr(&o)
    );
    assert!(!dir.path().join("bad-rep").exists());
}

/// `closure-budget fit … | head -1`: the reader closes the pipe after one line. The tool must end
/// quietly (SIGPIPE, as Unix tools do), not panic with "failed printing to stdout".
#[cfg(unix)]
#[test]
fn output_into_a_closed_pipe_ends_quietly() {
    use std::io::Read;
    use std::os::unix::process::ExitStatusExt;
    use std::process::{Command, Stdio};
    let dir = tempfile::tempdir().unwrap();
    let mut csv = String::from("model,n,replicate,skill\n");
    for n in [500, 1000, 2000, 4000, 8000] {
        for r in 0..3 {
            let skill = 1.5 * (1.0 - (-(n as f64) / 3000.0).exp()) + 0.01 * r as f64;
            csv.push_str(&format!("my-closure,{n},seed{r},{skill:.4}\n"));
        }
    }
    std::fs::write(dir.path().join("skill.csv"), &csv).unwrap();
    let mut child = Command::new(env!("CARGO_BIN_EXE_closure-budget"))
        .current_dir(dir.path())
        .args(["fit", "skill.csv", "--target", "1.0", "--draws", "50"])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Close the reading end before the tool prints anything.
    drop(child.stdout.take());
    let mut err = String::new();
    child
        .stderr
        .take()
        .unwrap()
        .read_to_string(&mut err)
        .unwrap();
    let status = child.wait().unwrap();
    assert!(!err.contains("panicked"), "{err}");
    assert!(
        status.success() || status.signal() == Some(libc::SIGPIPE),
        "{status:?}: {err}"
    );
}

#[test]
fn cost_command_prices_samples() {
    let o = bin()
        .args([
            "cost",
            "--inputs",
            repo("studies/demo.toml").to_str().unwrap(),
            "--samples",
            "10000",
            "--sample-interval",
            "0.01",
            "--json",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert!(v.to_string().contains("core"), "{v}");
    // A file of cost keys alone, by hand: (1,000 × 0.01 + 2 runs × 5 spin-up) = 20 time units
    // × 100 core-hours × overhead 1.5 = 3,000 core-hours.
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(
        dir.path().join("cost.toml"),
        "core-hours-per-time-unit = 100.0\nruns = 2\nspin-up-per-run = 5.0\noverhead-factor = 1.5\n",
    )
    .unwrap();
    let args = [
        "cost",
        "--inputs",
        "cost.toml",
        "--samples",
        "1000",
        "--sample-interval",
        "0.01",
    ];
    let o = run_in(dir.path(), &args);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(stdout(&o).contains("3,000 core-hours"), "{}", stdout(&o));
    let o = run_in(
        dir.path(),
        &[
            "cost",
            "--inputs",
            "missing.toml",
            "--samples",
            "1",
            "--sample-interval",
            "0.01",
        ],
    );
    assert_eq!(o.status.code(), Some(2));
    assert!(
        stderr(&o).contains("cannot read missing.toml"),
        "{}",
        stderr(&o)
    );
}

const TWO_SCALE: &str =
    "{ name = \"two-scale-lorenz-96\", k = 8, j = 32, h = 1.0, c = 10.0, b = 10.0, forcing = 20.0 }";

/// Closures the coarse solver cannot use are refused before any work, naming the setting and
/// what would work instead.
#[test]
fn closures_the_coarse_solver_cannot_use() {
    let dir = tempfile::tempdir().unwrap();
    let study = |model: &str, system: &str| {
        let text = format!(
            r#"title = "closure checks"
[data.simulate]
system = {system}
dt = 0.005
sample-interval = 0.01
training-pool = 3000
[split]
initial-conditions = 8
gap = 0.5
[skill]
max-lead = 1.0
[subsets]
sizes = [500, 1000, 2000]
[[model]]
name = "c"
role = "closure"
{model}
[plan]
targets = [0.3]
[cost]
core-hours-per-time-unit = 10.0
"#
        );
        let p = dir.path().join("study.toml");
        std::fs::write(&p, text).unwrap();
        p
    };
    let cases = [
        (
            "half-width = 1\nlstm = { hidden = 8 }",
            TWO_SCALE,
            vec![
                "`model \"c\".role` = closure (LSTM network)",
                "inputs = \"global\" for an LSTM closure",
            ],
        ),
        (
            "ngrc = { delays = 2 }",
            TWO_SCALE,
            vec!["delays = 1 for an NG-RC closure"],
        ),
        (
            "mlp = { window = 3 }",
            TWO_SCALE,
            vec!["window = 1 for a feed-forward closure"],
        ),
        (
            "esn = { reservoir-size = 40 }",
            "{ name = \"lorenz-63\", sigma = 10.0, rho = 28.0, beta = 2.6666666666666665 }",
            vec!["closures need two-scale Lorenz-96 data"],
        ),
    ];
    for (model, system, needles) in cases {
        let p = study(model, system);
        expect_failure(dir.path(), &p, &needles);
    }
}

/// A new regime that does not fit the pilot, or is not there, fails with one clear message and
/// leaves nothing behind, even though the pilot study itself could run.
#[test]
fn new_regime_data_that_does_not_fit() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("d.csv"), lorenz63_csv(3000)).unwrap();
    let data = r#"path = "d.csv"
sample-interval = 0.01"#;
    let with_transfer = |target: &str, sizes: &str| {
        let study = file_study(dir.path(), data, "[200, 400, 800]", 5);
        let mut text = std::fs::read_to_string(&study).unwrap();
        text.push_str(&format!(
            r#"
[transfer]
sizes = {sizes}
targets = [0.2]
[transfer.data.file]
path = "{target}"
sample-interval = 0.01
"#
        ));
        std::fs::write(&study, text).unwrap();
        study
    };
    // Missing file: found by the check, before any work.
    let study = with_transfer("gone.csv", "[100, 200, 400]");
    expect_failure(
        dir.path(),
        &study,
        &["`transfer.data.file.path`: cannot read", "gone.csv"],
    );
    // k larger than the new regime's data.
    std::fs::write(dir.path().join("t.csv"), lorenz63_csv(600)).unwrap();
    let study = with_transfer("t.csv", "[100, 200, 4000]");
    expect_failure(dir.path(), &study, &["600 samples", "4000"]);
    // A different number of variables.
    let two: String = lorenz63_csv(3000)
        .lines()
        .map(|l| l.rsplit_once(',').unwrap().0.to_string() + "\n")
        .collect();
    std::fs::write(dir.path().join("t2.csv"), two).unwrap();
    let study = with_transfer("t2.csv", "[100, 200, 400]");
    expect_failure(
        dir.path(),
        &study,
        &[
            "`transfer.data.file.path`",
            "t2.csv holds 2 variables but the pilot's data have 3",
        ],
    );
}

/// Runs the binary in `dir` and asserts it fails with exit code 2 and every needle in its
/// standard error.
fn refused(dir: &Path, args: &[&str], needles: &[&str]) {
    let o = run_in(dir, args);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(2), "{args:?}: {err}");
    for n in needles {
        assert!(err.contains(n), "{args:?}: expected '{n}' in: {err}");
    }
}

/// Bad values on the command line: each refused before any work, naming the option, the value
/// and what is allowed.
#[test]
fn command_line_values_out_of_range() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("a-file"), "not a folder").unwrap();
    std::fs::write(d.join("cost.toml"), "core-hours-per-time-unit = 10.0\n").unwrap();
    std::fs::write(
        d.join("huge-rate.toml"),
        "core-hours-per-time-unit = 1e300\n",
    )
    .unwrap();
    std::fs::write(
        d.join("skill.csv"),
        "model,n,replicate,skill\na,100,1,0.5\na,200,1,0.6\na,400,1,0.7\n",
    )
    .unwrap();
    let above_0 = "give a number above 0";
    #[rustfmt::skip]
    let cases: &[(&[&str], &[&str])] = &[
        // Negative numbers are range errors naming the option, with a space or with `=`.
        (&["fit", "skill.csv", "--target", "-1"], &["'--target <TARGETS>'", "-1 is out of range", above_0]),
        (&["fit", "skill.csv", "--target=-1"], &["'--target <TARGETS>'", "-1 is out of range", above_0]),
        (&["fit", "skill.csv", "--target", "0"], &["--target", "0 is out of range", above_0]),
        (&["fit", "skill.csv", "--target", "nan"], &["--target", "not a finite number"]),
        (&["fit", "skill.csv", "--target", "1", "--confidence", "1.5"], &["--confidence", "between 0 and 1"]),
        (&["fit", "skill.csv", "--target", "1", "--draws", "0"], &["--draws", "1 or more"]),
        (&["fit", "skill.csv", "--target", "1", "--draws", "-5"], &["--draws", "-5 is out of range"]),
        (&["fit", "skill.csv", "--target", "1", "--seed", "-1"], &["--seed", "0 or more"]),
        (&["fit", "skill.csv", "--target", "1", "--trust-factor", "-2"], &["--trust-factor", above_0]),
        (&["cost", "--inputs", "cost.toml", "--samples", "100", "--sample-interval", "0.01", "--variables", "0"], &["--variables", "1 or more"]),
        (&["cost", "--inputs", "cost.toml", "--samples", "-3", "--sample-interval", "0.01"], &["--samples", "-3 is out of range"]),
        (&["cost", "--inputs", "cost.toml", "--samples", "100", "--sample-interval", "0"], &["--sample-interval", above_0]),
        (&["cost", "--inputs", "cost.toml", "--sampled-time=-1", "--sample-interval", "0.01"], &["--sampled-time", "-1 is out of range"]),
        (&["cost", "--inputs", "huge-rate.toml", "--samples", "1e12", "--sample-interval", "0.01"], &["overflow: the cost of 1e12 samples exceeds", "core-hours", "check `samples`"]),
        (&["simulate", "--system", "lorenz-63", "--samples", "1e12", "--out", "x.npy"], &["this simulation would take 1.000e12 integrator steps", "GB for its saved values", "1e9 steps", "reduce `samples`"]),
        (&["simulate", "--system", "lorenz-63", "--samples", "0", "--out", "x.npy"], &["--samples", "1 or more"]),
        (&["simulate", "--system", "lorenz-63", "--samples", "-10", "--out", "x.npy"], &["--samples", "-10 is out of range"]),
        (&["simulate", "--system", "lorenz-63", "--samples", "2.5", "--out", "x.npy"], &["--samples", "2.5 is not a whole number"]),
        (&["simulate", "--system", "lorenz-63", "--samples", "10", "--dt", "-0.01", "--out", "x.npy"], &["--dt", above_0]),
        (&["simulate", "--system", "lorenz-63", "--samples", "10", "--spin-up", "-1", "--out", "x.npy"], &["--spin-up", "0 or a number above it"]),
        (&["lyapunov", "--system", "lorenz-63", "--duration", "1e12"], &["this Lyapunov estimate would take", "integrator steps", "reduce `duration`"]),
        (&["lyapunov", "--system", "lorenz-63", "--duration", "-5"], &["--duration", above_0]),
        (&["lyapunov", "--system", "lorenz-63", "--renormalise-every", "0"], &["--renormalise-every", above_0]),
        (&["run", "study.toml", "-j", "0"], &["--threads", "1 or more"]),
        (&["run", "study.toml", "--threads=-1"], &["--threads", "-1 is out of range"]),
        (&["run", "study.toml", "--shard", "0/3"], &["--shard", "not a shard", "1 ≤ I ≤ N"]),
        (&["slurm", "study.toml", "--array", "0"], &["--array", "1 or more"]),
        (&["slurm", "study.toml", "--array", "4", "--cpus", "-2"], &["--cpus", "-2 is out of range"]),
        (&["repair-store", "nowhere"], &["nowhere is neither a study's output folder", "records.jsonl"]),
    ];
    for (args, needles) in cases {
        refused(d, args, needles);
    }
    assert!(!d.join("x.npy").exists(), "nothing simulated");
    assert!(cases.len() >= 29);
}

/// A small, fast study of Lorenz-63 with NG-RC models named `models`, in `dir/study.toml`.
fn tiny_study(dir: &Path, models: &[&str]) -> std::path::PathBuf {
    std::fs::create_dir_all(dir).unwrap();
    let mut text = String::from(
        "title = \"bad-input test (invented)\"\nseed = 5\n\
         [data.simulate]\nsystem = { name = \"lorenz-63\", sigma = 10.0, rho = 28.0, beta = 2.6666666666666665 }\ndt = 0.01\nsample-interval = 0.01\n\
         spin-up = 5.0\ntraining-pool = 1200\n\
         [split]\ninitial-conditions = 8\ngap = 0.5\n\
         [skill]\nwarm-up = 0.2\nmax-lead = 1.5\n\
         [subsets]\nsizes = [200, 400, 800]\nreplicates = 2\n",
    );
    for (i, m) in models.iter().enumerate() {
        text.push_str(&format!(
            "[[model]]\nname = \"{m}\"\nngrc = {{ delays = {} }}\n",
            2 + i
        ));
    }
    text.push_str(
        "[plan]\ntargets = [0.3]\nbootstrap-draws = 50\n[cost]\ncore-hours-per-time-unit = 10.0\n",
    );
    let p = dir.join("study.toml");
    std::fs::write(&p, text).unwrap();
    p
}

fn run_tiny(study: &Path, out: &Path, extra: &[&str]) -> std::process::Output {
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

fn counts(out: &Path) -> closure_budget::study::results::PointCounts {
    let doc: closure_budget::study::results::PlanDocument =
        serde_json::from_slice(&std::fs::read(out.join("budget.json")).unwrap()).unwrap();
    doc.points.unwrap()
}

fn store_lines(out: &Path) -> usize {
    std::fs::read(out.join("records.jsonl"))
        .map(|b| b.iter().filter(|&&c| c == b'\n').count())
        .unwrap_or(0)
}

fn ok(o: &std::process::Output) {
    assert!(o.status.success(), "{}", stderr(o));
}

/// Removing a model keeps its stored points; restoring it reuses them; only `prune` removes.
#[test]
fn a_removed_model_keeps_its_records_until_pruned() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let both = tiny_study(dir.path(), &["ngrc-a", "ngrc-b"]);
    ok(&run_tiny(&both, &out, &[]));
    assert_eq!(store_lines(&out), 12);

    tiny_study(dir.path(), &["ngrc-a"]);
    ok(&run_tiny(&both, &out, &[]));
    assert_eq!(store_lines(&out), 12, "the removed model's records stay");
    let c = counts(&out);
    assert_eq!((c.planned, c.reused, c.computed, c.kept), (6, 6, 0, 6));
    let o = run_in(
        dir.path(),
        &[
            "run",
            both.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ],
    );
    ok(&o);
    assert!(
        stdout(&o).contains("6 kept in the store though not planned"),
        "{}",
        stdout(&o)
    );

    // Restored: every point reused, none recomputed.
    tiny_study(dir.path(), &["ngrc-a", "ngrc-b"]);
    ok(&run_tiny(&both, &out, &[]));
    let c = counts(&out);
    assert_eq!((c.planned, c.reused, c.computed, c.kept), (12, 12, 0, 0));

    // Pruning for the one-model study removes the other model's points.
    tiny_study(dir.path(), &["ngrc-a"]);
    let o = run_in(
        dir.path(),
        &[
            "prune",
            both.to_str().unwrap(),
            "--out",
            out.to_str().unwrap(),
        ],
    );
    ok(&o);
    assert!(
        stdout(&o).contains("6 records of points the study plans kept, 6 removed"),
        "{}",
        stdout(&o)
    );
    assert_eq!(store_lines(&out), 6);
}

/// Another study's folder is refused (nothing written) unless adopted.
#[test]
fn a_folder_of_another_study_is_refused_unless_adopted() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let a = tiny_study(&dir.path().join("a"), &["ngrc-a"]);
    let b = tiny_study(&dir.path().join("b"), &["ngrc-a", "ngrc-b"]);
    ok(&run_tiny(&a, &out, &[]));
    let before = std::fs::read(out.join("records.jsonl")).unwrap();
    let o = run_tiny(&b, &out, &[]);
    assert_eq!(o.status.code(), Some(2));
    let err = stderr(&o);
    for n in [
        "holds the points of another study",
        "a/study.toml",
        "b/study.toml",
        "--out DIR",
        "--adopt",
    ] {
        assert!(err.contains(n), "expected '{n}' in: {err}");
    }
    assert_eq!(std::fs::read(out.join("records.jsonl")).unwrap(), before);
    // Adopted: the points of the shared model are reused, the folder is b's now.
    ok(&run_tiny(&b, &out, &["--adopt"]));
    let c = counts(&out);
    assert_eq!((c.planned, c.reused, c.computed), (12, 6, 6));
    let o = run_tiny(&a, &out, &[]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("another study"), "{}", stderr(&o));

    // A damaged identity file is named, with what to do.
    std::fs::write(out.join("study-id.json"), "{oops").unwrap();
    refused(
        dir.path(),
        &["run", b.to_str().unwrap(), "--out", out.to_str().unwrap()],
        &["study-id.json is not a study identity", "--adopt"],
    );
}

/// A damaged middle line names the line and the intact records; repair keeps every good one.
#[test]
fn a_damaged_store_line_is_named_and_repaired() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let s = tiny_study(dir.path(), &["ngrc-a"]);
    ok(&run_tiny(&s, &out, &[]));
    let store = out.join("records.jsonl");
    let text = std::fs::read_to_string(&store).unwrap();
    let mut lines: Vec<&str> = text.lines().collect();
    lines[2] = "{\"key\": \"damaged";
    std::fs::write(&store, lines.join("\n") + "\n").unwrap();
    let damaged = std::fs::read(&store).unwrap();
    let o = run_tiny(&s, &out, &[]);
    assert_eq!(o.status.code(), Some(2));
    let err = stderr(&o);
    for n in [
        "records.jsonl is damaged: line 3 is not a skill record",
        "the other 5 records are intact",
        "records.jsonl.damaged",
        "closure-budget repair-store",
        "--drop-damaged",
    ] {
        assert!(err.contains(n), "expected '{n}' in: {err}");
    }
    assert!(!err.contains("move it aside"), "{err}");
    assert_eq!(std::fs::read(&store).unwrap(), damaged, "left as it was");

    let o = run_in(dir.path(), &["repair-store", out.to_str().unwrap()]);
    ok(&o);
    assert!(
        stdout(&o).contains("5 intact records kept; 1 line moved"),
        "{}",
        stdout(&o)
    );
    assert_eq!(store_lines(&out), 5);
    assert_eq!(
        std::fs::read_to_string(out.join("records.jsonl.damaged")).unwrap(),
        "{\"key\": \"damaged\n"
    );
    ok(&run_tiny(&s, &out, &[]));
    let c = counts(&out);
    assert_eq!((c.reused, c.computed), (5, 1));

    // The same through `run --drop-damaged`.
    let text = std::fs::read_to_string(&store).unwrap();
    std::fs::write(&store, text.replacen('\n', "\nnot json\n", 1)).unwrap();
    ok(&run_tiny(&s, &out, &["--drop-damaged"]));
    let c = counts(&out);
    assert_eq!((c.reused, c.computed), (6, 0));
    assert_eq!(store_lines(&out), 6);
}

/// `run` after the shards finished merges their stores instead of recomputing.
#[test]
fn run_after_shards_merges_their_stores() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let s = tiny_study(dir.path(), &["ngrc-a", "ngrc-b"]);
    for i in ["1/2", "2/2"] {
        ok(&run_tiny(&s, &out, &["--shard", i]));
    }
    let o = run_in(
        dir.path(),
        &["run", s.to_str().unwrap(), "--out", out.to_str().unwrap()],
    );
    ok(&o);
    assert!(
        stdout(&o).contains(
            "12 reused from the records store (12 merged from finished shard stores), 0 computed"
        ),
        "{}",
        stdout(&o)
    );
    let c = counts(&out);
    assert_eq!((c.reused, c.computed, c.from_shards), (12, 0, 12));
    assert!(
        files_below(&out.join("shards")).is_empty(),
        "merged shards removed"
    );
    assert_eq!(store_lines(&out), 12);

    // One shard of two, then `run`: its points are merged and the rest computed.
    let out2 = dir.path().join("out2");
    ok(&run_tiny(&s, &out2, &["--shard", "1/2"]));
    let in_shard = std::fs::read_to_string(out2.join("shards/shard-1-of-2.jsonl"))
        .unwrap()
        .lines()
        .count();
    ok(&run_tiny(&s, &out2, &[]));
    let c = counts(&out2);
    assert_eq!(
        (c.reused, c.computed, c.from_shards),
        (in_shard, 12 - in_shard, in_shard)
    );
}

/// A deleted history is said to have started afresh while the store holds earlier points.
#[test]
fn a_deleted_history_is_reported() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let s = tiny_study(dir.path(), &["ngrc-a"]);
    ok(&run_tiny(&s, &out, &[]));
    std::fs::remove_file(out.join("history.jsonl")).unwrap();
    let o = run_in(
        dir.path(),
        &["run", s.to_str().unwrap(), "--out", out.to_str().unwrap()],
    );
    ok(&o);
    assert!(
        stdout(&o).contains("history started afresh: no earlier runs found")
            && stdout(&o).contains("the store holds 6 points from earlier runs"),
        "{}",
        stdout(&o)
    );
    // The next run has a history again and says nothing of it.
    let o = run_in(
        dir.path(),
        &["run", s.to_str().unwrap(), "--out", out.to_str().unwrap()],
    );
    ok(&o);
    assert!(!stdout(&o).contains("afresh"), "{}", stdout(&o));
}

/// An output folder that is a file is refused by every command that writes or reads one.
#[test]
fn an_out_that_is_a_file_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let s = tiny_study(dir.path(), &["ngrc-a"]);
    std::fs::write(dir.path().join("taken"), "x").unwrap();
    for cmd in ["run", "merge", "status", "prune"] {
        refused(
            dir.path(),
            &[cmd, s.to_str().unwrap(), "--out", "taken"],
            &["--out taken is a file; give a folder"],
        );
    }
}

/// Data files and measured-skill files that look right but are not.
#[test]
fn headerless_and_duplicate_column_files() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let data = r#"path = "d.csv"
sample-interval = 0.01"#;
    // No header row: the first sample must not become variable names.
    let body: String = lorenz63_csv(600)
        .lines()
        .skip(1)
        .collect::<Vec<_>>()
        .join("\n");
    std::fs::write(d.join("d.csv"), body + "\n").unwrap();
    let study = file_study(d, data, "[100, 200, 400]", 5);
    expect_failure(
        d,
        &study,
        &[
            "d.csv, line 1",
            "holds numbers, not variable names",
            "add one",
        ],
    );
    // The same name twice.
    let csv = lorenz63_csv(600).replacen("x,y,z", "x,y,x", 1);
    std::fs::write(d.join("d.csv"), csv).unwrap();
    expect_failure(d, &study, &["d.csv, line 1", "column 'x' twice"]);

    let fit = |name: &str, text: &str, needles: &[&str]| {
        std::fs::write(d.join(name), text).unwrap();
        refused(
            d,
            &["fit", name, "--target", "1", "--report", "rep"],
            needles,
        );
        assert!(!d.join("rep").exists(), "no partial output");
    };
    let good = "a,100,1,0.5\na,200,1,0.6\na,400,1,0.7\n";
    fit(
        "dup.csv",
        &format!("model,n,skill,replicate,skill\n{good}"),
        &["dup.csv, line 1", "column 'skill' twice"],
    );
    fit(
        "big.csv",
        "model,n,replicate,skill\na,100,1,0.5\na,200,1,1e308\na,400,1,0.7\n",
        &[
            "big.csv, line 3",
            "skill = 1e308 is too large",
            "check this row",
        ],
    );
    fit(
        "inf.csv",
        "model,n,replicate,skill\na,100,1,0.5\na,200,1,inf\na,400,1,0.7\n",
        &["inf.csv, line 3", "skill = inf is not finite"],
    );
    fit("nohead.csv", good, &["lacks the column 'model'"]);
}

/// A small valid study of Lorenz-63 with one echo state network, for the checks below.
const CHECKED: &str = r#"title = "bad-input checks (invented)"
seed = 5
[data.simulate]
system = { name = "lorenz-63", sigma = 10.0, rho = 28.0, beta = 2.6666666666666665 }
dt = 0.01
sample-interval = 0.01
spin-up = 5.0
[split]
initial-conditions = 8
gap = 0.5
[skill]
warm-up = 0.2
max-lead = 1.5
[subsets]
sizes = [200, 400, 800]
replicates = 2
[[model]]
name = "esn"
esn = { reservoir-size = 40, washout = 20 }
[plan]
targets = [0.3]
bootstrap-draws = 50
[cost]
core-hours-per-time-unit = 10.0
"#;

/// Replacements `(from, to)` in a study file's text.
type Edits<'a> = &'a [(&'a str, &'a str)];

/// `CHECKED` with each `(from, to)` replaced (every `from` must be there), written to
/// `dir/study.toml`.
fn edited(dir: &Path, edits: &[(&str, &str)]) -> std::path::PathBuf {
    let mut text = CHECKED.to_string();
    for (from, to) in edits {
        assert!(text.contains(from), "'{from}' in the study");
        text = text.replacen(from, to, 1);
    }
    let p = dir.join("study.toml");
    std::fs::write(&p, text).unwrap();
    p
}

/// `check` of `study` fails naming every needle, in words of the study file (no type names of
/// the tool's code, no message wrapped in another), and `run` refuses it before any work.
fn refused_by_check(dir: &Path, study: &Path, needles: &[&str]) -> String {
    let o = run_in(dir, &["check", study.to_str().unwrap()]);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(2), "{err}");
    for n in needles {
        assert!(err.contains(n), "expected '{n}' in: {err}");
    }
    for word in [
        "usize",
        "f64",
        "Some(",
        "see the message",
        "is invalid; allowed: see",
    ] {
        assert!(!err.contains(word), "'{word}' in: {err}");
    }
    err
}

/// Each mistake a study file can hold is found by `check`, with the key (a model by its name),
/// the bad value, what is allowed and what to do.
#[test]
fn study_file_mistakes_are_named_by_check() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let esn = "name = \"esn\"\nesn = { reservoir-size = 40, washout = 20 }";
    #[rustfmt::skip]
    let cases: &[(Edits, &[&str])] = &[
        // A washout the smallest subset cannot hold.
        (&[("washout = 20", "washout = 300")], &["`model \"esn\".esn.washout` = 300 is invalid", "the smallest subset of 200 samples leaves training pairs after the washout", "raise the smallest size to at least 302"]),
        // Geometric sizes that round to fewer distinct sizes than asked for.
        (&[("sizes = [200, 400, 800]", "geometric = { smallest = 10, largest = 12, count = 5 }")], &["`subsets.geometric` = smallest 10 largest 12 count 5", "rounding gives only 3 distinct sizes [10, 11, 12]", "merged: 10 (2 times), 11 (2 times)", "set count = 3 or widen the range"]),
        // A target no forecast runs long enough to measure.
        (&[("targets = [0.3]", "targets = [0.3, 3.0]")], &["`plan.targets` = 3 (above skill.max-lead = 1.5)", "a target above max-lead cannot be measured", "raise max-lead to at least 3"]),
        // A normalised-error threshold out of range, far and near.
        (&[("max-lead = 1.5", "max-lead = 1.5\nthreshold = 1e9")], &["`skill.threshold` = 1000000000 is invalid", "greater than 0 and at most 10"]),
        (&[("max-lead = 1.5", "max-lead = 1.5\nthreshold = 0.0")], &["`skill.threshold` = 0 is invalid"]),
        // Integrator steps above the limit: a long spin-up, a tiny step.
        (&[("spin-up = 5.0", "spin-up = 1e9")], &["`data.simulate`: the simulation would take 1.000e11 integrator steps (1.000e11 for the spin-up", "hours on one core", "the limit is 1e9 steps", "shorten `spin-up`"]),
        (&[("dt = 0.01", "dt = 1e-9")], &["2.070e10 integrator steps", "1571 samples × 10000000 steps each", "raise `dt`"]),
        // Sizes whose data would not fit in any machine's memory.
        (&[("sizes = [200, 400, 800]", "sizes = [200, 400, 1000000000000]")], &["`subsets.sizes`: the study would hold about", "(the pilot data", "1000000000771 samples", "more than the limit of", "reduce the largest subset size"]),
        // A fit whose design matrix would not.
        (&[("sizes = [200, 400, 800]", "sizes = [200, 400, 1000000000000]"), (esn, "name = \"poly\"\npolynomial = { degree = 3 }")], &["`model \"poly\".polynomial`: the study would hold about", "the design matrix of 1000000000000 rows × 20 monomials", "give model poly settings with fewer features"]),
        // A size written as a float: the reader's words, not the code's types.
        (&[("sizes = [200, 400, 800]", "sizes = [200, 400, 1e10]")], &["is not valid TOML for a study", "expected a whole number ≥ 0"]),
        // A bad name: the model is keyed by its position, every bad setting of it reported.
        (&[("name = \"esn\"", "name = \"my esn\""), ("reservoir-size = 40", "reservoir-size = 40, spectral-radius = 3.0, leak-rate = 0.0")], &["has 3 problems", "`model[0].name` = 'my esn'", "`model[0].esn.spectral-radius` = 3 is invalid", "`model[0].esn.leak-rate` = 0 is invalid"]),
        // Delays spanning the smallest subset.
        (&[(esn, "name = \"ng\"\nngrc = { delays = 3, stride = 100 }")], &["`model \"ng\".ngrc.delays` = 3 (with stride 100, spanning 200 samples)", "raise the smallest size"]),
        // A network window the smallest subset cannot hold.
        (&[(esn, "name = \"net\"\nmlp = { window = 300 }")], &["`model \"net\".mlp.window` = 300", "raise the smallest size to at least 308"]),
        // More monomials than a polynomial fit accepts: C(45, 5) for 40 variables at degree 5.
        (&[("{ name = \"lorenz-63\", sigma = 10.0, rho = 28.0, beta = 2.6666666666666665 }", "{ name = \"lorenz-96\", k = 40, forcing = 8.0 }"), (esn, "name = \"poly\"\npolynomial = { degree = 5 }")], &["`model \"poly\".polynomial.degree` = 5", "degree 5 gives 1221759", "lower `degree`"]),
        // A cost setting, named once (not wrapped in a second message).
        (&[("core-hours-per-time-unit = 10.0", "core-hours-per-time-unit = 10.0\nbytes-per-value = 3")], &["`cost.bytes-per-value` = 3 is invalid; allowed: 4 or 8"]),
    ];
    for (edits, needles) in cases {
        let study = edited(d, edits);
        refused_by_check(d, &study, needles);
    }
    assert!(cases.len() >= 15);

    // `run` refuses the same before any work and leaves nothing behind.
    let study = edited(d, &[("spin-up = 5.0", "spin-up = 1e9")]);
    expect_failure(d, &study, &["the limit is 1e9 steps"]);
}

/// Three problems in one file are reported together, one line each.
#[test]
fn three_problems_in_one_file_are_reported_together() {
    let dir = tempfile::tempdir().unwrap();
    let study = edited(
        dir.path(),
        &[
            ("max-lead = 1.5", "max-lead = 1.5\nthreshold = 1e9"),
            ("targets = [0.3]", "targets = [0.3, 3.0]"),
            ("washout = 20", "washout = 300"),
        ],
    );
    let err = refused_by_check(
        dir.path(),
        &study,
        &[
            "has 3 problems; fix them and run `check` again:",
            "\n  - `skill.threshold` = 1000000000 is invalid",
            "\n  - `plan.targets` = 3 (above skill.max-lead = 1.5)",
            "\n  - `model \"esn\".esn.washout` = 300 is invalid",
        ],
    );
    assert_eq!(err.trim_end().lines().count(), 4, "{err}");
}

/// Data files are found (or not) by `check`, with the reader each file type needs.
#[test]
fn data_files_are_checked_before_any_work() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let data = |path: &str| format!("path = \"{path}\"\nsample-interval = 0.01");
    // Missing, for the pilot.
    let study = file_study(d, &data("nowhere.csv"), "[100, 200, 400]", 5);
    refused_by_check(d, &study, &["`data.file.path`: cannot read", "nowhere.csv"]);
    // No sampling interval and no sidecar.
    std::fs::write(d.join("d.csv"), lorenz63_csv(1000)).unwrap();
    let study = file_study(d, "path = \"d.csv\"", "[100, 200, 400]", 5);
    refused_by_check(d, &study, &["`data.file.sample-interval`", "sidecar"]);
    // A file type no reader takes.
    std::fs::write(d.join("d.txt"), lorenz63_csv(1000)).unwrap();
    let study = file_study(d, &data("d.txt"), "[100, 200, 400]", 5);
    refused_by_check(
        d,
        &study,
        &[
            "`data.file.path` = 'd.txt' is invalid",
            "a trajectory in .npy (with an optional .json sidecar) or .csv, or gridded fields in NetCDF (.nc) or NumPy .npz",
        ],
    );
    // A trajectory given field keys.
    let study = file_study(
        d,
        &format!("{}\nvariables = [\"x\"]", data("d.csv")),
        "[100, 200, 400]",
        5,
    );
    refused_by_check(
        d,
        &study,
        &[
            "`data.file.path` = 'd.csv' with gridded-field keys",
            "read as one trajectory",
            "drop `variables`",
        ],
    );
    // Fields for the new regime, and a new regime's file that is not there.
    let with_transfer = |path: &str| {
        let study = file_study(d, &data("d.csv"), "[100, 200, 400]", 5);
        let mut text = std::fs::read_to_string(&study).unwrap();
        text.push_str(&format!(
            "[transfer]\nsizes = [50, 100, 200]\ntargets = [0.2]\n[transfer.data.file]\n{}\n",
            data(path)
        ));
        std::fs::write(&study, text).unwrap();
        study
    };
    let study = with_transfer("t.nc");
    refused_by_check(
        d,
        &study,
        &[
            "`transfer.data.file` = gridded fields ('t.nc')",
            "for the pilot's [data.file] only",
        ],
    );
    let study = with_transfer("gone.npy");
    refused_by_check(
        d,
        &study,
        &["`transfer.data.file.path`: cannot read", "gone.npy"],
    );
}

/// `check` of a valid study shows the work before any is done: the samples to simulate and
/// their integrator steps, the training points, the memory at once against the limit.
#[test]
fn check_shows_the_work_estimate() {
    let dir = tempfile::tempdir().unwrap();
    let study = edited(dir.path(), &[]);
    let o = run_in(dir.path(), &["check", study.to_str().unwrap()]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = stdout(&o);
    // By hand, at sample interval 0.01: a pool of 800 + 200 (one smallest size for the second
    // replicate) = 1000 samples, a gap of 50, and a test region of 20 warm-up + 7 × 50 spacing +
    // 150 lead + 1 = 521 samples: 1571 samples; 5/0.01 = 500 spin-up steps and 1570 steps
    // between them: 2070 steps.
    for n in [
        "work estimate (before any work):",
        "simulate (data.simulate): 1571 samples, 2.070e3 integrator steps, under a second on one core (limit 1e9 steps)",
        "training: 6 points (1 model × 3 sizes × 2 replicates: 2 nested training passes), 48 test forecasts",
        // 1571 samples × 3 variables × 8 bytes; 3 × 61² + 3 × 61 × 3 doubles for the
        // normal equations of 1 + 40 + 20 features.
        "memory: about 131 kB at once (the pilot data 37.7 kB (1571 samples), the largest fit 93.7 kB (model esn: the normal equations of 61 features)); limit",
    ] {
        assert!(text.contains(n), "expected '{n}' in: {text}");
    }
}
