//! The user's own gridded simulation output as a study's pilot data: NetCDF or `.npz` files of
//! one or several runs, read through a selection, reduced (coarse-graining, then POD fitted on
//! the training pool only), and laid out for the study engine; the checks that open every file
//! before any work and report all problems at once; and what the data contract records of it
//! ([`OwnDataInfo`]).
//!
//! Keys of `[data.file]` for fields (a `.npy`/`.csv` `path` alone stays a plain trajectory):
//!
//! | key | meaning |
//! |---|---|
//! | `path` or `runs` | one file (one run, or every run along `member-dimension`), or one file per run |
//! | `member-dimension` | the dimension of `path` that indexes the runs |
//! | `variables` | variables stacked as state columns, each field flattened in C order |
//! | `time` | the time dimension (default: the unlimited one, then one named `time`) |
//! | `slice` | `{ dim = [start, stop, stride] }` per dimension, the time dimension included |
//! | `sample-interval` | needed unless the selected time coordinate is evenly spaced |
//! | `reduce` | `{ coarse-grain = [f₁, f₂], pod = { energy = 0.99 } }` or `pod = { modes = r }` |
//! | `test` | `{ held-out-runs = k }`: test initial conditions from the last k runs |
//!
//! **Layout.** The engine works on one array whose held-out test region comes first and whose
//! training pool follows (see [`crate::data::Split`]). Without held-out runs that array is the
//! first run, split as a single trajectory is. With `held-out-runs = k` it is the k held-out
//! runs one after another, then the first training run: test initial conditions are spread
//! round-robin over the held-out runs and each one's warm-up and forecast window lies inside its
//! own run, and the training pool is the whole first training run. Training windows and warm-ups
//! never cross a run boundary because the model layer trains on one contiguous pool: the largest
//! subset (with the replicate windows) must fit in the first training run, and further training
//! runs are read, checked and hashed but not trained on (the report says so).
//!
//! **Reduction.** Coarse-graining first (block means, [`crate::data::coarse`]), then POD
//! ([`crate::data::pod`]) fitted on the training pool only — never on held-out runs or the test
//! region; models train and forecast on the POD coefficients. The POD modes are orthonormal in
//! the centred, per-variable scaled space, so for a truth snapshot z = Φa + r (r outside the
//! kept modes) and a forecast ẑ = Φâ, ‖z − ẑ‖² = ‖a − â‖² + ‖r‖²: skill is measured on the
//! reconstructed field by adding the truth's unresolved energy ‖r‖² at each lead
//! ([`crate::skill::Unresolved`]). The valid time of a perfect reduced model (truncation error
//! alone) is the reconstruction floor.

use super::plan::problem::Checks;
use super::plan::Timing;
use super::schema::FileSection;
use super::StudyError;
use crate::data::coarse::{coarse_grain_snapshots, coarse_layout, CoarseError, CoarseGrain};
use crate::data::dataset::{Dataset, DatasetError, FieldLayout, Selection, Slice, Snapshots};
use crate::data::pod::{groups_of, InMemory, Pod, PodError, PodSpec};
use crate::data::{
    column_stats, hash_array, Split, SplitSpec, Trajectory, TrajectoryMeta, SIDECAR_SCHEMA,
};
use crate::skill::{SkillSpec, SkillSummary, Unresolved};
use ndarray::{s, Array2, ArrayView2, Axis};
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use std::sync::Arc;

/// Singular values and energies kept in the data contract (the leading ones).
pub const SPECTRUM_SHOWN: usize = 200;

