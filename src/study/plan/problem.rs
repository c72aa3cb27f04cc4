//! The problems of a study file, collected while it is checked so that `check` (and `run`, before
//! any work) reports every one of them at once, each on one line: the key as written, the bad
//! value, what is allowed and what to do.

use crate::models::ModelError;
use crate::study::StudyError;
use std::path::Path;

/// One problem of a study file.
#[derive(Debug, Clone, PartialEq)]
pub struct Problem {
    /// The key as written, e.g. `skill.threshold` or `model "esn-big".esn.washout` (a model by
    /// its name; by its position, `model[2]`, only when the name itself is bad).
    pub key: String,
    pub kind: ProblemKind,
}

/// What is wrong with a key.
#[derive(Debug, Clone, PartialEq)]
pub enum ProblemKind {
    /// A value outside what is allowed; `allowed` also says what to do where that is not plain.
    Value { value: String, allowed: String },
    /// Anything else, in words that say what to do.
    Message(String),
}

impl std::fmt::Display for Problem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match &self.kind {
            ProblemKind::Value { value, allowed } => {
                write!(f, "`{}` = {value} is invalid; allowed: {allowed}", self.key)
            }
            ProblemKind::Message(m) => write!(f, "`{}`: {m}", self.key),
        }
    }
}

/// The message of [`StudyError::Problems`]: one problem on the same line as the file, several
/// one per line.
pub(crate) fn problems_text(path: &Path, problems: &[Problem]) -> String {
    match problems {
        [one] => format!("study file {}: {one}", path.display()),
        _ => {
            let mut s = format!(
                "study file {} has {} problems; fix them and run `check` again:",
                path.display(),
                problems.len()
            );
            for p in problems {
                s.push_str("\n  - ");
                s.push_str(&p.to_string());
            }
            s
        }
    }
}

/// The problems found so far.
#[derive(Debug, Default)]
pub(crate) struct Checks {
    problems: Vec<Problem>,
}

impl Checks {
    /// `key` = `value` is not allowed; `allowed` says what is.
    pub(crate) fn invalid(
        &mut self,
        key: impl Into<String>,
        value: impl Into<String>,
        allowed: impl Into<String>,
    ) {
        self.problems.push(Problem {
            key: key.into(),
            kind: ProblemKind::Value {
                value: value.into(),
                allowed: allowed.into(),
            },
        });
    }

    /// A problem of `key` in words.
    pub(crate) fn message(&mut self, key: impl Into<String>, message: impl Into<String>) {
        self.problems.push(Problem {
            key: key.into(),
            kind: ProblemKind::Message(message.into()),
        });
    }

    /// `v` when it is a positive number, else a problem of `key`.
    pub(crate) fn positive(&mut self, key: &str, v: f64) -> Option<f64> {
        if v.is_finite() && v > 0.0 {
            Some(v)
        } else {
            self.invalid(key, v.to_string(), "a positive number");
            None
        }
    }

    /// The settings a model family refused, under `prefix` (e.g. `model "esn-big".esn`): a
    /// setting out of range under its own key, anything else in words.
    pub(crate) fn settings(&mut self, prefix: &str, e: ModelError) {
        for e in e.into_settings() {
            match e {
                ModelError::InvalidParameter {
                    key,
                    value,
                    allowed,
                } => self.invalid(format!("{prefix}.{key}"), value, allowed),
                e => self.message(prefix, e.to_string()),
            }
        }
    }

    /// How many problems were found.
    pub(crate) fn count(&self) -> usize {
        self.problems.len()
    }

    /// Whether no problem was found.
    pub(crate) fn is_empty(&self) -> bool {
        self.problems.is_empty()
    }

    /// The problems as the error of the study file at `path`.
    pub(crate) fn into_error(self, path: &Path) -> StudyError {
        StudyError::Problems {
            path: path.to_path_buf(),
            problems: self.problems,
        }
    }
}

