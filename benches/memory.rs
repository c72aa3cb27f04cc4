//! Peak memory of a ridge-readout learning curve against the pilot's length: the streaming
//! nested pass holds the normal equations (features², independent of n) and one block of
//! features, never the n × features design matrix, so its peak resident memory beyond the
//! pilot data itself should not grow with n.
//!
//! An echo state network with 666 units reads out 1 + 666 + 333 = 1,000 features (bias, the
//! states and the squares of every second one); it is trained on every size of a nested curve
//! (n/8, n/4, n/2, n) of the two-scale Lorenz-96 slow variables, for n = 10^5 and 10^6. Each n
//! runs in a child process of this benchmark, which reads its own peak resident set size
//! (`VmHWM` in /proc/self/status, Linux): its resident size once the data are in memory, and its peak after the
//! curve (the peak reset in between, so the second figure is the curve's phase alone). Printed per n: the data's bytes, the peak before and after, the growth beyond the
//! data, and the ratio of the growth at 10^6 to that at 10^5.
//! Run with `cargo bench --bench memory` (about a minute on two cores).

use closure_budget::models::esn::{fit_nested, EsnParams};
use closure_budget::systems::{simulate, SimulationSpec, SystemSpec};
use std::process::Command;

/// A field of /proc/self/status in bytes (`None` off Linux).
fn status_bytes(field: &str) -> Option<u64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with(field))?;
    let kb: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb * 1024)
}

/// Peak resident set size since the last [`reset_peak`], bytes.
fn peak_rss() -> Option<u64> {
    status_bytes("VmHWM:")
}

/// Resets the peak to the current resident set size (Linux ≥ 4.0: `5` to clear_refs), so the
/// peak after it measures one phase alone; returns the resident size at the reset.
fn reset_peak() -> Option<u64> {
    std::fs::write("/proc/self/clear_refs", "5").ok()?;
    status_bytes("VmRSS:")
}

/// The child: simulate n samples, report the peak with the data in memory, train the curve,
/// report the peak again. Prints `data_bytes before after seconds`.
fn child(n: usize) {
    let data = simulate(
        &SimulationSpec {
            system: SystemSpec::with_defaults("two-scale-lorenz-96").unwrap(),
            dt: 0.005,
            sample_interval: 0.01,
            spin_up: 5.0,
            samples: n,
            seed: 3,
        },
        None,
    )
    .unwrap()
    .resolved;
    let data_bytes = (data.len() * std::mem::size_of::<f64>()) as u64;
    // The simulation's scratch is freed; the curve's phase starts from what is resident now.
    let before = reset_peak().unwrap_or(0);
    let p = EsnParams {
        reservoir_size: 666,
        ridge: 1e-6,
        ..EsnParams::default()
    }
    .check()
    .unwrap();
    let sizes: Vec<usize> = [8, 4, 2, 1].iter().map(|d| n / d).collect();
    let t = std::time::Instant::now();
    let fits = fit_nested(&p, data.view(), &sizes, 5).unwrap();
    let seconds = t.elapsed().as_secs_f64();
    std::hint::black_box(&fits);
    let after = peak_rss().unwrap_or(0);
    println!("{data_bytes} {before} {after} {seconds}");
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    if let Some(i) = args.iter().position(|a| a == "child") {
        child(args[i + 1].parse().expect("n"));
        return;
    }
    if peak_rss().is_none() {
        println!("memory benchmark skipped: needs /proc/self/status (Linux)");
        return;
    }
    let exe = std::env::current_exe().expect("own path");
    let mut growth = Vec::new();
    for n in [100_000usize, 1_000_000] {
        let o = Command::new(&exe)
            .args(["child", &n.to_string()])
            .output()
            .expect("child runs");
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let text = String::from_utf8_lossy(&o.stdout);
        let v: Vec<f64> = text
            .split_whitespace()
            .map(|x| x.parse().expect("number"))
            .collect();
        let (data, before, after, seconds) = (v[0], v[1], v[2], v[3]);
        let mib = |b: f64| b / (1u64 << 20) as f64;
        println!(
            "ESN 1,000 features, n = {n:>9}: data {:7.1} MiB, resident with data {:7.1} MiB, after the curve {:7.1} MiB, growth beyond the data {:6.1} MiB ({seconds:.1} s)",
            mib(data),
            mib(before),
            mib(after),
            mib(after - before)
        );
        growth.push(after - before);
    }
    println!(
        "growth at n = 10^6 vs 10^5: {:.2}x (target: at most 1.10x)",
        growth[1] / growth[0]
    );
}
