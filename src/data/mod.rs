//! Trajectories of state vectors: the in-memory type, its metadata sidecar, readers and writers
//! (`.npy` + JSON sidecar, CSV), content hashing, and the training/test split; and the way from a
//! solver's gridded output to such trajectories:
//!
//! - [`dataset`]: NetCDF-3, NetCDF-4/HDF5 (cargo feature `netcdf4`) and `.npz` files as one
//!   dataset abstraction — variables stacked as state columns, a time dimension, slices, CF
//!   metadata, packing and refusal of gaps, streamed reading in blocks;
//! - [`ensemble`]: several runs of one regime, kept apart (whole runs held out for testing);
//! - [`coarse`]: box-filter coarse-graining of 2-D and 3-D fields;
//! - [`pod`]: snapshot POD with bounded memory, the number of modes from an energy fraction,
//!   projection and reconstruction.

pub mod autocorr;
pub mod coarse;
pub mod dataset;
pub mod ensemble;
mod io;
pub mod pod;
mod split;

pub use io::{
    read_npy, read_trajectory, trajectory_columns, write_npy, write_trajectory, OutputFormats,
};
pub use split::{Split, SplitSpec};

use ndarray::{Array2, ArrayView2};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;
use std::path::PathBuf;

/// Version tag written into every metadata sidecar.
pub const SIDECAR_SCHEMA: &str = "closure-budget/trajectory/1";

/// Errors from reading, writing and splitting trajectory data.
#[derive(Debug, thiserror::Error)]
pub enum DataError {
    #[error("cannot read {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("cannot write {path}: {source}")]
    Write {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path} is not a readable .npy array of float64 with shape {shape}: {reason}")]
    Npy {
        path: PathBuf,
        /// The expected shape, e.g. "(samples, variables)".
        shape: String,
        reason: String,
    },
    #[error("metadata sidecar {path} is invalid: {reason}")]
    Sidecar { path: PathBuf, reason: String },
    #[error("{path}, line {line}: {reason}")]
    Csv {
        path: PathBuf,
        line: u64,
        reason: String,
    },
    #[error("{path}: value at sample {sample}, variable '{variable}' is {value}; data must be finite (remove or repair the sample)")]
    NonFinite {
        path: PathBuf,
        sample: usize,
        variable: String,
        value: f64,
    },
    #[error("{path} has no sampling interval: give `sample-interval` in the study's [data.file] table or provide a JSON sidecar")]
    MissingSampleInterval { path: PathBuf },
    #[error("{path}: unsupported file type '{extension}'; use .npy (with optional JSON sidecar) or .csv")]
    UnsupportedFormat { path: PathBuf, extension: String },
    #[error("{path} holds {samples} samples of {variables} variables; at least 2 samples and 1 variable are needed")]
    TooSmall {
        path: PathBuf,
        samples: usize,
        variables: usize,
    },
    #[error(
        "the data has {available} samples but the split needs {needed}: {detail}; \
         supply more data, or reduce the subset sizes, test initial conditions, gap, warm-up or maximum lead"
    )]
    SplitTooShort {
        available: usize,
        needed: usize,
        detail: String,
    },
}

/// Metadata stored beside a trajectory as a JSON sidecar.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct TrajectoryMeta {
    /// Always [`SIDECAR_SCHEMA`].
    pub schema: String,
    /// Built-in system label, or `null` for external data.
    pub system: Option<String>,
    /// System parameters (e.g. forcing, Reynolds number).
    pub parameters: BTreeMap<String, f64>,
    /// Integrator time step in model time units, when known.
    pub dt: Option<f64>,
    /// Time between saved samples in model time units.
    pub sample_interval: f64,
    /// Discarded spin-up in model time units, when known.
    pub spin_up: Option<f64>,
    /// Names of the state variables (columns of the main array).
    pub variables: Vec<String>,
    /// Names of the subgrid coupling columns (the `.subgrid.npy` array), if any.
    #[serde(default)]
    pub subgrid_variables: Vec<String>,
    /// Seed of the initial condition, for simulated data.
    pub seed: Option<u64>,
    /// Version of the tool that wrote the data.
    pub tool_version: String,
}

/// A time series of state vectors sampled at a fixed interval.
#[derive(Debug, Clone)]
pub struct Trajectory {
    /// Samples × variables.
    pub values: Array2<f64>,
    /// Subgrid coupling term acting on each resolved variable (samples × variables), when known.
    pub subgrid: Option<Array2<f64>>,
    pub meta: TrajectoryMeta,
}

impl Trajectory {
    /// Number of saved samples.
    pub fn samples(&self) -> usize {
        self.values.nrows()
    }

    /// Number of state variables.
    pub fn dim(&self) -> usize {
        self.values.ncols()
    }

    /// Time between samples in model time units.
    pub fn sample_interval(&self) -> f64 {
        self.meta.sample_interval
    }

    /// SHA-256 of the state array (shape, then values as little-endian f64), hex encoded.
    pub fn content_hash(&self) -> String {
        hash_array(self.values.view())
    }
}

/// SHA-256 of an array's shape and values (little-endian f64), hex encoded.
pub fn hash_array(a: ArrayView2<f64>) -> String {
    let mut h = Sha256::new();
    h.update((a.nrows() as u64).to_le_bytes());
    h.update((a.ncols() as u64).to_le_bytes());
    for v in a.iter() {
        h.update(v.to_le_bytes());
    }
    hex(&h.finalize())
}

/// SHA-256 of a byte string, hex encoded.
pub fn hash_bytes(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// Per-variable mean and standard deviation (population, divisor n) of the rows of `a`.
pub fn column_stats(a: ArrayView2<f64>) -> (Vec<f64>, Vec<f64>) {
    let n = a.nrows().max(1) as f64;
    let d = a.ncols();
    let mut mean = vec![0.0; d];
    for row in a.rows() {
        for (m, v) in mean.iter_mut().zip(row.iter()) {
            *m += v;
        }
    }
    mean.iter_mut().for_each(|m| *m /= n);
    let mut var = vec![0.0; d];
    for row in a.rows() {
        for ((s, v), m) in var.iter_mut().zip(row.iter()).zip(&mean) {
            *s += (v - m) * (v - m);
        }
    }
    let sd = var.iter().map(|s| (s / n).sqrt()).collect();
    (mean, sd)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn column_stats_by_hand() {
        let a = array![[1.0, 10.0], [3.0, 10.0]];
        let (m, s) = column_stats(a.view());
        assert_eq!(m, vec![2.0, 10.0]);
        assert_eq!(s, vec![1.0, 0.0]);
    }

    #[test]
    fn hash_depends_on_shape_and_values() {
        let a = array![[1.0, 2.0], [3.0, 4.0]];
        let b = array![[1.0, 2.0, 3.0, 4.0]];
        let c = array![[1.0, 2.0], [3.0, 4.5]];
        assert_ne!(hash_array(a.view()), hash_array(b.view()));
        assert_ne!(hash_array(a.view()), hash_array(c.view()));
        assert_eq!(hash_array(a.view()), hash_array(a.clone().view()));
    }
}
