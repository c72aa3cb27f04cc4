//! Shared helpers for the command-line tests.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Output;

/// The built binary under test.
pub fn bin() -> assert_cmd::Command {
    assert_cmd::Command::new(env!("CARGO_BIN_EXE_closure-budget"))
}

/// Path of a file in the repository.
pub fn repo(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// Runs the binary with `args` in `dir` and returns its output.
pub fn run_in(dir: &Path, args: &[&str]) -> Output {
    bin()
        .current_dir(dir)
        .args(args)
        .output()
        .expect("binary runs")
}

/// Runs `run STUDY --out DIR/out --quiet` in `dir`; returns the output and the output folder.
pub fn run_quietly(dir: &Path, study: &Path) -> (Output, PathBuf) {
    let out = dir.join("out");
    let o = run_in(
        dir,
        &[
            "run",
            study.to_str().expect("UTF-8 path"),
            "--out",
            out.to_str().expect("UTF-8 path"),
            "--quiet",
        ],
    );
    (o, out)
}

pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// Every file below `dir`, relative, sorted.
pub fn files_below(dir: &Path) -> Vec<String> {
    let mut out = Vec::new();
    if let Ok(rd) = std::fs::read_dir(dir) {
        for e in rd.flatten() {
            let p = e.path();
            if p.is_dir() {
                for f in files_below(&p) {
                    out.push(format!("{}/{}", e.file_name().to_string_lossy(), f));
                }
            } else {
                out.push(e.file_name().to_string_lossy().into_owned());
            }
        }
    }
    out.sort();
    out
}
pub mod mutate;

/// Whether `python3` with NumPy and netCDF4 can run (the NetCDF tests write their files with
/// them); panics when it cannot and CI is set, else prints why `suite` is skipped.
pub fn python_ready(label: &str, suite: &str) -> bool {
    python_with(&["numpy", "netCDF4"], label, suite)
}

/// Whether `python3` can import every module of `modules`; panics when it cannot and CI is set
/// (CI installs them, see `.ci/run`), else prints why `suite` is skipped.
pub fn python_with(modules: &[&str], label: &str, suite: &str) -> bool {
    let ok = std::process::Command::new("python3")
        .args(["-c", &format!("import {}", modules.join(", "))])
        .output()
        .is_ok_and(|o| o.status.success());
    let names = modules.join(" and ");
    if !ok {
        assert!(
            std::env::var_os("CI").is_none(),
            "python3 with {names} is needed for the {label} tests on CI (.ci/run installs them)"
        );
        eprintln!(
            "SKIPPED {suite}: python3 with {names} was not found (`pip install {}` to run these tests)",
            modules.join(" ")
        );
    }
    ok
}
