//! Streaming ridge regression: normal equations G = Σφφᵀ, B = Σφyᵀ accumulated block by block
//! (the feature matrix is never materialised), snapshots at nested-prefix boundaries, the
//! penalised solve (G + λI)W = B by Cholesky, and the penalty chosen by generalised
//! cross-validation from one eigendecomposition of G.
//!
//! Gram updates use faer's lower-triangular matrix product (half the work of a full product);
//! every product and factorisation runs sequentially inside one fit, so results do not depend on
//! the thread count.
//!
//! # Generalised cross-validation from the normal equations
//!
//! With G = VEVᵀ and C = VᵀB, for any λ: W = V diag(1/(e + λ)) C; the residual sum of squares is
//! RSS(λ) = Σy² − Σ_i Σ_k c_ik² (e_i + 2λ)/(e_i + λ)²; the effective degrees of freedom are
//! df(λ) = tr H = Σ_i e_i/(e_i + λ); and GCV(λ) = N·RSS(λ)/(N − df(λ))², summed over outputs
//! (every output shares df). One O(F³) decomposition makes each λ cost O(F·D).
//!
//! References: Hoerl & Kennard (1970), "Ridge regression", Technometrics 12(1); Golub, Heath &
//! Wahba (1979), "Generalized cross-validation as a method for choosing a good ridge parameter",
//! Technometrics 21(2).

use super::RidgeScaling;
use faer::dyn_stack::{MemBuffer, MemStack, StackReq};
use faer::linalg::cholesky::llt::factor::{cholesky_in_place, cholesky_in_place_scratch};
use faer::linalg::cholesky::llt::solve::solve_in_place;
use faer::linalg::evd::tridiag::{tridiag_in_place, tridiag_in_place_scratch};
use faer::linalg::householder::{
    apply_block_householder_sequence_on_the_left_in_place_scratch,
    apply_block_householder_sequence_on_the_left_in_place_with_conj,
    apply_block_householder_sequence_transpose_on_the_left_in_place_scratch,
    apply_block_householder_sequence_transpose_on_the_left_in_place_with_conj,
};
use faer::linalg::matmul::{matmul, triangular};
use faer::linalg::qr::no_pivoting::factor::recommended_block_size;
use faer::{Accum, Conj, Mat, MatRef, Par};
use serde::{Deserialize, Serialize};
use std::borrow::Cow;

/// Rows per Gram update: large enough for efficient matrix products, small enough to stay in cache.
///
/// The nested passes add full blocks at fixed positions, counted from the first training pair
/// (or row), and evaluate a prefix that ends inside a block from a copy of the equations with
/// the partial block added ([`NormalEquations::with_rows`]), which keeps filling; the block the
/// last prefix ends in is added once that prefix is in, as nothing follows it. The equations of
/// a prefix are therefore summed in the same order, bit for bit, whatever other prefixes the
/// pass evaluates. The price is the Gram work of the partial block at every boundary but the
/// last (at most `BLOCK_ROWS` − 1 rows each) and one copy of the equations.
pub const BLOCK_ROWS: usize = 1024;

/// The first `rows` rows of a block as the nested passes write it: `phi` holds `features`
/// columns of [`BLOCK_ROWS`] values each (column-major, feature j of row i at
/// j · BLOCK_ROWS + i) and `y` holds `outputs` values per row (row-major).
pub fn block_rows<'a>(
    phi: &'a [f64],
    y: &'a [f64],
    rows: usize,
    features: usize,
    outputs: usize,
) -> (MatRef<'a, f64>, MatRef<'a, f64>) {
    (
        MatRef::from_column_major_slice_with_stride(phi, rows, features, BLOCK_ROWS),
        MatRef::from_row_major_slice(&y[..rows * outputs], rows, outputs),
    )
}

/// Errors from solving the ridge normal equations.
#[derive(Debug, thiserror::Error)]
pub enum RidgeError {
    #[error("ridge system of size {features} is not positive definite even with penalty {lambda:e}; the features are degenerate (raise `ridge`)")]
    NotPositiveDefinite { features: usize, lambda: f64 },
    #[error("no training pairs: the subset is not longer than the washout")]
    Empty,
    #[error("eigendecomposition of the {features} × {features} Gram matrix failed (non-finite features?); use `ridge-selection = \"fixed\"`")]
    Eigen { features: usize },
    #[error("generalised cross-validation gave no finite score on the penalty grid of {grid} values (non-finite or degenerate features); use `ridge-selection = \"fixed\"`")]
    NoFiniteScore { grid: usize },
}

/// Clears the upper halves of the vector registers after faer's hand-written AVX-512 kernels.
///
/// Measured: without it, every later scalar `exp` on the same thread ran about ten times slower
/// (glibc's SSE code pays for the dirty upper register state), which made reservoir updates after
/// a Gram update dominate the whole study.
#[inline]
pub fn clear_upper_simd_state() {
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: `vzeroupper` only zeroes bits 128 and up of the vector registers, which no
            // live Rust value holds across this call boundary; the CPU supports AVX.
            unsafe { std::arch::asm!("vzeroupper", options(nomem, nostack, preserves_flags)) };
        }
    }
}

/// Normal equations of a least-squares problem with `features` inputs and `outputs` targets.
#[derive(Debug, Clone)]
pub struct NormalEquations {
    /// Σφφᵀ; only the lower triangle (with the diagonal) is meaningful.
    pub gram: Mat<f64>,
    /// Σφyᵀ (features × outputs).
    pub cross: Mat<f64>,
    /// Σ y_j² per output, for the training residual.
    pub target_sq: Vec<f64>,
    /// Number of rows accumulated.
    pub count: usize,
}

impl NormalEquations {
    /// Empty equations.
    pub fn zeros(features: usize, outputs: usize) -> Self {
        Self {
            gram: Mat::zeros(features, features),
            cross: Mat::zeros(features, outputs),
            target_sq: vec![0.0; outputs],
            count: 0,
        }
    }

    pub fn features(&self) -> usize {
        self.gram.nrows()
    }

    pub fn outputs(&self) -> usize {
        self.cross.ncols()
    }

    /// Adds the rows of `phi` (rows × features) and `y` (rows × outputs), in any layout.
    ///
    /// Measured: column-major feature blocks (each feature's values contiguous) accumulate
    /// about 1.8× faster than row-major ones here (41 vs 22.5 GFLOP/s at 901 features,
    /// `cargo bench --bench hot_paths`), so the echo state network writes its blocks that way.
    pub fn add(&mut self, phi: MatRef<'_, f64>, ym: MatRef<'_, f64>) {
        let rows = phi.nrows();
        if rows == 0 {
            return;
        }
        debug_assert_eq!(phi.ncols(), self.features());
        debug_assert_eq!(ym.nrows(), rows);
        debug_assert_eq!(ym.ncols(), self.outputs());
        triangular::matmul(
            self.gram.as_mut(),
            triangular::BlockStructure::TriangularLower,
            Accum::Add,
            phi.transpose(),
            triangular::BlockStructure::Rectangular,
            phi,
            triangular::BlockStructure::Rectangular,
            1.0,
            Par::Seq,
        );
        matmul(
            self.cross.as_mut(),
            Accum::Add,
            phi.transpose(),
            ym,
            1.0,
            Par::Seq,
        );
        clear_upper_simd_state();
        for (j, s) in self.target_sq.iter_mut().enumerate() {
            for i in 0..rows {
                let v = ym[(i, j)];
                *s += v * v;
            }
        }
        self.count += rows;
    }

