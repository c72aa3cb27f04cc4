//! Benchmarks of the hot paths, each against a baseline measured in the same run:
//! Gram accumulation (faer lower-triangular product vs a plain scalar loop), the whole nested
//! learning curve vs one fit at the largest size (echo state network with a fixed penalty and
//! with GCV, next-generation reservoir computing), free-running forecasts (one by one vs
//! batched), the two-scale integrator, an epoch of network gradients (chunks of samples vs one
//! sample at a time, against the FMA peak), feed-forward network training (one thread vs two),
//! and the learning-curve stage with its bootstrap (one thread vs two). The FMA peak is checked
//! against the core clock, measured by a chain of dependent integer adds.
//! Run with `cargo bench --bench hot_paths` (add `-- quick` for a short run).

use closure_budget::models::esn::{fit_nested, EsnParams};
use closure_budget::models::ngrc::{self, NgrcParams};
use closure_budget::models::ridge::{NormalEquations, RidgeSelection};
use closure_budget::models::Forecaster;
use closure_budget::systems::{simulate, SimulationSpec, SystemSpec};
use std::hint::black_box;
use std::time::Instant;

/// Best wall time of `reps` runs, seconds.
fn best_of<T>(reps: usize, mut f: impl FnMut() -> T) -> f64 {
    (0..reps)
        .map(|_| {
            let t = Instant::now();
            black_box(f());
            t.elapsed().as_secs_f64()
        })
        .fold(f64::INFINITY, f64::min)
}

fn pseudo_random(len: usize, seed: u64) -> Vec<f64> {
    let mut s = seed
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    (0..len)
        .map(|_| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            ((s >> 11) as f64 / (1u64 << 53) as f64) * 2.0 - 1.0
        })
        .collect()
}

/// The default two-scale Lorenz-96 system saved every 0.01 time units.
fn two_scale(dt: f64, spin_up: f64, samples: usize, seed: u64) -> SimulationSpec {
    SimulationSpec {
        system: SystemSpec::with_defaults("two-scale-lorenz-96").unwrap(),
        dt,
        sample_interval: 0.01,
        spin_up,
        samples,
        seed,
    }
}

/// The machine's double-precision FMA peak on one core, GFLOP/s: 12 independent accumulators
/// of fused multiply-adds in the widest vectors the CPU offers (AVX-512, else AVX2, detected at
/// run time as faer does), so the loop is bound by FMA throughput, not latency. A fused
/// multiply-add counts as two floating-point operations.
fn fma_peak_gflops() -> (f64, &'static str) {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::*;
        // Best of 30 short runs (about 7 ms each at 16 flops per cycle and 3.6 GHz), so a run
        // that another process interrupts on a shared machine does not count.
        const ITERS: usize = 2_000_000;
        #[target_feature(enable = "avx512f")]
        unsafe fn avx512(iters: usize) -> f64 {
            let a = _mm512_set1_pd(0.999_999_9);
            let b = _mm512_set1_pd(1e-9);
            let mut acc = [_mm512_set1_pd(1.0); 12];
            // The accumulators pass through black_box every 1,000 steps, so the loop cannot be
            // removed or shortened.
            for _ in 0..iters / 1000 {
                for _ in 0..1000 {
                    for x in acc.iter_mut() {
                        *x = _mm512_fmadd_pd(*x, a, b);
                    }
                }
                acc = std::hint::black_box(acc);
            }
            let mut out = [0.0f64; 8];
            let mut sum = _mm512_setzero_pd();
            for x in acc {
                sum = _mm512_add_pd(sum, x);
            }
            _mm512_storeu_pd(out.as_mut_ptr(), sum);
            out.iter().sum()
        }
        #[target_feature(enable = "avx2,fma")]
        unsafe fn avx2(iters: usize) -> f64 {
            let a = _mm256_set1_pd(0.999_999_9);
            let b = _mm256_set1_pd(1e-9);
            let mut acc = [_mm256_set1_pd(1.0); 12];
            // The accumulators pass through black_box every 1,000 steps, so the loop cannot be
            // removed or shortened.
            for _ in 0..iters / 1000 {
                for _ in 0..1000 {
                    for x in acc.iter_mut() {
                        *x = _mm256_fmadd_pd(*x, a, b);
                    }
                }
                acc = std::hint::black_box(acc);
            }
            let mut out = [0.0f64; 4];
            let mut sum = _mm256_setzero_pd();
            for x in acc {
                sum = _mm256_add_pd(sum, x);
            }
            _mm256_storeu_pd(out.as_mut_ptr(), sum);
            out.iter().sum()
        }
        if std::arch::is_x86_feature_detected!("avx512f") {
            // SAFETY: the CPU supports AVX-512F (checked just above).
            let t = best_of(30, || unsafe { avx512(ITERS) });
            return ((ITERS * 12 * 8 * 2) as f64 / t / 1e9, "AVX-512 FMA");
        }
        if std::arch::is_x86_feature_detected!("avx2") && std::arch::is_x86_feature_detected!("fma")
        {
            // SAFETY: the CPU supports AVX2 and FMA (checked just above).
            let t = best_of(30, || unsafe { avx2(ITERS) });
            return ((ITERS * 12 * 4 * 2) as f64 / t / 1e9, "AVX2 FMA");
        }
    }
    let iters = 50_000_000usize;
    let t = best_of(3, || {
        let mut acc = [1.0f64; 12];
        for _ in 0..iters / 1000 {
            for _ in 0..1000 {
                for x in acc.iter_mut() {
                    *x = x.mul_add(0.999_999_9, 1e-9);
                }
            }
            acc = std::hint::black_box(acc);
        }
        acc.iter().sum::<f64>()
    });
    ((iters * 12 * 2) as f64 / t / 1e9, "scalar FMA")
}

