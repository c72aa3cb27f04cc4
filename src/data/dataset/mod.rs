//! Gridded data files as one "dataset": NetCDF-3 (classic, 64-bit offset and 64-bit data, by
//! this crate's own reader), NetCDF-4/HDF5 (through the system's libnetcdf, with the cargo
//! feature `netcdf4`) and NumPy `.npz` archives behind one interface.
//!
//! A [`Dataset`] lists dimensions, variables and attributes. A [`Selection`] names the variables
//! to stack as state columns (each a field of any rank, flattened in C order), the time
//! dimension, and slices (start, stop, stride) along time and any other dimension. The checked
//! [`Plan`] is read whole ([`Dataset::read`] → [`Snapshots`]) or streamed in blocks of snapshots
//! ([`Dataset::stream`]) so that memory stays bounded; only the selected values are read.
//!
//! Values become float64 after the CF packing rules (CF Conventions 1.11, section 8.1:
//! `unpacked = packed × scale_factor + add_offset`). A value equal to `_FillValue` or
//! `missing_value`, outside `valid_min`/`valid_max`/`valid_range` (compared in the packed type as
//! CF section 2.5.1 prescribes), NaN, or — when a variable declares no `_FillValue` — equal to the
//! netCDF default fill of its type (NetCDF User Guide, "Fill Values"; not for bytes) is refused
//! with the variable's name and the first file index, since models cannot be trained on gaps.
//!
//! The time dimension is the one named in the selection, otherwise the unlimited (record)
//! dimension, otherwise a dimension named `time`; in `.npz` archives (no named dimensions) the
//! axes of an array are named `axis0`, `axis1`, … and time is `axis0`. The time coordinate is the
//! one-dimensional variable named like the time dimension (`time` in an `.npz` archive); its
//! selected values, `units` and `calendar` go into the metadata, and a uniform spacing gives the
//! sampling interval.
//!
//! References: NetCDF Classic and 64-bit Offset Format Specification (Unidata, NetCDF User
//! Guide, appendix "File Format Specifications"); CDF-5 format (PnetCDF, Argonne); NumPy `.npy`
//! format 1.0–3.0 (numpy.lib.format); CF Metadata Conventions 1.11.

mod cf;
mod netcdf3;
#[cfg(feature = "netcdf4")]
mod netcdf4;
mod npz;
mod raw;

pub use netcdf3::{Netcdf3Schema, Netcdf3Variable, Netcdf3Variant, Netcdf3Writer};
pub use raw::DataType;

use super::{Trajectory, TrajectoryMeta, SIDECAR_SCHEMA};
use cf::Cf;
use ndarray::{Array2, ArrayView2, ArrayViewMut2};
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::ops::Range;
use std::path::{Path, PathBuf};

/// What to do to read another format, shown when a file is not one of the supported formats.
const CONVERT_HINT: &str = "supported: NetCDF-3 (classic, 64-bit offset, 64-bit data), \
NetCDF-4/HDF5 (built with the `netcdf4` feature), NumPy .npz, and .npy/.csv trajectories; \
convert NetCDF-4 to NetCDF-3 with `nccopy -k nc7 in.nc out.nc` (or `-k classic`), \
or save arrays from Python with `numpy.savez`";

