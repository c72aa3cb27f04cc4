//! Readers and writers for trajectories: `.npy` arrays with a JSON metadata sidecar, and CSV with a
//! header row of variable names and one row per sample; plus float64 `.npy` arrays of any
//! dimension ([`read_npy`], [`write_npy`]).
//!
//! Reference: the NumPy `.npy` format, version 1.0–3.0 (numpy.lib.format documentation).

use super::{DataError, Trajectory, TrajectoryMeta, SIDECAR_SCHEMA};
use crate::atomic::write_atomic;
use ndarray::{Array, Array2, ArrayBase, Data, Dimension};
use ndarray_npy::{ReadNpyExt, WriteNpyExt};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Which files [`write_trajectory`] produces besides the sidecar.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct OutputFormats {
    pub npy: bool,
    pub csv: bool,
}

/// Path of the sidecar that belongs to a data file: `run.npy` → `run.json`.
fn sidecar_path(path: &Path) -> PathBuf {
    path.with_extension("json")
}

/// Path of the subgrid array that belongs to a data file: `run.npy` → `run.subgrid.npy`.
fn subgrid_path(path: &Path) -> PathBuf {
    path.with_extension("subgrid.npy")
}

/// Reads a trajectory from `.npy` (plus `.json` sidecar and `.subgrid.npy` when present) or `.csv`.
///
/// `sample_interval` is used when no sidecar gives one; when both exist they must agree.
/// Every value is checked to be finite.
pub fn read_trajectory(path: &Path, sample_interval: Option<f64>) -> Result<Trajectory, DataError> {
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    let sidecar = read_sidecar(&sidecar_path(path))?;
    let (values, header) = match ext.as_str() {
        "npy" => (read_npy(path, TRAJECTORY_SHAPE)?, None),
        "csv" => {
            let (v, h) = read_csv(path)?;
            (v, Some(h))
        }
        _ => {
            return Err(DataError::UnsupportedFormat {
                path: path.to_path_buf(),
                extension: ext,
            })
        }
    };
    if values.nrows() < 2 || values.ncols() == 0 {
        return Err(DataError::TooSmall {
            path: path.to_path_buf(),
            samples: values.nrows(),
            variables: values.ncols(),
        });
    }
    let mut meta = match sidecar {
        Some(meta) => {
            if let Some(dt) = sample_interval {
                if (dt - meta.sample_interval).abs() > 1e-12 * dt.abs().max(1.0) {
                    return Err(DataError::Sidecar {
                        path: sidecar_path(path),
                        reason: format!(
                            "its sample-interval {} differs from the study's {}; remove one of them",
                            meta.sample_interval, dt
                        ),
                    });
                }
            }
            meta
        }
        None => {
            let dt = sample_interval.ok_or_else(|| DataError::MissingSampleInterval {
                path: path.to_path_buf(),
            })?;
            TrajectoryMeta {
                schema: SIDECAR_SCHEMA.to_string(),
                system: None,
                parameters: BTreeMap::new(),
                dt: None,
                sample_interval: dt,
                spin_up: None,
                variables: Vec::new(),
                subgrid_variables: Vec::new(),
                seed: None,
                tool_version: String::new(),
            }
        }
    };
    if !(meta.sample_interval.is_finite() && meta.sample_interval > 0.0) {
        return Err(DataError::Sidecar {
            path: sidecar_path(path),
            reason: format!(
                "sample-interval must be a positive number, got {}",
                meta.sample_interval
            ),
        });
    }
    if let Some(h) = header {
        if !meta.variables.is_empty() && meta.variables != h {
            return Err(DataError::Sidecar {
                path: sidecar_path(path),
                reason: "its variable names differ from the CSV header".into(),
            });
        }
        meta.variables = h;
    }
    if meta.variables.is_empty() {
        meta.variables = (0..values.ncols()).map(|i| format!("v{i}")).collect();
    }
    if meta.variables.len() != values.ncols() {
        return Err(DataError::Sidecar {
            path: sidecar_path(path),
            reason: format!(
                "it names {} variables but the array has {} columns",
                meta.variables.len(),
                values.ncols()
            ),
        });
    }
    check_finite(path, &values, &meta.variables)?;
    let sub_path = subgrid_path(path);
    let subgrid = if ext == "npy" && sub_path.exists() {
        let s = read_npy(&sub_path, SUBGRID_SHAPE)?;
        if s.nrows() != values.nrows() {
            return Err(DataError::Npy {
                path: sub_path,
                shape: SUBGRID_SHAPE.into(),
                reason: format!(
                    "{} rows, but the state array has {}",
                    s.nrows(),
                    values.nrows()
                ),
            });
        }
        if meta.subgrid_variables.len() != s.ncols() {
            meta.subgrid_variables = (0..s.ncols()).map(|i| format!("u{i}")).collect();
        }
        check_finite(&sub_path, &s, &meta.subgrid_variables)?;
        Some(s)
    } else {
        None
    };
    Ok(Trajectory {
        values,
        subgrid,
        meta,
    })
}

