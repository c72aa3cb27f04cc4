//! Whose an output folder is: the first run of a study writes the study's identity (the study
//! file's absolute path) into the folder as `study-id.json`; a run of another study is refused
//! there unless it adopts the folder, so two studies never mix or overwrite each other's points.

use super::plan::StudyPlan;
use super::StudyError;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// The identity file's name in the output directory.
pub const STUDY_ID_FILE: &str = "study-id.json";

/// Format version of [`StudyId`].
pub const STUDY_ID_SCHEMA: &str = "closure-budget/study-id/1";

/// The identity of the study that owns an output folder.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct StudyId {
    pub schema: String,
    /// The study file's absolute path (symbolic links resolved).
    pub study_file: String,
}

/// The identity of `plan`: its file's absolute path with links resolved, or the path as given
/// when it cannot be resolved.
pub fn identity(plan: &StudyPlan) -> String {
    std::fs::canonicalize(&plan.source_path)
        .unwrap_or_else(|_| plan.source_path.clone())
        .display()
        .to_string()
}

/// Who owns `out_dir` now.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Owner {
    /// No identity file (a new folder, or one written before identities existed).
    Nobody,
    /// This study.
    This,
    /// Another study, by its identity; allowed only when adopting.
    Other(String),
}

/// Checks that `out_dir` is free or this study's (or that it may be adopted); writes nothing.
pub fn check(out_dir: &Path, plan: &StudyPlan, adopt: bool) -> Result<Owner, StudyError> {
    let path = out_dir.join(STUDY_ID_FILE);
    let me = identity(plan);
    let text = match std::fs::read(&path) {
        Ok(t) => t,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(Owner::Nobody),
        Err(source) => return Err(StudyError::Read { path, source }),
    };
    let id = match serde_json::from_slice::<StudyId>(&text) {
        Ok(id) => id,
        Err(_) if adopt => return Ok(Owner::Other("an unreadable identity".into())),
        Err(e) => {
            return Err(StudyError::OwnerUnreadable {
                path,
                message: e.to_string(),
            })
        }
    };
    if id.study_file == me {
        Ok(Owner::This)
    } else if adopt {
        Ok(Owner::Other(id.study_file))
    } else {
        Err(StudyError::OtherStudy {
            dir: out_dir.to_path_buf(),
            owner: id.study_file,
            study: me,
        })
    }
}

/// Checks ownership as [`check`] does and writes this study's identity into `out_dir`
/// (creating it) when the folder had none or is adopted; returns the previous owner when the
/// folder was adopted from another study.
pub fn claim(out_dir: &Path, plan: &StudyPlan, adopt: bool) -> Result<Option<String>, StudyError> {
    let owner = check(out_dir, plan, adopt)?;
    if owner == Owner::This {
        return Ok(None);
    }
    let id = StudyId {
        schema: STUDY_ID_SCHEMA.into(),
        study_file: identity(plan),
    };
    let mut bytes = serde_json::to_vec_pretty(&id).expect("identity serialises");
    bytes.push(b'\n');
    let path = out_dir.join(STUDY_ID_FILE);
    crate::atomic::write_atomic(&path, &bytes)
        .map_err(|source| StudyError::Write { path, source })?;
    Ok(match owner {
        Owner::Other(previous) => Some(previous),
        _ => None,
    })
}