/// Serde's and TOML's words for the tool's value types in the words of a study file: "expected
/// usize" → "expected a whole number ≥ 0", "expected f64" → "expected a number", "struct
/// SimulateSection" → "a table".
pub fn plain_words(message: &str) -> String {
    const TYPES: [(&str, &str); 12] = [
        ("usize", "a whole number ≥ 0"),
        ("u64", "a whole number ≥ 0"),
        ("u32", "a whole number ≥ 0"),
        ("u16", "a whole number ≥ 0"),
        ("u8", "a whole number ≥ 0"),
        ("i64", "a whole number"),
        ("i32", "a whole number"),
        ("f64", "a number"),
        ("f32", "a number"),
        ("bool", "true or false"),
        ("a sequence", "a list [..]"),
        ("a map", "a table"),
    ];
    let mut out = String::with_capacity(message.len());
    let mut rest = message;
    while let Some(at) = rest.find("expected ") {
        let (head, tail) = rest.split_at(at + "expected ".len());
        out.push_str(head);
        rest = tail;
        // "struct Name", "internally tagged enum Name", "enum Name", "tuple struct Name".
        let mut replaced = false;
        for prefix in [
            "internally tagged enum ",
            "tuple struct ",
            "struct variant ",
            "struct ",
            "enum ",
        ] {
            if let Some(after) = rest.strip_prefix(prefix) {
                let name_len = after
                    .find(|c: char| !(c.is_ascii_alphanumeric() || c == '_'))
                    .unwrap_or(after.len());
                out.push_str(if prefix.contains("enum") {
                    "one of the allowed values"
                } else {
                    "a table"
                });
                rest = &after[name_len..];
                replaced = true;
                break;
            }
        }
        if replaced {
            continue;
        }
        for (ty, words) in TYPES {
            if let Some(after) = rest.strip_prefix(ty) {
                if !after.starts_with(|c: char| c.is_ascii_alphanumeric() || c == '_') {
                    out.push_str(words);
                    rest = after;
                    break;
                }
            }
        }
    }
    out.push_str(rest);
    // serde's words for the file's keys and values.
    for (from, to) in [
        ("unknown variant ", "unknown value "),
        ("unknown field ", "unknown key "),
        ("missing field ", "missing key or table "),
    ] {
        out = out.replace(from, to);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rust_type_names_become_plain_words() {
        assert_eq!(
            plain_words("invalid type: string \"long\", expected f64"),
            "invalid type: string \"long\", expected a number"
        );
        assert_eq!(
            plain_words("invalid value: integer `-3`, expected usize"),
            "invalid value: integer `-3`, expected a whole number ≥ 0"
        );
        assert_eq!(
            plain_words("invalid type: integer `3`, expected struct SimulateSection here"),
            "invalid type: integer `3`, expected a table here"
        );
        assert_eq!(
            plain_words("invalid type: string \"x\", expected internally tagged enum SystemSpec"),
            "invalid type: string \"x\", expected one of the allowed values"
        );
        assert_eq!(
            plain_words("expected a sequence; expected usize"),
            "expected a list [..]; expected a whole number ≥ 0"
        );
        // Words that only begin like a type name stay.
        assert_eq!(plain_words("expected u8x"), "expected u8x");
        assert_eq!(
            plain_words("unknown variant `forcast`, expected one of `fixed`, `gcv`, `forecast`"),
            "unknown value `forcast`, expected one of `fixed`, `gcv`, `forecast`"
        );
        assert_eq!(
            plain_words("missing field `plan`"),
            "missing key or table `plan`"
        );
    }

    #[test]
    fn one_problem_on_one_line_several_one_per_line() {
        let mut c = Checks::default();
        c.invalid("skill.threshold", "1e9", "greater than 0 and at most 10");
        let one = problems_text(Path::new("s.toml"), &c.problems);
        assert_eq!(
            one,
            "study file s.toml: `skill.threshold` = 1e9 is invalid; allowed: greater than 0 and at most 10"
        );
        c.message("data.file.path", "cannot read x.csv");
        let two = problems_text(Path::new("s.toml"), &c.problems);
        assert_eq!(
            two,
            "study file s.toml has 2 problems; fix them and run `check` again:\n  - `skill.threshold` = 1e9 is invalid; allowed: greater than 0 and at most 10\n  - `data.file.path`: cannot read x.csv"
        );
    }
}
