//! The dataset readers against NumPy and the netCDF4 Python library: a 2-D Kolmogorov-flow
//! ensemble is written by `tests/data/make_field_ensemble.py` (netCDF4-python writes the NetCDF
//! files in NETCDF3_CLASSIC, NETCDF3_64BIT_OFFSET, NETCDF3_64BIT_DATA and NETCDF4 formats; NumPy
//! writes the .npz archives), together with what those libraries read back; the tool's readers
//! must agree. The POD singular values are checked against `numpy.linalg.svd`.
//!
//! Needs Python 3 with NumPy and netCDF4. Without them the tests are skipped with a message,
//! unless the environment variable CI is set (CI installs them; there their absence is a failure).

mod common;
use closure_budget::data::coarse::{coarse_grain_snapshots, CoarseGrain};
use closure_budget::data::dataset::{
    AttrValue, DataType, Dataset, Format, Netcdf3Schema, Netcdf3Variable, Netcdf3Variant,
    Netcdf3Writer, Selection, Slice,
};
use closure_budget::data::ensemble::{read_members, read_runs};
use closure_budget::data::pod::{groups_of, FromDataset, InMemory, Pod, PodMethod, PodSpec};
use closure_budget::data::write_npy;
use common::python_ready;
use common::repo;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

/// The reference files, written once per test binary into a temporary folder.
fn reference() -> Option<&'static (PathBuf, Value)> {
    static DIR: OnceLock<Option<(PathBuf, Value)>> = OnceLock::new();
    DIR.get_or_init(|| {
        if !python_ready("dataset", "datasets") {
            return None;
        }
        let dir = tempfile::tempdir().unwrap().keep();
        let out = Command::new("python3")
            .arg(repo("tests/data/make_field_ensemble.py"))
            .arg(&dir)
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let sums: Value =
            serde_json::from_str(&std::fs::read_to_string(dir.join("checksums.json")).unwrap())
                .unwrap();
        Some((dir, sums))
    })
    .as_ref()
}

fn f(v: &Value) -> f64 {
    v.as_f64().unwrap()
}

/// Reads every time-dependent variable of `file` and compares it with what NumPy/netCDF4 read.
fn compare_with_python(dir: &Path, sums: &Value, file: &str) -> usize {
    let mut ds = Dataset::open(&dir.join(file)).unwrap();
    let vars = sums["files"][file].as_object().unwrap();
    let mut checked = 0;
    for (name, want) in vars {
        if name.starts_with('_') {
            continue;
        }
        let var = ds.variable(name).unwrap().clone();
        let time = if ds.format() == Format::Npz {
            "axis0"
        } else {
            "time"
        };
        if !var.dims.iter().any(|d| d == time) {
            continue;
        }
        let snap = ds.read(&Selection::variables(&[name])).unwrap();
        let shape: Vec<usize> = want["shape"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_u64().unwrap() as usize)
            .collect();
        assert_eq!(snap.values.nrows(), shape[0], "{file}:{name}");
        assert_eq!(
            snap.values.ncols(),
            shape[1..].iter().product::<usize>(),
            "{file}:{name}"
        );
        let flat: Vec<f64> = snap.values.iter().copied().collect();
        let sum: f64 = flat.iter().sum();
        let sum_sq: f64 = flat.iter().map(|v| v * v).sum();
        // Summation order differs from NumPy's pairwise sums: allow rounding of the order of
        // 1e-12 of the summed magnitude.
        let tol = 1e-12 * (f(&want["sum_sq"]) * flat.len() as f64).sqrt();
        assert!(
            (sum - f(&want["sum"])).abs() <= tol.max(1e-300),
            "{file}:{name} sum {sum} vs {}",
            want["sum"]
        );
        assert!(
            (sum_sq - f(&want["sum_sq"])).abs() <= 1e-12 * f(&want["sum_sq"]),
            "{file}:{name} sum of squares {sum_sq} vs {}",
            want["sum_sq"]
        );
        let first: Vec<f64> = want["first"].as_array().unwrap().iter().map(f).collect();
        assert_eq!(
            &flat[..first.len()],
            &first[..],
            "{file}:{name} first values"
        );
        assert_eq!(
            *flat.last().unwrap(),
            f(&want["last"]),
            "{file}:{name} last value"
        );
        checked += 1;
    }
    checked
}

