//! Reading and reducing large gridded data: writes a NetCDF-3 file of float32 snapshots
//! (default 2,000 snapshots of 8 × 128 × 128, about 1 GB), then measures
//!
//! 1. the read of the whole selection into memory, from a cold page cache (the file's pages are
//!    dropped with `posix_fadvise(DONTNEED)` first) and warm: throughput in MB/s of file data and
//!    peak resident memory (VmHWM) against the size of the data read;
//! 2. a streamed read in blocks of 64 snapshots (memory bounded by the block);
//! 3. POD by the covariance route on the 8 × 4 × 4 coarse-grained field (1,024 values per
//!    snapshot) for 500, 1,000 and 2,000 snapshots: peak memory should not grow with T;
//! 4. POD by the method of snapshots on the full field for 500 snapshots.
//!
//! The peak is reset before each phase by writing 5 to /proc/self/clear_refs (Linux ≥ 4.0).
//! Settings: FIELD_BENCH_SNAPSHOTS (default 2000), FIELD_BENCH_DIR (default the temporary
//! folder); the file is removed at the end unless FIELD_BENCH_KEEP is set.
//!
//! Run: `cargo bench --bench field_data`.

use closure_budget::data::coarse::{coarse_layout, CoarseGrain};
use closure_budget::data::dataset::{
    AttrValue, DataType, Dataset, Netcdf3Schema, Netcdf3Variable, Netcdf3Variant, Netcdf3Writer,
    Selection, Slice,
};
use closure_budget::data::pod::{groups_of, FromDataset, Mapped, Pod, PodError, PodSpec};
use std::path::Path;
use std::time::Instant;

const NZ: usize = 8;
const NY: usize = 128;
const NX: usize = 128;

