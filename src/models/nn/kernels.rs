//! Small numerical kernels of the networks, written so the compiler can vectorise them and so
//! every vector width gives the same bits: a register-tiled matrix product whose every element
//! is summed in one fixed order, and branch-free exp, expm1-based tanh and logistic functions (no
//! calls into the platform's libm, whose scalar calls took a third of the training time).
//!
//! References: Cody & Waite (1980), "Software manual for the elementary functions" (argument
//! reduction with ln 2 split in two parts; the split constants are those of fdlibm's `exp`).

/// C += A·B (`TRANS_A = false`, A is m × k) or C += Aᵀ·B (`TRANS_A = true`, A is k × m), with B
/// k × n and C m × n, all row-major and dense. Every element is summed in the same order,
/// c ← c + a₀b₀ + a₁b₁ + … (p = 0, 1, …, k − 1), whatever tile it falls in, so the result does not
/// depend on the shapes' remainders or the vector width. Tiles of 4 × 8 keep the accumulators in
/// registers.
#[inline(always)]
pub(crate) fn gemm<const TRANS_A: bool>(
    m: usize,
    n: usize,
    k: usize,
    a: &[f64],
    b: &[f64],
    c: &mut [f64],
) {
    assert!(a.len() >= m * k && b.len() >= k * n && c.len() >= m * n);
    let mut i = 0;
    while i + 4 <= m {
        row_block::<4, TRANS_A>(i, m, n, k, a, b, c);
        i += 4;
    }
    while i < m {
        row_block::<1, TRANS_A>(i, m, n, k, a, b, c);
        i += 1;
    }
}

#[inline(always)]
fn row_block<const R: usize, const TRANS_A: bool>(
    i: usize,
    m: usize,
    n: usize,
    k: usize,
    a: &[f64],
    b: &[f64],
    c: &mut [f64],
) {
    let mut j = 0;
    while j + 16 <= n {
        tile::<R, 16, TRANS_A>(i, j, m, n, k, a, b, c);
        j += 16;
    }
    while j + 8 <= n {
        tile::<R, 8, TRANS_A>(i, j, m, n, k, a, b, c);
        j += 8;
    }
    while j < n {
        tile::<R, 1, TRANS_A>(i, j, m, n, k, a, b, c);
        j += 1;
    }
}

#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn tile<const R: usize, const C: usize, const TRANS_A: bool>(
    i: usize,
    j: usize,
    m: usize,
    n: usize,
    k: usize,
    a: &[f64],
    b: &[f64],
    c: &mut [f64],
) {
    let mut acc = [[0.0f64; C]; R];
    for (r, row) in acc.iter_mut().enumerate() {
        row.copy_from_slice(&c[(i + r) * n + j..(i + r) * n + j + C]);
    }
    for p in 0..k {
        let bv: &[f64; C] = b[p * n + j..p * n + j + C].try_into().expect("tile width");
        for (r, row) in acc.iter_mut().enumerate() {
            let av = if TRANS_A {
                a[p * m + i + r]
            } else {
                a[(i + r) * k + p]
            };
            for (x, y) in row.iter_mut().zip(bv) {
                *x += av * y;
            }
        }
    }
    for (r, row) in acc.iter().enumerate() {
        c[(i + r) * n + j..(i + r) * n + j + C].copy_from_slice(row);
    }
}

/// `out` (cols × rows) = transpose of `a` (rows × cols), both row-major.
#[inline(always)]
pub(crate) fn transpose(rows: usize, cols: usize, a: &[f64], out: &mut [f64]) {
    for (i, row) in a[..rows * cols].chunks_exact(cols).enumerate() {
        for (j, v) in row.iter().enumerate() {
            out[j * rows + i] = *v;
        }
    }
}

/// (2ᵏ, expm1(r)) with y = k·ln 2 + r, |r| ≤ ln 2 / 2, for y clamped to [−700, 700]; then
/// eʸ = 2ᵏ·(1 + expm1(r)) and eʸ − 1 = 2ᵏ·expm1(r) + (2ᵏ − 1). expm1(r) is its Taylor series to
/// degree 13 (remainder below 0.35¹⁴/14! ≈ 4e-18 relative to r).
#[inline(always)]
fn exp_parts(y: f64) -> (f64, f64) {
    // ln 2 = LN2_HI + LN2_LO to about 1e-26; LN2_HI has 32 significant bits, so k·LN2_HI is
    // exact for |k| < 2²¹ (fdlibm's `ln2_hi`, `ln2_lo`).
    const LN2_HI: f64 = f64::from_bits(0x3FE6_2E42_FEE0_0000);
    const LN2_LO: f64 = f64::from_bits(0x3DEA_39EF_3579_3C76);
    // Adding 1.5·2⁵² rounds to an integer held in the low mantissa bits.
    const SHIFT: f64 = 6_755_399_441_055_744.0;
    let y = y.clamp(-700.0, 700.0);
    let t = y * std::f64::consts::LOG2_E + SHIFT;
    let k = t - SHIFT;
    let r = (y - k * LN2_HI) - k * LN2_LO;
    let ki = t.to_bits().wrapping_sub(SHIFT.to_bits()) as i64;
    let scale = f64::from_bits(((ki + 1023) as u64) << 52);
    // Horner form of r + r²/2! + … + r¹³/13!.
    const INV_FACT: [f64; 14] = [
        1.0,
        1.0,
        1.0 / 2.0,
        1.0 / 6.0,
        1.0 / 24.0,
        1.0 / 120.0,
        1.0 / 720.0,
        1.0 / 5_040.0,
        1.0 / 40_320.0,
        1.0 / 362_880.0,
        1.0 / 3_628_800.0,
        1.0 / 39_916_800.0,
        1.0 / 479_001_600.0,
        1.0 / 6_227_020_800.0,
    ];
    let mut p = INV_FACT[13];
    for c in INV_FACT[2..13].iter().rev() {
        p = p * r + c;
    }
    let q = r + r * r * p;
    (scale, q)
}

