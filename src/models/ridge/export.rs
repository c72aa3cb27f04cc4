//! A solved readout written out for an independent check: the rows of its least-squares
//! problem, what each row predicts, its penalty as applied and its weights, beside the
//! standardisation of the inputs. The families' `export` functions write these with their own
//! feature definition (`esn::export`, `ngrc::export`), so another implementation can rebuild
//! the features from the training data alone and solve the same problem.

use super::{Penalty, RidgeSelection};
use crate::atomic::write_atomic;
use crate::data::{write_npy, DataError};
use crate::models::{FitSummary, RidgeScaling};
use ndarray::{Array1, ArrayView2};
use serde::Serialize;
use std::path::Path;

/// Version of the layout of an exported model (the manifest `model.json` and its `.npy` files).
pub const EXPORT_SCHEMA: &str = "closure-budget-model-parts-1";

/// Name of an exported model's manifest in its folder.
pub const MANIFEST: &str = "model.json";

/// How a readout was fitted, as its manifest records it.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct ReadoutFit {
    /// Samples n of the training prefix (rows 0 … n − 1 of the training data).
    pub samples: usize,
    /// Rows of the least-squares problem: the pairs t = `first-pair`, …, n − 2.
    pub training_pairs: usize,
    /// The sample t of the first pair.
    pub first_pair: usize,
    /// What the row of pair t predicts.
    pub target: &'static str,
    /// `ridge` as set.
    pub ridge: f64,
    /// `ridge-scaling` as set.
    pub ridge_scaling: RidgeScaling,
    /// `ridge-selection` as set.
    pub ridge_selection: RidgeSelection,
    /// The penalty λ the solve used: (G + λI)W = B, G = Σφφᵀ and B = Σφyᵀ over the rows.
    pub lambda: Option<f64>,
    /// Which features λ applies to.
    pub penalised: &'static str,
    /// The weights, outputs × features (`readout.npy`).
    pub weights: &'static str,
}

impl ReadoutFit {
    /// The record of the fit summarised by `summary`, whose penalty was set by `penalty` and
    /// whose first pair is at sample `first_pair`.
    pub fn new(summary: &FitSummary, penalty: &Penalty, first_pair: usize) -> Self {
        Self {
            samples: summary.n,
            training_pairs: summary.training_pairs,
            first_pair,
            target: "u(t + 1) − u(t), u the standardised state",
            ridge: penalty.ridge,
            ridge_scaling: penalty.scaling,
            ridge_selection: penalty.selection,
            lambda: summary.ridge_penalty,
            penalised: "every feature, the constant included",
            weights: "readout.npy",
        }
    }
}

/// Writes `readout.npy` (the weights, `outputs` rows), `mean.npy` and `scale.npy` (the
/// standardisation u = (x − mean) / scale) into `dir`.
pub(crate) fn write_readout(
    dir: &Path,
    weights: &[f64],
    outputs: usize,
    mean: &[f64],
    scale: &[f64],
) -> Result<(), DataError> {
    let features = weights.len() / outputs.max(1);
    let w = ArrayView2::from_shape((outputs, features), weights).expect("outputs × features");
    write_npy(&dir.join("readout.npy"), &w)?;
    write_npy(&dir.join("mean.npy"), &Array1::from(mean.to_vec()))?;
    write_npy(&dir.join("scale.npy"), &Array1::from(scale.to_vec()))
}

/// Writes `manifest` as the pretty-printed `model.json` of `dir`, creating `dir` first.
pub(crate) fn write_manifest<M: Serialize>(dir: &Path, manifest: &M) -> Result<(), DataError> {
    let path = dir.join(MANIFEST);
    let text = serde_json::to_string_pretty(manifest).expect("manifests serialise");
    write_atomic(&path, text.as_bytes()).map_err(|source| DataError::Write { path, source })
}

/// Creates `dir` (and its parents) for an exported model.
pub(crate) fn create_dir(dir: &Path) -> Result<(), DataError> {
    std::fs::create_dir_all(dir).map_err(|source| DataError::Write {
        path: dir.to_path_buf(),
        source,
    })
}