#[test]
fn netcdf3_and_npz_values_match_what_python_reads() {
    let Some((dir, sums)) = reference() else {
        return;
    };
    let expect = [
        ("field_classic.nc", Format::Netcdf3Classic, 6),
        ("field_64bit.nc", Format::Netcdf3Offset64, 6),
        ("field_cdf5.nc", Format::Netcdf3Data64, 6),
        ("run0_classic.nc", Format::Netcdf3Classic, 6),
        ("field.npz", Format::Npz, 6),
        ("field_compressed.npz", Format::Npz, 6),
        ("run1.npz", Format::Npz, 4),
    ];
    for (file, format, vars) in expect {
        assert_eq!(Dataset::open(&dir.join(file)).unwrap().format(), format);
        assert_eq!(compare_with_python(dir, sums, file), vars, "{file}");
    }
}

#[cfg(feature = "netcdf4")]
#[test]
fn netcdf4_values_match_what_python_reads_and_the_classic_file() {
    let Some((dir, sums)) = reference() else {
        return;
    };
    assert_eq!(
        Dataset::open(&dir.join("field_nc4.nc")).unwrap().format(),
        Format::Netcdf4
    );
    assert_eq!(compare_with_python(dir, sums, "field_nc4.nc"), 6);
    let sel = Selection {
        variables: vec!["omega".into(), "omega_i16".into(), "u".into()],
        time_slice: Slice::new(5, Some(100), 7),
        slices: [("x".to_string(), Slice::new(1, None, 3))].into(),
        ..Selection::default()
    };
    let a = Dataset::open(&dir.join("field_nc4.nc"))
        .unwrap()
        .read(&sel)
        .unwrap();
    let b = Dataset::open(&dir.join("field_classic.nc"))
        .unwrap()
        .read(&sel)
        .unwrap();
    assert_eq!(a.values, b.values);
    assert_eq!(a.meta.fields, b.meta.fields);
    assert_eq!(a.meta.time, b.meta.time);
}

#[cfg(not(feature = "netcdf4"))]
#[test]
fn netcdf4_without_the_feature_says_how_to_read_it() {
    let Some((dir, _)) = reference() else {
        return;
    };
    let e = Dataset::open(&dir.join("field_nc4.nc"))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("NetCDF-4/HDF5") && e.contains("--features netcdf4") && e.contains("nccopy"),
        "{e}"
    );
}