/// The core clock while busy, GHz, from a dependent chain of integer adds (one cycle of latency
/// each): four `add reg, 1` per loop iteration on one register, so the loop counter and branch
/// run beside the chain and each iteration takes four cycles. `None` off x86_64.
fn core_clock_ghz() -> Option<f64> {
    #[cfg(target_arch = "x86_64")]
    {
        // Best of 30 runs of about 4.4 ms, as for the FMA peak.
        const ITERS: u64 = 4_000_000;
        let t = best_of(30, || {
            let mut x = 0u64;
            for _ in 0..ITERS {
                // SAFETY: four adds on a register the asm owns; no memory, no stack.
                unsafe {
                    std::arch::asm!(
                        "add {0}, 1",
                        "add {0}, 1",
                        "add {0}, 1",
                        "add {0}, 1",
                        inout(reg) x,
                        options(nomem, nostack),
                    );
                }
            }
            assert_eq!(x, 4 * ITERS, "the add chain ran short");
            x
        });
        Some((4 * ITERS) as f64 / t / 1e9)
    }
    #[cfg(not(target_arch = "x86_64"))]
    None
}

/// Measures the FMA peak and the clock and prints flops per cycle, so the peak is checked
/// against the core's FMA width: a 256-bit FMA is 4 doubles × 2 flops = 8 flops. (From memory:
/// AMD's Zen 4 has two 256-bit FMA pipes and runs a 512-bit FMA as two halves, 16 flops per
/// cycle; Intel cores with two 512-bit FMA units reach 32.) Returns the peak, GFLOP/s.
fn peak_and_clock() -> f64 {
    let (peak, how) = fma_peak_gflops();
    match core_clock_ghz() {
        Some(ghz) => {
            let per_cycle = peak / ghz;
            println!(
                "fma peak           single-core {how} {peak:.1} GFLOP/s; clock {ghz:.2} GHz (dependent \
                 integer adds); {per_cycle:.1} flops per cycle = {:.2} 256-bit FMAs per cycle",
                per_cycle / 8.0
            );
        }
        None => println!(
            "fma peak           single-core {how} {peak:.1} GFLOP/s; clock not measured (not x86_64), \
             so flops per cycle unknown"
        ),
    }
    peak
}