/// Errors from reading and reducing the user's fields.
#[derive(Debug, thiserror::Error)]
pub enum OwnDataError {
    #[error(transparent)]
    Dataset(#[from] DatasetError),
    #[error("data.file.reduce.coarse-grain: {0}")]
    Coarse(#[from] CoarseError),
    #[error("data.file.reduce.pod: {0}")]
    Pod(#[from] PodError),
    #[error("{0}")]
    Layout(String),
}

/// How many POD modes to keep.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum PodChoice {
    /// The fewest modes whose energy fraction reaches this.
    Energy(f64),
    /// A fixed number of modes.
    Modes(usize),
}

/// The checked `[data.file]` keys of gridded data.
#[derive(Debug, Clone, PartialEq)]
pub struct FieldPlan {
    /// Resolved paths: one per run, or the one file of `member_dimension`.
    pub files: Vec<PathBuf>,
    pub member_dimension: Option<String>,
    /// Variables, time dimension and slices; a slice named like the time dimension becomes the
    /// time slice once the file is open.
    pub selection: Selection,
    pub sample_interval: Option<f64>,
    pub coarse_grain: Option<Vec<usize>>,
    pub pod: Option<PodChoice>,
    /// Runs held out whole for the test (0: the test region of the first run).
    pub held_out_runs: usize,
}

/// A `[data.file]` table checked: the first path, the given sampling interval and, for gridded
/// data, the field plan.
pub(super) type PlannedFile = (PathBuf, Option<f64>, Option<Box<FieldPlan>>);

/// A run's reduced values and, with a POD, the truth's unresolved energy per row.
type Reduced = (Array2<f64>, Option<Vec<f64>>);

/// Whether a `[data.file]` table asks for gridded fields rather than a `.npy`/`.csv` trajectory.
fn wants_fields(f: &FileSection) -> bool {
    let plain = f.path.as_ref().is_some_and(|p| {
        matches!(
            p.extension()
                .and_then(|e| e.to_str())
                .map(str::to_lowercase)
                .as_deref(),
            Some("npy" | "csv")
        )
    });
    f.runs.is_some()
        || f.member_dimension.is_some()
        || f.variables.is_some()
        || f.time.is_some()
        || f.slice.is_some()
        || f.reduce.is_some()
        || f.test.is_some()
        || !plain
}

/// The extensions of the trajectory readers (`.npy` with its sidecar, `.csv`) and of the field
/// readers (NetCDF, `.npz`; a field file is recognised by its first bytes, these are the names
/// it usually goes by).
const TRAJECTORY_EXTENSIONS: [&str; 2] = ["npy", "csv"];
const FIELD_EXTENSIONS: [&str; 7] = ["nc", "nc4", "cdf", "netcdf", "h5", "hdf5", "npz"];

/// The lowercase extension of `path`.
fn extension(path: &Path) -> String {
    path.extension()
        .and_then(|e| e.to_str())
        .map(str::to_lowercase)
        .unwrap_or_default()
}

/// Checks the keys of a `[data.file]` table (`key`: its name), recording every problem in `c`.
/// Returns the first path, the given sampling interval and, for gridded data, the field plan,
/// when the table has no problem. Field files are opened later, by [`check_files`]; a
/// trajectory's file is looked for here.
pub(super) fn plan_file(
    f: FileSection,
    key: &str,
    base: &Path,
    c: &mut Checks,
) -> Option<PlannedFile> {
    let before = c.count();
    let k = |name: &str| format!("{key}.file.{name}");
    if let Some(dt) = f.sample_interval {
        if !(dt.is_finite() && dt > 0.0) {
            c.invalid(k("sample-interval"), dt.to_string(), "a positive number");
        }
    }
    let first = match (&f.path, &f.runs) {
        (Some(p), None) => p.clone(),
        (None, Some(r)) if !r.is_empty() => r[0].clone(),
        _ => {
            c.invalid(
                format!("{key}.file"),
                "both or neither of `path` and `runs` (or an empty `runs`)",
                "exactly one of `path = \"..\"` or `runs = [\"..\", ..]`",
            );
            return None;
        }
    };
    let ext = extension(&first);
    if !TRAJECTORY_EXTENSIONS.contains(&ext.as_str()) && !FIELD_EXTENSIONS.contains(&ext.as_str()) {
        c.invalid(
            if f.runs.is_some() { k("runs") } else { k("path") },
            format!("'{}'", first.display()),
            "a trajectory in .npy (with an optional .json sidecar) or .csv, or gridded fields in NetCDF (.nc) or NumPy .npz; convert the file, or rename it if it is one of these",
        );
        return None;
    }
    if !wants_fields(&f) {
        let path = base.join(&first);
        match crate::data::trajectory_columns(&path) {
            Err(e) => c.message(k("path"), e.to_string()),
            Ok(_) => {
                if f.sample_interval.is_none() && !path.with_extension("json").exists() {
                    c.message(
                        k("sample-interval"),
                        crate::data::DataError::MissingSampleInterval { path: path.clone() }
                            .to_string(),
                    );
                }
            }
        }
        return (c.count() == before).then_some((path, f.sample_interval, None));
    }
    if TRAJECTORY_EXTENSIONS.contains(&ext.as_str()) {
        c.invalid(
            k("path"),
            format!("'{}' with gridded-field keys", first.display()),
            "a .npy or .csv file is read as one trajectory, whose columns are its variables: drop `variables`, `runs`, `member-dimension`, `time`, `slice`, `reduce` and `test`, or give the fields in NetCDF (.nc) or .npz",
        );
        return None;
    }
    if key != "data" {
        c.invalid(
            format!("{key}.file"),
            format!("gridded fields ('{}')", first.display()),
            "a .npy or .csv `path` with an optional `sample-interval`: NetCDF/.npz fields, runs and reductions are read for the pilot's [data.file] only",
        );
        return None;
    }
    let variables = match f.variables {
        Some(v) if !v.is_empty() => v,
        _ => {
            c.invalid(
                k("variables"),
                "missing or empty",
                "the variables to stack as state columns, e.g. `variables = [\"u\", \"v\"]` (NetCDF and .npz files hold several)",
            );
            Vec::new()
        }
    };
    if f.member_dimension.is_some() && f.runs.is_some() {
        c.invalid(
            k("member-dimension"),
            "member-dimension with `runs`",
            "`member-dimension` with a single `path` only",
        );
    }
    let mut selection = Selection {
        variables,
        time: f.time.clone(),
        ..Selection::default()
    };
    for (dim, [start, stop, stride]) in f.slice.unwrap_or_default() {
        if stride == 0 || start >= stop {
            c.invalid(
                format!("{key}.file.slice.{dim}"),
                format!("[{start}, {stop}, {stride}]"),
                "[start, stop, stride] with start < stop and stride ≥ 1",
            );
            continue;
        }
        if f.member_dimension.as_deref() == Some(dim.as_str()) {
            c.invalid(
                format!("{key}.file.slice.{dim}"),
                format!("a slice of the member dimension '{dim}'"),
                "slices of the time and grid dimensions; choose runs by listing files in `runs`",
            );
            continue;
        }
        selection
            .slices
            .insert(dim, Slice::new(start, Some(stop), stride));
    }
    let (coarse_grain, pod) = match f.reduce {
        None => (None, None),
        Some(r) => {
            if let Some(g) = &r.coarse_grain {
                if g.is_empty() || g.contains(&0) {
                    c.invalid(
                        k("reduce.coarse-grain"),
                        format!("{g:?}"),
                        "one factor ≥ 1 per grid dimension of the fields, e.g. [4, 4]",
                    );
                }
            }
            let pod = match r.pod {
                None => None,
                Some(p) => match (p.energy, p.modes) {
                    (Some(e), None) if e > 0.0 && e <= 1.0 => Some(PodChoice::Energy(e)),
                    (None, Some(m)) if m >= 1 => Some(PodChoice::Modes(m)),
                    (e, m) => {
                        let given =
                            |name: &str, v: Option<String>| v.map(|v| format!("{name} = {v}"));
                        let given: Vec<String> = [
                            given("energy", e.map(|e| e.to_string())),
                            given("modes", m.map(|m| m.to_string())),
                        ]
                        .into_iter()
                        .flatten()
                        .collect();
                        c.invalid(
                            k("reduce.pod"),
                            if given.is_empty() {
                                "neither `energy` nor `modes`".to_string()
                            } else {
                                given.join(", ")
                            },
                            "exactly one of `energy` (a fraction in (0, 1]) or `modes` (≥ 1)",
                        );
                        None
                    }
                },
            };
            (r.coarse_grain, pod)
        }
    };
    let held_out_runs = match f.test.and_then(|t| t.held_out_runs) {
        None => 0,
        Some(0) => {
            c.invalid(
                k("test.held-out-runs"),
                "0",
                "at least 1 (or leave `test` out to test inside the first run)",
            );
            0
        }
        Some(h) => {
            if let Some(r) = &f.runs {
                if h >= r.len() {
                    c.invalid(
                        k("test.held-out-runs"),
                        h.to_string(),
                        format!(
                            "fewer than the {} runs listed: at least one run must remain for training",
                            r.len()
                        ),
                    );
                }
            } else if f.member_dimension.is_none() {
                c.invalid(
                    k("test.held-out-runs"),
                    h.to_string(),
                    "several runs: list them in `runs`, or give `member-dimension` for one file holding them",
                );
            }
            h
        }
    };
    if c.count() > before {
        return None;
    }
    let files = match f.runs {
        Some(r) => r.iter().map(|p| base.join(p)).collect(),
        None => vec![base.join(&first)],
    };
    Some((
        base.join(first),
        f.sample_interval,
        Some(Box::new(FieldPlan {
            files,
            member_dimension: f.member_dimension,
            selection,
            sample_interval: f.sample_interval,
            coarse_grain,
            pod,
            held_out_runs,
        })),
    ))
}

/// The key under which a file of the plan is named in messages.
fn file_key(fp: &FieldPlan) -> &'static str {
    if fp.member_dimension.is_some() || fp.files.len() == 1 {
        "data.file.path"
    } else {
        "data.file.runs"
    }
}

/// The selection for an open file: a slice named like the file's time dimension becomes the
/// time slice.
fn selection_for(ds: &Dataset, fp: &FieldPlan) -> Result<Selection, DatasetError> {
    let mut sel = fp.selection.clone();
    let slices = std::mem::take(&mut sel.slices);
    let time = ds
        .plan(&sel)
        .map(|p| p.time_dimension().to_string())
        .or_else(|e| match &sel.time {
            Some(t) => Ok(t.clone()),
            None => Err(e),
        })?;
    for (dim, slice) in slices {
        if dim == time {
            sel.time_slice = slice;
        } else {
            sel.slices.insert(dim, slice);
        }
    }
    Ok(sel)
}

/// The layouts without the member dimension (whose slice selects one index).
fn drop_member(mut fields: Vec<FieldLayout>, member: Option<&str>) -> Vec<FieldLayout> {
    if let Some(m) = member {
        for f in &mut fields {
            if let Some(i) = f.dims.iter().position(|d| d == m) {
                f.dims.remove(i);
                f.shape.remove(i);
                f.spans.remove(i);
            }
        }
    }
    fields
}

/// One run as the checks see it.
struct RunShape {
    name: String,
    samples: usize,
}

/// What one file holds for the selection: its runs, field layouts, sampling interval.
struct FileShape {
    runs: Vec<RunShape>,
    fields: Vec<FieldLayout>,
    sample_interval: Option<f64>,
    time_units: Option<String>,
}

fn describe_file(ds: &mut Dataset, fp: &FieldPlan, stem: &str) -> Result<FileShape, String> {
    let sel = selection_for(ds, fp).map_err(|e| e.to_string())?;
    let plan = ds.plan(&sel).map_err(|e| e.to_string())?;
    let meta = ds.describe(&plan).map_err(|e| e.to_string())?;
    let samples = plan.snapshots();
    let runs = match &fp.member_dimension {
        None => vec![RunShape {
            name: stem.to_string(),
            samples,
        }],
        Some(m) => {
            let span = meta
                .fields
                .iter()
                .find_map(|f| f.dims.iter().position(|d| d == m).map(|i| f.spans[i]))
                .ok_or_else(|| {
                    format!(
                        "{}: dimension '{m}' (data.file.member-dimension) is not among the selected variables' dimensions",
                        ds.path().display()
                    )
                })?;
            (0..span.count)
                .map(|k| RunShape {
                    name: format!("{stem}[{}]", span.at(k)),
                    samples,
                })
                .collect()
        }
    };
    Ok(FileShape {
        runs,
        fields: drop_member(meta.fields.clone(), fp.member_dimension.as_deref()),
        sample_interval: fp.sample_interval.or(meta.time.uniform_step()),
        time_units: meta.time.units.clone(),
    })
}

/// Run names from file stems (whole paths when stems repeat).
fn stems(files: &[PathBuf]) -> Vec<String> {
    let stem = |p: &PathBuf| {
        p.file_stem()
            .map(|s| s.to_string_lossy().into_owned())
            .unwrap_or_else(|| p.display().to_string())
    };
    let names: Vec<String> = files.iter().map(stem).collect();
    let mut sorted = names.clone();
    sorted.sort();
    sorted.dedup();
    if sorted.len() == names.len() {
        names
    } else {
        files.iter().map(|p| p.display().to_string()).collect()
    }
}

/// The split of the study in samples.
fn split_spec(t: &Timing, dt: f64) -> SplitSpec {
    t.split(dt)
}

/// Test initial conditions a held-out run of `len` samples can hold.
fn capacity(len: usize, spec: &SplitSpec) -> usize {
    let window = spec.warm_up + spec.max_lead + 1;
    if len < window {
        0
    } else {
        (len - window) / spec.spacing + 1
    }
}

/// Opens every data file of a field plan and checks it against the study's `sizes` and
/// `timing`: files readable and of a known format, variables present with the same shape in
/// every run, the time dimension and the sampling interval found, slices in range,
/// coarse-graining factors dividing the grid, POD modes available, and run lengths against the
/// sizes and the split. Returns every problem (each beginning with its key) and, when they can
/// be told before the POD is fitted, the state variables the models will see.
pub(super) fn check_files(
    fp: &FieldPlan,
    sizes: &[usize],
    timing: &Timing,
) -> (Vec<String>, Option<usize>) {
    let mut problems = Vec::new();
    let key = file_key(fp);
    let names = stems(&fp.files);
    let mut runs: Vec<RunShape> = Vec::new();
    let mut first: Option<(String, Vec<FieldLayout>, Option<f64>)> = None;
    for (path, stem) in fp.files.iter().zip(&names) {
        let mut ds = match Dataset::open(path) {
            Ok(ds) => ds,
            Err(e) => {
                problems.push(format!("{key}: {e}"));
                continue;
            }
        };
        let shape = match describe_file(&mut ds, fp, stem) {
            Ok(s) => s,
            Err(e) => {
                problems.push(format!("{key}: {e}"));
                continue;
            }
        };
        if shape.sample_interval.is_none() {
            problems.push(format!(
                "data.file.sample-interval: {} has no evenly spaced time coordinate to give the sampling interval{}; give `sample-interval` (model time units)",
                path.display(),
                shape
                    .time_units
                    .as_ref()
                    .map(|u| format!(" (time units '{u}')"))
                    .unwrap_or_default()
            ));
        }
        match &first {
            None => first = Some((stem.clone(), shape.fields.clone(), shape.sample_interval)),
            Some((first_name, fields, dt)) => {
                for (a, b) in fields.iter().zip(&shape.fields) {
                    if a.shape != b.shape {
                        problems.push(format!(
                            "data.file.variables: variable '{}' has shape {:?} ({}) in run '{stem}' but {:?} in run '{first_name}'; every run must hold the same grid (slice them alike)",
                            b.name,
                            b.shape,
                            b.dims.join(", "),
                            a.shape
                        ));
                    }
                }
                if let (Some(a), Some(b)) = (dt, shape.sample_interval) {
                    if (a - b).abs() > 1e-9 * a.abs() {
                        problems.push(format!(
                            "data.file.sample-interval: run '{stem}' is sampled every {b} time units, run '{first_name}' every {a}; every run must share the sampling interval"
                        ));
                    }
                }
            }
        }
        runs.extend(shape.runs);
    }
    let Some((_, fields, dt)) = first else {
        return (problems, None);
    };
    // Reduction.
    let mut dim = fields.iter().map(FieldLayout::size).sum::<usize>();
    if let Some(f) = &fp.coarse_grain {
        match coarse_layout(&fields, &CoarseGrain::new(f)) {
            Ok((_, d)) => dim = d,
            Err(e) => problems.push(format!("data.file.reduce.coarse-grain: {e}")),
        }
    }
    // Lengths against the sizes and the split.
    let largest = *sizes.last().expect("sizes");
    if let Some(dt) = dt {
        let spec = split_spec(timing, dt);
        let k = fp.held_out_runs;
        if k > 0 && k >= runs.len() && !runs.is_empty() {
            problems.push(format!(
                "data.file.test.held-out-runs: {k} held-out runs but the data hold {} run{}; at least one must remain for training",
                runs.len(),
                if runs.len() == 1 { "" } else { "s" }
            ));
        } else if k > 0 {
            let first_run = &runs[0];
            if first_run.samples < largest {
                problems.push(format!(
                    "subsets.sizes: the largest size is {largest} samples but the first training run '{}' holds {}; training windows never cross a run boundary, so the first training run must hold the largest size — give a longer run first or smaller sizes",
                    first_run.name, first_run.samples
                ));
            }
            let held = &runs[runs.len() - k..];
            let cap: usize = held.iter().map(|r| capacity(r.samples, &spec)).sum();
            if cap < spec.initial_conditions {
                let each: Vec<String> = held
                    .iter()
                    .map(|r| {
                        format!(
                            "'{}' ({} samples: {})",
                            r.name,
                            r.samples,
                            capacity(r.samples, &spec)
                        )
                    })
                    .collect();
                problems.push(format!(
                    "split.initial-conditions: {} test initial conditions, each with {} warm-up and {} forecast samples inside its run and spaced {} apart, do not fit in the held-out runs, which hold {cap}: {}; hold out more or longer runs, or reduce the initial conditions, spacing, warm-up or maximum lead",
                    spec.initial_conditions,
                    spec.warm_up,
                    spec.max_lead,
                    spec.spacing,
                    each.join(", ")
                ));
            }
        } else if let Some(r) = runs.first() {
            let needed = spec.total_for_pool(largest);
            if r.samples < needed {
                problems.push(format!(
                    "data.file: the first run '{}' holds {} samples but the split needs {needed}: a training pool of {largest} samples (the largest size), a gap of {}, and {} test initial conditions spaced {} apart with {} warm-up and {} forecast samples each; supply more data, hold out whole runs (`test = {{ held-out-runs = 1 }}`), or reduce the sizes, initial conditions, gap, warm-up or maximum lead",
                    r.name, r.samples, spec.gap, spec.initial_conditions, spec.spacing, spec.warm_up, spec.max_lead
                ));
            }
        }
        if let Some(PodChoice::Modes(m)) = fp.pod {
            if m > dim {
                problems.push(format!(
                    "data.file.reduce.pod.modes: {m} modes asked but the (coarse-grained) fields have {dim} values per snapshot; ask for at most {dim}"
                ));
            }
        }
    }
    let variables = match fp.pod {
        Some(PodChoice::Modes(m)) => Some(m.min(dim)),
        Some(PodChoice::Energy(_)) => None,
        None => Some(dim),
    };
    (problems, variables)
}

/// One line for `check`'s description.
pub(super) fn describe(fp: &FieldPlan) -> String {
    let files: Vec<String> = fp.files.iter().map(|p| p.display().to_string()).collect();
    let mut s = format!(
        "data: fields {} of {}",
        fp.selection.variables.join(", "),
        files.join(", ")
    );
    if let Some(m) = &fp.member_dimension {
        s.push_str(&format!(" (runs along '{m}')"));
    }
    if let Some(c) = &fp.coarse_grain {
        s.push_str(&format!("; coarse-grained by {c:?}"));
    }
    match fp.pod {
        Some(PodChoice::Energy(e)) => s.push_str(&format!(
            "; POD to {e} of the energy, fitted on the training pool"
        )),
        Some(PodChoice::Modes(m)) => s.push_str(&format!(
            "; POD with {m} modes, fitted on the training pool"
        )),
        None => {}
    }
    if fp.held_out_runs > 0 {
        s.push_str(&format!(
            "; test from the last {} run{}",
            fp.held_out_runs,
            if fp.held_out_runs == 1 { "" } else { "s" }
        ));
    }
    s
}

/// One field as the data contract shows it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct FieldInfo {
    pub name: String,
    /// Grid dimensions (without time).
    pub dims: Vec<String>,
    /// Shape as selected.
    pub shape: Vec<usize>,
    /// Shape after coarse-graining.
    pub reduced_shape: Vec<usize>,
    /// CF attributes, when the file gives them.
    pub units: Option<String>,
    pub long_name: Option<String>,
    pub standard_name: Option<String>,
}