#[test]
fn metadata_packing_and_the_time_coordinate() {
    let Some((dir, sums)) = reference() else {
        return;
    };
    let snap = Dataset::open(&dir.join("field_64bit.nc"))
        .unwrap()
        .read(&Selection::variables(&["omega", "omega_i16", "energy"]))
        .unwrap();
    let m = &snap.meta;
    assert_eq!(m.time.dimension, "time");
    assert_eq!(m.time.units.as_deref(), Some("1"));
    let dt = f(&sums["sample_interval"]);
    assert!((snap.sample_interval(None).unwrap() - dt).abs() < 1e-12);
    let w = &m.fields[0];
    assert_eq!(w.dims, ["run", "y", "x"]);
    assert_eq!(w.dtype, DataType::F32);
    assert_eq!(w.long_name.as_deref(), Some("vorticity"));
    assert_eq!(
        w.standard_name.as_deref(),
        Some("atmosphere_relative_vorticity")
    );
    let p = m.fields[1].packing.unwrap();
    assert_eq!((p.scale_factor, p.add_offset), (1e-3, 0.5));
    assert_eq!(m.fields[1].dtype, DataType::I16);
    // The packed copy agrees with the float32 field to half a quantisation step.
    let n = w.size();
    let diff = (0..snap.values.nrows())
        .flat_map(|t| (0..n).map(move |j| (t, j)))
        .map(|(t, j)| (snap.values[(t, j)] - snap.values[(t, n + j)]).abs())
        .fold(0.0, f64::max);
    assert!(diff <= 0.5e-3 + 1e-6, "{diff}");
    assert_eq!(m.fields[2].shape, vec![3]);
    assert_eq!(m.global["Conventions"], "CF-1.8");
    let t = snap.into_trajectory(None).unwrap();
    assert_eq!(t.meta.variables[0], "omega[0,0,0]");
    assert_eq!(t.meta.variables.last().unwrap(), "energy[2]");
    // In an .npz archive the `time` array is the coordinate of axis 0.
    let snap = Dataset::open(&dir.join("run2.npz"))
        .unwrap()
        .read(&Selection {
            variables: vec!["u".into()],
            time_slice: Slice::new(0, None, 4),
            ..Selection::default()
        })
        .unwrap();
    assert!((snap.sample_interval(None).unwrap() - 4.0 * dt).abs() < 1e-12);
}

#[test]
fn slices_agree_across_formats_and_with_the_full_read() {
    let Some((dir, _)) = reference() else {
        return;
    };
    let full = Dataset::open(&dir.join("field_classic.nc"))
        .unwrap()
        .read(&Selection::variables(&["omega", "v"]))
        .unwrap();
    let sel = Selection {
        variables: vec!["omega".into(), "v".into()],
        time: Some("time".into()),
        time_slice: Slice::new(10, Some(50), 3),
        slices: [
            ("run".to_string(), Slice::new(1, Some(3), 1)),
            ("y".to_string(), Slice::new(2, Some(30), 5)),
            ("x".to_string(), Slice::new(0, None, 2)),
        ]
        .into(),
    };
    let part = Dataset::open(&dir.join("field_classic.nc"))
        .unwrap()
        .read(&sel)
        .unwrap();
    let (runs, ny, nx) = (3, 32, 32);
    let ys: Vec<usize> = (2..30).step_by(5).collect();
    let xs: Vec<usize> = (0..32).step_by(2).collect();
    assert_eq!(part.values.nrows(), 14);
    assert_eq!(part.meta.fields[0].shape, vec![2, ys.len(), xs.len()]);
    let per_field = 2 * ys.len() * xs.len();
    for (k, t) in (10..50).step_by(3).enumerate() {
        let mut col = 0;
        for field in 0..2 {
            for r in 1..3 {
                for &y in &ys {
                    for &x in &xs {
                        let src = field * runs * ny * nx + (r * ny + y) * nx + x;
                        assert_eq!(part.values[(k, col)], full.values[(t, src)]);
                        col += 1;
                    }
                }
            }
        }
        assert_eq!(col, 2 * per_field);
    }
    // The same selection from the .npz archives (stored and deflated), whose axes are unnamed.
    for npz in ["field.npz", "field_compressed.npz"] {
        let sel_npz = Selection {
            variables: vec!["omega".into(), "v".into()],
            time: None,
            time_slice: sel.time_slice,
            slices: [
                ("axis1".to_string(), sel.slices["run"]),
                ("axis2".to_string(), sel.slices["y"]),
                ("axis3".to_string(), sel.slices["x"]),
            ]
            .into(),
        };
        let z = Dataset::open(&dir.join(npz))
            .unwrap()
            .read(&sel_npz)
            .unwrap();
        assert_eq!(z.values, part.values, "{npz}");
    }
    // The 64-bit-data (CDF-5) and 64-bit-offset files hold the same values.
    for other in ["field_64bit.nc", "field_cdf5.nc"] {
        let o = Dataset::open(&dir.join(other)).unwrap().read(&sel).unwrap();
        assert_eq!(o.values, part.values, "{other}");
    }
}

