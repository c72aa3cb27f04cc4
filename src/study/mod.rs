//! Studies: the study file schema, its validation into a plan, the results contract, the
//! records store, and the runner that turns a plan into results stage by stage.
//!
//! The runner's stages, in order: `prepare` (data, split, skill, cost, coupling) →
//! [`points`] (keys, store, training and scoring through [`train`] and `score`; split into
//! [`shards`]) → [`analysis`] (curves → estimates) → transfer (a new regime) → `outcome`
//! (document, tables of runs, history). [`status`] reads the stores; [`measured`] takes skill
//! measured outside the tool straight to [`analysis`].

pub mod analysis;
pub mod history;
pub mod keys;
pub mod measured;
mod outcome;
pub mod own_data;
pub mod owner;
pub mod plan;
pub mod points;
mod prepare;
mod progress;
pub mod records;
pub mod results;
pub mod runner;
pub mod schema;
mod score;
pub mod seeds;
pub mod shards;
pub mod status;
pub mod train;
mod transfer;

pub use plan::{load_plan, StudyPlan};
pub use results::StudyResults;
pub use runner::{
    merge_study, prune_study, run_shard, run_study, study_status, PruneSummary, RunOptions,
};
pub use shards::Shard;

use std::path::PathBuf;

impl From<records::StoreError> for StudyError {
    fn from(e: records::StoreError) -> Self {
        StudyError::Store(Box::new(e))
    }
}

/// Errors from reading, checking and running a study.
#[derive(Debug, thiserror::Error)]
pub enum StudyError {
    #[error("cannot read study file {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("study file {path} is not valid TOML for a study: {message}")]
    Parse { path: PathBuf, message: String },
    /// Every problem `check` found in a study file, one per line.
    #[error("{}", plan::problem::problems_text(path, problems))]
    Problems {
        path: PathBuf,
        problems: Vec<plan::Problem>,
    },
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
    #[error(transparent)]
    OwnData(#[from] own_data::OwnDataError),
    #[error("simulating the pilot data failed: {0}")]
    System(#[from] crate::systems::SystemError),
    #[error("model '{model}', replicate {replicate}: {source}")]
    Model {
        model: String,
        replicate: usize,
        source: crate::models::ModelError,
    },
    #[error("cost inputs: {0}")]
    Cost(#[from] crate::cost::CostError),
    #[error("variable '{variable}' is constant over {region}; it carries no information and breaks the normalised error: drop it from the data")]
    ConstantVariable {
        variable: String,
        region: &'static str,
    },
    #[error("cannot write {path}: {source}")]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("closure models need {need}; {found}")]
    ClosureData { need: String, found: String },
    #[error("new regime ([transfer]): {0}")]
    NewRegime(Box<StudyError>),
    #[error("the new regime's data have {target} resolved variables but the pilot's have {pilot}; a model transfers between regimes of one system")]
    TransferMismatch { pilot: usize, target: usize },
    #[error("stopped: {stored} point{} computed in this run {} stored; {remaining} still to compute — run the same command again to resume", if *.stored == 1 { "" } else { "s" }, if *.stored == 1 { "is" } else { "are" })]
    Interrupted { stored: usize, remaining: usize },
    #[error("{missing} point{} of the study {} in no store (per model: {detail}); run the missing shards (or `run` without --shard) and merge again", if *.missing == 1 { "" } else { "s" }, if *.missing == 1 { "is" } else { "are" })]
    Gaps { missing: usize, detail: String },
    #[error("model '{model}', n = {n}, replicate {replicate} was stored twice with different results, in {} and in {}: the stores come from different builds or data; remove the stale one and merge again", first.display(), second.display())]
    Conflict {
        model: String,
        n: usize,
        replicate: usize,
        first: PathBuf,
        second: PathBuf,
    },
    #[error("{failed} point{} of the user's training command failed (the other points are stored; a rerun retries only these):\n{detail}", if *.failed == 1 { "" } else { "s" })]
    CommandPoints { failed: usize, detail: String },
    #[error(transparent)]
    Store(Box<records::StoreError>),
    #[error("{} holds the points of another study ({owner}); give this study ({study}) its own folder with --out DIR, or take the folder over with --adopt (every point stored there is kept)", dir.display())]
    OtherStudy {
        dir: PathBuf,
        owner: String,
        study: String,
    },
    #[error("{} is not a study identity ({message}); remove it, or run with --adopt to write this study's", path.display())]
    OwnerUnreadable { path: PathBuf, message: String },
    #[error("the shard store {} is in use by a running shard; wait for the shards to finish, then run `closure-budget merge` (or `run`) again", path.display())]
    ShardRunning { path: PathBuf },
    #[error("cannot start {threads} worker threads: {message}")]
    Threads { threads: usize, message: String },
}