/// One run as the data contract shows it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RunInfo {
    pub name: String,
    pub path: String,
    /// "training pool", "training (not trained on)" or "held out".
    pub role: String,
    pub samples: usize,
    /// SHA-256 of the selected values (before any reduction).
    pub selection_sha256: String,
    /// SHA-256 of the reduced values the study uses (coarse-grained, projected), for the runs
    /// it uses.
    pub reduced_sha256: Option<String>,
}

/// One held-out run's (or the test region's) share of fluctuation the kept modes miss.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct ReconstructionError {
    pub run: String,
    /// ‖z − ΦΦᵀz‖ / ‖z‖ over the run's snapshots in the scaled space.
    pub relative_error: f64,
}

/// The POD of a study as the data contract shows it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct PodInfo {
    /// "snapshots" (T × T Gram matrix) or "covariance" (D × D).
    pub method: crate::data::pod::PodMethod,
    /// What the modes were fitted on (the training pool only).
    pub fitted_on: String,
    pub snapshots: usize,
    /// Values per snapshot (after coarse-graining).
    pub dim: usize,
    /// The requested energy fraction, or `None` for a fixed number of modes.
    pub energy_target: Option<f64>,
    pub modes: usize,
    pub energy_captured: f64,
    /// Per-variable divisors after centring.
    pub variable_scales: Vec<(String, f64)>,
    /// Leading singular values of the centred, scaled snapshot matrix (at most
    /// [`SPECTRUM_SHOWN`]).
    pub singular_values: Vec<f64>,
    /// Cumulative energy fraction after each of those modes.
    pub cumulative_energy: Vec<f64>,
    /// Reconstruction error of the held-out data on the kept modes.
    pub held_out_error: Vec<ReconstructionError>,
    /// Valid times of a perfect reduced model (the truth's truncation error alone), over the
    /// test initial conditions.
    pub reconstruction_floor: SkillSummary,
}