#[test]
fn errors_name_the_file_the_variable_and_what_to_do() {
    let Some((dir, _)) = reference() else {
        return;
    };
    let classic = dir.join("field_classic.nc");
    let e = Dataset::open(&dir.join("missing.nc"))
        .unwrap_err()
        .to_string();
    assert!(e.contains("cannot read") && e.contains("missing.nc"), "{e}");
    let text = dir.join("notes.nc");
    std::fs::write(&text, "time,u\n0,1\n").unwrap();
    let e = Dataset::open(&text).unwrap_err().to_string();
    assert!(
        e.contains("notes.nc")
            && e.contains("NetCDF-3")
            && e.contains(".npz")
            && e.contains("convert"),
        "{e}"
    );
    let mut ds = Dataset::open(&classic).unwrap();
    let e = ds
        .read(&Selection::variables(&["vorticity"]))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("'vorticity'")
            && e.contains("omega(time, run, y, x)")
            && e.contains("energy(time, run)"),
        "{e}"
    );
    let e = ds
        .read(&Selection {
            variables: vec!["omega".into()],
            time: Some("t".into()),
            ..Selection::default()
        })
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("time dimension 't' not found") && e.contains("time = 120 (unlimited)"),
        "{e}"
    );
    let e = ds
        .read(&Selection::variables(&["x"]))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("'x'") && e.contains("without the time dimension 'time'"),
        "{e}"
    );
    let e = ds
        .read(&Selection {
            variables: vec!["omega".into()],
            time_slice: Slice::new(0, Some(500), 1),
            ..Selection::default()
        })
        .unwrap_err()
        .to_string();
    assert!(e.contains("'time'") && e.contains("use at most 120"), "{e}");
    let e = ds
        .read(&Selection {
            variables: vec!["energy".into()],
            slices: [("y".to_string(), Slice::default())].into(),
            ..Selection::default()
        })
        .unwrap_err()
        .to_string();
    assert!(e.contains("'y'") && e.contains("run, time"), "{e}");
    // A fill value inside the data is refused with the variable and its first index.
    let e = Dataset::open(&dir.join("field_gap.nc"))
        .unwrap()
        .read(&Selection::variables(&["u", "omega"]))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("'omega'") && e.contains("[3, 0, 5, 7]") && e.contains("fill value"),
        "{e}"
    );
    // Slicing the gap away reads the rest.
    let ok = Dataset::open(&dir.join("field_gap.nc"))
        .unwrap()
        .read(&Selection {
            variables: vec!["omega".into()],
            time_slice: Slice::new(4, None, 1),
            ..Selection::default()
        })
        .unwrap();
    assert_eq!(ok.values.nrows(), 116);
    // Axes of .npz arrays are independent, except time, which must agree.
    let npz = dir.join("mixed.npz");
    let script = format!(
        "import numpy as np\nnp.savez({p:?}, a=np.ones((10, 3)), b=np.arange(40.0).reshape(10, 4), c=np.zeros((12, 2)))\n",
        p = npz.to_string_lossy()
    );
    let out = Command::new("python3")
        .args(["-c", &script])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let mut z = Dataset::open(&npz).unwrap();
    let ab = z.read(&Selection::variables(&["a", "b"])).unwrap();
    assert_eq!(ab.values.ncols(), 7);
    assert_eq!(ab.values[(9, 6)], 39.0);
    let e = z
        .read(&Selection::variables(&["a", "c"]))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("'axis0'") && e.contains("10 in 'a'") && e.contains("12 in 'c'"),
        "{e}"
    );
    // A single .npy is not a dataset; the message says what to do.
    let npy = dir.join("one.npy");
    write_npy(&npy, &ndarray::Array2::<f64>::zeros((2, 2))).unwrap();
    let e = Dataset::open(&npy).unwrap_err().to_string();
    assert!(e.contains("single .npy array"), "{e}");
}

