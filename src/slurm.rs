//! Slurm submission: a self-contained bash script that runs a study as an array of shards
//! (`run --shard I/N`) and then merges them (`merge`) in a job that waits for every shard.
//!
//! [`SlurmOptions::resolved`] does the file-system work (absolute paths, the study and the
//! binary must exist); [`batch_script`] checks every option and renders the script without
//! touching the disk, so it can be tested on its own.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

/// The largest array accepted. Clusters usually cap arrays lower (Slurm's `MaxArraySize`
/// defaults to 1001, i.e. task ids up to 1000).
pub const MAX_ARRAY: usize = 10_000;

/// Everything the submission script needs.
///
/// | field | meaning | valid |
/// |---|---|---|
/// | `study` | study file | absolute path, UTF-8, no control characters |
/// | `out` | output directory (shards, report, `slurm/` logs) | as `study` |
/// | `array` | number of shards = array tasks | 1 ..= [`MAX_ARRAY`] |
/// | `partition` | `sbatch --partition` | letters, digits, `.` `_` `-`, and `,` between partitions |
/// | `time` | `sbatch --time` per job | `M`, `M:S`, `H:M:S`, `D-H`, `D-H:M`, `D-H:M:S` |
/// | `cpus` | `sbatch --cpus-per-task`; also the shard's `--threads` | ≥ 1 |
/// | `mem` | `sbatch --mem` per job | digits with an optional unit `K`, `M`, `G`, `T` |
/// | `account` | `sbatch --account` | letters, digits, `.` `_` `-` |
/// | `binary` | the closure-budget executable the jobs run | as `study` |
/// | `job_name` | array job name; the merge job adds `-merge` | letters, digits, `.` `_` `-` |
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SlurmOptions {
    pub study: PathBuf,
    pub out: PathBuf,
    pub array: usize,
    pub partition: Option<String>,
    pub time: Option<String>,
    pub cpus: Option<usize>,
    pub mem: Option<String>,
    pub account: Option<String>,
    pub binary: PathBuf,
    pub job_name: String,
}