/// Errors from opening, describing and reading datasets.
#[derive(Debug, thiserror::Error)]
pub enum DatasetError {
    #[error("cannot read {path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path} is not a file format this tool reads ({found}); {CONVERT_HINT}")]
    UnknownFormat { path: PathBuf, found: String },
    #[error(
        "{path} is a NetCDF-4/HDF5 file, but this build reads NetCDF-3 and .npz only; rebuild with \
         `cargo build --release --features netcdf4` (needs libnetcdf, e.g. Debian's libnetcdf-dev), \
         or convert the file with `nccopy -k nc7 {path} out.nc`"
    )]
    Netcdf4NotBuilt { path: PathBuf },
    #[error("{path} is damaged or not valid {format}: {reason}")]
    Malformed {
        path: PathBuf,
        format: &'static str,
        reason: String,
    },
    #[error("{path}: {reason}")]
    Library { path: PathBuf, reason: String },
    #[error("{path}: no variables were selected; name at least one of: {available}")]
    NoVariables { path: PathBuf, available: String },
    #[error("{path} has no variable '{name}'; available: {available}")]
    UnknownVariable {
        path: PathBuf,
        name: String,
        available: String,
    },
    #[error("{path}: variable '{name}' has type {dtype}, which is not numeric; select numeric variables")]
    NotNumeric {
        path: PathBuf,
        name: String,
        dtype: String,
    },
    #[error("{path}: {reason}; dimensions in the file: {available}")]
    TimeDimension {
        path: PathBuf,
        reason: String,
        available: String,
    },
    #[error("{path}: variable '{name}' has dimensions ({dims}) without the time dimension '{time}'; select variables that vary in time")]
    NoTimeAxis {
        path: PathBuf,
        name: String,
        dims: String,
        time: String,
    },
    #[error("{path}: the selected variables disagree on the length of dimension '{dim}' ({first} in '{first_var}', {second} in '{second_var}')")]
    DimensionMismatch {
        path: PathBuf,
        dim: String,
        first: usize,
        first_var: String,
        second: usize,
        second_var: String,
    },
    #[error("{path}: a slice is given for dimension '{dim}', which none of the selected variables has; their dimensions: {available}")]
    UnknownSliceDimension {
        path: PathBuf,
        dim: String,
        available: String,
    },
    #[error("{path}: slice {slice} of dimension '{dim}' (length {len}) is invalid: {reason}")]
    BadSlice {
        path: PathBuf,
        dim: String,
        len: usize,
        slice: String,
        reason: String,
    },
    #[error("{path}: variable '{name}' holds {value} at index [{index}] ({why}); data must have no gaps — fill or cut them before training (e.g. slice the time dimension around them)")]
    Gap {
        path: PathBuf,
        name: String,
        index: String,
        value: f64,
        why: &'static str,
    },
    #[error("{path}: attribute '{attribute}' of variable '{name}' is invalid: {reason}")]
    Attribute {
        path: PathBuf,
        name: String,
        attribute: String,
        reason: String,
    },
    #[error("{path}: {reason}")]
    SampleInterval { path: PathBuf, reason: String },
}

/// The file formats a [`Dataset`] can hold.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Format {
    /// NetCDF-3 classic (CDF-1).
    Netcdf3Classic,
    /// NetCDF-3 64-bit offset (CDF-2).
    Netcdf3Offset64,
    /// NetCDF-3 64-bit data (CDF-5).
    Netcdf3Data64,
    /// NetCDF-4 (HDF5 storage), read through libnetcdf.
    Netcdf4,
    /// NumPy `.npz` archive of `.npy` arrays (stored or deflated).
    Npz,
}

impl Format {
    /// A short human-readable name.
    pub fn label(self) -> &'static str {
        match self {
            Format::Netcdf3Classic => "NetCDF-3 classic",
            Format::Netcdf3Offset64 => "NetCDF-3 64-bit offset",
            Format::Netcdf3Data64 => "NetCDF-3 64-bit data (CDF-5)",
            Format::Netcdf4 => "NetCDF-4/HDF5",
            Format::Npz => "NumPy .npz",
        }
    }
}

/// An attribute value: text, or numbers converted to float64 (exact for every integer type up to
/// 2^53 in magnitude).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum AttrValue {
    Text(String),
    Numbers(Vec<f64>),
}

impl AttrValue {
    /// The text, when the attribute is text.
    pub fn as_text(&self) -> Option<&str> {
        match self {
            AttrValue::Text(s) => Some(s),
            AttrValue::Numbers(_) => None,
        }
    }
}

/// A named dimension of a file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Dimension {
    pub name: String,
    pub len: usize,
    /// The unlimited (record) dimension of a NetCDF file.
    pub unlimited: bool,
}

/// A variable as the file declares it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Variable {
    pub name: String,
    /// Dimension names, slowest-varying first (C order).
    pub dims: Vec<String>,
    pub shape: Vec<usize>,
    pub dtype: DataType,
    pub attributes: BTreeMap<String, AttrValue>,
}

impl Variable {
    fn text_attr(&self, name: &str) -> Option<String> {
        self.attributes
            .get(name)
            .and_then(AttrValue::as_text)
            .map(str::to_string)
    }
}

/// A half-open range `start..stop` taken every `stride`-th index, as in Python's `start:stop:step`
/// (without negative values). `stop = None` means the end of the dimension.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct Slice {
    #[serde(default)]
    pub start: usize,
    #[serde(default)]
    pub stop: Option<usize>,
    #[serde(default = "one")]
    pub stride: usize,
}

fn one() -> usize {
    1
}

impl Default for Slice {
    fn default() -> Self {
        Slice {
            start: 0,
            stop: None,
            stride: 1,
        }
    }
}

impl Slice {
    /// Every index from `start` to `stop` (exclusive) with step `stride`.
    pub fn new(start: usize, stop: Option<usize>, stride: usize) -> Self {
        Slice {
            start,
            stop,
            stride,
        }
    }

    /// The single index `i`.
    pub fn index(i: usize) -> Self {
        Slice::new(i, Some(i + 1), 1)
    }