    /// These equations with the rows of `phi` and `ym` added ([`NormalEquations::add`]), leaving
    /// `self` unchanged; borrowed when there are no rows. The values are those `add` would give.
    pub fn with_rows(&self, phi: MatRef<'_, f64>, ym: MatRef<'_, f64>) -> Cow<'_, Self> {
        if phi.nrows() == 0 {
            return Cow::Borrowed(self);
        }
        let mut ne = self.clone();
        ne.add(phi, ym);
        Cow::Owned(ne)
    }

    /// [`NormalEquations::add`] for row-major slices: `phi` rows × features, `y` rows × outputs.
    pub fn add_rows(&mut self, phi: &[f64], y: &[f64], rows: usize) {
        let (f, d) = (self.features(), self.outputs());
        self.add(
            MatRef::from_row_major_slice(phi, rows, f),
            MatRef::from_row_major_slice(y, rows, d),
        );
    }

    /// Solves (G + λI) W = B. Returns W as outputs × features, row-major (one readout row per
    /// output), and the root-mean-square training residual over all outputs.
    pub fn solve(&self, lambda: f64) -> Result<(Vec<f64>, f64), RidgeError> {
        if self.count == 0 {
            return Err(RidgeError::Empty);
        }
        let f = self.features();
        let d = self.outputs();
        let mut a = Mat::<f64>::zeros(f, f);
        for j in 0..f {
            for i in j..f {
                let g = self.gram[(i, j)];
                a[(i, j)] = g;
                a[(j, i)] = g;
            }
            a[(j, j)] += lambda;
        }
        // Sequential factorisation (faer's default would follow the global thread count).
        let mut l = a.clone();
        let mut mem = MemBuffer::new(cholesky_in_place_scratch::<f64>(
            f,
            Par::Seq,
            Default::default(),
        ));
        cholesky_in_place(
            l.as_mut(),
            Default::default(),
            Par::Seq,
            MemStack::new(&mut mem),
            Default::default(),
        )
        .map_err(|_| RidgeError::NotPositiveDefinite {
            features: f,
            lambda,
        })?;
        let mut w = self.cross.clone();
        solve_in_place(l.as_ref(), w.as_mut(), Par::Seq, MemStack::new(&mut mem));
        // Training RSS = Σ‖y‖² − 2 tr(WᵀB) + tr(WᵀGW), with G taken as the full symmetric matrix.
        let mut rss = self.target_sq.iter().sum::<f64>();
        let mut gw = Mat::<f64>::zeros(f, d);
        let mut g_full = a;
        for j in 0..f {
            g_full[(j, j)] -= lambda;
        }
        matmul(
            gw.as_mut(),
            Accum::Replace,
            g_full.as_ref(),
            w.as_ref(),
            1.0,
            Par::Seq,
        );
        for k in 0..d {
            for i in 0..f {
                rss += w[(i, k)] * (gw[(i, k)] - 2.0 * self.cross[(i, k)]);
            }
        }
        clear_upper_simd_state();
        let rmse = (rss.max(0.0) / (self.count * d) as f64).sqrt();
        let mut out = vec![0.0; d * f];
        for k in 0..d {
            for i in 0..f {
                out[k * f + i] = w[(i, k)];
            }
        }
        Ok((out, rmse))
    }

    /// G as a full symmetric matrix (from the lower triangle).
    fn full_gram(&self) -> Mat<f64> {
        let f = self.features();
        Mat::from_fn(f, f, |i, j| self.gram[(i.max(j), i.min(j))])
    }

    /// Residual sum of squares Σ‖y − Wφ‖² over every row and output of these equations for the
    /// readout `w` (outputs × features, row-major): Σy² − 2 tr(WB) + tr(WGWᵀ). A difference of
    /// large sums, so its absolute round-off is of order ε·Σy² (clamped at 0).
    pub fn residual_sum_of_squares(&self, w: &[f64]) -> f64 {
        let (f, d) = (self.features(), self.outputs());
        assert_eq!(w.len(), f * d, "readout of outputs × features");
        let wt = Mat::<f64>::from_fn(f, d, |i, k| w[k * f + i]);
        let mut gw = Mat::<f64>::zeros(f, d);
        matmul(
            gw.as_mut(),
            Accum::Replace,
            self.full_gram().as_ref(),
            wt.as_ref(),
            1.0,
            Par::Seq,
        );
        clear_upper_simd_state();
        let mut rss = self.target_sq.iter().sum::<f64>();
        for k in 0..d {
            for i in 0..f {
                rss += wt[(i, k)] * (gw[(i, k)] - 2.0 * self.cross[(i, k)]);
            }
        }
        rss.max(0.0)
    }

    /// The normal equations of the residual targets y' = y − W₀φ, for the prior readout `w0`
    /// (outputs × features, row-major, the layout of [`NormalEquations::solve`]): G unchanged,
    /// B' = B − G W₀ᵀ and Σy'_j² = Σy_j² − 2 (W₀B)_jj + (W₀GW₀ᵀ)_jj, same row count.
    ///
    /// Ordinary ridge on these equations gives V = argmin ‖Y' − VΦ‖² + λ‖V‖², so W = W₀ + V
    /// minimises ‖Y − WΦ‖² + λ‖W − W₀‖²: ridge shrinking toward W₀ instead of 0 (Tikhonov
    /// regularisation with a non-zero prior mean; Hoerl & Kennard 1970 for ridge; see
    /// [`fit_readout_toward`]).
    ///
    /// Σy'² is a difference of large sums: when W₀ fits the data closely its absolute round-off
    /// (order ε·Σy²) can be a large share of it; it is clamped at 0 and only enters the reported
    /// residual and GCV's residual term.
    ///
    /// # Panics
    /// If `w0` is not outputs × features long.
    pub fn centred_on(&self, w0: &[f64]) -> NormalEquations {
        let (f, d) = (self.features(), self.outputs());
        assert_eq!(w0.len(), f * d, "prior readout of outputs × features");
        let w0t = Mat::<f64>::from_fn(f, d, |i, k| w0[k * f + i]);
        let mut gw = Mat::<f64>::zeros(f, d);
        matmul(
            gw.as_mut(),
            Accum::Replace,
            self.full_gram().as_ref(),
            w0t.as_ref(),
            1.0,
            Par::Seq,
        );
        clear_upper_simd_state();
        let cross = Mat::<f64>::from_fn(f, d, |i, k| self.cross[(i, k)] - gw[(i, k)]);
        let target_sq = (0..d)
            .map(|k| {
                let (mut wb, mut wgw) = (0.0, 0.0);
                for i in 0..f {
                    wb += w0t[(i, k)] * self.cross[(i, k)];
                    wgw += w0t[(i, k)] * gw[(i, k)];
                }
                (self.target_sq[k] - 2.0 * wb + wgw).max(0.0)
            })
            .collect();
        NormalEquations {
            gram: self.gram.clone(),
            cross,
            target_sq,
            count: self.count,
        }
    }

    /// Pooled equations: these (the target data) plus `weight` times `base` (G, B and Σy² alike),
    /// i.e. the normal equations of the target rows together with the base rows each weighted by
    /// `weight` (a weighted least-squares fit).
    ///
    /// `count` is the effective number of rows, target rows plus `weight` × base rows, rounded to
    /// the nearest whole row: it is what per-sample penalty scaling multiplies, what the reported
    /// root-mean-square residual divides by (so that is the weighted residual per effective row),
    /// and GCV's N (GCV treats the weighted rows as if they were that many independent rows, an
    /// approximation).
    ///
    /// # Panics
    /// If the two have different shapes, or `weight` is negative or not finite.
    pub fn pooled(&self, base: &NormalEquations, weight: f64) -> NormalEquations {
        assert_eq!(
            (self.features(), self.outputs()),
            (base.features(), base.outputs()),
            "pooled equations of one feature map"
        );
        assert!(weight.is_finite() && weight >= 0.0, "weight {weight}");
        let f = self.features();
        let d = self.outputs();
        NormalEquations {
            gram: Mat::from_fn(f, f, |i, j| {
                if i >= j {
                    self.gram[(i, j)] + weight * base.gram[(i, j)]
                } else {
                    0.0
                }
            }),
            cross: Mat::from_fn(f, d, |i, k| {
                self.cross[(i, k)] + weight * base.cross[(i, k)]
            }),
            target_sq: self
                .target_sq
                .iter()
                .zip(&base.target_sq)
                .map(|(a, b)| a + weight * b)
                .collect(),
            count: self.count + (weight * base.count as f64).round() as usize,
        }
    }

    /// Eigendecomposition G = VEVᵀ (from the lower triangle) and the projections C = VᵀB, from
    /// which [`RidgeEigen`] evaluates the fit, its residual and its GCV score at any penalty.
    ///
    /// G is reduced to tridiagonal form T = QᵀGQ (faer's Householder reduction) and T is
    /// diagonalised by the implicit symmetric QR algorithm with Wilkinson shifts (Golub & Van Loan
    /// 2013, "Matrix Computations", 4th ed., §8.3), whose rotations are applied to the D columns
    /// of QᵀB instead of accumulating the F × F eigenvectors: C costs O(F²D) on top of the
    /// reduction, and solutions come from T by a tridiagonal solve. Measured (best of 7, with one
    /// solve): 0.75× the time of faer's eigendecomposition with eigenvectors at F = 153 and 451,
    /// 0.55× at F = 901 (1.9, 18 and 100 ms here), of which the reduction is about half.
    pub fn eigen(&self) -> Result<RidgeEigen, RidgeError> {
        if self.count == 0 {
            return Err(RidgeError::Empty);
        }
        let f = self.features();
        let d = self.outputs();
        let mut reduced = Mat::<f64>::zeros(f, f);
        for j in 0..f {
            for i in j..f {
                reduced[(i, j)] = self.gram[(i, j)];
            }
        }
        let block = recommended_block_size::<f64>(f, f);
        let mut factors = Mat::<f64>::zeros(block, f.saturating_sub(1));
        let mut rotated = self.cross.clone();
        if f > 1 {
            let mut mem = MemBuffer::new(StackReq::any_of(&[
                tridiag_in_place_scratch::<f64>(f, Par::Seq, Default::default()),
                apply_block_householder_sequence_transpose_on_the_left_in_place_scratch::<f64>(
                    f - 1,
                    block,
                    d,
                ),
            ]));
            tridiag_in_place(
                reduced.as_mut(),
                factors.as_mut(),
                Par::Seq,
                MemStack::new(&mut mem),
                Default::default(),
            );
            apply_block_householder_sequence_transpose_on_the_left_in_place_with_conj(
                reduced.as_ref().submatrix(1, 0, f - 1, f - 1),
                factors.as_ref(),
                Conj::No,
                rotated.as_mut().subrows_mut(1, f - 1),
                Par::Seq,
                MemStack::new(&mut mem),
            );
            clear_upper_simd_state();
        }
        let diag: Vec<f64> = (0..f).map(|i| reduced[(i, i)]).collect();
        let offdiag: Vec<f64> = (1..f).map(|i| reduced[(i, i - 1)]).collect();
        if !diag.iter().chain(&offdiag).all(|v| v.is_finite()) {
            return Err(RidgeError::Eigen { features: f });
        }
        // Rows of QᵀB contiguous (row-major), for the rotations.
        let mut rows: Vec<f64> = (0..f * d).map(|x| rotated[(x / d, x % d)]).collect();
        let reduced_cross = rotated;
        let mut values = diag.clone();
        let mut off = offdiag.clone();
        tridiagonal_qr(&mut values, &mut off, &mut rows, d)
            .ok_or(RidgeError::Eigen { features: f })?;
        // Ascending order; G is positive semi-definite, so negative eigenvalues are round-off.
        let mut order: Vec<usize> = (0..f).collect();
        order.sort_by(|&i, &j| values[i].total_cmp(&values[j]));
        let mut proj = Mat::<f64>::zeros(f, d);
        for (row, &i) in order.iter().enumerate() {
            for k in 0..d {
                proj[(row, k)] = rows[i * d + k];
            }
        }
        let values = order.iter().map(|&i| values[i].max(0.0)).collect();
        Ok(RidgeEigen {
            values,
            proj,
            reflectors: reduced,
            factors,
            diag,
            offdiag,
            reduced_cross,
            target_sq: self.target_sq.iter().sum(),
            count: self.count,
        })
    }
}

