//! Studies: the study file schema, its validation into a plan, the results contract, the
//! records store, the runner that turns a plan into results, and the protocol that runs the
//! user's own training script as a model.

pub mod command;
pub mod measured;
pub mod plan;
pub mod records;
pub mod results;
pub mod runner;
pub mod schema;
pub mod train;
mod transfer;

pub use plan::{load_plan, StudyPlan};
pub use runner::{run_study, RunOptions};

use std::path::PathBuf;

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
    #[error("study file {path}: `{key}` = {value} is invalid; allowed: {allowed}")]
    Invalid {
        path: PathBuf,
        key: String,
        value: String,
        allowed: String,
    },
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
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
    #[error("variable '{variable}' is constant over the training pool; it carries no information and breaks the normalised error: drop it from the data")]
    ConstantVariable { variable: String },
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
    #[error("cannot start {threads} worker threads: {message}")]
    Threads { threads: usize, message: String },
}