fn check_finite(path: &Path, a: &Array2<f64>, names: &[String]) -> Result<(), DataError> {
    for ((sample, var), &value) in a.indexed_iter() {
        if !value.is_finite() {
            return Err(DataError::NonFinite {
                path: path.to_path_buf(),
                sample,
                variable: names[var].clone(),
                value,
            });
        }
    }
    Ok(())
}

fn read_sidecar(path: &Path) -> Result<Option<TrajectoryMeta>, DataError> {
    if !path.exists() {
        return Ok(None);
    }
    let text = std::fs::read_to_string(path).map_err(|source| DataError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let meta: TrajectoryMeta = serde_json::from_str(&text).map_err(|e| DataError::Sidecar {
        path: path.to_path_buf(),
        reason: e.to_string(),
    })?;
    if meta.schema != SIDECAR_SCHEMA {
        return Err(DataError::Sidecar {
            path: path.to_path_buf(),
            reason: format!(
                "schema '{}' is not supported (expected '{SIDECAR_SCHEMA}')",
                meta.schema
            ),
        });
    }
    Ok(Some(meta))
}

/// Shape of a trajectory array, for messages.
const TRAJECTORY_SHAPE: &str = "(samples, variables)";
/// Shape of a subgrid array, for messages.
const SUBGRID_SHAPE: &str = "(samples, subgrid variables)";

/// Reads a float64 `.npy` array with `D`'s number of dimensions (either byte order, C or Fortran
/// order). `shape` describes the expected shape in messages, e.g. `"(samples, variables)"`.
///
/// A file whose header declares more values than the file has bytes is refused before any
/// memory is set aside for them, so a damaged header cannot exhaust memory (whatever its dtype,
/// every value takes at least one byte).
pub fn read_npy<D: Dimension>(path: &Path, shape: &str) -> Result<Array<f64, D>, DataError> {
    let npy_err = |reason: String| DataError::Npy {
        path: path.to_path_buf(),
        shape: shape.to_string(),
        reason,
    };
    let bytes = std::fs::metadata(path)
        .map_err(|source| DataError::Read {
            path: path.to_path_buf(),
            source,
        })?
        .len();
    let file = std::fs::File::open(path).map_err(|source| DataError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let mut reader = std::io::BufReader::new(file);
    if let Some(declared) = declared_shape(&mut reader) {
        let values = declared
            .iter()
            .try_fold(1u64, |acc, &v| acc.checked_mul(v as u64));
        if values.is_none_or(|v| v > bytes) {
            return Err(npy_err(format!(
                "its header declares shape {declared:?}, more values than the file has bytes ({bytes}); the file is damaged"
            )));
        }
    }
    use std::io::Seek;
    reader.rewind().map_err(|source| DataError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    Array::<f64, D>::read_npy(reader).map_err(|e| npy_err(e.to_string()))
}

/// Samples and variables of a trajectory file as far as its first bytes tell, without reading
/// its values: a `.npy` header's shape, a `.csv` header's columns (its rows are not counted).
/// A file that cannot be opened is an error; a shape that cannot be told is `None`, left to
/// [`read_trajectory`] to judge.
pub fn trajectory_columns(path: &Path) -> Result<(Option<usize>, Option<usize>), DataError> {
    let read = |source| DataError::Read {
        path: path.to_path_buf(),
        source,
    };
    let file = std::fs::File::open(path).map_err(read)?;
    if file.metadata().map_err(read)?.is_dir() {
        return Err(read(std::io::Error::other("it is a folder, not a file")));
    }
    let mut reader = std::io::BufReader::new(file);
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    Ok(match ext.as_str() {
        "npy" => match declared_shape(&mut reader).as_deref() {
            Some(&[rows, columns]) => (Some(rows), Some(columns)),
            _ => (None, None),
        },
        "csv" => {
            use std::io::BufRead;
            let mut header = String::new();
            reader.read_line(&mut header).map_err(read)?;
            let cells = header.trim_end().split(',').count();
            (None, (!header.trim().is_empty()).then_some(cells))
        }
        _ => (None, None),
    })
}

/// The shape declared in a `.npy` header, when the header can be read; `None` leaves the
/// judgement to the full reader.
fn declared_shape(reader: &mut impl std::io::Read) -> Option<Vec<usize>> {
    let mut magic = [0u8; 8];
    reader.read_exact(&mut magic).ok()?;
    if &magic[..6] != b"\x93NUMPY" {
        return None;
    }
    let len = match magic[6] {
        1 => {
            let mut b = [0u8; 2];
            reader.read_exact(&mut b).ok()?;
            u16::from_le_bytes(b) as usize
        }
        2 | 3 => {
            let mut b = [0u8; 4];
            reader.read_exact(&mut b).ok()?;
            u32::from_le_bytes(b) as usize
        }
        _ => return None,
    };
    // A header describes dtype, order and shape in a few dozen bytes.
    if len > 1 << 20 {
        return None;
    }
    let mut header = vec![0u8; len];
    reader.read_exact(&mut header).ok()?;
    let header = String::from_utf8_lossy(&header);
    let after = &header[header.find("shape")? + "shape".len()..];
    let tuple = &after[after.find('(')? + 1..];
    let tuple = &tuple[..tuple.find(')')?];
    tuple
        .split(',')
        .map(str::trim)
        .filter(|t| !t.is_empty())
        .map(|t| t.trim_end_matches('L').parse().ok())
        .collect()
}

/// Writes a float64 array as `.npy` in C order, atomically (any memory layout in, C order out).
pub fn write_npy<S, D>(path: &Path, a: &ArrayBase<S, D>) -> Result<(), DataError>
where
    S: Data<Elem = f64>,
    D: Dimension,
{
    let mut buf = Vec::new();
    a.as_standard_layout()
        .write_npy(&mut buf)
        .map_err(|e| DataError::Npy {
            path: path.to_path_buf(),
            shape: format!("{:?}", a.shape()),
            reason: e.to_string(),
        })?;
    write_atomic(path, &buf).map_err(|source| DataError::Write {
        path: path.to_path_buf(),
        source,
    })
}

fn read_csv(path: &Path) -> Result<(Array2<f64>, Vec<String>), DataError> {
    let file = std::fs::File::open(path).map_err(|source| DataError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .trim(csv::Trim::All)
        .from_reader(std::io::BufReader::new(file));
    let csv_err = |line: u64, reason: String| DataError::Csv {
        path: path.to_path_buf(),
        line,
        reason,
    };
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| csv_err(1, e.to_string()))?
        .iter()
        .map(str::to_string)
        .collect();
    if header.is_empty() || header.iter().any(|h| h.is_empty()) {
        return Err(csv_err(
            1,
            "the header row must name every column (variable names)".into(),
        ));
    }
    if header.iter().all(|h| h.parse::<f64>().is_ok()) {
        return Err(csv_err(
            1,
            format!(
                "the first row ({}) holds numbers, not variable names: the CSV needs a header row naming every column; add one (e.g. x,y,z)",
                header.join(",")
            ),
        ));
    }
    let mut seen = std::collections::BTreeSet::new();
    if let Some(dup) = header.iter().find(|h| !seen.insert(h.as_str())) {
        return Err(csv_err(
            1,
            format!("the header names the column '{dup}' twice; give every column its own name"),
        ));
    }
    let d = header.len();
    let mut values = Vec::new();
    let mut record = csv::StringRecord::new();
    loop {
        match rdr.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {}
            Err(e) => {
                let line = e.position().map(|p| p.line()).unwrap_or(0);
                let reason = match e.kind() {
                    csv::ErrorKind::UnequalLengths {
                        expected_len, len, ..
                    } => format!(
                        "row has {len} cells but the header has {expected_len}; every row needs one value per variable"
                    ),
                    _ => e.to_string(),
                };
                return Err(csv_err(line, reason));
            }
        }
        let line = record.position().map(|p| p.line()).unwrap_or(0);
        for (col, cell) in record.iter().enumerate() {
            let v: f64 = cell.parse().map_err(|_| {
                csv_err(
                    line,
                    format!("cell '{cell}' in column '{}' is not a number", header[col]),
                )
            })?;
            values.push(v);
        }
    }
    let rows = values.len() / d;
    let a = Array2::from_shape_vec((rows, d), values).expect("rows checked to have equal length");
    Ok((a, header))
}

/// Writes a trajectory next to `path` (whose extension is replaced): `.npy` (+ `.subgrid.npy`)
/// and/or `.csv`, always with the `.json` sidecar. Every file is written atomically. Returns the
/// paths written.
pub fn write_trajectory(
    traj: &Trajectory,
    path: &Path,
    formats: OutputFormats,
) -> Result<Vec<PathBuf>, DataError> {
    let mut written = Vec::new();
    let write = |p: &Path, bytes: &[u8]| {
        write_atomic(p, bytes).map_err(|source| DataError::Write {
            path: p.to_path_buf(),
            source,
        })
    };
    if formats.npy {
        let p = path.with_extension("npy");
        write_npy(&p, &traj.values)?;
        written.push(p);
        if let Some(s) = &traj.subgrid {
            let p = subgrid_path(path);
            write_npy(&p, s)?;
            written.push(p);
        }
    }
    if formats.csv {
        let p = path.with_extension("csv");
        let mut w = csv::Writer::from_writer(Vec::new());
        let mut header = traj.meta.variables.clone();
        if traj.subgrid.is_some() {
            header.extend(traj.meta.subgrid_variables.iter().cloned());
        }
        let io_err = |e: csv::Error| DataError::Csv {
            path: p.clone(),
            line: 0,
            reason: e.to_string(),
        };
        w.write_record(&header).map_err(io_err)?;
        for (t, row) in traj.values.rows().into_iter().enumerate() {
            let mut cells: Vec<String> = row.iter().map(|v| format!("{v:e}")).collect();
            if let Some(s) = &traj.subgrid {
                cells.extend(s.row(t).iter().map(|v| format!("{v:e}")));
            }
            w.write_record(&cells).map_err(io_err)?;
        }
        let bytes = w.into_inner().map_err(|e| DataError::Csv {
            path: p.clone(),
            line: 0,
            reason: e.to_string(),
        })?;
        write(&p, &bytes)?;
        written.push(p);
    }
    let side = sidecar_path(path);
    let json = serde_json::to_vec_pretty(&traj.meta).expect("metadata serialises");
    write(&side, &json)?;
    written.push(side);
    Ok(written)
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn meta(vars: &[&str]) -> TrajectoryMeta {
        TrajectoryMeta {
            schema: SIDECAR_SCHEMA.into(),
            system: Some("test".into()),
            parameters: BTreeMap::from([("forcing".to_string(), 8.0)]),
            dt: Some(0.01),
            sample_interval: 0.05,
            spin_up: Some(1.0),
            variables: vars.iter().map(|s| s.to_string()).collect(),
            subgrid_variables: vec!["u0".into(), "u1".into()],
            seed: Some(3),
            tool_version: "0".into(),
        }
    }

    #[test]
    fn npy_round_trip_with_sidecar_and_subgrid() {
        let dir = tempfile::tempdir().unwrap();
        let t = Trajectory {
            values: array![[1.0, 2.0], [3.0, 4.0], [5.0, 6.5]],
            subgrid: Some(array![[0.1, 0.2], [0.3, 0.4], [0.5, 0.6]]),
            meta: meta(&["a", "b"]),
        };
        let p = dir.path().join("run.npy");
        write_trajectory(
            &t,
            &p,
            OutputFormats {
                npy: true,
                csv: true,
            },
        )
        .unwrap();
        let back = read_trajectory(&p, None).unwrap();
        assert_eq!(back.values, t.values);
        assert_eq!(back.subgrid, t.subgrid);
        assert_eq!(back.meta, t.meta);
        let csv_back = read_trajectory(&dir.path().join("run.csv"), None);
        // The CSV carries the subgrid columns too, so its header differs from the sidecar's names.
        assert!(csv_back.is_err());
    }

    #[test]
    fn csv_errors_name_the_line_and_the_cell() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("d.csv");
        std::fs::write(&p, "x,y\n1,2\n3\n").unwrap();
        let e = read_trajectory(&p, Some(0.1)).unwrap_err().to_string();
        assert!(e.contains("line 3") && e.contains("1 cells"), "{e}");
        std::fs::write(&p, "x,y\n1,2\n3,abc\n").unwrap();
        let e = read_trajectory(&p, Some(0.1)).unwrap_err().to_string();
        assert!(e.contains("'abc'") && e.contains("column 'y'"), "{e}");
        std::fs::write(&p, "x,y\n1,2\n3,NaN\n").unwrap();
        let e = read_trajectory(&p, Some(0.1)).unwrap_err().to_string();
        assert!(
            e.contains("sample 1") && e.contains("'y'") && e.contains("finite"),
            "{e}"
        );
        std::fs::write(&p, "x,y\n1,2\n3,4\n").unwrap();
        let e = read_trajectory(&p, None).unwrap_err().to_string();
        assert!(e.contains("sample-interval"), "{e}");
        let t = read_trajectory(&p, Some(0.1)).unwrap();
        assert_eq!(t.values, array![[1.0, 2.0], [3.0, 4.0]]);
        assert_eq!(t.meta.variables, vec!["x", "y"]);
    }

    #[test]
    fn npy_arrays_of_any_dimension_round_trip_in_c_order() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.npy");
        let a =
            ndarray::Array3::from_shape_fn((2, 3, 4), |(i, j, k)| (100 * i + 10 * j + k) as f64);
        // A transposed view has neither C nor Fortran layout; it is written in C order.
        let t = a.view().permuted_axes([2, 1, 0]);
        write_npy(&p, &t).unwrap();
        let back: ndarray::Array3<f64> = read_npy(&p, "(4, 3, 2)").unwrap();
        assert_eq!(back, t);
        let bytes = std::fs::read(&p).unwrap();
        let header = String::from_utf8_lossy(&bytes[..128]);
        assert!(header.contains("'fortran_order': False"), "{header}");
        // The wrong number of dimensions is an error naming the expected shape.
        let e = read_npy::<ndarray::Ix2>(&p, "(samples, variables)")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("a.npy") && e.contains("(samples, variables)"),
            "{e}"
        );
    }

    #[test]
    fn npy_with_a_damaged_header_or_another_dtype_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.npy");
        // A version 1.0 header claiming 10^12 values, followed by 32 bytes of data.
        let mut header =
            "{'descr': '<f8', 'fortran_order': False, 'shape': (1000000, 1000000), }".to_string();
        while !(10 + header.len() + 1).is_multiple_of(64) {
            header.push(' ');
        }
        header.push('\n');
        let mut bytes = b"\x93NUMPY\x01\x00".to_vec();
        bytes.extend((header.len() as u16).to_le_bytes());
        bytes.extend(header.bytes());
        bytes.extend([0u8; 32]);
        std::fs::write(&p, &bytes).unwrap();
        let e = read_npy::<ndarray::Ix2>(&p, "(2, 2)")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("[1000000, 1000000]") && e.contains("damaged"),
            "{e}"
        );
        // float32 data is not read as float64.
        let f32_array = array![[1.0f32, 2.0]];
        let mut buf = Vec::new();
        f32_array.write_npy(&mut buf).unwrap();
        std::fs::write(&p, &buf).unwrap();
        let e = read_npy::<ndarray::Ix2>(&p, "(1, 2)")
            .unwrap_err()
            .to_string();
        assert!(e.contains("float64") && e.contains("f4"), "{e}");
    }

    #[test]
    fn missing_file_and_unknown_type_are_clear() {
        let e = read_trajectory(Path::new("/nonexistent/run.npy"), Some(1.0))
            .unwrap_err()
            .to_string();
        assert!(e.contains("cannot read") && e.contains("run.npy"), "{e}");
        let e = read_trajectory(Path::new("run.h5"), Some(1.0))
            .unwrap_err()
            .to_string();
        assert!(e.contains("unsupported file type"), "{e}");
    }
}