/// Diagonalises the symmetric tridiagonal matrix with diagonal `a` and subdiagonal `b` in place
/// (eigenvalues left in `a`, unsorted) by implicit QR steps with Wilkinson shifts, applying every
/// rotation Gᵀ to the rows of `c` (n × `d`, row-major), so that `c` becomes Sᵀc for T = SΛSᵀ.
/// Golub & Van Loan (2013), Algorithms 8.3.2–8.3.3. Returns `None` if some eigenvalue has not
/// converged after 30·n steps.
fn tridiagonal_qr(a: &mut [f64], b: &mut [f64], c: &mut [f64], d: usize) -> Option<()> {
    let n = a.len();
    let mut rotate_rows = |p: usize, cos: f64, sin: f64| {
        let (upper, lower) = c[p * d..(p + 2) * d].split_at_mut(d);
        for (x, y) in upper.iter_mut().zip(lower.iter_mut()) {
            let (u, v) = (*x, *y);
            *x = cos * u - sin * v;
            *y = sin * u + cos * v;
        }
    };
    let mut steps = 0;
    let mut h = n.saturating_sub(1);
    while h > 0 {
        for i in 0..h {
            if b[i].abs() <= f64::EPSILON * (a[i].abs() + a[i + 1].abs()) {
                b[i] = 0.0;
            }
        }
        if b[h - 1] == 0.0 {
            h -= 1;
            continue;
        }
        let mut l = h - 1;
        while l > 0 && b[l - 1] != 0.0 {
            l -= 1;
        }
        steps += 1;
        if steps > 30 * n {
            return None;
        }
        // Wilkinson shift: the eigenvalue of the trailing 2 × 2 block nearer a[h].
        let half = (a[h - 1] - a[h]) / 2.0;
        let e = b[h - 1];
        let sign = if half >= 0.0 { 1.0 } else { -1.0 };
        let shift = a[h] - e * e / (half + sign * half.hypot(e));
        // Chase the bulge from (l + 1, l) down the block.
        let mut x = a[l] - shift;
        let mut z = b[l];
        for p in l..h {
            let r = x.hypot(z);
            let (cos, sin) = if r == 0.0 {
                (1.0, 0.0)
            } else {
                (x / r, -z / r)
            };
            if p > l {
                b[p - 1] = cos * b[p - 1] - sin * z; // the bulge at (p + 1, p − 1) becomes 0
            }
            // The 2 × 2 block on rows/columns p, p + 1: Gᵀ M G.
            let (ap, aq, bp) = (a[p], a[p + 1], b[p]);
            let (n00, n01) = (ap * cos - bp * sin, ap * sin + bp * cos);
            let (n10, n11) = (bp * cos - aq * sin, bp * sin + aq * cos);
            a[p] = cos * n00 - sin * n10;
            b[p] = sin * n00 + cos * n10;
            a[p + 1] = sin * n01 + cos * n11;
            if p + 1 < h {
                z = -sin * b[p + 1]; // new bulge at (p + 2, p)
                b[p + 1] *= cos;
                x = b[p];
            }
            rotate_rows(p, cos, sin);
        }
    }
    Some(())
}