/// The user's gridded data in the data contract (`budget.json` → `data.own-data`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct OwnDataInfo {
    /// File format of the first file.
    pub format: String,
    pub time_dimension: String,
    pub time_units: Option<String>,
    /// "study file" or "time coordinate".
    pub sample_interval_from: String,
    pub fields: Vec<FieldInfo>,
    /// Values per snapshot as selected (what the simulation stores).
    pub selected_columns: usize,
    pub coarse_grain: Option<Vec<usize>>,
    /// Values per snapshot after coarse-graining.
    pub coarse_columns: usize,
    /// State columns the models see (POD coefficients, or the coarse field).
    pub state_columns: usize,
    pub pod: Option<PodInfo>,
    pub runs: Vec<RunInfo>,
    /// Runs held out whole for the test (0: the test region of the first run).
    pub held_out_runs: usize,
    /// Where the test initial conditions and the training pool come from, and what is not
    /// used, in words.
    pub layout: String,
}

/// What [`load`] gives the study.
pub(super) struct Loaded {
    pub traj: Trajectory,
    pub split: Split,
    pub skill: SkillSpec,
    pub source: String,
    pub info: OwnDataInfo,
}

/// One run read and coarse-grained.
struct RunData {
    name: String,
    path: PathBuf,
    selection_hash: String,
    values: Array2<f64>,
}