/// Why a submission script cannot be written.
#[derive(Debug, thiserror::Error)]
pub enum SlurmError {
    #[error("--array {0} is out of range: give the number of shards, 1 to {MAX_ARRAY}")]
    ArrayOutOfRange(usize),
    #[error("--cpus 0 is invalid: give the CPUs per shard task, 1 or more")]
    ZeroCpus,
    #[error(
        "--time '{value}' is not a Slurm time limit ({reason}); write minutes (90), MM:SS, \
         HH:MM:SS (02:30:00), D-HH, D-HH:MM or D-HH:MM:SS (1-12:00:00)"
    )]
    BadTime { value: String, reason: String },
    #[error(
        "--mem '{value}' is not a Slurm memory size; write a whole number with an optional unit \
         K, M, G or T (4G, 4000M, or 4000 for megabytes){hint}"
    )]
    BadMem { value: String, hint: String },
    #[error(
        "--{flag} '{value}' is not a valid name; use letters, digits, '.', '_' and '-'{extra} \
         (no spaces or shell characters)"
    )]
    BadName {
        flag: &'static str,
        value: String,
        extra: &'static str,
    },
    #[error("{what} path {path} is not absolute; resolve it before writing the script")]
    RelativePath { what: &'static str, path: PathBuf },
    #[error("{what} path {path} is not UTF-8; move or rename it")]
    NonUtf8Path { what: &'static str, path: PathBuf },
    #[error("{what} path {path:?} contains a line break or control character; rename it")]
    ControlCharacter { what: &'static str, path: PathBuf },
    #[error("cannot find the study file {path}: {source}")]
    StudyMissing {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error(
        "cannot find the closure-budget binary {path}: {source}; give the installed binary with \
         --binary"
    )]
    BinaryMissing {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("cannot resolve the output directory {path}: {source}")]
    OutDir {
        path: PathBuf,
        source: std::io::Error,
    },
}

impl SlurmOptions {
    /// The options with absolute paths: the study file and the binary must exist (symbolic
    /// links are resolved); the output directory need not exist yet and is made absolute against
    /// the current directory.
    pub fn resolved(mut self) -> Result<Self, SlurmError> {
        self.study =
            std::fs::canonicalize(&self.study).map_err(|source| SlurmError::StudyMissing {
                path: self.study.clone(),
                source,
            })?;
        self.binary =
            std::fs::canonicalize(&self.binary).map_err(|source| SlurmError::BinaryMissing {
                path: self.binary.clone(),
                source,
            })?;
        self.out = std::path::absolute(&self.out).map_err(|source| SlurmError::OutDir {
            path: self.out.clone(),
            source,
        })?;
        Ok(self)
    }
}

/// A default Slurm job name for a study file: `cb-` and the file stem, with characters Slurm
/// or a shell might trip on replaced by `-`.
pub fn default_job_name(study: &Path) -> String {
    let stem = study
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "study".into());
    let clean: String = stem
        .chars()
        .map(|c| if is_name_char(c) { c } else { '-' })
        .collect();
    format!("cb-{clean}")
}

/// The submission script for `o`: checks every option, then renders the bash text. The paths in
/// `o` must already be absolute (see [`SlurmOptions::resolved`]).
pub fn batch_script(o: &SlurmOptions) -> Result<String, SlurmError> {
    if o.array == 0 || o.array > MAX_ARRAY {
        return Err(SlurmError::ArrayOutOfRange(o.array));
    }
    if o.cpus == Some(0) {
        return Err(SlurmError::ZeroCpus);
    }
    if let Some(t) = &o.time {
        check_time(t).map_err(|reason| SlurmError::BadTime {
            value: t.clone(),
            reason,
        })?;
    }
    if let Some(m) = &o.mem {
        check_mem(m)?;
    }
    if let Some(p) = &o.partition {
        check_name("partition", p, true)?;
    }
    if let Some(a) = &o.account {
        check_name("account", a, false)?;
    }
    check_name("job-name", &o.job_name, false)?;
    let study = checked_path("study", &o.study)?;
    let out = checked_path("output directory", &o.out)?;
    let binary = checked_path("binary", &o.binary)?;

    let n = o.array;
    let mut sbatch_options = String::new();
    for (flag, value) in [
        ("--partition", o.partition.clone()),
        ("--account", o.account.clone()),
        ("--time", o.time.clone()),
        ("--cpus-per-task", o.cpus.map(|c| c.to_string())),
        ("--mem", o.mem.clone()),
    ] {
        if let Some(v) = value {
            // Checked above: plain words that need no quoting.
            let _ = write!(sbatch_options, " \\\n  {flag}={v}");
        }
    }
    let mut header_options = format!("--array {n}");
    for (flag, value) in [
        ("--partition", &o.partition),
        ("--account", &o.account),
        ("--time", &o.time),
        ("--mem", &o.mem),
    ] {
        if let Some(v) = value {
            let _ = write!(header_options, " {flag} {v}");
        }
    }
    if let Some(c) = o.cpus {
        let _ = write!(header_options, " --cpus {c}");
    }

    let q_study = shell_quote(study);
    let q_out = shell_quote(out);
    let q_binary = shell_quote(binary);
    let array_name = &o.job_name;
    let merge_name = format!("{}-merge", o.job_name);
    let version = env!("CARGO_PKG_VERSION");

    Ok(format!(
        r#"#!/usr/bin/env bash
# Runs a closure-budget study on Slurm: {n} shard tasks, then one merge job.
# Written by `closure-budget slurm` {version} ({header_options}).
#
#   study:  {study}
#   output: {out}
#   binary: {binary}
#
# Submit it once, from a login node:   bash <this file>
# It submits
#   1. an array job '{array_name}' of {n} tasks; task I runs
#        closure-budget run STUDY --out OUT --shard I/{n} --threads $SLURM_CPUS_PER_TASK --quiet
#      and writes its share of the study's points to OUT/shards/shard-I-of-{n}.jsonl;
#   2. a job '{merge_name}' that starts only after every task succeeded (afterok) and runs
#        closure-budget merge STUDY --out OUT --quiet
#      which combines the shards and writes report.html, budget.json, records.jsonl and skill.csv;
# and prints both job ids. Slurm's logs go to OUT/slurm/.
# The binary, the study file and OUT must be visible at the same paths on the compute nodes.
#
# Watch:   squeue -j ARRAY_ID,MERGE_ID
# Cancel:  scancel ARRAY_ID MERGE_ID
# If a task fails, the merge job never starts (Slurm shows it pending with the reason
# DependencyNeverSatisfied, unless the cluster cancels such jobs): read the task's log in
# OUT/slurm/, cancel the merge job, fix the cause and run this script again.
set -euo pipefail

binary={q_binary}
study={q_study}
out={q_out}

if ! command -v sbatch >/dev/null 2>&1; then
  echo "error: sbatch not found; run this script on a Slurm login node" >&2
  exit 1
fi
if [ ! -x "$binary" ]; then
  echo "error: the closure-budget binary $binary is missing or not executable;" \
    "write the script again with --binary" >&2
  exit 1
fi
if [ ! -f "$study" ]; then
  echo "error: the study file $study is missing" >&2
  exit 1
fi
mkdir -p "$out/slurm"

# The job bodies below are quoted here-documents: nothing in them is expanded now; Slurm sets
# SLURM_ARRAY_TASK_ID and SLURM_CPUS_PER_TASK when each task runs. Log names are relative to
# --chdir, so the output path never meets Slurm's %-patterns.
array_id=$(sbatch --parsable \
  --job-name={array_name} \
  --array=1-{n}{sbatch_options} \
  --chdir="$out" \
  --output='slurm/%x-%A_%a.out' <<'CLOSURE_BUDGET_SHARD'
#!/usr/bin/env bash
set -euo pipefail
exec {q_binary} run {q_study} --out {q_out} \
  --shard "${{SLURM_ARRAY_TASK_ID}}/{n}" --threads "${{SLURM_CPUS_PER_TASK:-1}}" --quiet
CLOSURE_BUDGET_SHARD
)
array_id=${{array_id%%;*}}

if ! merge_id=$(sbatch --parsable \
  --job-name={merge_name} \
  --dependency=afterok:"$array_id"{sbatch_options} \
  --chdir="$out" \
  --output='slurm/%x-%j.out' <<'CLOSURE_BUDGET_MERGE'
#!/usr/bin/env bash
set -euo pipefail
exec {q_binary} merge {q_study} --out {q_out} --quiet
CLOSURE_BUDGET_MERGE
); then
  echo "error: the merge job was not submitted; the array job $array_id is queued:" \
    "cancel it with: scancel $array_id" >&2
  exit 1
fi
merge_id=${{merge_id%%;*}}

echo "array job $array_id: {n} shard tasks"
echo "merge job $merge_id: runs after every shard task succeeded"
echo "logs:     $out/slurm/"
echo "watch:    squeue -j $array_id,$merge_id"
echo "cancel:   scancel $array_id $merge_id"
"#
    ))
}

/// Quotes `s` for bash: single quotes, with each `'` written as `'\''`. Plain words (letters,
/// digits and `/._-+,:=@`) are left bare for readability.
pub fn shell_quote(s: &str) -> String {
    let plain = !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || "/._-+,:=@".contains(c));
    if plain {
        s.to_string()
    } else {
        format!("'{}'", s.replace('\'', r"'\''"))
    }
}