/// Solves (T + λI)X = R in place for the symmetric tridiagonal T with diagonal `a` and
/// subdiagonal `b` by Gaussian elimination without pivoting (stable for a positive definite
/// matrix, as T + λI is for λ > 0).
fn tridiagonal_solve(a: &[f64], b: &[f64], lambda: f64, r: &mut Mat<f64>) {
    let n = a.len();
    let mut pivot = vec![0.0; n];
    pivot[0] = a[0] + lambda;
    for i in 1..n {
        pivot[i] = a[i] + lambda - b[i - 1] * b[i - 1] / pivot[i - 1];
    }
    for k in 0..r.ncols() {
        for i in 1..n {
            r[(i, k)] -= b[i - 1] / pivot[i - 1] * r[(i - 1, k)];
        }
        r[(n - 1, k)] /= pivot[n - 1];
        for i in (0..n - 1).rev() {
            r[(i, k)] = (r[(i, k)] - b[i] * r[(i + 1, k)]) / pivot[i];
        }
    }
}

/// Penalties tried by [`RidgeEigen::default_grid`], relative to the mean eigenvalue trace(G)/F:
/// 10^−12, 10^−11.5, …, 10^0 (25 values, half a decade apart). Relative values make the grid
/// follow the scale of the features. For scale: the penalty of Gauthier et al. (2021) on raw
/// Lorenz-63 features, 2.5e-6 with 400 training pairs, is 8e-14 relative (measured).
pub const GCV_GRID_DECADES: (f64, f64, usize) = (-12.0, 0.0, 25);

/// The eigendecomposition of a ridge problem's normal equations: the fit at any penalty λ > 0 in
/// O(F·D) operations after one O(F³) decomposition (see the module documentation).
#[derive(Debug, Clone)]
pub struct RidgeEigen {
    /// Eigenvalues of G in ascending order, round-off negatives clamped to 0.
    values: Vec<f64>,
    /// C = VᵀB, F × D, rows in the order of `values`.
    proj: Mat<f64>,
    /// The Householder vectors of Q below the subdiagonal (faer's tridiagonal reduction).
    reflectors: Mat<f64>,
    /// The block Householder factors of Q.
    factors: Mat<f64>,
    /// T = QᵀGQ: diagonal and subdiagonal.
    diag: Vec<f64>,
    offdiag: Vec<f64>,
    /// QᵀB.
    reduced_cross: Mat<f64>,
    /// Σy² over all outputs.
    target_sq: f64,
    /// Rows N.
    count: usize,
}

/// The penalty GCV chose on a grid, with the score of every grid value.
#[derive(Debug, Clone, PartialEq)]
pub struct Selection {
    /// Chosen penalty λ.
    pub lambda: f64,
    /// GCV score at the chosen penalty.
    pub score: f64,
    /// Position of the chosen penalty in the grid.
    pub index: usize,
    /// GCV score at every grid value (+∞ where N ≤ df(λ)).
    pub scores: Vec<f64>,
}

impl Selection {
    /// The chosen penalty is the smallest or largest on the grid, so the best may lie beyond it.
    pub fn at_grid_edge(&self) -> bool {
        self.index == 0 || self.index + 1 == self.scores.len()
    }
}

impl RidgeEigen {
    /// Eigenvalues of G in ascending order (round-off negatives clamped to 0).
    pub fn eigenvalues(&self) -> &[f64] {
        &self.values
    }

    /// trace(G)/F, the scale of [`RidgeEigen::default_grid`].
    pub fn mean_eigenvalue(&self) -> f64 {
        self.values.iter().sum::<f64>() / self.values.len().max(1) as f64
    }

    /// Residual sum of squares Σ‖y − Wᵀφ‖² over all rows and outputs at penalty λ (clamped at
    /// 0: it is a difference of two large sums when the fit is close).
    pub fn rss(&self, lambda: f64) -> f64 {
        let mut explained = 0.0;
        for (i, &e) in self.values.iter().enumerate() {
            let den = e + lambda;
            if den <= 0.0 {
                continue; // e = 0 with λ = 0: that direction carries no signal
            }
            let weight = (e + 2.0 * lambda) / (den * den);
            let row = self.proj.row(i);
            let c2: f64 = row.iter().map(|c| c * c).sum();
            explained += c2 * weight;
        }
        (self.target_sq - explained).max(0.0)
    }

    /// Effective degrees of freedom df(λ) = tr H = Σ e_i/(e_i + λ).
    pub fn effective_dof(&self, lambda: f64) -> f64 {
        self.values
            .iter()
            .map(|&e| {
                if e + lambda > 0.0 {
                    e / (e + lambda)
                } else {
                    0.0
                }
            })
            .sum()
    }

    /// GCV(λ) = N·RSS(λ)/(N − df(λ))², summed over outputs; +∞ when N ≤ df(λ) (a fit with no
    /// residual degrees of freedom has no cross-validation estimate).
    pub fn gcv(&self, lambda: f64) -> f64 {
        let n = self.count as f64;
        let spare = n - self.effective_dof(lambda);
        if spare <= 0.0 {
            return f64::INFINITY;
        }
        n * self.rss(lambda) / (spare * spare)
    }

    /// The documented default grid ([`GCV_GRID_DECADES`]) scaled by the mean eigenvalue (by 1 if
    /// every eigenvalue is 0).
    pub fn default_grid(&self) -> Vec<f64> {
        let mean = self.mean_eigenvalue();
        let scale = if mean > 0.0 { mean } else { 1.0 };
        let (lo, hi, points) = GCV_GRID_DECADES;
        (0..points)
            .map(|i| {
                let decade = lo + (hi - lo) * i as f64 / (points - 1) as f64;
                scale * 10f64.powf(decade)
            })
            .collect()
    }

    /// The grid penalty with the smallest GCV score (the larger penalty on an exact tie).
    /// Non-finite scores never win; an empty grid or one with no finite score is an error.
    pub fn select(&self, grid: &[f64]) -> Result<Selection, RidgeError> {
        let scores: Vec<f64> = grid.iter().map(|&l| self.gcv(l)).collect();
        let mut best: Option<usize> = None;
        for (i, &s) in scores.iter().enumerate() {
            if s.is_finite() && best.is_none_or(|b| s <= scores[b]) {
                best = Some(i);
            }
        }
        let index = best.ok_or(RidgeError::NoFiniteScore { grid: grid.len() })?;
        Ok(Selection {
            lambda: grid[index],
            score: scores[index],
            index,
            scores,
        })
    }

    /// The ridge solution W = V diag(1/(e + λ)) C at λ > 0, in the layout of
    /// [`NormalEquations::solve`] (outputs × features, row-major), and the root-mean-square
    /// training residual over all outputs.
    pub fn solve(&self, lambda: f64) -> (Vec<f64>, f64) {
        let f = self.values.len();
        let d = self.proj.ncols();
        // W = Q (T + λI)⁻¹ QᵀB.
        let mut w = self.reduced_cross.clone();
        tridiagonal_solve(&self.diag, &self.offdiag, lambda, &mut w);
        if f > 1 {
            let block = self.factors.nrows();
            let mut mem = MemBuffer::new(
                apply_block_householder_sequence_on_the_left_in_place_scratch::<f64>(
                    f - 1,
                    block,
                    d,
                ),
            );
            apply_block_householder_sequence_on_the_left_in_place_with_conj(
                self.reflectors.as_ref().submatrix(1, 0, f - 1, f - 1),
                self.factors.as_ref(),
                Conj::No,
                w.as_mut().subrows_mut(1, f - 1),
                Par::Seq,
                MemStack::new(&mut mem),
            );
            clear_upper_simd_state();
        }
        let mut out = vec![0.0; d * f];
        for k in 0..d {
            for i in 0..f {
                out[k * f + i] = w[(i, k)];
            }
        }
        let rmse = (self.rss(lambda) / (self.count * d).max(1) as f64).sqrt();
        (out, rmse)
    }
}