fn read_runs(fp: &FieldPlan) -> Result<(Vec<RunData>, Snapshots), OwnDataError> {
    let names = stems(&fp.files);
    let filter = fp.coarse_grain.as_ref().map(|f| CoarseGrain::new(f));
    let mut out = Vec::new();
    let mut first_meta: Option<Snapshots> = None;
    let mut take = |name: String, path: &Path, mut snap: Snapshots| -> Result<(), OwnDataError> {
        snap.meta.fields = drop_member(snap.meta.fields, fp.member_dimension.as_deref());
        let selection_hash = hash_array(snap.values.view());
        if let Some(f) = &filter {
            snap = coarse_grain_snapshots(&snap, f)?;
        }
        let values = std::mem::take(&mut snap.values);
        if first_meta.is_none() {
            first_meta = Some(Snapshots {
                values: Array2::zeros((0, 0)),
                meta: snap.meta,
            });
        }
        out.push(RunData {
            name,
            path: path.to_path_buf(),
            selection_hash,
            values,
        });
        Ok(())
    };
    for (path, stem) in fp.files.iter().zip(names) {
        let mut ds = Dataset::open(path)?;
        let sel = selection_for(&ds, fp)?;
        match &fp.member_dimension {
            None => {
                let snap = ds.read(&sel)?;
                take(stem, path, snap)?;
            }
            Some(m) => {
                let plan = ds.plan(&sel)?;
                let span = plan
                    .fields()
                    .iter()
                    .find_map(|f| f.dims.iter().position(|d| d == m).map(|i| f.spans[i]))
                    .ok_or_else(|| {
                        OwnDataError::Layout(format!(
                            "{}: dimension '{m}' (data.file.member-dimension) is not among the selected variables' dimensions",
                            path.display()
                        ))
                    })?;
                for k in 0..span.count {
                    let mut s = sel.clone();
                    s.slices.insert(m.clone(), Slice::index(span.at(k)));
                    let snap = ds.read(&s)?;
                    take(format!("{stem}[{}]", span.at(k)), path, snap)?;
                }
            }
        }
    }
    let meta = first_meta.ok_or_else(|| OwnDataError::Layout("no runs were read".into()))?;
    Ok((out, meta))
}