fn gram(quick: bool, peak: f64) {
    use faer::MatRef;
    let (rows, f, d) = (if quick { 8192 } else { 32768 }, 901, 8);
    let phi = pseudo_random(rows * f, 1);
    let y = pseudo_random(rows * d, 2);
    let block = closure_budget::models::ridge::BLOCK_ROWS;
    let flops = rows as f64 * (f * f) as f64; // symmetric count N·D²
                                              // The layout the echo state network writes: column-major blocks of BLOCK_ROWS rows.
    let blocks: Vec<Vec<f64>> = phi
        .chunks(block * f)
        .map(|p| {
            let n = p.len() / f;
            let mut v = vec![0.0; block * f];
            for r in 0..n {
                for c in 0..f {
                    v[c * block + r] = p[r * f + c];
                }
            }
            v
        })
        .collect();
    let col = best_of(3, || {
        let mut ne = NormalEquations::zeros(f, d);
        for (b, q) in blocks.iter().zip(y.chunks(block * d)) {
            let n = q.len() / d;
            ne.add(
                MatRef::from_column_major_slice_with_stride(b, n, f, block),
                MatRef::from_row_major_slice(q, n, d),
            );
        }
        ne.count
    });
    let row = best_of(3, || {
        let mut ne = NormalEquations::zeros(f, d);
        for (p, q) in phi.chunks(block * f).zip(y.chunks(block * d)) {
            ne.add_rows(p, q, p.len() / f);
        }
        ne.count
    });
    // Baseline: lower-triangular rank-1 updates in a plain scalar loop over the same rows
    // (measured on a quarter of the rows and scaled, to keep the run short).
    let base_rows = rows / 4;
    let slow = best_of(1, || {
        let mut g = vec![0.0; f * f];
        for r in 0..base_rows {
            let row = &phi[r * f..(r + 1) * f];
            for i in 0..f {
                let a = row[i];
                let gi = &mut g[i * f..i * f + i + 1];
                for (gj, b) in gi.iter_mut().zip(&row[..=i]) {
                    *gj += a * b;
                }
            }
        }
        g[0]
    }) * (rows / base_rows) as f64;
    println!(
        "gram accumulation  N={rows} D={f}, blocks of {block}: column-major {:.1} GFLOP/s ({:.3} s), \
         row-major {:.1} GFLOP/s, scalar loop {:.1} GFLOP/s; column-major vs scalar {:.1}x, vs row-major {:.2}x",
        flops / col / 1e9,
        col,
        flops / row / 1e9,
        flops / slow / 1e9,
        slow / col,
        row / col
    );
    println!(
        "gram vs peak       single-core FMA peak {peak:.1} GFLOP/s (measured above); column-major Gram at {:.0}% of it",
        100.0 * flops / col / 1e9 / peak
    );
}

fn nested_curve(quick: bool) {
    let samples = if quick { 16_000 } else { 64_000 };
    let data = simulate(&two_scale(0.005, 5.0, samples, 1), None)
        .unwrap()
        .resolved;
    let largest = data.nrows();
    let sizes: Vec<usize> = (0..7).map(|i| largest >> (6 - i)).collect();
    for size in [300, 600] {
        for selection in [RidgeSelection::Fixed, RidgeSelection::Gcv] {
            let p = EsnParams {
                reservoir_size: size,
                ridge: 1e-6,
                ridge_selection: selection,
                ..EsnParams::default()
            }
            .check()
            .unwrap();
            let one = best_of(2, || {
                fit_nested(&p, data.view(), &[sizes[0], largest], 5).unwrap()
            });
            let all = best_of(2, || fit_nested(&p, data.view(), &sizes, 5).unwrap());
            println!(
                "nested curve       ESN D={size} {selection:?}, sizes {:?}: all 7 sizes {:.3} s, one fit at n={largest} {:.3} s; ratio {:.3}",
                sizes, all, one, all / one
            );
        }
    }
    // NG-RC on the resolved two-scale variables: K = 8, 2 delays, 1 + 16 + 136 = 153 features.
    for selection in [RidgeSelection::Fixed, RidgeSelection::Gcv] {
        let p = NgrcParams {
            ridge_selection: selection,
            ..NgrcParams::default()
        }
        .check()
        .unwrap();
        let one = best_of(7, || {
            ngrc::fit_nested(&p, data.view(), &[sizes[0], largest]).unwrap()
        });
        let all = best_of(7, || ngrc::fit_nested(&p, data.view(), &sizes).unwrap());
        println!(
            "nested curve       NG-RC F=153 {selection:?}, sizes {:?}: all 7 sizes {:.4} s, one fit at n={largest} {:.4} s; ratio {:.3}",
            sizes, all, one, all / one
        );
    }
}