    fn describe(&self) -> String {
        match self.stop {
            Some(s) => format!("{}:{}:{}", self.start, s, self.stride),
            None => format!("{}::{}", self.start, self.stride),
        }
    }

    /// Checks the slice against a dimension of length `len`.
    fn resolve(&self, path: &Path, dim: &str, len: usize) -> Result<Span, DatasetError> {
        let bad = |reason: String| DatasetError::BadSlice {
            path: path.to_path_buf(),
            dim: dim.to_string(),
            len,
            slice: self.describe(),
            reason,
        };
        if self.stride == 0 {
            return Err(bad("the stride must be at least 1".into()));
        }
        let stop = self.stop.unwrap_or(len);
        if stop > len {
            return Err(bad(format!(
                "stop {stop} is past the end; use at most {len}"
            )));
        }
        if self.start >= stop {
            return Err(bad(format!(
                "it selects nothing (start {} is not below stop {stop})",
                self.start
            )));
        }
        Ok(Span {
            start: self.start,
            count: (stop - self.start).div_ceil(self.stride),
            stride: self.stride,
        })
    }
}

/// A resolved slice of one dimension: `count` indices from `start` every `stride`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Span {
    pub start: usize,
    pub count: usize,
    pub stride: usize,
}

impl Span {
    /// The file index of the `k`-th selected index.
    pub fn at(&self, k: usize) -> usize {
        self.start + k * self.stride
    }

    fn full(len: usize) -> Self {
        Span {
            start: 0,
            count: len,
            stride: 1,
        }
    }
}

/// What to read from a dataset.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub struct Selection {
    /// Variables stacked as state columns, in this order.
    pub variables: Vec<String>,
    /// The time dimension; `None` picks the unlimited dimension, else one named `time`
    /// (`axis0` in `.npz` archives).
    #[serde(default)]
    pub time: Option<String>,
    /// Which time indices to read.
    #[serde(default)]
    pub time_slice: Slice,
    /// Slices of other dimensions, by name; unnamed dimensions are read whole.
    #[serde(default)]
    pub slices: BTreeMap<String, Slice>,
}

impl Selection {
    /// All time indices of the named variables.
    pub fn variables<S: AsRef<str>>(names: &[S]) -> Self {
        Selection {
            variables: names.iter().map(|s| s.as_ref().to_string()).collect(),
            ..Selection::default()
        }
    }
}

/// Values packed by `scale_factor` and `add_offset` (CF 8.1), as recorded in the metadata.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct Packing {
    pub scale_factor: f64,
    pub add_offset: f64,
}

/// One selected variable's place among the state columns and its metadata.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct FieldLayout {
    pub name: String,
    /// Non-time dimensions after slicing (C order within the columns).
    pub dims: Vec<String>,
    pub shape: Vec<usize>,
    /// The state columns this variable fills.
    pub columns: Range<usize>,
    /// Slices applied to the non-time dimensions, in file indices.
    pub spans: Vec<Span>,
    /// The type in the file.
    pub dtype: DataType,
    pub units: Option<String>,
    pub long_name: Option<String>,
    pub standard_name: Option<String>,
    pub packing: Option<Packing>,
}

impl FieldLayout {
    /// Number of state columns (values per snapshot).
    pub fn size(&self) -> usize {
        self.columns.len()
    }
}

/// The selected time indices and, when the file has one, the time coordinate.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TimeAxis {
    pub dimension: String,
    /// Length of the time dimension in the file.
    pub length: usize,
    pub span: Span,
    /// Values of the coordinate variable at the selected indices (CF-unpacked).
    pub values: Option<Vec<f64>>,
    pub units: Option<String>,
    pub calendar: Option<String>,
}

impl TimeAxis {
    /// The uniform step of the selected coordinate values, if every step agrees with their mean
    /// to a relative 1e-6 (time coordinates are often stored in float32).
    pub fn uniform_step(&self) -> Option<f64> {
        let v = self.values.as_ref()?;
        if v.len() < 2 {
            return None;
        }
        let mean = (v[v.len() - 1] - v[0]) / (v.len() - 1) as f64;
        if !(mean.is_finite() && mean > 0.0) {
            return None;
        }
        v.windows(2)
            .all(|w| ((w[1] - w[0]) - mean).abs() <= 1e-6 * mean)
            .then_some(mean)
    }
}

/// Where selected data came from and what it means: the part a report shows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct SelectionMeta {
    pub path: PathBuf,
    pub format: Format,
    pub fields: Vec<FieldLayout>,
    pub time: TimeAxis,
    /// The file's `title`, `institution`, `source`, `history` and `Conventions`, when present.
    pub global: BTreeMap<String, String>,
}

impl SelectionMeta {
    /// Number of state columns.
    pub fn columns(&self) -> usize {
        self.fields.last().map_or(0, |f| f.columns.end)
    }