#[test]
fn ensembles_from_files_and_from_a_member_dimension_agree() {
    let Some((dir, _)) = reference() else {
        return;
    };
    let sel = Selection::variables(&["omega", "u", "v"]);
    let files: Vec<PathBuf> = (0..3).map(|r| dir.join(format!("run{r}.npz"))).collect();
    let (from_files, metas) = read_runs(&files, &sel, None).unwrap();
    assert_eq!(metas.len(), 3);
    assert_eq!(from_files.len(), 3);
    assert_eq!(from_files.runs()[1].name, "run1");
    let (from_dim, _) = read_members(&dir.join("field_classic.nc"), &sel, "run", None).unwrap();
    assert_eq!(from_dim.runs()[2].name, "field_classic[2]");
    for (a, b) in from_files.runs().iter().zip(from_dim.runs()) {
        assert_eq!(a.trajectory.values, b.trajectory.values);
        assert_eq!(a.hash, b.hash);
    }
    let hashes: std::collections::BTreeSet<_> = from_files.runs().iter().map(|r| &r.hash).collect();
    assert_eq!(hashes.len(), 3);
    let (train, test) = from_files.hold_out(1).unwrap();
    assert_eq!((train.len(), test.len()), (2, 1));
    assert_eq!(train.total_samples(), 240);
    // NetCDF runs carry `run` in the column names of the member file, the per-run files do not.
    let nc_files: Vec<PathBuf> = (0..3)
        .map(|r| dir.join(format!("run{r}_classic.nc")))
        .collect();
    let (nc, _) = read_runs(&nc_files, &sel, None).unwrap();
    assert_eq!(
        nc.runs()[0].trajectory.values,
        from_files.runs()[0].trajectory.values
    );
}

/// Singular values of the centred, per-variable scaled snapshot matrix stored in `npy`, by
/// `numpy.linalg.svd`; `groups` are the column ranges of the stacked variables.
fn numpy_singular_values(npy: &Path, groups: &[(usize, usize)]) -> Vec<f64> {
    let script = format!(
        "import numpy as np, json\n\
         x = np.load({path:?})\n\
         x = x - x.mean(axis=0)\n\
         for a, b in {groups:?}:\n    x[:, a:b] /= np.sqrt(np.mean(x[:, a:b] ** 2))\n\
         print(json.dumps([float(s) for s in np.linalg.svd(x, compute_uv=False)]))\n",
        path = npy.to_string_lossy(),
        groups = groups
    );
    let out = Command::new("python3")
        .args(["-c", &script])
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    serde_json::from_slice(&out.stdout).unwrap()
}

/// Compares POD singular values with NumPy's: 1e-8 relative where σ ≥ 1e-3 σ₁ (where the Gram
/// route keeps that accuracy), 1e-7 σ₁ absolute below. Returns the worst relative error seen in
/// the first group.
fn compare_sigma(ours: &[f64], numpy: &[f64]) -> f64 {
    let s1 = numpy[0];
    let mut worst: f64 = 0.0;
    for (k, (&a, &b)) in ours.iter().zip(numpy).enumerate() {
        if b >= 1e-3 * s1 {
            let rel = (a - b).abs() / b;
            worst = worst.max(rel);
            assert!(rel <= 1e-8, "σ_{k}: {a} vs numpy {b} (relative {rel:e})");
        } else {
            assert!((a - b).abs() <= 1e-7 * s1, "σ_{k}: {a} vs numpy {b}");
        }
    }
    worst
}