fn forecasts(quick: bool) {
    let data = simulate(&two_scale(0.005, 5.0, 12_000, 2), None)
        .unwrap()
        .resolved;
    for size in [300, 600] {
        let p = EsnParams {
            reservoir_size: size,
            ridge: 1e-6,
            ..EsnParams::default()
        }
        .check()
        .unwrap();
        let fitted = fit_nested(&p, data.view(), &[10_000], 3).unwrap();
        let esn = &fitted[0].0;
        let steps = if quick { 2_000 } else { 20_000 };
        let t = best_of(3, || {
            let mut last = 0.0;
            esn.forecast(
                data.slice(ndarray::s![10_000..10_200, ..]),
                steps,
                &mut |_, x| {
                    last = x[0];
                    true
                },
            );
            last
        });
        println!(
            "free-run forecast  D={size}: {:.2} µs per step ({} steps after 200 warm-up)",
            t / (steps + 200) as f64 * 1e6,
            steps
        );
        // Many initial conditions: one by one (the baseline) vs advanced together.
        let ics: Vec<usize> = (0..60).map(|i| 10_200 + 25 * i).collect();
        let histories: Vec<_> = ics
            .iter()
            .map(|&ic| data.slice(ndarray::s![ic - 200..=ic, ..]))
            .collect();
        let lead = if quick { 100 } else { 400 };
        let single = best_of(3, || {
            let mut last = 0.0;
            for h in &histories {
                esn.forecast(*h, lead, &mut |_, x| {
                    last = x[0];
                    true
                });
            }
            last
        });
        let batched = best_of(3, || {
            let mut last = 0.0;
            esn.forecast_batch(&histories, lead, &mut |_, _, x| {
                last = x[0];
                true
            });
            last
        });
        println!(
            "60 forecasts       D={size}, {lead} leads: one by one {:.3} s, batched {:.3} s; speed-up {:.2}",
            single,
            batched,
            single / batched
        );
    }
}

fn integrator(quick: bool) {
    let samples = if quick { 5_000 } else { 40_000 };
    let run = |dt: f64| {
        let spec = two_scale(dt, 0.0, samples, 3);
        best_of(3, || simulate(&spec, None).unwrap())
    };
    let (a, b) = (run(0.005), run(0.0025));
    println!(
        "two-scale RK4      K=8 J=32, {samples} samples: dt 0.005 {:.3} s ({:.2} µs/step), dt 0.0025 {:.3} s; ratio {:.2}",
        a,
        a / (samples as f64 * 2.0) * 1e6,
        b,
        b / a
    );
}

/// One epoch of network gradients on one thread: chunks of `CHUNK_ROWS` samples (matrix
/// products, as training does) against one sample at a time (matrix–vector products through the
/// same kernels, the per-sample baseline), with the achieved rate of the batched pass as a share
/// of the measured FMA peak. The flop counts (matrix products only) are derived on
/// `closure_budget::models::nn::gradient_pass_seconds`.
fn network_epochs(quick: bool, peak: f64) {
    use closure_budget::models::nn::{gradient_pass_seconds, CHUNK_ROWS};
    let rows = 16_000;
    let reps = if quick { 5 } else { 9 };
    for (kind, label) in [("mlp", "MLP 8-64-64-8"), ("lstm", "LSTM 8-32-8, window 4")] {
        let best = |chunk: usize| {
            (0..reps)
                .map(|_| gradient_pass_seconds(kind, rows, chunk))
                .fold((f64::INFINITY, 0.0), |a, b| if b.0 < a.0 { b } else { a })
        };
        let (batched, flops) = best(CHUNK_ROWS);
        let (single, _) = best(1);
        let rate = flops / batched / 1e9;
        println!(
            "network epoch      {label}, {rows} samples, 1 thread: chunks of {CHUNK_ROWS} {batched:.4} s, \
             one at a time {single:.4} s; ratio {:.2}x; batched {rate:.1} GFLOP/s ({:.1} kflop per sample), \
             {:.0}% of the FMA peak",
            single / batched,
            flops / rows as f64 / 1e3,
            100.0 * rate / peak
        );
    }
}

