//! Several runs of one regime (an ensemble: the same system from different initial conditions),
//! kept apart so that training windows and warm-ups stay inside one run and whole runs can be
//! held out for testing.
//!
//! Runs come from one file per run ([`read_runs`]) or from one file whose member dimension
//! (e.g. `run`, CF's `realization`) indexes the runs ([`read_members`]).

use super::dataset::{Dataset, DatasetError, Selection, SelectionMeta, Slice};
use super::{hash_bytes, Trajectory};
use std::path::{Path, PathBuf};

/// Errors from assembling an ensemble.
#[derive(Debug, thiserror::Error)]
pub enum EnsembleError {
    #[error("an ensemble needs at least one run")]
    Empty,
    #[error("run '{run}' has variables that differ from run '{first}' ({detail}); every run must hold the same variables")]
    Variables {
        run: String,
        first: String,
        detail: String,
    },
    #[error("run '{run}' is sampled every {interval} time units, run '{first}' every {first_interval}; every run must share the sampling interval (relative tolerance 1e-9)")]
    Interval {
        run: String,
        interval: f64,
        first: String,
        first_interval: f64,
    },
    #[error("two runs are named '{0}'; give each run its own name")]
    DuplicateName(String),
    #[error("cannot hold out {held_out} of {runs} runs: at least one run must remain for training and one be held out")]
    HoldOut { held_out: usize, runs: usize },
    #[error("{path}: dimension '{dim}' (the ensemble members) is not among the selected variables' dimensions")]
    NoMemberDimension { path: PathBuf, dim: String },
    #[error(transparent)]
    Dataset(#[from] DatasetError),
}

/// One run of an ensemble.
#[derive(Debug, Clone)]
pub struct Run {
    /// A label: the file stem, or `stem[member]` for members of one file.
    pub name: String,
    pub trajectory: Trajectory,
    /// [`Trajectory::content_hash`] of the run.
    pub hash: String,
}

/// Runs of one regime with the same variables and sampling interval, in a fixed order.
#[derive(Debug, Clone)]
pub struct Ensemble {
    runs: Vec<Run>,
}

impl Ensemble {
    /// Checks that the runs agree in variables and sampling interval and hashes each.
    pub fn new(runs: Vec<(String, Trajectory)>) -> Result<Ensemble, EnsembleError> {
        let Some((first_name, first)) = runs.first() else {
            return Err(EnsembleError::Empty);
        };
        let (first_name, vars, dt) = (
            first_name.clone(),
            first.meta.variables.clone(),
            first.sample_interval(),
        );
        let mut out: Vec<Run> = Vec::with_capacity(runs.len());
        for (name, t) in runs {
            if out.iter().any(|r| r.name == name) {
                return Err(EnsembleError::DuplicateName(name));
            }
            if t.meta.variables != vars {
                let detail = if t.meta.variables.len() != vars.len() {
                    format!(
                        "{} columns instead of {}",
                        t.meta.variables.len(),
                        vars.len()
                    )
                } else {
                    let k = t
                        .meta
                        .variables
                        .iter()
                        .zip(&vars)
                        .position(|(a, b)| a != b)
                        .expect("lists differ");
                    format!(
                        "column {k} is '{}' instead of '{}'",
                        t.meta.variables[k], vars[k]
                    )
                };
                return Err(EnsembleError::Variables {
                    run: name,
                    first: first_name,
                    detail,
                });
            }
            let interval = t.sample_interval();
            if (interval - dt).abs() > 1e-9 * dt.abs() {
                return Err(EnsembleError::Interval {
                    run: name,
                    interval,
                    first: first_name,
                    first_interval: dt,
                });
            }
            let hash = t.content_hash();
            out.push(Run {
                name,
                trajectory: t,
                hash,
            });
        }
        Ok(Ensemble { runs: out })
    }

    pub fn runs(&self) -> &[Run] {
        &self.runs
    }

    pub fn len(&self) -> usize {
        self.runs.len()
    }

    pub fn is_empty(&self) -> bool {
        self.runs.is_empty()
    }

    /// Column names shared by every run.
    pub fn variables(&self) -> &[String] {
        &self.runs[0].trajectory.meta.variables
    }

    /// Number of state columns.
    pub fn dim(&self) -> usize {
        self.runs[0].trajectory.dim()
    }

    /// Sampling interval shared by every run.
    pub fn sample_interval(&self) -> f64 {
        self.runs[0].trajectory.sample_interval()
    }

    /// Samples over all runs.
    pub fn total_samples(&self) -> usize {
        self.runs.iter().map(|r| r.trajectory.samples()).sum()
    }

    /// SHA-256 over the runs' names and content hashes in order, hex encoded.
    pub fn content_hash(&self) -> String {
        let mut s = String::new();
        for r in &self.runs {
            s.push_str(&r.name);
            s.push('\n');
            s.push_str(&r.hash);
            s.push('\n');
        }
        hash_bytes(s.as_bytes())
    }

    /// Splits into (training, held out): the last `held_out` runs are held out whole.
    pub fn hold_out(&self, held_out: usize) -> Result<(Ensemble, Ensemble), EnsembleError> {
        if held_out == 0 || held_out >= self.runs.len() {
            return Err(EnsembleError::HoldOut {
                held_out,
                runs: self.runs.len(),
            });
        }
        let k = self.runs.len() - held_out;
        Ok((
            Ensemble {
                runs: self.runs[..k].to_vec(),
            },
            Ensemble {
                runs: self.runs[k..].to_vec(),
            },
        ))
    }