    /// One name per state column: the variable name for a scalar, else `name[i,j,…]` with the
    /// indices of the selected grid (not of the file).
    pub fn column_names(&self) -> Vec<String> {
        let mut names = Vec::with_capacity(self.columns());
        for f in &self.fields {
            if f.shape.is_empty() {
                names.push(f.name.clone());
                continue;
            }
            for flat in 0..f.size() {
                let idx = unravel(flat, &f.shape);
                let s: Vec<String> = idx.iter().map(usize::to_string).collect();
                names.push(format!("{}[{}]", f.name, s.join(",")));
            }
        }
        names
    }
}

/// Selected snapshots in memory: time × state columns, and their metadata.
#[derive(Debug, Clone)]
pub struct Snapshots {
    /// Snapshots × columns (every selected variable's field, flattened in C order, side by side).
    pub values: Array2<f64>,
    pub meta: SelectionMeta,
}

impl Snapshots {
    /// The sampling interval: `given` when present, else the uniform step of the time
    /// coordinate (which already includes the time stride).
    pub fn sample_interval(&self, given: Option<f64>) -> Result<f64, DatasetError> {
        let err = |reason: String| DatasetError::SampleInterval {
            path: self.meta.path.clone(),
            reason,
        };
        if let Some(dt) = given {
            if !(dt.is_finite() && dt > 0.0) {
                return Err(err(format!(
                    "sample-interval must be a positive number, got {dt}"
                )));
            }
            return Ok(dt);
        }
        match (&self.meta.time.values, self.meta.time.uniform_step()) {
            (_, Some(step)) => Ok(step),
            (None, None) => Err(err(format!(
                "no coordinate variable '{}' gives the sampling interval; give `sample-interval` in the study file",
                self.meta.time.dimension
            ))),
            (Some(_), None) => Err(err(format!(
                "the selected values of the time coordinate '{}' are not evenly spaced (or fewer than 2); give `sample-interval` or slice an evenly spaced part",
                self.meta.time.dimension
            ))),
        }
    }

    /// A trajectory of these snapshots, with column names from [`SelectionMeta::column_names`].
    pub fn into_trajectory(self, sample_interval: Option<f64>) -> Result<Trajectory, DatasetError> {
        let dt = self.sample_interval(sample_interval)?;
        Ok(Trajectory {
            meta: TrajectoryMeta {
                schema: SIDECAR_SCHEMA.to_string(),
                system: None,
                parameters: BTreeMap::new(),
                dt: None,
                sample_interval: dt,
                spin_up: None,
                variables: self.meta.column_names(),
                subgrid_variables: Vec::new(),
                seed: None,
                tool_version: env!("CARGO_PKG_VERSION").to_string(),
            },
            values: self.values,
            subgrid: None,
        })
    }
}

/// A reader of one file format: reads a hyperslab of one variable as float64 in C order, before
/// any CF unpacking.
trait Source {
    /// Appends the values of variable `var` at `spans` (one per dimension) to `out`.
    fn read_slab(
        &mut self,
        var: usize,
        spans: &[Span],
        out: &mut Vec<f64>,
    ) -> Result<(), DatasetError>;
}

/// An open data file.
pub struct Dataset {
    path: PathBuf,
    format: Format,
    dimensions: Vec<Dimension>,
    variables: Vec<Variable>,
    attributes: BTreeMap<String, AttrValue>,
    source: Box<dyn Source>,
}

impl std::fmt::Debug for Dataset {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Dataset")
            .field("path", &self.path)
            .field("format", &self.format)
            .field("dimensions", &self.dimensions)
            .field("variables", &self.variables)
            .finish_non_exhaustive()
    }
}

/// The parts every format reader returns on opening a file.
struct Opened {
    format: Format,
    dimensions: Vec<Dimension>,
    variables: Vec<Variable>,
    attributes: BTreeMap<String, AttrValue>,
    source: Box<dyn Source>,
}

/// The HDF5 signature (HDF5 File Format Specification, "Format Signature").
const HDF5_MAGIC: &[u8] = b"\x89HDF\r\n\x1a\n";