/// Peak resident set size in MB (VmHWM).
fn peak_mb() -> f64 {
    let s = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    s.lines()
        .find(|l| l.starts_with("VmHWM:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse::<f64>().ok())
        .map_or(f64::NAN, |kb| kb * 1024.0 / 1e6)
}

/// Current resident set size in MB (VmRSS).
fn rss_mb() -> f64 {
    let s = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    s.lines()
        .find(|l| l.starts_with("VmRSS:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse::<f64>().ok())
        .map_or(f64::NAN, |kb| kb * 1024.0 / 1e6)
}

fn reset_peak() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

fn drop_cache(path: &Path) {
    #[cfg(target_os = "linux")]
    {
        use std::os::unix::io::AsRawFd;
        if let Ok(f) = std::fs::File::open(path) {
            // SAFETY: plain advisory call on an open descriptor.
            unsafe {
                libc::posix_fadvise(f.as_raw_fd(), 0, 0, libc::POSIX_FADV_DONTNEED);
            }
        }
    }
}

/// Eight smooth patterns with chaotic-looking amplitudes, plus small deterministic noise.
fn write_file(path: &Path, snapshots: usize) {
    let size = NZ * NY * NX;
    let pattern = |m: usize, z: usize, y: usize, x: usize| {
        let (fx, fy) = (
            2.0 * std::f64::consts::PI / NX as f64,
            2.0 * std::f64::consts::PI / NY as f64,
        );
        ((m + 1) as f64 * fx * x as f64 + m as f64).sin()
            * ((m / 2 + 1) as f64 * fy * y as f64).cos()
            * (1.0 + 0.1 * z as f64)
            / (m + 1) as f64
    };
    let modes: Vec<Vec<f64>> = (0..8)
        .map(|m| {
            (0..size)
                .map(|i| pattern(m, i / (NY * NX), (i / NX) % NY, i % NX))
                .collect()
        })
        .collect();
    let schema = Netcdf3Schema {
        variant: Netcdf3Variant::Offset64,
        dimensions: vec![
            ("time".into(), None),
            ("z".into(), Some(NZ)),
            ("y".into(), Some(NY)),
            ("x".into(), Some(NX)),
        ],
        attributes: vec![("title".into(), AttrValue::Text("field benchmark".into()))],
        variables: vec![Netcdf3Variable {
            name: "theta".into(),
            dims: vec!["time".into(), "z".into(), "y".into(), "x".into()],
            dtype: DataType::F32,
            attributes: vec![("units".into(), AttrValue::Text("K".into()))],
        }],
    };
    let mut w = Netcdf3Writer::create(path, schema).unwrap();
    let mut rec = vec![0.0f64; size];
    let mut seed = 0x9E37_79B9_7F4A_7C15u64;
    for t in 0..snapshots {
        let tt = t as f64 * 0.05;
        let amps: Vec<f64> = (0..8)
            .map(|m| {
                (tt * (1.0 + 0.37 * m as f64)).sin() + 0.5 * (tt * 0.11 * (m + 2) as f64).cos()
            })
            .collect();
        for (i, r) in rec.iter_mut().enumerate() {
            seed = seed
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            let noise = ((seed >> 11) as f64 / (1u64 << 53) as f64 - 0.5) * 1e-3;
            let mut v = 300.0 + noise;
            for (a, m) in amps.iter().zip(&modes) {
                v += a * m[i];
            }
            *r = v;
        }
        w.write_record(&[&rec]).unwrap();
    }
    w.finish().unwrap();
}

fn main() {
    let snapshots: usize = std::env::var("FIELD_BENCH_SNAPSHOTS")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(2000);
    let dir = std::env::var_os("FIELD_BENCH_DIR")
        .map(std::path::PathBuf::from)
        .unwrap_or_else(std::env::temp_dir);
    let path = dir.join(format!(
        "closure-budget-field-bench-{}.nc",
        std::process::id()
    ));
    let t0 = Instant::now();
    write_file(&path, snapshots);
    let bytes = std::fs::metadata(&path).unwrap().len() as f64;
    let mb = bytes / 1e6;
    println!(
        "wrote {} ({mb:.0} MB, {snapshots} snapshots of {NZ}×{NY}×{NX} float32) in {:.1} s",
        path.display(),
        t0.elapsed().as_secs_f64()
    );
    let sel = Selection::variables(&["theta"]);
    let data_mb = (snapshots * NZ * NY * NX * 8) as f64 / 1e6;

    for (label, cold) in [("cold cache", true), ("warm cache", false)] {
        if cold {
            drop_cache(&path);
        }
        reset_peak();
        let base = rss_mb();
        let t = Instant::now();
        let snap = Dataset::open(&path).unwrap().read(&sel).unwrap();
        let secs = t.elapsed().as_secs_f64();
        let peak = peak_mb();
        println!(
            "read whole ({label}): {:.2} s, {:.0} MB/s of file data; peak RSS {peak:.0} MB (before {base:.0} MB) for {data_mb:.0} MB of float64 snapshots: {:.3}× the data",
            secs,
            mb / secs,
            (peak - base) / data_mb
        );
        assert_eq!(snap.values.nrows(), snapshots);
        drop(snap);
    }

    for (label, cold) in [("cold cache", true), ("warm cache", false)] {
        if cold {
            drop_cache(&path);
        }
        reset_peak();
        let base = rss_mb();
        let t = Instant::now();
        let mut ds = Dataset::open(&path).unwrap();
        let plan = ds.plan(&sel).unwrap();
        let mut total = 0.0;
        ds.stream(&plan, 64, |_, block| {
            total += block.sum();
            Ok::<(), closure_budget::data::dataset::DatasetError>(())
        })
        .unwrap();
        let secs = t.elapsed().as_secs_f64();
        println!(
            "streamed read ({label}, blocks of 64 snapshots = {:.0} MB as float64): {:.2} s, {:.0} MB/s; peak RSS {:.0} MB (before {base:.0} MB); mean value {:.4}",
            64.0 * (NZ * NY * NX * 8) as f64 / 1e6,
            secs,
            mb / secs,
            peak_mb(),
            total / (snapshots * NZ * NY * NX) as f64
        );
    }

    // POD of the coarse-grained field by the covariance route, for growing T.
    let filter = CoarseGrain::new(&[8, 4, 4]);
    for t_count in [500, 1000, 2000].into_iter().filter(|&n| n <= snapshots) {
        let mut ds = Dataset::open(&path).unwrap();
        let plan = ds
            .plan(&Selection {
                time_slice: Slice::new(0, Some(t_count), 1),
                ..sel.clone()
            })
            .unwrap();
        let fields = plan.fields();
        let (coarse_fields, dim) = coarse_layout(&fields, &filter).unwrap();
        let f0 = fields[0].clone();
        let filter2 = filter.clone();
        let mut source = Mapped {
            source: FromDataset {
                dataset: &mut ds,
                plan,
            },
            dim,
            map: move |block: ndarray::ArrayView2<'_, f64>| {
                filter2
                    .apply(&f0.name, &f0.dims, &f0.shape, block)
                    .map_err(PodError::from)
            },
        };
        reset_peak();
        let base = rss_mb();
        let t = Instant::now();
        let spec = PodSpec {
            memory: 128 << 20,
            ..PodSpec::default()
        };
        let pod = Pod::fit(&mut source, &groups_of(&coarse_fields), &spec).unwrap();
        println!(
            "POD covariance route, T = {t_count}, D = {dim} (coarse-grained 8×4×4, memory setting 128 MB): {:.2} s; {} modes for 99% energy; peak RSS {:.0} MB (before {base:.0} MB); σ₁ = {:.4}",
            t.elapsed().as_secs_f64(),
            pod.rank(),
            peak_mb(),
            pod.summary.singular_values[0]
        );
    }

    // POD by the method of snapshots on the full field.
    let t_count = 500.min(snapshots);
    let mut ds = Dataset::open(&path).unwrap();
    let plan = ds
        .plan(&Selection {
            time_slice: Slice::new(0, Some(t_count), 1),
            ..sel.clone()
        })
        .unwrap();
    let groups = groups_of(&plan.fields());
    reset_peak();
    let base = rss_mb();
    let t = Instant::now();
    let spec = PodSpec {
        memory: 256 << 20,
        ..PodSpec::default()
    };
    let pod = Pod::fit(
        &mut FromDataset {
            dataset: &mut ds,
            plan,
        },
        &groups,
        &spec,
    )
    .unwrap();
    println!(
        "POD method of snapshots, T = {t_count}, D = {}: {:.2} s; {} modes for 99% energy; peak RSS {:.0} MB (before {base:.0} MB; data would be {:.0} MB as float64; memory setting 256 MB)",
        NZ * NY * NX,
        t.elapsed().as_secs_f64(),
        pod.rank(),
        peak_mb(),
        (t_count * NZ * NY * NX * 8) as f64 / 1e6
    );
    if std::env::var_os("FIELD_BENCH_KEEP").is_none() {
        let _ = std::fs::remove_file(&path);
    }
}