fn checked_path<'a>(what: &'static str, p: &'a Path) -> Result<&'a str, SlurmError> {
    if !p.is_absolute() {
        return Err(SlurmError::RelativePath {
            what,
            path: p.to_path_buf(),
        });
    }
    let s = p.to_str().ok_or_else(|| SlurmError::NonUtf8Path {
        what,
        path: p.to_path_buf(),
    })?;
    if s.chars().any(char::is_control) {
        return Err(SlurmError::ControlCharacter {
            what,
            path: p.to_path_buf(),
        });
    }
    Ok(s)
}

fn is_name_char(c: char) -> bool {
    c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-')
}

fn check_name(flag: &'static str, value: &str, list: bool) -> Result<(), SlurmError> {
    let ok = if list {
        !value.is_empty()
            && value
                .split(',')
                .all(|part| !part.is_empty() && part.chars().all(is_name_char))
    } else {
        !value.is_empty() && value.chars().all(is_name_char)
    };
    if ok {
        Ok(())
    } else {
        Err(SlurmError::BadName {
            flag,
            value: value.to_string(),
            extra: if list {
                " (',' between partitions)"
            } else {
                ""
            },
        })
    }
}

/// Checks a Slurm time limit; the error says which part is wrong.
fn check_time(t: &str) -> Result<(), String> {
    fn number(part: &str, name: &str) -> Result<u64, String> {
        if part.is_empty() || part.len() > 7 || !part.bytes().all(|b| b.is_ascii_digit()) {
            return Err(format!("the {name} '{part}' is not a whole number"));
        }
        part.parse()
            .map_err(|_| format!("the {name} '{part}' is not a whole number"))
    }
    fn below(v: u64, limit: u64, name: &str) -> Result<(), String> {
        if v < limit {
            Ok(())
        } else {
            Err(format!("the {name} must be below {limit}, not {v}"))
        }
    }
    if t.is_empty() {
        return Err("it is empty".into());
    }
    match t.split_once('-') {
        Some((days, rest)) => {
            number(days, "days")?;
            let parts: Vec<&str> = rest.split(':').collect();
            match parts.as_slice() {
                [h] => below(number(h, "hours")?, 24, "hours"),
                [h, m] => {
                    below(number(h, "hours")?, 24, "hours")?;
                    below(number(m, "minutes")?, 60, "minutes")
                }
                [h, m, s] => {
                    below(number(h, "hours")?, 24, "hours")?;
                    below(number(m, "minutes")?, 60, "minutes")?;
                    below(number(s, "seconds")?, 60, "seconds")
                }
                _ => Err("after D- come hours, HH:MM or HH:MM:SS".into()),
            }
        }
        None => {
            let parts: Vec<&str> = t.split(':').collect();
            match parts.as_slice() {
                [m] => number(m, "minutes").map(|_| ()),
                [m, s] => {
                    number(m, "minutes")?;
                    below(number(s, "seconds")?, 60, "seconds")
                }
                [h, m, s] => {
                    number(h, "hours")?;
                    below(number(m, "minutes")?, 60, "minutes")?;
                    below(number(s, "seconds")?, 60, "seconds")
                }
                _ => Err("it has more than three ':'-separated fields".into()),
            }
        }
    }
}