/// Rows `rows` of every part, stacked.
fn stack(parts: &[ArrayView2<f64>]) -> Array2<f64> {
    ndarray::concatenate(Axis(0), parts).expect("parts share their columns")
}

/// Reads, reduces and lays out the user's runs for a study with the given timing and largest
/// subset size (see the module documentation).
pub(super) fn load(fp: &FieldPlan, t: &Timing, largest: usize) -> Result<Loaded, StudyError> {
    let (runs, first) = read_runs(fp)?;
    let dt = first
        .sample_interval(fp.sample_interval)
        .map_err(OwnDataError::from)?;
    let spec = split_spec(t, dt);
    let k = fp.held_out_runs;
    let layout_err = |m: String| StudyError::from(OwnDataError::Layout(m));
    if k >= runs.len() && k > 0 {
        return Err(layout_err(format!(
            "data.file.test.held-out-runs: {k} held-out runs but the data hold {} runs",
            runs.len()
        )));
    }
    let fields = first.meta.fields.clone();
    // The layout: test region first, then the training pool.
    let (split, parts, pool_rows): (Split, Vec<(usize, std::ops::Range<usize>)>, _) = if k == 0 {
        let n = runs[0].values.nrows();
        let split = Split::new(n, spec, largest)?;
        let pool = split.pool.clone();
        (split, vec![(0, 0..n)], pool)
    } else {
        let held: Vec<usize> = (runs.len() - k..runs.len()).collect();
        let mut parts = Vec::new();
        let mut offset = 0;
        let mut offsets = Vec::new();
        for &r in &held {
            let n = runs[r].values.nrows();
            parts.push((r, 0..n));
            offsets.push((offset, n));
            offset += n;
        }
        // Round-robin over the held-out runs, each initial condition inside its own run.
        let mut ics = Vec::with_capacity(spec.initial_conditions);
        let mut next = vec![0usize; k];
        let mut exhausted = 0;
        while ics.len() < spec.initial_conditions && exhausted < k {
            exhausted = 0;
            for (j, &(o, n)) in offsets.iter().enumerate() {
                if ics.len() == spec.initial_conditions {
                    break;
                }
                let ic = spec.warm_up + next[j] * spec.spacing;
                if ic + spec.max_lead < n {
                    ics.push(o + ic);
                    next[j] += 1;
                } else {
                    exhausted += 1;
                }
            }
        }
        if ics.len() < spec.initial_conditions {
            return Err(layout_err(format!(
                "split.initial-conditions: the held-out runs hold only {} of the {} test initial conditions",
                ics.len(),
                spec.initial_conditions
            )));
        }
        ics.sort_unstable();
        let n0 = runs[0].values.nrows();
        if n0 < largest {
            return Err(layout_err(format!(
                "subsets.sizes: the largest size is {largest} samples but the first training run '{}' holds {n0}",
                runs[0].name
            )));
        }
        parts.push((0, 0..n0));
        let split = Split {
            pool: offset..offset + n0,
            held_out: 0..offset,
            initial_conditions: ics,
            validation: offset..offset,
            validation_conditions: Vec::new(),
            spec,
        };
        (split, parts, 0..n0)
    };
    // POD on the training pool only.
    let pod = match fp.pod {
        None => None,
        Some(choice) => {
            let pool = runs[0].values.slice(s![pool_rows.clone(), ..]);
            let pod_spec = match choice {
                PodChoice::Energy(e) => PodSpec {
                    energy: e,
                    ..PodSpec::default()
                },
                PodChoice::Modes(m) => PodSpec {
                    energy: 1.0,
                    max_modes: Some(m),
                    ..PodSpec::default()
                },
            };
            Some(
                Pod::fit(&mut InMemory::new(pool), &groups_of(&fields), &pod_spec)
                    .map_err(OwnDataError::from)?,
            )
        }
    };
    let field_dim = fields.iter().map(FieldLayout::size).sum::<usize>();
    // Each used run reduced once.
    let reduce = |x: ArrayView2<f64>| -> Reduced {
        match &pod {
            None => (x.to_owned(), None),
            Some(p) => {
                let mut z = x.to_owned();
                for mut row in z.rows_mut() {
                    for ((v, m), c) in row.iter_mut().zip(&p.mean).zip(&p.column_scale) {
                        *v = (*v - m) / c;
                    }
                }
                let a = z.dot(&p.modes);
                let back = a.dot(&p.modes.t());
                let unresolved = (&z - &back)
                    .rows()
                    .into_iter()
                    .map(|r| r.iter().map(|v| v * v).sum())
                    .collect();
                (a, Some(unresolved))
            }
        }
    };
    let mut reduced: Vec<Option<Reduced>> = vec![None; runs.len()];
    for (r, _) in &parts {
        if reduced[*r].is_none() {
            reduced[*r] = Some(reduce(runs[*r].values.view()));
        }
    }
    let views: Vec<ArrayView2<f64>> = parts
        .iter()
        .map(|(r, rows)| {
            reduced[*r]
                .as_ref()
                .expect("reduced")
                .0
                .slice(s![rows.clone(), ..])
        })
        .collect();
    let values = stack(&views);
    let unresolved: Option<Vec<f64>> = pod.as_ref().map(|_| {
        parts
            .iter()
            .flat_map(|(r, rows)| {
                reduced[*r]
                    .as_ref()
                    .expect("reduced")
                    .1
                    .as_ref()
                    .expect("pod")[rows.clone()]
                .to_vec()
            })
            .collect()
    });
    let variables: Vec<String> = match &pod {
        Some(p) => (1..=p.rank()).map(|i| format!("pod-{i}")).collect(),
        None => {
            let mut m = first.meta.clone();
            m.fields = fields.clone();
            m.column_names()
        }
    };
    let traj = Trajectory {
        values,
        subgrid: None,
        meta: TrajectoryMeta {
            schema: SIDECAR_SCHEMA.into(),
            system: None,
            parameters: Default::default(),
            dt: None,
            sample_interval: dt,
            spin_up: None,
            variables,
            subgrid_variables: Vec::new(),
            seed: None,
            tool_version: env!("CARGO_PKG_VERSION").into(),
        },
    };
    let pool = traj.values.slice(s![split.pool.clone(), ..]);
    if let Some(j) = column_stats(pool)
        .1
        .iter()
        .position(|s| s.is_nan() || *s <= 0.0)
    {
        return Err(StudyError::ConstantVariable {
            variable: traj.meta.variables[j].clone(),
            region: "the training pool",
        });
    }
    let (mean, sigma) = column_stats(traj.values.slice(s![split.held_out.clone(), ..]));
    if let Some(j) = sigma.iter().position(|s| s.is_nan() || *s <= 0.0) {
        return Err(StudyError::ConstantVariable {
            variable: traj.meta.variables[j].clone(),
            region: "the held-out test region",
        });
    }
    let skill = SkillSpec {
        threshold: t.threshold,
        warm_up: split.spec.warm_up,
        max_lead: split.spec.max_lead,
        sample_interval: dt,
        mean,
        sigma,
        unresolved: unresolved.map(|energy| {
            Arc::new(Unresolved {
                energy,
                field_dim: field_dim as f64,
            })
        }),
    };
    let floor = skill.unresolved.as_ref().map(|u| {
        split
            .initial_conditions
            .iter()
            .map(|&ic| u.perfect_valid_time(ic, &skill))
            .collect::<Vec<_>>()
    });
    // The contract.
    let trained_note = if runs.len() - k > 1 {
        let unused: Vec<String> = runs[1..runs.len() - k]
            .iter()
            .map(|r| format!("'{}'", r.name))
            .collect();
        format!(
            " Training run{} {} {} read, checked and hashed but not trained on: training windows and warm-ups never cross a run boundary and the models train on one contiguous pool, so the pool is the first training run, which holds the largest size.",
            if unused.len() == 1 { "" } else { "s" },
            unused.join(", "),
            if unused.len() == 1 { "is" } else { "are" }
        )
    } else {
        String::new()
    };
    let layout = if k == 0 {
        format!(
            "Test initial conditions from the held-out region at the start of run '{}', the training pool after a gap in the same run.{trained_note}",
            runs[0].name
        )
    } else {
        let held: Vec<String> = runs[runs.len() - k..]
            .iter()
            .map(|r| format!("'{}'", r.name))
            .collect();
        format!(
            "Test initial conditions from the held-out run{} {} (the last {k}, held out whole; spread over them, each forecast inside its own run); the training pool is the whole first run '{}'.{trained_note}",
            if k == 1 { "" } else { "s" },
            held.join(", "),
            runs[0].name
        )
    };
    let role = |i: usize| {
        if i >= runs.len() - k {
            "held out"
        } else if i == 0 {
            "training pool"
        } else {
            "training (not trained on)"
        }
    };
    let run_infos = runs
        .iter()
        .enumerate()
        .map(|(i, r)| RunInfo {
            name: r.name.clone(),
            path: r.path.display().to_string(),
            role: role(i).into(),
            samples: r.values.nrows(),
            selection_sha256: r.selection_hash.clone(),
            reduced_sha256: reduced[i].as_ref().map(|(v, _)| hash_array(v.view())),
        })
        .collect();
    let pod_info = pod.as_ref().map(|p| {
        let total: f64 = p.summary.singular_values.iter().map(|s| s * s).sum();
        let shown: Vec<f64> = p
            .summary
            .singular_values
            .iter()
            .take(SPECTRUM_SHOWN)
            .copied()
            .collect();
        let mut acc = 0.0;
        let cumulative = shown
            .iter()
            .map(|s| {
                acc += s * s;
                acc / total
            })
            .collect();
        let held_out_error = if k == 0 {
            vec![ReconstructionError {
                run: format!("{} (test region)", runs[0].name),
                relative_error: p
                    .relative_error(runs[0].values.slice(s![split.held_out.clone(), ..])),
            }]
        } else {
            runs[runs.len() - k..]
                .iter()
                .map(|r| ReconstructionError {
                    run: r.name.clone(),
                    relative_error: p.relative_error(r.values.view()),
                })
                .collect()
        };
        PodInfo {
            method: p.summary.method,
            fitted_on: format!(
                "the training pool only: samples {}..{} of run '{}' ({} snapshots); never the held-out data",
                pool_rows.start, pool_rows.end, runs[0].name, pool_rows.len()
            ),
            snapshots: p.summary.snapshots,
            dim: p.summary.dim,
            energy_target: match fp.pod {
                Some(PodChoice::Energy(e)) => Some(e),
                _ => None,
            },
            modes: p.rank(),
            energy_captured: p.summary.energy_captured,
            variable_scales: p
                .summary
                .variables
                .iter()
                .map(|v| (v.name.clone(), v.scale))
                .collect(),
            singular_values: shown,
            cumulative_energy: cumulative,
            held_out_error,
            reconstruction_floor: crate::skill::summarise(floor.as_deref().unwrap_or(&[])),
        }
    });
    let selected_fields: Vec<FieldLayout> = {
        // Shapes as selected: the coarse factors multiply back.
        fields
            .iter()
            .map(|f| {
                let mut g = f.clone();
                if let Some(c) = &fp.coarse_grain {
                    g.shape = f.shape.iter().zip(c).map(|(n, k)| n * k).collect();
                }
                g
            })
            .collect()
    };
    let info = OwnDataInfo {
        format: first.meta.format.label().to_string(),
        time_dimension: first.meta.time.dimension.clone(),
        time_units: first.meta.time.units.clone(),
        sample_interval_from: if fp.sample_interval.is_some() {
            "study file".into()
        } else {
            "time coordinate".into()
        },
        fields: fields
            .iter()
            .zip(&selected_fields)
            .map(|(f, g)| FieldInfo {
                name: f.name.clone(),
                dims: f.dims.clone(),
                shape: g.shape.clone(),
                reduced_shape: f.shape.clone(),
                units: f.units.clone(),
                long_name: f.long_name.clone(),
                standard_name: f.standard_name.clone(),
            })
            .collect(),
        selected_columns: selected_fields
            .iter()
            .map(|f| f.shape.iter().product::<usize>())
            .sum(),
        coarse_grain: fp.coarse_grain.clone(),
        coarse_columns: field_dim,
        state_columns: traj.dim(),
        pod: pod_info,
        runs: run_infos,
        held_out_runs: k,
        layout,
    };
    let source = fp
        .files
        .iter()
        .map(|p| p.display().to_string())
        .collect::<Vec<_>>()
        .join(", ");
    Ok(Loaded {
        traj,
        split,
        skill,
        source,
        info,
    })
}