    /// Start indices of windows of `len` samples, every `step` samples, that lie wholly inside
    /// one run: `(run, first sample)` pairs in run order. Warm-up and lead time belong in `len`.
    pub fn windows(&self, len: usize, step: usize) -> Vec<(usize, usize)> {
        let step = step.max(1);
        let mut out = Vec::new();
        for (r, run) in self.runs.iter().enumerate() {
            let n = run.trajectory.samples();
            if len == 0 || len > n {
                continue;
            }
            out.extend((0..=n - len).step_by(step).map(|s| (r, s)));
        }
        out
    }
}

/// Reads one run per file with the same selection; runs are named by file stem (or the whole
/// file name when stems repeat). Returns the ensemble and each file's metadata.
pub fn read_runs(
    paths: &[PathBuf],
    selection: &Selection,
    sample_interval: Option<f64>,
) -> Result<(Ensemble, Vec<SelectionMeta>), EnsembleError> {
    let stem = |p: &Path| {
        p.file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| p.display().to_string())
    };
    let stems: Vec<String> = paths.iter().map(|p| stem(p)).collect();
    let unique = {
        let mut s = stems.clone();
        s.sort();
        s.dedup();
        s.len() == stems.len()
    };
    let mut runs = Vec::with_capacity(paths.len());
    let mut metas = Vec::with_capacity(paths.len());
    for (p, s) in paths.iter().zip(stems) {
        let snap = Dataset::open(p)?.read(selection)?;
        metas.push(snap.meta.clone());
        let name = if unique { s } else { p.display().to_string() };
        runs.push((name, snap.into_trajectory(sample_interval)?));
    }
    Ok((Ensemble::new(runs)?, metas))
}

/// Reads each index of `member_dim` of one file as its own run (the dimension is dropped from
/// the state). Runs are named `stem[k]`.
pub fn read_members(
    path: &Path,
    selection: &Selection,
    member_dim: &str,
    sample_interval: Option<f64>,
) -> Result<(Ensemble, Vec<SelectionMeta>), EnsembleError> {
    let mut ds = Dataset::open(path)?;
    let plan = ds.plan(selection)?;
    let len = plan
        .fields()
        .iter()
        .find_map(|f| {
            f.dims
                .iter()
                .position(|d| d == member_dim)
                .map(|i| f.spans[i])
        })
        .ok_or_else(|| EnsembleError::NoMemberDimension {
            path: path.to_path_buf(),
            dim: member_dim.to_string(),
        })?;
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    let mut runs = Vec::new();
    let mut metas = Vec::new();
    for k in 0..len.count {
        let mut sel = selection.clone();
        sel.slices
            .insert(member_dim.to_string(), Slice::index(len.at(k)));
        let snap = ds.read(&sel)?;
        metas.push(snap.meta.clone());
        runs.push((
            format!("{stem}[{}]", len.at(k)),
            snap.into_trajectory(sample_interval)?,
        ));
    }
    Ok((Ensemble::new(runs)?, metas))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::{TrajectoryMeta, SIDECAR_SCHEMA};
    use ndarray::Array2;
    use std::collections::BTreeMap;

    fn traj(n: usize, vars: &[&str], dt: f64, seed: f64) -> Trajectory {
        Trajectory {
            values: Array2::from_shape_fn((n, vars.len()), |(i, j)| {
                seed + i as f64 + 0.1 * j as f64
            }),
            subgrid: None,
            meta: TrajectoryMeta {
                schema: SIDECAR_SCHEMA.into(),
                system: None,
                parameters: BTreeMap::new(),
                dt: None,
                sample_interval: dt,
                spin_up: None,
                variables: vars.iter().map(|s| s.to_string()).collect(),
                subgrid_variables: vec![],
                seed: None,
                tool_version: String::new(),
            },
        }
    }

    #[test]
    fn runs_must_agree_and_hold_out_keeps_whole_runs() {
        let e = Ensemble::new(vec![
            ("a".into(), traj(10, &["x", "y"], 0.5, 0.0)),
            ("b".into(), traj(8, &["x", "y"], 0.5, 1.0)),
            ("c".into(), traj(6, &["x", "y"], 0.5, 2.0)),
        ])
        .unwrap();
        assert_eq!(e.total_samples(), 24);
        assert_ne!(e.runs()[0].hash, e.runs()[1].hash);
        let (train, test) = e.hold_out(1).unwrap();
        assert_eq!(train.len(), 2);
        assert_eq!(test.runs()[0].name, "c");
        assert_ne!(train.content_hash(), e.content_hash());
        assert!(e.hold_out(3).is_err() && e.hold_out(0).is_err());
        // Windows of 7 samples every 2: run a (10 samples) starts 0, 2; run b (8): 0; c: none.
        assert_eq!(e.windows(7, 2), vec![(0, 0), (0, 2), (1, 0)]);
        let err = Ensemble::new(vec![
            ("a".into(), traj(10, &["x", "y"], 0.5, 0.0)),
            ("b".into(), traj(10, &["x", "z"], 0.5, 0.0)),
        ])
        .unwrap_err()
        .to_string();
        assert!(
            err.contains("'b'") && err.contains("column 1 is 'z'"),
            "{err}"
        );
        let err = Ensemble::new(vec![
            ("a".into(), traj(10, &["x"], 0.5, 0.0)),
            ("b".into(), traj(10, &["x"], 0.25, 0.0)),
        ])
        .unwrap_err()
        .to_string();
        assert!(
            err.contains("0.25") && err.contains("sampling interval"),
            "{err}"
        );
        assert!(Ensemble::new(vec![]).is_err());
    }
}
