//! The `slurm` command: writes an executable submission script with absolute, quoted paths, and
//! rejects bad options with one clear message before writing anything.

mod common;
use common::*;

#[test]
fn writes_an_executable_script_with_absolute_paths() {
    let dir = tempfile::tempdir().unwrap();
    let study = dir.path().join("my study.toml");
    std::fs::copy(repo("studies/demo-quick.toml"), &study).unwrap();
    let o = run_in(
        dir.path(),
        &[
            "slurm",
            "my study.toml",
            "--array",
            "4",
            "--out",
            "out dir",
            "--time",
            "1-00:00:00",
            "--cpus",
            "2",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let out = std::fs::canonicalize(dir.path()).unwrap().join("out dir");
    let script = out.join("submit-slurm.sh");
    let text = std::fs::read_to_string(&script).unwrap();
    let study_abs = std::fs::canonicalize(&study).unwrap();
    assert!(
        text.contains(&format!("study='{}'", study_abs.display())),
        "{text}"
    );
    assert!(text.contains(&format!("out='{}'", out.display())), "{text}");
    assert!(text.contains("--array=1-4"), "{text}");
    assert!(text.contains("--time=1-00:00:00"), "{text}");
    assert!(text.contains("--cpus-per-task=2"), "{text}");
    assert!(text.contains("--job-name=cb-my-study"), "{text}");
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let mode = std::fs::metadata(&script).unwrap().permissions().mode();
        assert_eq!(mode & 0o100, 0o100, "executable: {mode:o}");
    }
    let printed = stdout(&o);
    assert!(printed.contains("bash '"), "{printed}");
    assert!(printed.contains("submit-slurm.sh"), "{printed}");
}

#[test]
fn script_path_and_binary_can_be_chosen() {
    let dir = tempfile::tempdir().unwrap();
    let fake = dir.path().join("cb");
    std::fs::write(&fake, "#!/bin/sh\n").unwrap();
    let script = dir.path().join("submit.sh");
    let o = run_in(
        dir.path(),
        &[
            "slurm",
            repo("studies/demo-quick.toml").to_str().unwrap(),
            "--array",
            "2",
            "--out",
            "o",
            "--script",
            script.to_str().unwrap(),
            "--binary",
            fake.to_str().unwrap(),
            "--job-name",
            "quick",
        ],
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let text = std::fs::read_to_string(&script).unwrap();
    let fake_abs = std::fs::canonicalize(&fake).unwrap();
    assert!(
        text.contains(&format!("binary={}\n", fake_abs.display())),
        "{text}"
    );
    assert!(text.contains("--job-name=quick-merge"), "{text}");
    assert!(!dir.path().join("o").exists(), "only the script is written");
}

#[test]
fn bad_options_fail_before_anything_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let study = repo("studies/demo-quick.toml");
    let study = study.to_str().unwrap();
    for (args, needle) in [
        (vec!["--array", "0"], "'--array <N>': 0 is out of range"),
        (vec!["--array", "2", "--time", "2h"], "--time '2h'"),
        (
            vec!["--array", "2", "--mem", "4GB"],
            "write 4G without the B",
        ),
        (
            vec!["--array", "2", "--partition", "a b"],
            "--partition 'a b'",
        ),
        (vec!["--array", "2", "--account", "x;y"], "--account 'x;y'"),
        (
            vec!["--array", "2", "--cpus", "0"],
            "'--cpus <C>': 0 is out of range",
        ),
        (
            vec!["--array", "2", "--binary", "no-such-binary"],
            "cannot find the closure-budget binary",
        ),
    ] {
        let mut all = vec!["slurm", study, "--out", "o"];
        all.extend(args);
        let o = run_in(dir.path(), &all);
        assert_eq!(o.status.code(), Some(2), "{all:?}");
        let err = stderr(&o);
        assert!(err.starts_with("error: "), "{err}");
        assert!(err.contains(needle), "expected '{needle}' in: {err}");
        assert!(!dir.path().join("o").exists(), "{all:?} wrote output");
    }
    let o = run_in(dir.path(), &["slurm", "missing.toml", "--array", "2"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("missing.toml"), "{}", stderr(&o));
}