/// eʸ (inputs beyond ±700 are clamped; NaN stays NaN).
#[inline(always)]
pub(crate) fn exp(y: f64) -> f64 {
    let (scale, q) = exp_parts(y);
    scale + scale * q
}

/// tanh(x) = −m / (2 + m) with m = expm1(−2|x|), sign restored: relative accuracy of a few ulp
/// at every x, including near 0.
#[inline(always)]
pub(crate) fn tanh(x: f64) -> f64 {
    // tanh(20) rounds to 1; a comparison (not `min`) keeps NaN.
    let a = if x.abs() > 20.0 { 20.0 } else { x.abs() };
    let (scale, q) = exp_parts(-2.0 * a);
    let m = scale * q + (scale - 1.0);
    (-m / (2.0 + m)).copysign(x)
}

/// Logistic function 1 / (1 + e^{−x}).
#[inline(always)]
pub(crate) fn sigmoid(x: f64) -> f64 {
    1.0 / (1.0 + exp(-x))
}

/// Evaluates `recv.method(args)` (an `#[inline(always)]` method) through a copy compiled for
/// AVX-512F or AVX2 when the CPU has them, else directly; use it as a whole function body. The
/// kernels above are lane-wise or use a fixed summation order, and the compiler never fuses a
/// multiply and an add on its own, so every copy gives the same bits.
macro_rules! simd_dispatch {
    ($ty:ty, $recv:ident . $method:ident ($($arg:ident : $argty:ty),*) -> $ret:ty) => {{
        #[cfg(target_arch = "x86_64")]
        {
            #[target_feature(enable = "avx512f")]
            unsafe fn wide(n: &$ty $(, $arg: $argty)*) -> $ret {
                n.$method($($arg),*)
            }
            #[target_feature(enable = "avx2")]
            unsafe fn narrow(n: &$ty $(, $arg: $argty)*) -> $ret {
                n.$method($($arg),*)
            }
            if std::arch::is_x86_feature_detected!("avx512f") {
                // SAFETY: the CPU supports AVX-512F (checked on the line above).
                return unsafe { wide($recv $(, $arg)*) };
            }
            if std::arch::is_x86_feature_detected!("avx2") {
                // SAFETY: the CPU supports AVX2 (checked on the line above).
                return unsafe { narrow($recv $(, $arg)*) };
            }
        }
        $recv.$method($($arg),*)
    }};
}
pub(crate) use simd_dispatch;

#[cfg(test)]
mod tests {
    use super::*;

    /// Against the platform libm (glibc documents errors of at most a few ulp for exp and tanh):
    /// relative differences stay below 4 ulp over the whole range used (measured: exp 1.0,
    /// tanh 1.9, logistic 1.4 ulp).
    #[test]
    fn exp_tanh_sigmoid_match_libm() {
        let ulp = f64::EPSILON;
        let mut worst = [0.0f64; 3];
        for i in -69_990..=69_990 {
            let y = i as f64 * 0.01 + 0.003;
            let rel = (exp(y) - y.exp()).abs() / y.exp();
            worst[0] = worst[0].max(rel / ulp);
            if y.abs() < 30.0 {
                let x = y * 0.7;
                let t = x.tanh();
                worst[1] = worst[1].max((tanh(x) - t).abs() / t.abs() / ulp);
                let s = 1.0 / (1.0 + (-x).exp());
                worst[2] = worst[2].max((sigmoid(x) - s).abs() / s / ulp);
            }
        }
        for x in [1e-300, 1e-12, 1e-6, 1e-3, -2e-8] {
            worst[1] = worst[1].max((tanh(x) - x.tanh()).abs() / x.tanh().abs() / ulp);
        }
        assert!(
            worst.iter().all(|w| *w < 4.0),
            "worst errors in ulp {worst:?}"
        );
        assert_eq!(tanh(0.0), 0.0);
        assert_eq!(tanh(50.0), 1.0);
        assert_eq!(tanh(-1e300), -1.0);
        assert!(exp(f64::NAN).is_nan());
        assert!(tanh(f64::NAN).is_nan());
        assert!(sigmoid(f64::NAN).is_nan());
        assert_eq!(exp(0.0), 1.0);
    }

    /// Both layouts against a triple loop summing in the documented order (bit-equal), on shapes
    /// with row and column remainders.
    #[test]
    fn gemm_matches_the_triple_loop_bit_for_bit() {
        let (m, n, k) = (7, 27, 5);
        let val = |i: usize| ((i * 7919 % 1000) as f64 - 500.0) / 137.0;
        let a: Vec<f64> = (0..m * k).map(val).collect();
        let at: Vec<f64> = (0..m * k).map(|x| a[(x % m) * k + x / m]).collect();
        let b: Vec<f64> = (0..k * n).map(|i| val(i + 3)).collect();
        let c0: Vec<f64> = (0..m * n).map(|i| val(i + 11)).collect();
        let mut want = c0.clone();
        for i in 0..m {
            for j in 0..n {
                for p in 0..k {
                    want[i * n + j] += a[i * k + p] * b[p * n + j];
                }
            }
        }
        let mut c = c0.clone();
        gemm::<false>(m, n, k, &a, &b, &mut c);
        assert_eq!(c, want);
        let mut c = c0.clone();
        gemm::<true>(m, n, k, &at, &b, &mut c);
        assert_eq!(c, want);
        let mut t = vec![0.0; m * k];
        transpose(m, k, &a, &mut t);
        assert_eq!(t, at);
    }
}
