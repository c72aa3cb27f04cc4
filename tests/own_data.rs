//! The user's own gridded runs through a study file: a 2-D convection ensemble written as
//! NetCDF by the netCDF4 Python library (`tests/data/make_convection_ensemble.py`), read as
//! several runs, coarse-grained, reduced by POD fitted on the training pool, checked, run and
//! reported; POD singular values against NumPy's SVD of the same snapshots; adding a held-in run
//! reuses every point; and a study with several data-file problems names them all at once.

mod common;
use closure_budget::study::results::PlanDocument;
use common::*;
use std::path::Path;
use std::process::Command;

/// Writes the example study and its four runs (`data/conv0.nc` … `conv3.nc`) into `dir`.
fn example(dir: &Path) {
    let out = Command::new("python3")
        .arg(repo("tests/data/make_convection_ensemble.py"))
        .arg(dir.join("data"))
        .output()
        .unwrap();
    assert!(
        out.status.success(),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    std::fs::copy(
        repo("studies/fields/convection-ensemble.toml"),
        dir.join("study.toml"),
    )
    .unwrap();
}

fn plan_json(out: &Path) -> PlanDocument {
    serde_json::from_str(&std::fs::read_to_string(out.join("budget.json")).unwrap()).unwrap()
}

/// Singular values by `numpy.linalg.svd` of the training pool as the study reduces it: the
/// first run's `psi` and `theta`, box-filtered by 2 × 2 block means, centred by the temporal
/// mean, each variable divided by the RMS of its fluctuations.
fn numpy_singular_values(run: &Path) -> Vec<f64> {
    let script = format!(
        "import numpy as np, netCDF4, json\n\
         d = netCDF4.Dataset({path:?})\n\
         parts = []\n\
         for name in ['psi', 'theta']:\n    \
             a = np.asarray(d[name][0:600], dtype=np.float64)\n    \
             t, nz, nx = a.shape\n    \
             c = a.reshape(t, nz // 2, 2, nx // 2, 2).mean(axis=(2, 4)).reshape(t, -1)\n    \
             c = c - c.mean(axis=0)\n    \
             parts.append(c / np.sqrt(np.mean(c ** 2)))\n\
         x = np.hstack(parts)\n\
         print(json.dumps([float(s) for s in np.linalg.svd(x, compute_uv=False)]))\n",
        path = run.to_string_lossy()
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

#[test]
fn a_netcdf_ensemble_runs_reduced_by_pod_and_a_new_held_in_run_reuses_every_point() {
    if !python_ready("own-data", "own_data") {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    example(dir);

    let o = run_in(dir, &["check", "study.toml"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let text = stdout(&o);
    assert!(
        text.contains("data: fields psi, theta of")
            && text.contains("coarse-grained by [2, 2]")
            && text.contains("test from the last 1 run"),
        "{text}"
    );

    let o = run_in(dir, &["run", "study.toml", "--out", "out", "--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let doc = plan_json(&dir.join("out"));
    let data = doc.data.as_ref().unwrap();
    let own = data.own_data.as_ref().expect("own data in the contract");
    assert_eq!(own.format, "NetCDF-3 classic");
    assert_eq!(own.time_dimension, "time");
    assert_eq!(own.sample_interval_from, "time coordinate");
    assert!((data.sample_interval - 0.05).abs() < 1e-12);
    // CF attributes of the variables; 16 × 32 grids, 8 × 16 after coarse-graining.
    let theta = &own.fields[1];
    assert_eq!(theta.name, "theta");
    assert_eq!(theta.units.as_deref(), Some("K"));
    assert_eq!(
        theta.long_name.as_deref(),
        Some("temperature deviation from the conductive profile")
    );
    assert_eq!(
        (theta.shape.clone(), theta.reduced_shape.clone()),
        (vec![16, 32], vec![8, 16])
    );
    assert_eq!((own.selected_columns, own.coarse_columns), (1024, 256));
    // Runs: roles, and hashes for the ones the study uses.
    let roles: Vec<(&str, &str)> = own
        .runs
        .iter()
        .map(|r| (r.name.as_str(), r.role.as_str()))
        .collect();
    assert_eq!(
        roles,
        vec![
            ("conv0", "training pool"),
            ("conv1", "training (not trained on)"),
            ("conv3", "held out")
        ]
    );
    assert!(own.runs[0].reduced_sha256.is_some() && own.runs[1].reduced_sha256.is_none());
    assert_eq!(own.held_out_runs, 1);
    // The test initial conditions all lie in the held-out run, which comes first.
    assert_eq!(data.training_pool, 600);
    assert!(data.test_range[1] + 60 < 600, "{:?}", data.test_range);

    // POD: fitted on the training pool (600 snapshots of conv0), singular values as NumPy's SVD
    // of the same snapshots — 1e-8 relative where σ ≥ 1e-3 σ₁ (the Gram route's accuracy, see
    // src/data/pod.rs), 1e-7 σ₁ absolute below.
    let pod = own.pod.as_ref().expect("a POD");
    assert_eq!((pod.snapshots, pod.dim), (600, 256));
    assert!(pod.fitted_on.contains("conv0") && pod.fitted_on.contains("never the held-out"));
    let numpy = numpy_singular_values(&dir.join("data/conv0.nc"));
    let s1 = numpy[0];
    for (k, (&a, &b)) in pod.singular_values.iter().zip(&numpy).enumerate() {
        if b >= 1e-3 * s1 {
            assert!((a - b).abs() <= 1e-8 * b, "σ_{k}: {a} vs numpy {b}");
        } else {
            assert!((a - b).abs() <= 1e-7 * s1, "σ_{k}: {a} vs numpy {b}");
        }
    }
    // The energy rule on NumPy's values: the fewest modes reaching 99%.
    let total: f64 = numpy.iter().map(|s| s * s).sum();
    let mut acc = 0.0;
    let r = numpy
        .iter()
        .position(|s| {
            acc += s * s;
            acc / total >= 0.99
        })
        .unwrap()
        + 1;
    assert_eq!(pod.modes, r);
    assert_eq!(own.state_columns, r);
    assert_eq!(data.variables.len(), r);
    assert!(pod.energy_captured >= 0.99);
    // The held-out run is reconstructed about as well as the energy rule promises, and the
    // reconstruction floor is a valid-time summary of the test initial conditions.
    assert_eq!(pod.held_out_error[0].run, "conv3");
    assert!(
        pod.held_out_error[0].relative_error < 0.2,
        "{:?}",
        pod.held_out_error
    );
    assert!(pod.reconstruction_floor.mean > 0.0);
    assert!(doc
        .skill
        .as_ref()
        .unwrap()
        .definition
        .contains("reconstructed field"));
    let model = &doc.models[0];
    assert_eq!(model.points.len(), 4);
    // More training data, longer valid times (measured here: about 0.4 at 60 samples, 2 at 480).
    assert!(
        model.points[3].mean > model.points[0].mean,
        "{:?}",
        model.points
    );
    let report = std::fs::read_to_string(dir.join("out/report.html")).unwrap();
    for needle in [
        "Your data and its reduction",
        "temperature deviation from the conductive profile",
        "Ceiling of the reduction",
        "conv3",
    ] {
        assert!(report.contains(needle), "report lacks {needle}");
    }
    let first = doc.points.unwrap();
    assert_eq!((first.planned, first.computed), (8, 8));

    // A new held-in run after the training runs: the training pool, the POD (fitted on it) and
    // the held-out run are unchanged, so every point is reused.
    let study = std::fs::read_to_string(dir.join("study.toml"))
        .unwrap()
        .replace(
            r#"runs = ["data/conv0.nc", "data/conv1.nc", "data/conv3.nc"]"#,
            r#"runs = ["data/conv0.nc", "data/conv1.nc", "data/conv2.nc", "data/conv3.nc"]"#,
        );
    std::fs::write(dir.join("study.toml"), study).unwrap();
    let o = run_in(dir, &["run", "study.toml", "--out", "out", "--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let again = plan_json(&dir.join("out"));
    let counts = again.points.as_ref().unwrap();
    assert_eq!(
        (counts.planned, counts.reused, counts.computed),
        (8, 8, 0),
        "{counts:?}"
    );
    let own = again.data.as_ref().unwrap().own_data.as_ref().unwrap();
    assert_eq!(own.runs.len(), 4);
    assert_eq!(own.runs[2].role, "training (not trained on)");
    assert_eq!(again.models[0].points, doc.models[0].points);

    // Holding out the new run instead changes the test data: every point is computed anew.
    let study = std::fs::read_to_string(dir.join("study.toml"))
        .unwrap()
        .replace("held-out-runs = 1", "held-out-runs = 2");
    std::fs::write(dir.join("study.toml"), study).unwrap();
    let o = run_in(dir, &["run", "study.toml", "--out", "out", "--quiet"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let counts = plan_json(&dir.join("out")).points.unwrap();
    assert_eq!((counts.reused, counts.computed), (0, 8), "{counts:?}");
}

#[test]
fn data_file_problems_are_reported_together() {
    if !python_ready("own-data", "own_data") {
        return;
    }
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    example(dir);
    let study = std::fs::read_to_string(dir.join("study.toml"))
        .unwrap()
        .replace(
            r#"runs = ["data/conv0.nc", "data/conv1.nc", "data/conv3.nc"]"#,
            r#"runs = ["data/conv0.nc", "data/missing.nc", "data/conv3.nc"]"#,
        )
        .replace("coarse-grain = [2, 2]", "coarse-grain = [3, 2]")
        .replace("sizes = [60, 120, 240, 480]", "sizes = [60, 120, 700]");
    std::fs::write(dir.join("study.toml"), study).unwrap();
    let o = run_in(dir, &["check", "study.toml"]);
    assert_eq!(o.status.code(), Some(2));
    let err = stderr(&o);
    assert!(err.contains("has 3 problems"), "{err}");
    assert!(
        err.contains("missing.nc") && err.contains("data.file.runs"),
        "{err}"
    );
    assert!(err.contains("data.file.reduce.coarse-grain"), "{err}");
    assert!(
        err.contains(
            "the largest size is 700 samples but the first training run 'conv0' holds 600"
        ),
        "{err}"
    );

    // A variable no run holds, and a slice past the end, in every run.
    let study = std::fs::read_to_string(dir.join("study.toml"))
        .unwrap()
        .replace("data/missing.nc", "data/conv1.nc")
        .replace("coarse-grain = [3, 2]", "coarse-grain = [2, 2]")
        .replace("sizes = [60, 120, 700]", "sizes = [60, 120, 240]")
        .replace(
            r#"variables = ["psi", "theta"]"#,
            r#"variables = ["psi", "rho"]"#,
        );
    std::fs::write(dir.join("study.toml"), study).unwrap();
    let err = stderr(&run_in(dir, &["check", "study.toml"]));
    assert!(err.contains("has 3 problems"), "{err}");
    assert!(
        err.contains("no variable 'rho'") && err.contains("conv3.nc"),
        "{err}"
    );
}