/// How a ridge readout's penalty is chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RidgeSelection {
    /// The configured `ridge`, scaled by `ridge-scaling`.
    #[default]
    Fixed,
    /// Generalised cross-validation on [`RidgeEigen::default_grid`], separately for every
    /// subset size; `ridge` and `ridge-scaling` are not used.
    ///
    /// GCV targets one-step (in-sample) prediction error and assumes independent residuals.
    /// One-step residuals of a time series are autocorrelated, under which GCV tends to choose
    /// too small a penalty (Opsomer, Wang & Yang 2001, "Nonparametric regression with correlated
    /// errors", Statistical Science); and the smallest
    /// one-step error need not give the most stable autonomous forecast (measured for the
    /// next-generation reservoir computer on Lorenz-63, see `ngrc`).
    Gcv,
}

/// A readout's penalty setting, resolved from model parameters.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Penalty {
    /// λ (per training pair under [`RidgeScaling::PerSample`]); used by [`RidgeSelection::Fixed`].
    pub ridge: f64,
    /// How λ follows the number of training pairs; used by [`RidgeSelection::Fixed`].
    pub scaling: RidgeScaling,
    /// Fixed penalty or GCV.
    pub selection: RidgeSelection,
}

/// How the penalty of one fit was chosen, as recorded in its fit summary.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct RidgeChoice {
    /// Fixed penalty or GCV.
    pub method: RidgeSelection,
    /// GCV score at the chosen penalty (squared target units; GCV only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gcv_score: Option<f64>,
    /// GCV chose the smallest or largest grid penalty: the best may lie beyond the grid.
    #[serde(default)]
    pub at_grid_edge: bool,
}

/// A solved readout.
#[derive(Debug, Clone, PartialEq)]
pub struct Readout {
    /// Outputs × features, row-major.
    pub weights: Vec<f64>,
    /// Root-mean-square training residual over all outputs.
    pub rmse: f64,
    /// Penalty actually used.
    pub lambda: f64,
    /// How it was chosen.
    pub choice: RidgeChoice,
}

/// Solves the readout of `ne` with the penalty `penalty` asks for.
///
/// Fixed: λ (times the number of rows under per-sample scaling), raised tenfold at most 6 times
/// while the penalised Gram matrix is not positive definite (the penalty used is recorded).
/// GCV: one eigendecomposition, the best penalty on the default grid, and the solution from the
/// same decomposition.
pub fn fit_readout(ne: &NormalEquations, penalty: &Penalty) -> Result<Readout, RidgeError> {
    match penalty.selection {
        RidgeSelection::Fixed => {
            let mut lambda = match penalty.scaling {
                RidgeScaling::PerSample => penalty.ridge * ne.count as f64,
                RidgeScaling::Fixed => penalty.ridge,
            };
            let mut attempt = 0;
            let (weights, rmse) = loop {
                match ne.solve(lambda) {
                    Ok(x) => break x,
                    Err(RidgeError::NotPositiveDefinite { .. }) if attempt < 6 => {
                        lambda *= 10.0;
                        attempt += 1;
                    }
                    Err(e) => return Err(e),
                }
            };
            Ok(Readout {
                weights,
                rmse,
                lambda,
                choice: RidgeChoice {
                    method: RidgeSelection::Fixed,
                    gcv_score: None,
                    at_grid_edge: false,
                },
            })
        }
        RidgeSelection::Gcv => {
            let eig = ne.eigen()?;
            let sel = eig.select(&eig.default_grid())?;
            let (weights, rmse) = eig.solve(sel.lambda);
            Ok(Readout {
                weights,
                rmse,
                lambda: sel.lambda,
                choice: RidgeChoice {
                    method: RidgeSelection::Gcv,
                    gcv_score: Some(sel.score),
                    at_grid_edge: sel.at_grid_edge(),
                },
            })
        }
    }
}