fn network_training(quick: bool) {
    use closure_budget::models::nn::{train_mlp, MlpParams};
    let rows = if quick { 16_000 } else { 64_000 };
    let x = ndarray::Array2::from_shape_vec((rows, 8), pseudo_random(rows * 8, 4)).unwrap();
    let y = ndarray::Array2::from_shape_fn((rows, 8), |(r, j)| {
        (2.0 * x[[r, j]]).sin() * x[[r, (j + 1) % 8]]
    });
    let p = MlpParams::default().check().unwrap();
    let mut report = None;
    let mut weights = Vec::new();
    let mut time = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        best_of(2, || {
            let (m, r) = pool.install(|| train_mlp(&p, x.view(), y.view(), 1, None).unwrap());
            weights.push(m.parameters().to_vec());
            report = Some(r);
        })
    };
    let (one, two) = (time(1), time(2));
    let r = report.unwrap();
    println!(
        "network training   MLP 8-64-64-8, {rows} rows, defaults ({} epochs, {} steps): 1 thread {:.2} s, \
         2 threads {:.2} s; speed-up {:.2}x; identical weights: {}",
        r.epochs,
        r.gradient_steps,
        one,
        two,
        one / two,
        weights.windows(2).all(|w| w[0] == w[1])
    );
}

/// The curve stage of one model: fits, backtest and bootstrap over 8 sizes × 3 replicates × 40
/// initial conditions (synthetic skill from a saturating power law with noise), on one thread
/// against two; the estimates must be identical.
fn curve_analysis(quick: bool) {
    use closure_budget::curves::{FitScale, SkillGrid};
    use closure_budget::study::analysis::{analyse_curve, CurveSettings};
    let noise = pseudo_random(8 * 3 * 40, 9);
    let grid: Vec<SkillGrid> = (0..8usize)
        .map(|i| {
            let n = 500.0 * 1.6f64.powi(i as i32);
            let mean = 2.0 - 1.8 * (n / 500.0).powf(-0.45);
            SkillGrid {
                n,
                values: (0..3)
                    .map(|r| {
                        (0..40)
                            .map(|k| (mean + 0.3 * noise[(i * 3 + r) * 40 + k]).max(0.01))
                            .collect()
                    })
                    .collect(),
                censored: false,
            }
        })
        .collect();
    let settings = CurveSettings {
        scale: FitScale::Linear,
        draws: if quick { 100 } else { 400 },
        level: 0.9,
        trust_factor: 2.0,
        seed: 5,
        direction: closure_budget::curves::Direction::Increasing,
    };
    let calibration = closure_budget::curves::calibration::Calibration::from_pairs(Vec::new(), 0.9);
    let context = closure_budget::study::analysis::CurveContext {
        calibration: &calibration,
        floor: None,
    };
    let mut results = Vec::new();
    let mut time = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        best_of(2, || {
            let a = pool.install(|| analyse_curve(&grid, &[1.0, 1.5], &settings, None, &context));
            results.push(format!("{:?}", a.estimates));
        })
    };
    let (one, two) = (time(1), time(2));
    println!(
        "curve analysis     8 sizes x 3 replicates x 40 ICs, {} bootstrap draws: 1 thread {:.2} s, \
         2 threads {:.2} s; speed-up {:.2}x; identical estimates: {}",
        settings.draws,
        one,
        two,
        one / two,
        results.windows(2).all(|w| w[0] == w[1])
    );
}

fn main() {
    let quick = std::env::args().any(|a| a == "quick");
    curve_analysis(quick);
    let peak = peak_and_clock();
    gram(quick, peak);
    nested_curve(quick);
    forecasts(quick);
    integrator(quick);
    network_epochs(quick, peak);
    network_training(quick);
}