impl Dataset {
    /// Opens a file, recognising the format from its first bytes (not its name).
    pub fn open(path: &Path) -> Result<Dataset, DatasetError> {
        let io = |source| DatasetError::Io {
            path: path.to_path_buf(),
            source,
        };
        let mut file = std::fs::File::open(path).map_err(io)?;
        let mut magic = [0u8; 8];
        let got = read_up_to(&mut file, &mut magic).map_err(io)?;
        let magic = &magic[..got];
        let opened = if magic.starts_with(b"CDF") {
            netcdf3::open(path, file)?
        } else if magic.starts_with(HDF5_MAGIC) {
            open_netcdf4(path)?
        } else if magic.starts_with(b"PK\x03\x04") || magic.starts_with(b"PK\x05\x06") {
            npz::open(path, file)?
        } else {
            let found = if magic.starts_with(b"\x93NUMPY") {
                "a single .npy array: read it as a trajectory, or put it into an .npz archive"
                    .to_string()
            } else if got == 0 {
                "an empty file".to_string()
            } else {
                format!("first bytes {}", printable(magic))
            };
            return Err(DatasetError::UnknownFormat {
                path: path.to_path_buf(),
                found,
            });
        };
        Ok(Dataset {
            path: path.to_path_buf(),
            format: opened.format,
            dimensions: opened.dimensions,
            variables: opened.variables,
            attributes: opened.attributes,
            source: opened.source,
        })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    pub fn format(&self) -> Format {
        self.format
    }

    /// Shared named dimensions (empty for `.npz` archives, whose axes are per array).
    pub fn dimensions(&self) -> &[Dimension] {
        &self.dimensions
    }

    pub fn variables(&self) -> &[Variable] {
        &self.variables
    }

    pub fn variable(&self, name: &str) -> Option<&Variable> {
        self.variables.iter().find(|v| v.name == name)
    }

    /// Global attributes.
    pub fn attributes(&self) -> &BTreeMap<String, AttrValue> {
        &self.attributes
    }

    fn variable_list(&self) -> String {
        let names: Vec<String> = self
            .variables
            .iter()
            .map(|v| format!("{}({})", v.name, v.dims.join(", ")))
            .collect();
        if names.is_empty() {
            "none".into()
        } else {
            names.join(", ")
        }
    }

    fn dimension_list(&self) -> String {
        if self.dimensions.is_empty() {
            return "none named (the axes of each array are axis0, axis1, …)".into();
        }
        self.dimensions
            .iter()
            .map(|d| {
                if d.unlimited {
                    format!("{} = {} (unlimited)", d.name, d.len)
                } else {
                    format!("{} = {}", d.name, d.len)
                }
            })
            .collect::<Vec<_>>()
            .join(", ")
    }

    /// The time dimension a selection asks for, by the rules in the module documentation.
    fn time_dimension(&self, sel: &Selection) -> Result<String, DatasetError> {
        let err = |reason: String| DatasetError::TimeDimension {
            path: self.path.clone(),
            reason,
            available: self.dimension_list(),
        };
        if let Some(name) = &sel.time {
            let known = self.dimensions.iter().any(|d| &d.name == name)
                || (self.dimensions.is_empty()
                    && self.variables.iter().any(|v| v.dims.contains(name)));
            if !known {
                return Err(err(format!("time dimension '{name}' not found")));
            }
            return Ok(name.clone());
        }
        if self.dimensions.is_empty() {
            return Ok("axis0".into());
        }
        if let Some(d) = self.dimensions.iter().find(|d| d.unlimited) {
            return Ok(d.name.clone());
        }
        if let Some(d) = self.dimensions.iter().find(|d| d.name == "time") {
            return Ok(d.name.clone());
        }
        Err(err(
            "no time dimension given, and the file has neither an unlimited dimension nor one named 'time'; name it with `time = \"...\"`".into(),
        ))
    }

    /// Checks a selection against the file: variables exist and are numeric, each has the time
    /// dimension, shared dimensions agree in length, and every slice fits.
    pub fn plan(&self, sel: &Selection) -> Result<Plan, DatasetError> {
        if sel.variables.is_empty() {
            return Err(DatasetError::NoVariables {
                path: self.path.clone(),
                available: self.variable_list(),
            });
        }
        let time = self.time_dimension(sel)?;
        let mut seen: BTreeMap<String, (usize, String)> = BTreeMap::new();
        let mut used_dims = std::collections::BTreeSet::new();
        let mut vars = Vec::new();
        let mut column = 0usize;
        let mut time_len = None;
        for name in &sel.variables {
            let index = self
                .variables
                .iter()
                .position(|v| &v.name == name)
                .ok_or_else(|| DatasetError::UnknownVariable {
                    path: self.path.clone(),
                    name: name.clone(),
                    available: self.variable_list(),
                })?;
            let var = &self.variables[index];
            if !var.dtype.is_numeric() {
                return Err(DatasetError::NotNumeric {
                    path: self.path.clone(),
                    name: name.clone(),
                    dtype: var.dtype.to_string(),
                });
            }
            let time_axis = var.dims.iter().position(|d| d == &time).ok_or_else(|| {
                DatasetError::NoTimeAxis {
                    path: self.path.clone(),
                    name: name.clone(),
                    dims: var.dims.join(", "),
                    time: time.clone(),
                }
            })?;
            for (d, &len) in var.dims.iter().zip(&var.shape) {
                used_dims.insert(d.clone());
                // Axes of `.npz` arrays are not shared, except that time must agree.
                if self.dimensions.is_empty() && d != &time {
                    continue;
                }
                match seen.get(d) {
                    Some((l, other)) if *l != len => {
                        return Err(DatasetError::DimensionMismatch {
                            path: self.path.clone(),
                            dim: d.clone(),
                            first: *l,
                            first_var: other.clone(),
                            second: len,
                            second_var: name.clone(),
                        })
                    }
                    Some(_) => {}
                    None => {
                        seen.insert(d.clone(), (len, name.clone()));
                    }
                }
            }
            time_len = Some(var.shape[time_axis]);
            let mut spans = Vec::with_capacity(var.dims.len());
            let mut field_dims = Vec::new();
            let mut field_spans = Vec::new();
            for (axis, (d, &len)) in var.dims.iter().zip(&var.shape).enumerate() {
                if axis == time_axis {
                    spans.push(Span::full(len));
                    continue;
                }
                let span = match sel.slices.get(d) {
                    Some(s) => s.resolve(&self.path, d, len)?,
                    None => Span::full(len),
                };
                spans.push(span);
                field_dims.push(d.clone());
                field_spans.push(span);
            }
            let shape: Vec<usize> = field_spans.iter().map(|s| s.count).collect();
            let size: usize = shape.iter().product();
            let cf = Cf::from_variable(&self.path, var)?;
            vars.push(PlannedVar {
                index,
                time_axis,
                spans,
                layout: FieldLayout {
                    name: name.clone(),
                    dims: field_dims,
                    shape,
                    columns: column..column + size,
                    spans: field_spans,
                    dtype: var.dtype.clone(),
                    units: var.text_attr("units"),
                    long_name: var.text_attr("long_name"),
                    standard_name: var.text_attr("standard_name"),
                    packing: cf.packing(),
                },
                cf,
            });
            column += size;
        }
        for d in sel.slices.keys() {
            if !used_dims.contains(d) {
                return Err(DatasetError::UnknownSliceDimension {
                    path: self.path.clone(),
                    dim: d.clone(),
                    available: used_dims.iter().cloned().collect::<Vec<_>>().join(", "),
                });
            }
            if d == &time {
                return Err(DatasetError::BadSlice {
                    path: self.path.clone(),
                    dim: d.clone(),
                    len: time_len.unwrap_or(0),
                    slice: sel.slices[d].describe(),
                    reason: "slice the time dimension with the time slice, not among the other dimensions".into(),
                });
            }
        }
        let time_len = time_len.expect("at least one variable");
        let time_span = sel.time_slice.resolve(&self.path, &time, time_len)?;
        Ok(Plan {
            time: time.clone(),
            time_len,
            time_span,
            vars,
            columns: column,
        })
    }

    /// Reads the time coordinate (the 1-D variable named like the time dimension, or `time` in
    /// an `.npz` archive) at the selected indices.
    fn time_axis(&mut self, plan: &Plan) -> Result<TimeAxis, DatasetError> {
        let coord_name = if self.format == Format::Npz {
            "time"
        } else {
            plan.time.as_str()
        };
        let coord = self
            .variables
            .iter()
            .position(|v| {
                v.name == coord_name
                    && v.shape.len() == 1
                    && v.shape[0] == plan.time_len
                    && v.dtype.is_numeric()
            })
            .map(|i| (i, self.variables[i].clone()));
        let mut axis = TimeAxis {
            dimension: plan.time.clone(),
            length: plan.time_len,
            span: plan.time_span,
            values: None,
            units: None,
            calendar: None,
        };
        if let Some((i, var)) = coord {
            let mut raw = Vec::with_capacity(plan.time_span.count);
            self.source.read_slab(i, &[plan.time_span], &mut raw)?;
            let cf = Cf::from_variable(&self.path, &var)?;
            let mut values = vec![0.0; raw.len()];
            cf.apply(&raw, &mut values)
                .map_err(|(pos, value, why)| DatasetError::Gap {
                    path: self.path.clone(),
                    name: var.name.clone(),
                    index: plan.time_span.at(pos).to_string(),
                    value,
                    why,
                })?;
            axis.values = Some(values);
            axis.units = var.text_attr("units");
            axis.calendar = var.text_attr("calendar");
        }
        Ok(axis)
    }

    /// Metadata of a planned selection (reads the time coordinate).
    pub fn describe(&mut self, plan: &Plan) -> Result<SelectionMeta, DatasetError> {
        let time = self.time_axis(plan)?;
        let global = ["title", "institution", "source", "history", "Conventions"]
            .iter()
            .filter_map(|k| {
                self.attributes
                    .get(*k)
                    .and_then(AttrValue::as_text)
                    .map(|v| (k.to_string(), v.to_string()))
            })
            .collect();
        Ok(SelectionMeta {
            path: self.path.clone(),
            format: self.format,
            fields: plan.vars.iter().map(|v| v.layout.clone()).collect(),
            time,
            global,
        })
    }

    /// Reads the whole selection into memory. Memory: the snapshots (time × columns × 8 bytes)
    /// plus one block of at most about 16 MB.
    ///
    /// Values are decoded straight into the result. On Linux the result is allocated with
    /// transparent huge pages advised: measured here, touching 2 GB of fresh 4 KiB pages took
    /// 5.6 s (a virtual machine's page faults), far longer than reading the file.
    pub fn read(&mut self, sel: &Selection) -> Result<Snapshots, DatasetError> {
        let plan = self.plan(sel)?;
        let meta = self.describe(&plan)?;
        let (t, d) = (plan.snapshots(), plan.columns());
        let mut values =
            Array2::from_shape_vec((t, d), zeroed_large(t * d)).expect("length is rows × columns");
        let rows = plan.block_rows(16 << 20);
        let mut raw = Vec::new();
        let mut first = 0;
        while first < t {
            let n = rows.min(t - first);
            let mut view = values.slice_mut(ndarray::s![first..first + n, ..]);
            self.read_block(&plan, first, n, &mut raw, &mut view)?;
            first += n;
        }
        Ok(Snapshots { values, meta })
    }

    /// Reads the selection in blocks of at most `block_rows` snapshots, calling `f(first, block)`
    /// with the index of the block's first snapshot (among the selected ones) and the block
    /// (rows × columns). Memory: one block plus one variable's share of it.
    pub fn stream<E, F>(&mut self, plan: &Plan, block_rows: usize, f: F) -> Result<(), E>
    where
        E: From<DatasetError>,
        F: FnMut(usize, ArrayView2<'_, f64>) -> Result<(), E>,
    {
        self.stream_range(plan, 0..plan.snapshots(), block_rows, f)
    }

    /// As [`Dataset::stream`], for the selected snapshots `range` only (indices among the
    /// selected snapshots; `first` passed to `f` counts from 0 of the whole selection).
    pub fn stream_range<E, F>(
        &mut self,
        plan: &Plan,
        range: Range<usize>,
        block_rows: usize,
        mut f: F,
    ) -> Result<(), E>
    where
        E: From<DatasetError>,
        F: FnMut(usize, ArrayView2<'_, f64>) -> Result<(), E>,
    {
        let block_rows = block_rows.max(1);
        let total = range.end.min(plan.snapshots());
        let mut first = range.start;
        if first >= total {
            return Ok(());
        }
        let mut block = Array2::<f64>::zeros((block_rows.min(total - first), plan.columns));
        let mut raw = Vec::new();
        while first < total {
            let rows = block_rows.min(total - first);
            let mut view = block.slice_mut(ndarray::s![..rows, ..]);
            self.read_block(plan, first, rows, &mut raw, &mut view)?;
            f(first, view.view())?;
            first += rows;
        }
        Ok(())
    }

    /// Fills `out` (rows × columns) with snapshots `first..first + rows` of the selection.
    fn read_block(
        &mut self,
        plan: &Plan,
        first: usize,
        rows: usize,
        raw: &mut Vec<f64>,
        out: &mut ArrayViewMut2<'_, f64>,
    ) -> Result<(), DatasetError> {
        for var in &plan.vars {
            let cols = var.layout.columns.clone();
            let size = cols.len();
            let mut spans = var.spans.clone();
            // With time first, one hyperslab holds the whole block in row order; otherwise each
            // snapshot is its own hyperslab.
            let per_call = if var.time_axis == 0 { rows } else { 1 };
            let mut r = 0;
            while r < rows {
                spans[var.time_axis] = Span {
                    start: plan.time_span.at(first + r),
                    count: per_call,
                    stride: plan.time_span.stride,
                };
                raw.clear();
                self.source.read_slab(var.index, &spans, raw)?;
                debug_assert_eq!(raw.len(), per_call * size);
                for k in 0..per_call {
                    let src = &raw[k * size..(k + 1) * size];
                    let mut row = out.row_mut(r + k);
                    let dst = row
                        .as_slice_mut()
                        .expect("block rows are contiguous")
                        .get_mut(cols.clone())
                        .expect("columns inside the block");
                    if let Err((pos, value, why)) = var.cf.apply(src, dst) {
                        return Err(self.gap(plan, var, first + r + k, pos, value, why));
                    }
                }
                r += per_call;
            }
        }
        Ok(())
    }

    fn gap(
        &self,
        plan: &Plan,
        var: &PlannedVar,
        snapshot: usize,
        pos: usize,
        value: f64,
        why: &'static str,
    ) -> DatasetError {
        let field_idx = unravel(pos, &var.layout.shape);
        let mut file_idx = Vec::with_capacity(var.spans.len());
        let mut f = field_idx.iter();
        let mut s = var.layout.spans.iter();
        for axis in 0..var.spans.len() {
            if axis == var.time_axis {
                file_idx.push(plan.time_span.at(snapshot));
            } else {
                let k = *f.next().expect("one index per field axis");
                file_idx.push(s.next().expect("one span per field axis").at(k));
            }
        }
        let index = file_idx
            .iter()
            .map(usize::to_string)
            .collect::<Vec<_>>()
            .join(", ");
        DatasetError::Gap {
            path: self.path.clone(),
            name: var.layout.name.clone(),
            index,
            value,
            why,
        }
    }
}

/// A checked selection, ready to read.
#[derive(Debug, Clone)]
pub struct Plan {
    time: String,
    time_len: usize,
    time_span: Span,
    vars: Vec<PlannedVar>,
    columns: usize,
}

#[derive(Debug, Clone)]
struct PlannedVar {
    index: usize,
    time_axis: usize,
    /// One span per dimension of the variable; the time span is set per read.
    spans: Vec<Span>,
    layout: FieldLayout,
    cf: Cf,
}

impl Plan {
    /// Number of selected snapshots.
    pub fn snapshots(&self) -> usize {
        self.time_span.count
    }

    /// Number of state columns.
    pub fn columns(&self) -> usize {
        self.columns
    }

    /// The selected variables' layouts.
    pub fn fields(&self) -> Vec<FieldLayout> {
        self.vars.iter().map(|v| v.layout.clone()).collect()
    }

    /// The time dimension's name.
    pub fn time_dimension(&self) -> &str {
        &self.time
    }

    /// Rows per block so that a block of float64 takes about `bytes`.
    pub fn block_rows(&self, bytes: usize) -> usize {
        (bytes / (8 * self.columns.max(1))).clamp(1, self.snapshots().max(1))
    }
}

/// Opens `path` and reads `selection` (see [`Dataset::read`]).
pub fn read_dataset(path: &Path, selection: &Selection) -> Result<Snapshots, DatasetError> {
    Dataset::open(path)?.read(selection)
}

#[cfg(feature = "netcdf4")]
fn open_netcdf4(path: &Path) -> Result<Opened, DatasetError> {
    netcdf4::open(path)
}

#[cfg(not(feature = "netcdf4"))]
fn open_netcdf4(path: &Path) -> Result<Opened, DatasetError> {
    Err(DatasetError::Netcdf4NotBuilt {
        path: path.to_path_buf(),
    })
}

/// A zero-filled vector of `n` float64, with transparent huge pages advised on Linux for large
/// sizes so that first touching it costs far fewer page faults.
fn zeroed_large(n: usize) -> Vec<f64> {
    let mut v: Vec<f64> = Vec::with_capacity(n);
    #[cfg(target_os = "linux")]
    {
        const HUGE: usize = 2 << 20;
        let bytes = n * std::mem::size_of::<f64>();
        if bytes >= 4 * HUGE {
            let start = v.as_mut_ptr() as usize;
            let aligned = start.next_multiple_of(HUGE);
            let end = (start + bytes) / HUGE * HUGE;
            if end > aligned {
                // SAFETY: advice only, on whole pages inside this vector's own allocation.
                unsafe {
                    libc::madvise(
                        aligned as *mut libc::c_void,
                        end - aligned,
                        libc::MADV_HUGEPAGE,
                    );
                }
            }
        }
    }
    v.resize(n, 0.0);
    v
}

/// The C-order multi-index of flat position `flat` in `shape`.
fn unravel(mut flat: usize, shape: &[usize]) -> Vec<usize> {
    let mut idx = vec![0; shape.len()];
    for (i, &n) in shape.iter().enumerate().rev() {
        if n > 0 {
            idx[i] = flat % n;
            flat /= n;
        }
    }
    idx
}

fn read_up_to(r: &mut impl std::io::Read, buf: &mut [u8]) -> std::io::Result<usize> {
    let mut got = 0;
    while got < buf.len() {
        match r.read(&mut buf[got..])? {
            0 => break,
            n => got += n,
        }
    }
    Ok(got)
}

fn printable(bytes: &[u8]) -> String {
    bytes
        .iter()
        .map(|&b| {
            if b.is_ascii_graphic() {
                (b as char).to_string()
            } else {
                format!("\\x{b:02x}")
            }
        })
        .collect()
}