fn check_mem(m: &str) -> Result<(), SlurmError> {
    let digits = m.trim_end_matches(|c: char| c.is_ascii_alphabetic());
    let unit = &m[digits.len()..];
    let unit_ok = matches!(unit, "" | "K" | "M" | "G" | "T" | "k" | "m" | "g" | "t");
    let digits_ok =
        !digits.is_empty() && digits.len() <= 12 && digits.bytes().all(|b| b.is_ascii_digit());
    if unit_ok && digits_ok {
        return Ok(());
    }
    let hint = match unit.to_ascii_uppercase().as_str() {
        "KB" | "MB" | "GB" | "TB" if digits_ok => {
            format!("; write {digits}{} without the B", &unit[..1])
        }
        _ => String::new(),
    };
    Err(SlurmError::BadMem {
        value: m.to_string(),
        hint,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn options() -> SlurmOptions {
        SlurmOptions {
            study: PathBuf::from("/data/my studies/it's.toml"),
            out: PathBuf::from("/scratch/out dir"),
            array: 3,
            partition: Some("compute".into()),
            time: Some("00:20:00".into()),
            cpus: Some(4),
            mem: Some("4G".into()),
            account: Some("proj-42".into()),
            binary: PathBuf::from("/opt/cb/bin/closure-budget"),
            job_name: "cb-demo".into(),
        }
    }

    #[test]
    fn quoting_survives_spaces_and_quotes() {
        assert_eq!(shell_quote("/a/b-c_d.e"), "/a/b-c_d.e");
        assert_eq!(shell_quote("/a b"), "'/a b'");
        assert_eq!(shell_quote("it's"), r"'it'\''s'");
        assert_eq!(shell_quote("$HOME`x`"), "'$HOME`x`'");
        assert_eq!(shell_quote(""), "''");
        let s = batch_script(&options()).unwrap();
        assert!(s.contains(r"study='/data/my studies/it'\''s.toml'"), "{s}");
        assert!(s.contains("out='/scratch/out dir'"), "{s}");
        assert!(s.contains("binary=/opt/cb/bin/closure-budget\n"), "{s}");
        assert!(
            s.contains(
                r"exec /opt/cb/bin/closure-budget run '/data/my studies/it'\''s.toml' --out '/scratch/out dir'"
            ),
            "{s}"
        );
    }

    #[test]
    fn script_submits_array_then_dependent_merge() {
        let s = batch_script(&options()).unwrap();
        assert!(s.starts_with("#!/usr/bin/env bash\n"));
        assert!(s.contains("--array=1-3 \\\n"), "{s}");
        assert!(
            s.contains(r#"--shard "${SLURM_ARRAY_TASK_ID}/3" --threads "${SLURM_CPUS_PER_TASK:-1}" --quiet"#),
            "{s}"
        );
        assert!(s.contains(r#"--dependency=afterok:"$array_id""#), "{s}");
        assert!(
            s.contains("merge '/data/my studies/it'\\''s.toml' --out '/scratch/out dir' --quiet")
        );
        for line in [
            "--partition=compute",
            "--account=proj-42",
            "--time=00:20:00",
            "--cpus-per-task=4",
            "--mem=4G",
        ] {
            assert_eq!(s.matches(line).count(), 2, "{line} on both jobs: {s}");
        }
        assert!(s.contains("--job-name=cb-demo \\"));
        assert!(s.contains("--job-name=cb-demo-merge \\"));
        assert!(s.contains(r#"mkdir -p "$out/slurm""#));
        assert!(s.contains("--output='slurm/%x-%A_%a.out'"));
        assert!(s.contains(r#"echo "array job $array_id"#));
        assert!(s.contains(r#"echo "merge job $merge_id"#));
        // The bodies are quoted here-documents, so nothing in them expands at submission.
        assert!(s.contains("<<'CLOSURE_BUDGET_SHARD'"));
        assert!(s.contains("<<'CLOSURE_BUDGET_MERGE'"));
    }

    #[test]
    fn optional_sbatch_options_are_left_out() {
        let o = SlurmOptions {
            partition: None,
            time: None,
            cpus: None,
            mem: None,
            account: None,
            ..options()
        };
        let s = batch_script(&o).unwrap();
        for flag in [
            "--partition",
            "--account",
            "--time",
            "--cpus-per-task",
            "--mem",
        ] {
            assert!(!s.contains(flag), "{flag} in {s}");
        }
        assert!(s.contains("--array=1-3 \\\n  --chdir"), "{s}");
    }

    #[test]
    fn script_is_valid_bash() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("s.sh");
        std::fs::write(&p, batch_script(&options()).unwrap()).unwrap();
        match std::process::Command::new("bash")
            .arg("-n")
            .arg(&p)
            .output()
        {
            Ok(o) => assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr)),
            Err(e) => eprintln!("bash not available, syntax not checked: {e}"),
        }
    }

    /// The lines between `<<'DELIM'` and `DELIM`.
    fn heredoc(script: &str, delim: &str) -> String {
        let start = script.find(&format!("<<'{delim}'\n")).unwrap();
        let body = &script[start..];
        let body = &body[body.find('\n').unwrap() + 1..];
        body[..body.find(&format!("\n{delim}\n")).unwrap()].to_string()
    }

    /// Runs `code` with bash and returns its standard output, or `None` without bash.
    fn bash(code: &str, env: &[(&str, &str)]) -> Option<String> {
        let o = std::process::Command::new("bash")
            .arg("-c")
            .arg(code)
            .envs(env.iter().copied())
            .output()
            .ok()?;
        assert!(
            o.status.success(),
            "{code}\n{}",
            String::from_utf8_lossy(&o.stderr)
        );
        Some(String::from_utf8(o.stdout).unwrap())
    }

    /// The job bodies, run by bash as Slurm would, pass every path as one argument, unchanged.
    #[test]
    fn job_bodies_pass_awkward_paths_intact() {
        let dir = tempfile::tempdir().unwrap();
        let base = dir.path().join("it's a $dir `x`");
        std::fs::create_dir(&base).unwrap();
        let binary = base.join("cb \"bin\"");
        std::fs::write(&binary, "#!/bin/sh\nprintf '%s\\n' \"$@\"\n").unwrap();
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            std::fs::set_permissions(&binary, std::fs::Permissions::from_mode(0o755)).unwrap();
        }
        let o = SlurmOptions {
            study: base.join("my study's.toml"),
            out: base.join("out * dir"),
            binary: binary.clone(),
            ..options()
        };
        let s = batch_script(&o).unwrap();
        let study = o.study.to_str().unwrap();
        let out = o.out.to_str().unwrap();

        let env = [("SLURM_ARRAY_TASK_ID", "2"), ("SLURM_CPUS_PER_TASK", "4")];
        let Some(shard) = bash(&heredoc(&s, "CLOSURE_BUDGET_SHARD"), &env) else {
            eprintln!("bash not available, job bodies not run");
            return;
        };
        let want = [
            "run",
            study,
            "--out",
            out,
            "--shard",
            "2/3",
            "--threads",
            "4",
            "--quiet",
        ];
        assert_eq!(shard.lines().collect::<Vec<_>>(), want);
        let shard = bash(&heredoc(&s, "CLOSURE_BUDGET_SHARD"), &env[..1]).unwrap();
        assert!(
            shard.contains("\n--threads\n1\n"),
            "one thread without --cpus: {shard}"
        );

        let merge = bash(&heredoc(&s, "CLOSURE_BUDGET_MERGE"), &[]).unwrap();
        let want = ["merge", study, "--out", out, "--quiet"];
        assert_eq!(merge.lines().collect::<Vec<_>>(), want);

        // The variables the submitting part uses hold the same paths.
        let assignments: Vec<&str> = s
            .lines()
            .filter(|l| {
                ["binary=", "study=", "out="]
                    .iter()
                    .any(|p| l.starts_with(p))
            })
            .collect();
        assert_eq!(assignments.len(), 3, "{s}");
        let code = format!(
            "{}\nprintf '%s\\n' \"$binary\" \"$study\" \"$out\"",
            assignments.join("\n")
        );
        let values = bash(&code, &[]).unwrap();
        assert_eq!(
            values.lines().collect::<Vec<_>>(),
            [binary.to_str().unwrap(), study, out]
        );
    }

    #[test]
    fn array_range_is_checked() {
        for bad in [0, MAX_ARRAY + 1] {
            let e = batch_script(&SlurmOptions {
                array: bad,
                ..options()
            })
            .unwrap_err();
            assert!(e.to_string().contains("1 to 10000"), "{e}");
        }
        assert!(batch_script(&SlurmOptions {
            array: MAX_ARRAY,
            ..options()
        })
        .is_ok());
        let e = batch_script(&SlurmOptions {
            cpus: Some(0),
            ..options()
        })
        .unwrap_err();
        assert!(matches!(e, SlurmError::ZeroCpus));
    }

    #[test]
    fn slurm_time_formats() {
        for ok in [
            "90",
            "0",
            "5:30",
            "02:30:00",
            "48:00:00",
            "1-12",
            "1-12:30",
            "1-12:30:15",
        ] {
            assert!(check_time(ok).is_ok(), "{ok}: {:?}", check_time(ok));
        }
        for (bad, why) in [
            ("", "empty"),
            ("1h", "not a whole number"),
            ("00:90:00", "minutes must be below 60"),
            ("10:75", "seconds must be below 60"),
            ("1-25", "hours must be below 24"),
            ("1:2:3:4", "more than three"),
            ("-5", "days"),
            ("1-2:3:4:5", "after D-"),
            (" 10", "not a whole number"),
        ] {
            let e = check_time(bad).unwrap_err();
            assert!(e.contains(why), "{bad}: {e}");
        }
        let e = batch_script(&SlurmOptions {
            time: Some("2h".into()),
            ..options()
        })
        .unwrap_err()
        .to_string();
        assert!(e.contains("--time '2h'") && e.contains("HH:MM:SS"), "{e}");
    }

    #[test]
    fn memory_sizes() {
        for ok in ["4G", "4000M", "4000", "512k", "1T", "0"] {
            assert!(check_mem(ok).is_ok(), "{ok}");
        }
        for bad in ["", "G", "4 G", "4.5G", "-4G", "4X", "4GiB"] {
            assert!(check_mem(bad).is_err(), "{bad}");
        }
        let e = check_mem("4GB").unwrap_err().to_string();
        assert!(e.contains("write 4G without the B"), "{e}");
    }

    #[test]
    fn names_reject_spaces_and_shell_characters() {
        for bad in ["a b", "a;b", "$(x)", "a'b", "", "a\nb", "a,b"] {
            let e = batch_script(&SlurmOptions {
                account: Some(bad.into()),
                ..options()
            })
            .unwrap_err()
            .to_string();
            assert!(e.starts_with("--account"), "{bad}: {e}");
        }
        assert!(batch_script(&SlurmOptions {
            partition: Some("short,long".into()),
            ..options()
        })
        .is_ok());
        for bad in ["short,", "a b", "x|y"] {
            let e = batch_script(&SlurmOptions {
                partition: Some(bad.into()),
                ..options()
            })
            .unwrap_err()
            .to_string();
            assert!(
                e.contains("--partition") && e.contains("between partitions"),
                "{e}"
            );
        }
        let e = batch_script(&SlurmOptions {
            job_name: "my job".into(),
            ..options()
        })
        .unwrap_err();
        assert!(e.to_string().starts_with("--job-name 'my job'"), "{e}");
    }

    #[test]
    fn paths_must_be_absolute_and_plain_text() {
        let e = batch_script(&SlurmOptions {
            study: "studies/demo.toml".into(),
            ..options()
        })
        .unwrap_err();
        assert!(
            matches!(e, SlurmError::RelativePath { what: "study", .. }),
            "{e}"
        );
        let e = batch_script(&SlurmOptions {
            out: "/tmp/a\nCLOSURE_BUDGET_SHARD\n".into(),
            ..options()
        })
        .unwrap_err();
        assert!(e.to_string().contains("line break"), "{e}");
    }

    #[test]
    fn default_job_name_is_clean() {
        assert_eq!(
            default_job_name(Path::new("/x/demo-quick.toml")),
            "cb-demo-quick"
        );
        assert_eq!(
            default_job_name(Path::new("my study$.toml")),
            "cb-my-study-"
        );
    }

    #[test]
    fn resolving_needs_existing_study_and_binary() {
        let dir = tempfile::tempdir().unwrap();
        let study = dir.path().join("s t.toml");
        std::fs::write(&study, "").unwrap();
        let o = SlurmOptions {
            study: study.clone(),
            out: "relative/out".into(),
            binary: study.clone(),
            ..options()
        }
        .resolved()
        .unwrap();
        assert!(o.out.is_absolute() && o.out.ends_with("relative/out"));
        assert_eq!(o.study, std::fs::canonicalize(&study).unwrap());
        let e = SlurmOptions {
            study: dir.path().join("missing.toml"),
            ..options()
        }
        .resolved()
        .unwrap_err();
        assert!(e.to_string().contains("cannot find the study file"), "{e}");
        let e = SlurmOptions {
            study,
            binary: dir.path().join("nope"),
            ..options()
        }
        .resolved()
        .unwrap_err();
        assert!(e.to_string().contains("--binary"), "{e}");
    }
}