#[test]
fn pod_singular_values_match_numpy_svd_by_both_methods() {
    let Some((dir, _)) = reference() else {
        return;
    };
    let sel = Selection::variables(&["omega", "u", "v"]);
    let files: Vec<PathBuf> = (0..3).map(|r| dir.join(format!("run{r}.npz"))).collect();
    let (ens, metas) = read_runs(&files, &sel, None).unwrap();
    let (train, test) = ens.hold_out(1).unwrap();
    let groups = groups_of(&metas[0].fields);
    let parts: Vec<_> = train
        .runs()
        .iter()
        .map(|r| r.trajectory.values.view())
        .collect();
    let x = ndarray::concatenate(ndarray::Axis(0), &parts).unwrap();
    let spec = PodSpec {
        energy: 0.99,
        ..PodSpec::default()
    };
    // 240 snapshots of 3 × 1024 values: method of snapshots.
    let pod = Pod::fit(&mut InMemory::stacked(parts.clone()), &groups, &spec).unwrap();
    assert_eq!(pod.summary.method, PodMethod::Snapshots);
    let npy = dir.join("pod_full.npy");
    write_npy(&npy, &x).unwrap();
    let g: Vec<(usize, usize)> = groups.iter().map(|(_, r)| (r.start, r.end)).collect();
    let want = numpy_singular_values(&npy, &g);
    let worst_snap = compare_sigma(&pod.summary.singular_values, &want);
    // Coarse-grained 4 × 4: 3 × 64 values < 240 snapshots: covariance.
    let filter = CoarseGrain::new(&[4, 4]);
    let coarse: Vec<_> = (0..3)
        .map(|r| {
            let snap = Dataset::open(&files[r]).unwrap().read(&sel).unwrap();
            coarse_grain_snapshots(&snap, &filter).unwrap()
        })
        .collect();
    let cparts: Vec<_> = coarse[..2].iter().map(|s| s.values.view()).collect();
    let cgroups = groups_of(&coarse[0].meta.fields);
    let cpod = Pod::fit(&mut InMemory::stacked(cparts.clone()), &cgroups, &spec).unwrap();
    assert_eq!(cpod.summary.method, PodMethod::Covariance);
    let cx = ndarray::concatenate(ndarray::Axis(0), &cparts).unwrap();
    let cnpy = dir.join("pod_coarse.npy");
    write_npy(&cnpy, &cx).unwrap();
    let cg: Vec<(usize, usize)> = cgroups.iter().map(|(_, r)| (r.start, r.end)).collect();
    let worst_cov = compare_sigma(
        &cpod.summary.singular_values,
        &numpy_singular_values(&cnpy, &cg),
    );
    // Held-out run: its reconstruction error is what a perfect reduced model could reach.
    let held = pod.relative_error(test.runs()[0].trajectory.values.view());
    let train_err = pod.relative_error(x.view());
    eprintln!(
        "POD: {} of {} modes for 99% energy (captured {:.4}); worst relative σ error vs numpy: \
         snapshots {worst_snap:.1e}, covariance {worst_cov:.1e}; relative reconstruction error \
         training {train_err:.4}, held-out run {held:.4}",
        pod.rank(),
        pod.summary.singular_values.len(),
        pod.summary.energy_captured
    );
    assert!((train_err - (1.0 - pod.summary.energy_captured).sqrt()).abs() < 1e-8);
    assert!(held > train_err && held < 1.0, "{held}");
    // Streaming from the file gives the same decomposition as the data in memory.
    let mut ds = Dataset::open(&dir.join("field_classic.nc")).unwrap();
    let one_run = Selection {
        slices: [("run".to_string(), Slice::index(0))].into(),
        ..sel.clone()
    };
    let plan = ds.plan(&one_run).unwrap();
    let stream_groups = groups_of(&plan.fields());
    let small = PodSpec {
        memory: 200_000,
        ..spec
    };
    let streamed = Pod::fit(
        &mut FromDataset {
            dataset: &mut ds,
            plan,
        },
        &stream_groups,
        &small,
    )
    .unwrap();
    let in_mem = Pod::fit(
        &mut InMemory::new(ens.runs()[0].trajectory.values.view()),
        &groups,
        &spec,
    )
    .unwrap();
    for (a, b) in streamed
        .summary
        .singular_values
        .iter()
        .zip(&in_mem.summary.singular_values)
        .take(in_mem.rank())
    {
        assert!((a - b).abs() <= 1e-10 * b, "{a} {b}");
    }
}