/// Solves the readout of `ne` shrunk toward the prior readout `w0` (outputs × features,
/// row-major): W = argmin ‖Y − WΦ‖² + λ‖W − W₀‖², with λ from `penalty` exactly as in
/// [`fit_readout`] (fixed, or GCV on the residual targets y − W₀φ).
///
/// This is ordinary ridge on the residual targets ([`NormalEquations::centred_on`]) with W₀
/// added back: Tikhonov regularisation toward a non-zero prior mean (Tikhonov & Arsenin 1977,
/// "Solutions of Ill-Posed Problems"; from memory), used to fine-tune a readout trained on one
/// regime with a few samples of another. λ → ∞ returns W₀, λ → 0 the least-squares solution.
///
/// The reported `rmse` is the training residual of the returned W on the original targets: the
/// shift leaves the residual unchanged (y − Wφ = y' − (W − W₀)φ). Under GCV, the score and the
/// penalty are those of the residual problem.
pub fn fit_readout_toward(
    ne: &NormalEquations,
    w0: &[f64],
    penalty: &Penalty,
) -> Result<Readout, RidgeError> {
    let mut readout = fit_readout(&ne.centred_on(w0), penalty)?;
    readout
        .weights
        .iter_mut()
        .zip(w0)
        .for_each(|(w, p)| *w += p);
    Ok(readout)
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    fn random_problem(rows: usize, f: usize, d: usize, seed: u64) -> (Vec<f64>, Vec<f64>) {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let phi: Vec<f64> = (0..rows * f).map(|_| rng.random_range(-1.0..1.0)).collect();
        let y: Vec<f64> = (0..rows * d).map(|_| rng.random_range(-1.0..1.0)).collect();
        (phi, y)
    }

    /// Gram matrix accumulated in uneven blocks equals the one computed directly from its definition.
    #[test]
    fn blockwise_accumulation_matches_definition() {
        let (rows, f, d) = (257, 13, 3);
        let (phi, y) = random_problem(rows, f, d, 1);
        let mut ne = NormalEquations::zeros(f, d);
        let mut start = 0;
        for len in [1, 100, 56, 100] {
            ne.add_rows(
                &phi[start * f..(start + len) * f],
                &y[start * d..(start + len) * d],
                len,
            );
            start += len;
        }
        assert_eq!(ne.count, rows);
        for i in 0..f {
            for j in 0..=i {
                let direct: f64 = (0..rows).map(|r| phi[r * f + i] * phi[r * f + j]).sum();
                assert!(
                    (ne.gram[(i, j)] - direct).abs() <= 1e-12 * rows as f64,
                    "G[{i},{j}]"
                );
            }
            for k in 0..d {
                let direct: f64 = (0..rows).map(|r| phi[r * f + i] * y[r * d + k]).sum();
                assert!((ne.cross[(i, k)] - direct).abs() <= 1e-12 * rows as f64);
            }
        }
    }

    /// Adding rows to a copy gives the values of adding them in place, bit for bit, and leaves
    /// the original alone; no rows borrow the original.
    #[test]
    fn with_rows_adds_to_a_copy() {
        let (f, d) = (7, 2);
        let (phi, y) = random_problem(300, f, d, 9);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi[..200 * f], &y[..200 * d], 200);
        let before = ne.clone();
        let rest = |rows: usize| {
            (
                MatRef::from_row_major_slice(&phi[200 * f..(200 + rows) * f], rows, f),
                MatRef::from_row_major_slice(&y[200 * d..(200 + rows) * d], rows, d),
            )
        };
        let (p, q) = rest(100);
        let copy = ne.with_rows(p, q).into_owned();
        assert_eq!((copy.count, before.count), (300, 200));
        assert_eq!((ne.gram.as_ref(), ne.count), (before.gram.as_ref(), 200));
        ne.add(p, q);
        assert_eq!(copy.gram, ne.gram);
        assert_eq!(copy.cross, ne.cross);
        assert_eq!(copy.target_sq, ne.target_sq);
        let (p, q) = rest(0);
        assert!(matches!(ne.with_rows(p, q), Cow::Borrowed(_)));
    }

    /// Column-major strided blocks (the layout the echo state network uses) give the same
    /// normal equations as row-major rows, to round-off.
    #[test]
    fn column_major_blocks_match_row_major_rows() {
        let (rows, f, d, stride) = (300, 9, 2, 128);
        let (phi, y) = random_problem(rows, f, d, 5);
        let mut a = NormalEquations::zeros(f, d);
        a.add_rows(&phi, &y, rows);
        let mut b = NormalEquations::zeros(f, d);
        let mut block = vec![0.0; stride * f];
        for start in (0..rows).step_by(stride) {
            let n = stride.min(rows - start);
            for i in 0..n {
                for j in 0..f {
                    block[j * stride + i] = phi[(start + i) * f + j];
                }
            }
            b.add(
                MatRef::from_column_major_slice_with_stride(&block, n, f, stride),
                MatRef::from_row_major_slice(&y[start * d..(start + n) * d], n, d),
            );
        }
        assert_eq!(a.count, b.count);
        for i in 0..f {
            for j in 0..=i {
                assert!((a.gram[(i, j)] - b.gram[(i, j)]).abs() < 1e-12 * rows as f64);
            }
        }
        for (x, z) in a.target_sq.iter().zip(&b.target_sq) {
            assert!((x - z).abs() < 1e-12 * rows as f64);
        }
    }

    /// The ridge solution satisfies its normal equations (G + λI)W = B to a size-scaled tolerance,
    /// and the reported residual equals the residual computed directly.
    #[test]
    fn solution_satisfies_normal_equations() {
        let (rows, f, d) = (400, 20, 2);
        let (phi, y) = random_problem(rows, f, d, 2);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let lambda = 0.3;
        let (w, rmse) = ne.solve(lambda).unwrap();
        let tol = f64::EPSILON * 64.0 * (f * rows) as f64;
        for k in 0..d {
            for i in 0..f {
                let mut lhs = lambda * w[k * f + i];
                for j in 0..f {
                    let g = if i >= j {
                        ne.gram[(i, j)]
                    } else {
                        ne.gram[(j, i)]
                    };
                    lhs += g * w[k * f + j];
                }
                assert!((lhs - ne.cross[(i, k)]).abs() < tol, "row {i} output {k}");
            }
        }
        let mut rss = 0.0;
        for r in 0..rows {
            for k in 0..d {
                let pred: f64 = (0..f).map(|i| phi[r * f + i] * w[k * f + i]).sum();
                rss += (pred - y[r * d + k]).powi(2);
            }
        }
        let direct = (rss / (rows * d) as f64).sqrt();
        assert!((rmse - direct).abs() < 1e-9, "{rmse} vs {direct}");
    }

    /// GCV by the explicit hat matrix H = Φ(ΦᵀΦ + λI)⁻¹Φᵀ (Golub, Heath & Wahba 1979, eq. 1.4):
    /// N‖(I − H)y‖²/tr(I − H)², summed over outputs; dense nalgebra LU, independent of faer.
    fn brute_force_gcv(
        phi: &[f64],
        y: &[f64],
        rows: usize,
        f: usize,
        d: usize,
        lambda: f64,
    ) -> f64 {
        let x = nalgebra::DMatrix::from_row_slice(rows, f, phi);
        let a = x.transpose() * &x + nalgebra::DMatrix::identity(f, f) * lambda;
        let h = &x * a.lu().try_inverse().unwrap() * x.transpose();
        let i_h = nalgebra::DMatrix::identity(rows, rows) - h;
        let tr = i_h.trace();
        (0..d)
            .map(|k| {
                let yk = nalgebra::DVector::from_iterator(rows, (0..rows).map(|r| y[r * d + k]));
                let res = &i_h * yk;
                rows as f64 * res.norm_squared() / (tr * tr)
            })
            .sum()
    }

    /// GCV from the eigendecomposition equals the hat-matrix definition to 1e-10 relative, over
    /// penalties spanning five decades, with more rows than features and fewer.
    #[test]
    fn gcv_matches_hat_matrix_definition() {
        for (rows, f, d, seed) in [(60, 8, 2, 11), (25, 12, 3, 12), (10, 16, 1, 13)] {
            let (phi, y) = random_problem(rows, f, d, seed);
            let mut ne = NormalEquations::zeros(f, d);
            ne.add_rows(&phi, &y, rows);
            let eig = ne.eigen().unwrap();
            for lambda in [1e-2, 1e-1, 1.0, 10.0, 1e3] {
                let fast = eig.gcv(lambda);
                let slow = brute_force_gcv(&phi, &y, rows, f, d, lambda);
                assert!(
                    (fast - slow).abs() <= 1e-10 * slow,
                    "N={rows} F={f} λ={lambda}: {fast} vs {slow}"
                );
            }
        }
    }

    /// The residual sum of squares from the eigendecomposition equals the residual of the
    /// solution computed row by row, and the degrees of freedom equal tr H from its definition.
    #[test]
    fn rss_and_dof_match_direct_computation() {
        let (rows, f, d) = (50, 9, 2);
        let (phi, y) = random_problem(rows, f, d, 21);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let eig = ne.eigen().unwrap();
        let x = nalgebra::DMatrix::from_row_slice(rows, f, &phi);
        for lambda in [0.05, 2.0, 40.0] {
            let (w, _) = eig.solve(lambda);
            let mut rss = 0.0;
            for r in 0..rows {
                for k in 0..d {
                    let pred: f64 = (0..f).map(|i| phi[r * f + i] * w[k * f + i]).sum();
                    rss += (pred - y[r * d + k]).powi(2);
                }
            }
            assert!(
                (eig.rss(lambda) - rss).abs() <= 1e-10 * rss,
                "λ={lambda}: {} vs {rss}",
                eig.rss(lambda)
            );
            let a = x.transpose() * &x + nalgebra::DMatrix::identity(f, f) * lambda;
            let tr_h = (&x * a.lu().try_inverse().unwrap() * x.transpose()).trace();
            assert!((eig.effective_dof(lambda) - tr_h).abs() <= 1e-10 * tr_h);
        }
    }

    /// The eigen solution equals the Cholesky solution to a size-scaled tolerance (both solve
    /// (G + λI)W = B; their round-off grows with F and with the condition number, here small).
    #[test]
    fn eigen_solution_equals_cholesky_solution() {
        for (rows, f, d, seed) in [(400, 20, 2, 31), (30, 45, 3, 32)] {
            let (phi, y) = random_problem(rows, f, d, seed);
            let mut ne = NormalEquations::zeros(f, d);
            ne.add_rows(&phi, &y, rows);
            let eig = ne.eigen().unwrap();
            for lambda in [1e-3, 0.3, 30.0] {
                let (a, ra) = ne.solve(lambda).unwrap();
                let (b, rb) = eig.solve(lambda);
                let norm = a.iter().fold(0.0f64, |m, v| m.max(v.abs()));
                let cond = (eig.eigenvalues()[f - 1] + lambda) / (eig.eigenvalues()[0] + lambda);
                let tol = f64::EPSILON * 64.0 * f as f64 * cond * norm;
                for (x, z) in a.iter().zip(&b) {
                    assert!(
                        (x - z).abs() <= tol,
                        "F={f} λ={lambda}: {x} vs {z} (tol {tol})"
                    );
                }
                assert!((ra - rb).abs() <= 1e-8 * ra.max(1e-12), "{ra} vs {rb}");
            }
        }
    }

    /// Eigenvalues from the tridiagonal QR iteration equal nalgebra's symmetric eigensolver (an
    /// independent implementation) to 1e-12 of the largest, and ‖C‖ per output equals ‖B‖ (V is
    /// orthogonal), for a random Gram matrix, one with a 20-fold repeated eigenvalue (identity
    /// plus rank 5: a case where QR deflation matters) and a 1 × 1 one.
    #[test]
    fn tridiagonal_qr_matches_a_dense_eigensolver() {
        let (rows, f, d) = (300, 120, 2);
        let (phi, y) = random_problem(rows, f, d, 71);
        let mut random = NormalEquations::zeros(f, d);
        random.add_rows(&phi, &y, rows);
        let mut repeated = NormalEquations::zeros(20, 1);
        let (low, ys) = random_problem(5, 20, 1, 72);
        repeated.add_rows(&low, &ys, 5);
        for i in 0..20 {
            repeated.gram[(i, i)] += 1.0;
        }
        let mut single = NormalEquations::zeros(1, 1);
        single.add_rows(&[3.0], &[2.0], 1);
        for ne in [random, repeated, single] {
            let f = ne.features();
            let full = nalgebra::DMatrix::from_fn(f, f, |i, j| ne.gram[(i.max(j), i.min(j))]);
            let mut reference: Vec<f64> =
                full.symmetric_eigen().eigenvalues.iter().copied().collect();
            reference.sort_by(f64::total_cmp);
            let eig = ne.eigen().unwrap();
            let top = reference[f - 1];
            for (a, b) in eig.eigenvalues().iter().zip(&reference) {
                assert!((a - b.max(0.0)).abs() <= 1e-12 * top, "F={f}: {a} vs {b}");
            }
            for k in 0..ne.outputs() {
                let b2: f64 = (0..f).map(|i| ne.cross[(i, k)].powi(2)).sum();
                let c2: f64 = (0..f).map(|i| eig.proj[(i, k)].powi(2)).sum();
                assert!((b2 - c2).abs() <= 1e-12 * b2, "F={f}: {b2} vs {c2}");
            }
        }
    }

    /// Only the lower triangle of the Gram matrix is read: junk above the diagonal changes
    /// nothing; a repeated feature column (a zero eigenvalue) gives no negative eigenvalue.
    #[test]
    fn eigen_reads_the_lower_triangle_and_clamps_round_off() {
        let (rows, f, d) = (40, 6, 1);
        let (mut phi, y) = random_problem(rows, f, d, 41);
        for r in 0..rows {
            phi[r * f + 5] = phi[r * f + 4];
        }
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let clean = ne.eigen().unwrap();
        for j in 0..f {
            for i in 0..j {
                ne.gram[(i, j)] = 1e3 * (i + 2 * j) as f64;
            }
        }
        let junk = ne.eigen().unwrap();
        assert_eq!(clean.eigenvalues(), junk.eigenvalues());
        assert!(clean.eigenvalues().iter().all(|&e| e >= 0.0));
        assert!(clean.eigenvalues()[0] <= 1e-12 * clean.eigenvalues()[f - 1]);
        assert!(clean.gcv(1e-6).is_finite());
    }

    /// The selected penalty is the grid's GCV minimiser; the default grid spans 1e-12 to 1 times
    /// the mean eigenvalue; noisier targets of the same signal get a larger penalty (GCV trades
    /// variance against bias).
    #[test]
    fn selection_minimises_gcv_and_follows_the_noise() {
        let (rows, f) = (80, 10);
        let (phi, noise) = random_problem(rows, f, 1, 51);
        let chosen = |noise_level: f64| {
            let y: Vec<f64> = (0..rows)
                .map(|r| {
                    let signal: f64 = (0..f)
                        .map(|i| phi[r * f + i] * (i as f64 - 4.5) * 0.2)
                        .sum();
                    signal + noise_level * noise[r]
                })
                .collect();
            let mut ne = NormalEquations::zeros(f, 1);
            ne.add_rows(&phi, &y, rows);
            let eig = ne.eigen().unwrap();
            let grid = eig.default_grid();
            assert_eq!(grid.len(), 25);
            assert!((grid[0] / eig.mean_eigenvalue() - 1e-12).abs() < 1e-24);
            assert!((grid[24] / eig.mean_eigenvalue() - 1.0).abs() < 1e-12);
            let sel = eig.select(&grid).unwrap();
            assert!(sel.scores.iter().all(|&s| s >= sel.score));
            assert_eq!(sel.scores[sel.index], eig.gcv(sel.lambda));
            sel.lambda
        };
        let (quiet, loud) = (chosen(0.01), chosen(3.0));
        assert!(loud > quiet, "λ: quiet {quiet}, loud {loud}");
    }

    /// Fixed selection reproduces the Cholesky solve at λ·n (per-sample scaling); GCV records its
    /// score and solves at the penalty it chose.
    #[test]
    fn fit_readout_follows_the_selection_setting() {
        let (rows, f, d) = (120, 7, 2);
        let (phi, y) = random_problem(rows, f, d, 61);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let fixed = fit_readout(
            &ne,
            &Penalty {
                ridge: 1e-3,
                scaling: RidgeScaling::PerSample,
                selection: RidgeSelection::Fixed,
            },
        )
        .unwrap();
        assert_eq!(fixed.lambda, 1e-3 * rows as f64);
        assert_eq!(fixed.weights, ne.solve(1e-3 * rows as f64).unwrap().0);
        assert_eq!(fixed.choice.gcv_score, None);
        let gcv = fit_readout(
            &ne,
            &Penalty {
                ridge: 1e-3,
                scaling: RidgeScaling::PerSample,
                selection: RidgeSelection::Gcv,
            },
        )
        .unwrap();
        let eig = ne.eigen().unwrap();
        let sel = eig.select(&eig.default_grid()).unwrap();
        assert_eq!(gcv.lambda, sel.lambda);
        assert_eq!(gcv.choice.gcv_score, Some(sel.score));
        assert_eq!(gcv.weights, eig.solve(sel.lambda).0);
    }

    /// A prior readout of `f` features and `d` outputs, entries uniform in ±`size`.
    fn random_prior(f: usize, d: usize, size: f64, seed: u64) -> Vec<f64> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..f * d).map(|_| rng.random_range(-size..size)).collect()
    }

    fn fixed(lambda: f64) -> Penalty {
        Penalty {
            ridge: lambda,
            scaling: RidgeScaling::Fixed,
            selection: RidgeSelection::Fixed,
        }
    }

    /// The centred equations equal the normal equations of the residual targets y − W₀φ built
    /// row by row (size-scaled tolerance), with junk above the Gram diagonal ignored.
    #[test]
    fn centred_equations_are_those_of_the_residual_targets() {
        let (rows, f, d) = (300, 12, 3);
        let (phi, y) = random_problem(rows, f, d, 81);
        let w0 = random_prior(f, d, 0.5, 82);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        for j in 0..f {
            for i in 0..j {
                ne.gram[(i, j)] = 1e6;
            }
        }
        let centred = ne.centred_on(&w0);
        let mut residual = y.clone();
        for r in 0..rows {
            for k in 0..d {
                let pred: f64 = (0..f).map(|i| phi[r * f + i] * w0[k * f + i]).sum();
                residual[r * d + k] -= pred;
            }
        }
        let mut direct = NormalEquations::zeros(f, d);
        direct.add_rows(&phi, &residual, rows);
        let tol = 1e-12 * (rows * f) as f64;
        assert_eq!(centred.count, rows);
        for i in 0..f {
            for k in 0..d {
                assert!((centred.cross[(i, k)] - direct.cross[(i, k)]).abs() < tol);
            }
        }
        for (a, b) in centred.target_sq.iter().zip(&direct.target_sq) {
            assert!((a - b).abs() < tol, "{a} vs {b}");
        }
    }

    /// λ → ∞ (10¹² × trace G) returns the prior W₀; λ → 0 (10⁻¹² × the mean eigenvalue) on
    /// full-rank data returns the least-squares solution by QR whatever the prior.
    /// Tolerances: at λ = 10¹²·tr G the pull away from W₀ is ‖G(W − W₀)‖/λ ≲ 10⁻¹² relative; at
    /// λ = 10⁻¹²·ē the bias is about λ/e_min ≈ 10⁻¹¹ relative and the round-off of the normal
    /// equations ε·cond(G) (about 10⁻¹⁵ here); both bounds are 10⁻⁹ of the largest weight.
    #[test]
    fn extreme_penalties_give_the_prior_and_least_squares() {
        let (rows, f, d) = (400, 15, 2);
        let (phi, y) = random_problem(rows, f, d, 83);
        let w0 = random_prior(f, d, 10.0, 84);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let trace: f64 = (0..f).map(|i| ne.gram[(i, i)]).sum();
        let max_abs = |v: &[f64]| v.iter().fold(0.0f64, |m, x| m.max(x.abs()));
        let stiff = fit_readout_toward(&ne, &w0, &fixed(1e12 * trace)).unwrap();
        let scale = max_abs(&w0);
        for (w, p) in stiff.weights.iter().zip(&w0) {
            assert!((w - p).abs() <= 1e-9 * scale, "{w} vs prior {p}");
        }
        let mean_eig = trace / f as f64;
        let loose = fit_readout_toward(&ne, &w0, &fixed(1e-12 * mean_eig)).unwrap();
        let design = ndarray::Array2::from_shape_vec((rows, f), phi).unwrap();
        let targets = ndarray::Array2::from_shape_vec((rows, d), y).unwrap();
        let ols = crate::models::polynomial::least_squares_qr_multi(design.view(), targets.view())
            .unwrap();
        let ols_w: Vec<f64> = (0..d * f).map(|x| ols[[x % f, x / f]]).collect();
        let scale = max_abs(&ols_w);
        for (w, o) in loose.weights.iter().zip(&ols_w) {
            assert!((w - o).abs() <= 1e-9 * scale, "{w} vs least squares {o}");
        }
    }

    /// The prior-centred solution satisfies its normal equations (G + λI)(W − W₀)ᵀ = B − GW₀ᵀ to
    /// a size-scaled tolerance, for a fixed penalty and for GCV, and the reported residual is that
    /// of the returned W on the original targets, computed row by row.
    #[test]
    fn prior_centred_solution_satisfies_its_normal_equations() {
        let (rows, f, d) = (250, 18, 2);
        let (phi, y) = random_problem(rows, f, d, 85);
        let w0 = random_prior(f, d, 1.0, 86);
        let mut ne = NormalEquations::zeros(f, d);
        ne.add_rows(&phi, &y, rows);
        let g = |i: usize, j: usize| ne.gram[(i.max(j), i.min(j))];
        let gcv = Penalty {
            ridge: 1.0,
            scaling: RidgeScaling::Fixed,
            selection: RidgeSelection::Gcv,
        };
        for penalty in [fixed(0.7), gcv] {
            let fit = fit_readout_toward(&ne, &w0, &penalty).unwrap();
            let (w, lambda) = (&fit.weights, fit.lambda);
            let tol = f64::EPSILON * 64.0 * (f * rows) as f64 * (1.0 + w0.len() as f64);
            for k in 0..d {
                for i in 0..f {
                    let mut lhs = lambda * (w[k * f + i] - w0[k * f + i]);
                    let mut rhs = ne.cross[(i, k)];
                    for j in 0..f {
                        lhs += g(i, j) * (w[k * f + j] - w0[k * f + j]);
                        rhs -= g(i, j) * w0[k * f + j];
                    }
                    assert!((lhs - rhs).abs() < tol, "{penalty:?} row {i} output {k}");
                }
            }
            let mut rss = 0.0;
            for r in 0..rows {
                for k in 0..d {
                    let pred: f64 = (0..f).map(|i| phi[r * f + i] * w[k * f + i]).sum();
                    rss += (pred - y[r * d + k]).powi(2);
                }
            }
            let direct = (rss / (rows * d) as f64).sqrt();
            assert!(
                (fit.rmse - direct).abs() < 1e-9 * direct,
                "{penalty:?}: {} vs {direct}",
                fit.rmse
            );
            let from_ne = (ne.residual_sum_of_squares(w) / (rows * d) as f64).sqrt();
            assert!((from_ne - direct).abs() < 1e-9 * direct);
        }
    }

    /// Pooling with weight 0 gives exactly the target-only fit (fixed and GCV); weight 1 gives
    /// the equations of all rows together (to round-off) with the counts added.
    #[test]
    fn pooled_equations_weight_the_base_rows() {
        let (f, d) = (10, 2);
        let (phi_t, y_t) = random_problem(60, f, d, 87);
        let (phi_b, y_b) = random_problem(500, f, d, 88);
        let mut target = NormalEquations::zeros(f, d);
        target.add_rows(&phi_t, &y_t, 60);
        let mut base = NormalEquations::zeros(f, d);
        base.add_rows(&phi_b, &y_b, 500);
        let alone = target.pooled(&base, 0.0);
        assert_eq!(alone.count, 60);
        for selection in [RidgeSelection::Fixed, RidgeSelection::Gcv] {
            let penalty = Penalty {
                ridge: 0.1,
                scaling: RidgeScaling::PerSample,
                selection,
            };
            assert_eq!(
                fit_readout(&alone, &penalty).unwrap(),
                fit_readout(&target, &penalty).unwrap()
            );
        }
        let both = target.pooled(&base, 1.0);
        let mut all = target.clone();
        all.add_rows(&phi_b, &y_b, 500);
        assert_eq!(both.count, 560);
        let tol = 1e-12 * 560.0;
        for i in 0..f {
            for j in 0..=i {
                assert!((both.gram[(i, j)] - all.gram[(i, j)]).abs() < tol);
            }
            for k in 0..d {
                assert!((both.cross[(i, k)] - all.cross[(i, k)]).abs() < tol);
            }
        }
        assert_eq!(target.pooled(&base, 0.1).count, 110);
    }

    #[test]
    fn empty_equations_are_an_error() {
        let ne = NormalEquations::zeros(3, 1);
        assert!(matches!(ne.solve(1.0), Err(RidgeError::Empty)));
        assert!(matches!(ne.eigen(), Err(RidgeError::Empty)));
    }
}