/// The skill definition on the reconstructed field, for POD studies.
pub(super) fn skill_definition(info: &OwnDataInfo, threshold: f64, ics: usize) -> Option<String> {
    let p = info.pod.as_ref()?;
    Some(format!(
        "valid prediction time on the reconstructed field: largest lead at which sqrt((‖a − â‖² + ‖r‖²)/D) has stayed ≤ {threshold}, in the POD's centred, per-variable scaled space (a the truth's {} POD coefficients, â the forecast's, r the truth's part outside the kept modes, D = {} values per snapshot); mean over {ics} test initial conditions",
        p.modes, p.dim
    ))
}

/// Warnings about the reduction: targets beyond the reconstruction floor.
pub(super) fn warnings(info: &OwnDataInfo, targets: &[f64], out: &mut Vec<String>) {
    let Some(p) = &info.pod else { return };
    let floor = p.reconstruction_floor.mean;
    for t in targets.iter().filter(|t| **t > floor) {
        out.push(format!(
            "target {t} lies beyond the reconstruction floor ({floor:.4} time units, the mean valid time of a perfect model on the {} kept POD modes): no model on these modes can reach it; keep more modes (a higher `energy` or more `modes`)",
            p.modes
        ));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn held_out_runs_hold_initial_conditions_by_capacity() {
        let spec = SplitSpec {
            initial_conditions: 4,
            gap: 0,
            spacing: 5,
            warm_up: 3,
            max_lead: 6,
            validation_conditions: 0,
        };
        // A window needs 3 + 6 + 1 = 10 samples; 24 samples hold starts 3, 8, 13 (13 + 6 < 24).
        assert_eq!(capacity(24, &spec), 3);
        assert_eq!(capacity(9, &spec), 0);
        assert_eq!(capacity(10, &spec), 1);
    }
}