#[test]
fn files_written_by_the_netcdf3_writer_read_back_in_python() {
    let Some((dir, _)) = reference() else {
        return;
    };
    for (variant, name) in [
        (Netcdf3Variant::Classic, "w_classic.nc"),
        (Netcdf3Variant::Offset64, "w_64bit.nc"),
    ] {
        let path = dir.join(name);
        let schema = Netcdf3Schema {
            variant,
            dimensions: vec![
                ("t".into(), None),
                ("y".into(), Some(3)),
                ("x".into(), Some(5)),
            ],
            attributes: vec![("title".into(), AttrValue::Text("writer check".into()))],
            variables: vec![
                Netcdf3Variable {
                    name: "grid".into(),
                    dims: vec!["y".into(), "x".into()],
                    dtype: DataType::F64,
                    attributes: vec![],
                },
                Netcdf3Variable {
                    name: "t".into(),
                    dims: vec!["t".into()],
                    dtype: DataType::F64,
                    attributes: vec![("units".into(), AttrValue::Text("s".into()))],
                },
                Netcdf3Variable {
                    name: "q".into(),
                    dims: vec!["t".into(), "y".into(), "x".into()],
                    dtype: DataType::I16,
                    attributes: vec![
                        ("scale_factor".into(), AttrValue::Numbers(vec![0.5])),
                        ("_FillValue".into(), AttrValue::Numbers(vec![-999.0])),
                    ],
                },
                Netcdf3Variable {
                    name: "w".into(),
                    dims: vec!["t".into(), "y".into(), "x".into()],
                    dtype: DataType::F32,
                    attributes: vec![],
                },
            ],
        };
        let mut w = Netcdf3Writer::create(&path, schema).unwrap();
        w.write_fixed("grid", &(0..15).map(|v| v as f64).collect::<Vec<_>>())
            .unwrap();
        for r in 0..4 {
            let q: Vec<f64> = (0..15).map(|v| (v + 100 * r) as f64).collect();
            let wv: Vec<f64> = (0..15).map(|v| v as f64 * 0.25 - r as f64).collect();
            w.write_record(&[&[r as f64 * 0.1], &q, &wv]).unwrap();
        }
        w.finish().unwrap();
        let script = format!(
            "import netCDF4, numpy as np\n\
             d = netCDF4.Dataset({p:?})\n\
             print(d.file_format, len(d.dimensions['t']), float(d['q'][:].sum()), float(d['w'][:].sum()), \
                   float(d['grid'][:].sum()), float(d['t'][:].sum()), d['t'].units, d.title)\n",
            p = path.to_string_lossy()
        );
        let out = Command::new("python3")
            .args(["-c", &script])
            .output()
            .unwrap();
        assert!(
            out.status.success(),
            "{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let text = String::from_utf8_lossy(&out.stdout).trim().to_string();
        let fmt = match variant {
            Netcdf3Variant::Classic => "NETCDF3_CLASSIC",
            Netcdf3Variant::Offset64 => "NETCDF3_64BIT_OFFSET",
        };
        // q unpacks to 0.5 × (v + 100 r): 0.5 × (4 × 105 + 15 × 600) = 4710; w sums to
        // 4 × 26.25 − 15 × 6 = 15; grid 105; t 0.6.
        assert_eq!(
            text,
            format!("{fmt} 4 4710.0 15.0 105.0 0.6000000000000001 s writer check"),
            "{name}"
        );
        let back = Dataset::open(&path)
            .unwrap()
            .read(&Selection::variables(&["q", "w"]))
            .unwrap();
        assert_eq!(back.values[(3, 14)], 0.5 * 314.0);
        assert_eq!(back.values[(3, 15 + 14)], 14.0 * 0.25 - 3.0);
    }
}
