//! Peak memory of a ridge-readout learning curve against the pilot's length: the streaming
//! nested pass holds the normal equations (features², independent of n) and one block of
//! features, never the n × features design matrix, so its peak memory beyond the pilot data
//! itself should not grow with n.
//!
//! An echo state network with 666 units reads out 1 + 666 + 333 = 1,000 features (bias, the
//! states and the squares of every second one); it is trained on every size of a nested curve
//! (n/8, n/4, n/2, n) of the two-scale Lorenz-96 slow variables, for n = 10^5 and 10^6. Each n
//! runs in a child process of this benchmark, which measures the curve's phase alone (from the
//! moment the data are in memory) twice:
//!
//! - its peak resident set size (`VmHWM` in /proc/self/status, Linux; reset to the resident size
//!   once the data are in), as the operating system sees it;
//! - its peak of live heap bytes, counted by this benchmark's allocator (every allocation and
//!   free of the process, passed on to the system allocator): what the code holds, whatever the
//!   allocator keeps besides.
//!
//! Printed per n: the data's bytes, both peaks before and after, and their growth beyond the
//! data; then the ratio of each growth at 10^6 to that at 10^5 and the bytes per sample it
//! amounts to ((growth at 10^6 − growth at 10^5) / 900,000 samples).
//!
//! Measured (2 shared cores, glibc malloc): the live heap grows by 42.96 MiB at both n, to the
//! byte; an O(n) allocation would show here as its bytes per sample. The resident growth lies
//! above it and varies, though not with n alone: 56.0, 86.4, 86.6, 86.8 and 63.8 MiB at
//! n = 1, 2, 3, 5 and 10 × 10^5 for a child started by a relative path, 78.8 MiB at both 10^5
//! and 10^6 for one started by its absolute path (as here). The difference is freed memory
//! that glibc keeps mapped. The curve allocates and frees matrices of 8 MB (103 MiB in blocks
//! of 64 KiB or more for its 43 MiB peak, counted once with a scratch allocator); whether they
//! land in the heap (kept when freed) or in mappings of their own (returned when freed) follows
//! glibc's dynamic mmap threshold, which a freed block of at most 32 MiB raises to its size
//! (mallopt(3), `M_MMAP_THRESHOLD`) — here the simulation's n × 8 coupling terms, freed once
//! the data are kept, for n up to 5.2 × 10^5. With the threshold fixed
//! (`MALLOC_MMAP_THRESHOLD_=131072 cargo bench --bench memory`; the children inherit it) the
//! resident growth follows the live heap: 41.0 MiB at both 10^5 and 10^6. Why the path of the
//! executable matters was not pinned down.
//!
//! Run with `cargo bench --bench memory` (about a minute on two cores).

use closure_budget::models::esn::{fit_nested, EsnParams};
use closure_budget::systems::{simulate, SimulationSpec, SystemSpec};
use std::alloc::{GlobalAlloc, Layout, System};
use std::process::Command;
use std::sync::atomic::{AtomicUsize, Ordering};

/// The system allocator, with the live heap bytes and their peak counted.
struct Counting;

/// Bytes allocated and not yet freed.
static LIVE: AtomicUsize = AtomicUsize::new(0);
/// The most [`LIVE`] has been since the last [`reset_heap_peak`].
static PEAK: AtomicUsize = AtomicUsize::new(0);

fn allocated(bytes: usize) {
    let live = LIVE.fetch_add(bytes, Ordering::Relaxed) + bytes;
    PEAK.fetch_max(live, Ordering::Relaxed);
}

fn freed(bytes: usize) {
    LIVE.fetch_sub(bytes, Ordering::Relaxed);
}

// SAFETY: every call is passed on to `System` unchanged; the counters only observe sizes.
unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        // SAFETY: the caller's contract for `layout` is the one `System::alloc` needs.
        let p = unsafe { System.alloc(layout) };
        if !p.is_null() {
            allocated(layout.size());
        }
        p
    }

    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        // SAFETY: as in `alloc`.
        let p = unsafe { System.alloc_zeroed(layout) };
        if !p.is_null() {
            allocated(layout.size());
        }
        p
    }

    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        freed(layout.size());
        // SAFETY: `ptr` came from this allocator, that is from `System`, with `layout`.
        unsafe { System.dealloc(ptr, layout) }
    }

    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        // SAFETY: `ptr` came from `System` with `layout`; the caller's contract holds.
        let p = unsafe { System.realloc(ptr, layout, new_size) };
        if !p.is_null() {
            freed(layout.size());
            allocated(new_size);
        }
        p
    }
}

#[global_allocator]
static ALLOCATOR: Counting = Counting;

/// Resets the heap peak to the live bytes now; returns them.
fn reset_heap_peak() -> u64 {
    let live = LIVE.load(Ordering::Relaxed);
    PEAK.store(live, Ordering::Relaxed);
    live as u64
}

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

/// The child: simulate n samples, report the peaks with the data in memory, train the curve,
/// report the peaks again. Prints `data_bytes before after seconds heap_before heap_after`.
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
    let heap_before = reset_heap_peak();
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
    let heap_after = PEAK.load(Ordering::Relaxed) as u64;
    println!("{data_bytes} {before} {after} {seconds} {heap_before} {heap_after}");
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
    let ns = [100_000usize, 1_000_000];
    let (mut resident, mut heap) = (Vec::new(), Vec::new());
    for n in ns {
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
        let (heap_before, heap_after) = (v[4], v[5]);
        let mib = |b: f64| b / (1u64 << 20) as f64;
        println!(
            "ESN 1,000 features, n = {n:>9}: data {:7.1} MiB, resident with data {:7.1} MiB, after the curve {:7.1} MiB, growth beyond the data {:6.1} MiB ({seconds:.1} s)",
            mib(data),
            mib(before),
            mib(after),
            mib(after - before)
        );
        println!(
            "{:>32}  live heap with data {:7.2} MiB, peak in the curve {:7.2} MiB, growth beyond the data {:6.2} MiB",
            "",
            mib(heap_before),
            mib(heap_after),
            mib(heap_after - heap_before)
        );
        resident.push(after - before);
        heap.push(heap_after - heap_before);
    }
    let samples = (ns[1] - ns[0]) as f64;
    for (what, growth) in [("resident", &resident), ("live heap", &heap)] {
        println!(
            "{what:>9} growth at n = 10^6 vs 10^5: {:.3}x, {:+.2} bytes per sample (target: at most 1.10x)",
            growth[1] / growth[0],
            (growth[1] - growth[0]) / samples
        );
    }
}
