//! Proper orthogonal decomposition (POD) of snapshot sets that need not fit in memory.
//!
//! Snapshots x₁ … x_T (each D values) are centred by their temporal mean and, when several
//! variables are stacked, each variable is divided by the root-mean-square of its fluctuations
//! (over its points and the snapshots), so that every variable weighs the same; both are
//! recorded. With X̃ the T × D matrix of centred, scaled snapshots:
//!
//! - **T ≤ D, method of snapshots** (Sirovich 1987): the T × T Gram matrix G = X̃X̃ᵀ is
//!   accumulated in panels of snapshots held in memory, so at most a panel and a block of
//!   snapshots plus G are held; G = VΛVᵀ, σₖ = √λₖ, modes φₖ = X̃ᵀvₖ/σₖ (one more pass).
//! - **D < T, covariance**: C = X̃ᵀX̃ (D × D) is accumulated block by block in one pass, so
//!   memory is independent of T; C = ΦΛΦᵀ, the modes are Φ's columns.
//!
//! Both give the singular values σₖ of X̃ and its right singular vectors (the spatial modes).
//! The number of modes r is the smallest whose energy Σₖ≤ᵣ σₖ² / Σ σₖ² reaches the requested
//! fraction, among the numerically non-zero modes (σₖ > σ₁ √(ε n), n the order of the Gram or
//! covariance matrix: below that a squared-matrix eigenvalue is rounding noise). Sums and
//! products run sequentially (faer `Par::Seq`), so results do not depend on the thread count.
//!
//! Accuracy: forming X̃X̃ᵀ squares the condition number, so σₖ carries an absolute error of
//! about ε σ₁² / σₖ (Golub & Van Loan 2013, "Matrix Computations", 4th ed., section 8.6, from
//! memory): 1e-8 relative for σₖ down to about 1e-4 σ₁.
//!
//! References: L. Sirovich (1987), "Turbulence and the dynamics of coherent structures",
//! Quart. Appl. Math. 45; Holmes, Lumley, Berkooz & Rowley (2012), "Turbulence, Coherent
//! Structures, Dynamical Systems and Symmetry", 2nd ed., chapter 3; B. Welford (1962) and Chan,
//! Golub & LeVeque (1979) for the blockwise mean and variance.

use super::dataset::{Dataset, DatasetError, FieldLayout, Plan};
use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::evd::{self_adjoint_evd, self_adjoint_evd_scratch, ComputeEigenvectors};
use faer::linalg::matmul::{matmul, triangular};
use faer::{Accum, Col, Mat, MatRef, Par};
use ndarray::{Array2, ArrayView2};
use serde::{Deserialize, Serialize};
use std::ops::Range;

/// Errors from the decomposition.
#[derive(Debug, thiserror::Error)]
pub enum PodError {
    #[error("energy fraction {0} must lie in (0, 1]")]
    Energy(f64),
    #[error("POD needs at least 2 snapshots and 1 value per snapshot, got {snapshots} × {dim}")]
    TooSmall { snapshots: usize, dim: usize },
    #[error("variable '{name}' does not vary over the snapshots (its fluctuations are zero), so it cannot be scaled; drop it from the selection or turn per-variable scaling off")]
    Constant { name: String },
    #[error("all snapshots are equal once the mean is removed: there is nothing to decompose")]
    NoFluctuation,
    #[error("the variable groups cover columns {covered} but the snapshots have {dim}; give one group per stacked variable, in order")]
    Groups { covered: usize, dim: usize },
    #[error("a block has {got} columns but the decomposition has {want}")]
    Columns { got: usize, want: usize },
    #[error("the eigendecomposition of the {n} × {n} matrix failed (non-finite input?)")]
    Eigen { n: usize },
    #[error(transparent)]
    Dataset(#[from] DatasetError),
    #[error(transparent)]
    Coarse(#[from] super::coarse::CoarseError),
}

/// Per-variable scaling of stacked variables.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scaling {
    /// Centre only.
    None,
    /// Centre, then divide each variable by the RMS of its fluctuations.
    PerVariable,
}

/// Settings of a decomposition.
///
/// | field | default | meaning | valid |
/// |---|---|---|---|
/// | `energy` | 0.99 | fraction of the fluctuation energy the kept modes must capture | (0, 1] |
/// | `max_modes` | none | upper bound on the kept modes | ≥ 1 |
/// | `scaling` | per-variable | how stacked variables are weighed | |
/// | `memory` | 256 MiB | bytes for blocks and panels of snapshots, about: a block and its copies take an eighth, a panel (method of snapshots) half; the Gram or covariance matrix, its eigenvectors and the modes come on top | ≥ 1 |
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PodSpec {
    pub energy: f64,
    pub max_modes: Option<usize>,
    pub scaling: Scaling,
    pub memory: usize,
}

impl Default for PodSpec {
    fn default() -> Self {
        PodSpec {
            energy: 0.99,
            max_modes: None,
            scaling: Scaling::PerVariable,
            memory: 256 << 20,
        }
    }
}

/// Which matrix was decomposed.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PodMethod {
    /// T × T Gram matrix of the snapshots (method of snapshots).
    Snapshots,
    /// D × D covariance matrix.
    Covariance,
}

/// A stacked variable's columns and its scale.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct VariableScale {
    pub name: String,
    pub columns: Range<usize>,
    /// The divisor applied after centring (1 without scaling).
    pub scale: f64,
}

/// The callback of [`SnapshotSource::for_each_block`]: `(first snapshot, block)`.
pub type BlockFn<'f> = dyn FnMut(usize, ArrayView2<'_, f64>) -> Result<(), PodError> + 'f;

/// Snapshots delivered in blocks of consecutive rows.
pub trait SnapshotSource {
    /// Number of snapshots (T).
    fn snapshots(&self) -> usize;
    /// Values per snapshot (D).
    fn dim(&self) -> usize;
    /// Bytes the source itself holds per snapshot of a block it delivers (its buffers), for
    /// sizing blocks within the memory setting.
    fn block_row_bytes(&self) -> usize {
        0
    }
    /// Calls `f(first, block)` for the snapshots in `range`, in order, in blocks of at most
    /// `rows` rows; `first` is the index of the block's first snapshot.
    fn for_each_block(
        &mut self,
        range: Range<usize>,
        rows: usize,
        f: &mut BlockFn<'_>,
    ) -> Result<(), PodError>;
}

/// Snapshots already in memory (several runs are stacked by giving several arrays).
pub struct InMemory<'a> {
    parts: Vec<ArrayView2<'a, f64>>,
}

impl<'a> InMemory<'a> {
    /// One array of snapshots × values.
    pub fn new(a: ArrayView2<'a, f64>) -> Self {
        InMemory { parts: vec![a] }
    }

    /// Several arrays with the same number of columns, one after the other (e.g. the training
    /// runs of an ensemble).
    pub fn stacked(parts: Vec<ArrayView2<'a, f64>>) -> Self {
        InMemory { parts }
    }
}

impl SnapshotSource for InMemory<'_> {
    fn snapshots(&self) -> usize {
        self.parts.iter().map(|p| p.nrows()).sum()
    }

    fn dim(&self) -> usize {
        self.parts.first().map_or(0, |p| p.ncols())
    }

    fn for_each_block(
        &mut self,
        range: Range<usize>,
        rows: usize,
        f: &mut BlockFn<'_>,
    ) -> Result<(), PodError> {
        let rows = rows.max(1);
        let mut offset = 0;
        for p in &self.parts {
            if p.ncols() != self.dim() {
                return Err(PodError::Columns {
                    got: p.ncols(),
                    want: self.dim(),
                });
            }
            let lo = range.start.max(offset);
            let hi = range.end.min(offset + p.nrows());
            let mut a = lo;
            while a < hi {
                let b = (a + rows).min(hi);
                f(a, p.slice(ndarray::s![a - offset..b - offset, ..]))?;
                a = b;
            }
            offset += p.nrows();
        }
        Ok(())
    }
}

/// Snapshots streamed from a file through a checked plan.
pub struct FromDataset<'a> {
    pub dataset: &'a mut Dataset,
    pub plan: Plan,
}

impl SnapshotSource for FromDataset<'_> {
    fn snapshots(&self) -> usize {
        self.plan.snapshots()
    }

    fn dim(&self) -> usize {
        self.plan.columns()
    }

    fn block_row_bytes(&self) -> usize {
        // The decoded block and the raw values of one variable.
        16 * self.plan.columns()
    }

    fn for_each_block(
        &mut self,
        range: Range<usize>,
        rows: usize,
        f: &mut BlockFn<'_>,
    ) -> Result<(), PodError> {
        self.dataset
            .stream_range(&self.plan, range, rows, |first, block| f(first, block))
    }
}

/// Another source with each block passed through a function (e.g. coarse-graining) that maps
/// `rows × D_in` to `rows × dim`.
pub struct Mapped<S, F> {
    pub source: S,
    pub dim: usize,
    pub map: F,
}

impl<S, F> SnapshotSource for Mapped<S, F>
where
    S: SnapshotSource,
    F: FnMut(ArrayView2<'_, f64>) -> Result<Array2<f64>, PodError>,
{
    fn snapshots(&self) -> usize {
        self.source.snapshots()
    }

    fn dim(&self) -> usize {
        self.dim
    }

    fn block_row_bytes(&self) -> usize {
        self.source.block_row_bytes() + 8 * self.source.dim() + 8 * self.dim
    }

    fn for_each_block(
        &mut self,
        range: Range<usize>,
        rows: usize,
        f: &mut BlockFn<'_>,
    ) -> Result<(), PodError> {
        let map = &mut self.map;
        self.source
            .for_each_block(range, rows, &mut |first, block| {
                let m = map(block)?;
                f(first, m.view())
            })
    }
}

/// The column groups of stacked fields, for per-variable scaling.
pub fn groups_of(fields: &[FieldLayout]) -> Vec<(String, Range<usize>)> {
    fields
        .iter()
        .map(|f| (f.name.clone(), f.columns.clone()))
        .collect()
}

/// What a report shows of a decomposition.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct PodSummary {
    pub method: PodMethod,
    pub snapshots: usize,
    pub dim: usize,
    /// Always true: the temporal mean of every column is removed.
    pub mean_subtracted: bool,
    pub scaling: Scaling,
    pub variables: Vec<VariableScale>,
    pub energy_target: f64,
    pub modes: usize,
    /// Fraction of the fluctuation energy the kept modes capture.
    pub energy_captured: f64,
    /// All singular values of the centred, scaled snapshot matrix, largest first.
    pub singular_values: Vec<f64>,
}

/// A fitted decomposition: mean, scales and the kept modes.
#[derive(Debug, Clone)]
pub struct Pod {
    pub summary: PodSummary,
    /// Temporal mean of every column.
    pub mean: Vec<f64>,
    /// Divisor of every column (its variable's scale).
    pub column_scale: Vec<f64>,
    /// D × r, orthonormal columns, in the centred and scaled space; each mode's entry of
    /// largest magnitude is positive.
    pub modes: Array2<f64>,
}

#[inline]
fn clear_upper_simd_state() {
    // Same reason as in the ridge solver: scalar code after faer's AVX-512 kernels runs much
    // slower with dirty upper vector registers.
    #[cfg(target_arch = "x86_64")]
    {
        if std::arch::is_x86_feature_detected!("avx") {
            // SAFETY: `vzeroupper` only zeroes bits 128 and up of the vector registers, which no
            // live Rust value holds across this call boundary; the CPU supports AVX.
            unsafe { std::arch::asm!("vzeroupper", options(nomem, nostack, preserves_flags)) };
        }
    }
}

/// `(block − mean) / scale` as a row-major matrix in `out`.
fn centred<'b>(
    block: ArrayView2<'_, f64>,
    mean: &[f64],
    inv_scale: &[f64],
    out: &'b mut Vec<f64>,
) -> MatRef<'b, f64> {
    let (n, d) = block.dim();
    out.clear();
    out.reserve(n * d);
    for row in block.rows() {
        match row.as_slice() {
            Some(r) => out.extend(
                r.iter()
                    .zip(mean)
                    .zip(inv_scale)
                    .map(|((v, m), s)| (v - m) * s),
            ),
            None => out.extend(
                row.iter()
                    .zip(mean)
                    .zip(inv_scale)
                    .map(|((v, m), s)| (v - m) * s),
            ),
        }
    }
    MatRef::from_row_major_slice(out.as_slice(), n, d)
}

/// Eigenvalues (descending) and eigenvectors (columns in the same order) of the symmetric matrix
/// whose lower triangle is `a`.
fn eigen_descending(a: &Mat<f64>) -> Result<(Vec<f64>, Mat<f64>), PodError> {
    let n = a.nrows();
    let mut s = Col::<f64>::zeros(n);
    let mut u = Mat::<f64>::zeros(n, n);
    let mut mem = MemBuffer::new(self_adjoint_evd_scratch::<f64>(
        n,
        ComputeEigenvectors::Yes,
        Par::Seq,
        Default::default(),
    ));
    self_adjoint_evd(
        a.as_ref(),
        s.as_mut().as_diagonal_mut(),
        Some(u.as_mut()),
        Par::Seq,
        MemStack::new(&mut mem),
        Default::default(),
    )
    .map_err(|_| PodError::Eigen { n })?;
    clear_upper_simd_state();
    let vals: Vec<f64> = (0..n).rev().map(|i| s[i]).collect();
    let vecs = Mat::from_fn(n, n, |i, j| u[(i, n - 1 - j)]);
    Ok((vals, vecs))
}

/// Orthonormalises the columns in order by Gram–Schmidt applied twice ("twice is enough":
/// Giraud, Langou & Rozložník 2005), keeping their span. The method of snapshots builds
/// φₖ = X̃ᵀvₖ/σₖ, whose orthogonality degrades like ε (σ₁/σₖ)² for small σₖ; this restores it
/// without changing the leading modes beyond their own rounding error.
fn orthonormalise(m: &mut Mat<f64>) {
    let (d, r) = (m.nrows(), m.ncols());
    for k in 0..r {
        for _ in 0..2 {
            for j in 0..k {
                let mut dot = 0.0;
                for i in 0..d {
                    dot += m[(i, j)] * m[(i, k)];
                }
                for i in 0..d {
                    let v = m[(i, j)];
                    m[(i, k)] -= dot * v;
                }
            }
        }
        let norm = (0..d).map(|i| m[(i, k)] * m[(i, k)]).sum::<f64>().sqrt();
        if norm > 0.0 {
            for i in 0..d {
                m[(i, k)] /= norm;
            }
        }
    }
}

impl Pod {
    /// Decomposes the snapshots of `source`. `groups` names the stacked variables' columns (in
    /// order, covering every column) for per-variable scaling; one group is enough without it.
    pub fn fit(
        source: &mut dyn SnapshotSource,
        groups: &[(String, Range<usize>)],
        spec: &PodSpec,
    ) -> Result<Pod, PodError> {
        if !(spec.energy > 0.0 && spec.energy <= 1.0) {
            return Err(PodError::Energy(spec.energy));
        }
        let (t, d) = (source.snapshots(), source.dim());
        if t < 2 || d == 0 {
            return Err(PodError::TooSmall {
                snapshots: t,
                dim: d,
            });
        }
        let covered = groups.last().map_or(0, |g| g.1.end);
        let contiguous = groups.windows(2).all(|w| w[0].1.end == w[1].1.start)
            && groups.first().is_some_and(|g| g.1.start == 0);
        if covered != d || !contiguous {
            return Err(PodError::Groups { covered, dim: d });
        }
        // Memory: a block as the source holds it plus its centred copy (an eighth of the
        // setting), and in the method of snapshots a panel (half of it).
        let row_bytes = source.block_row_bytes() + 8 * d;
        let block_rows = (spec.memory / 8 / row_bytes).clamp(1, t);
        // Pass 1: mean and sum of squared deviations of every column (blockwise, Chan et al.).
        let mut mean = vec![0.0; d];
        let mut m2 = vec![0.0; d];
        let mut count = 0usize;
        source.for_each_block(0..t, block_rows, &mut |_, block| {
            if block.ncols() != d {
                return Err(PodError::Columns {
                    got: block.ncols(),
                    want: d,
                });
            }
            let nb = block.nrows() as f64;
            let mut bm = vec![0.0; d];
            for row in block.rows() {
                for (m, &v) in bm.iter_mut().zip(row.iter()) {
                    *m += v;
                }
            }
            bm.iter_mut().for_each(|m| *m /= nb);
            let mut bq = vec![0.0; d];
            for row in block.rows() {
                for ((q, &v), &m) in bq.iter_mut().zip(row.iter()).zip(&bm) {
                    *q += (v - m) * (v - m);
                }
            }
            let na = count as f64;
            let n = na + nb;
            for j in 0..d {
                let delta = bm[j] - mean[j];
                mean[j] += delta * nb / n;
                m2[j] += bq[j] + delta * delta * na * nb / n;
            }
            count += block.nrows();
            Ok(())
        })?;
        let mut variables = Vec::with_capacity(groups.len());
        let mut column_scale = vec![1.0; d];
        for (name, cols) in groups {
            let scale = match spec.scaling {
                Scaling::None => 1.0,
                Scaling::PerVariable => {
                    let ss: f64 = m2[cols.clone()].iter().sum();
                    let s = (ss / (t as f64 * cols.len() as f64)).sqrt();
                    if !(s > 0.0 && s.is_finite()) {
                        return Err(PodError::Constant { name: name.clone() });
                    }
                    s
                }
            };
            column_scale[cols.clone()]
                .iter_mut()
                .for_each(|c| *c = scale);
            variables.push(VariableScale {
                name: name.clone(),
                columns: cols.clone(),
                scale,
            });
        }
        let inv: Vec<f64> = column_scale.iter().map(|s| 1.0 / s).collect();
        let method = if t <= d {
            PodMethod::Snapshots
        } else {
            PodMethod::Covariance
        };
        let mut buf: Vec<f64> = Vec::new();
        let (lambda, modes_full_or_v) = match method {
            PodMethod::Covariance => {
                let mut c = Mat::<f64>::zeros(d, d);
                source.for_each_block(0..t, block_rows, &mut |_, block| {
                    let b = centred(block, &mean, &inv, &mut buf);
                    triangular::matmul(
                        c.as_mut(),
                        triangular::BlockStructure::TriangularLower,
                        Accum::Add,
                        b.transpose(),
                        triangular::BlockStructure::Rectangular,
                        b,
                        triangular::BlockStructure::Rectangular,
                        1.0,
                        Par::Seq,
                    );
                    clear_upper_simd_state();
                    Ok(())
                })?;
                eigen_descending(&c)?
            }
            PodMethod::Snapshots => {
                let mut g = Mat::<f64>::zeros(t, t);
                // Panels of snapshots kept in memory; each panel meets every later block once.
                let panel_rows = (spec.memory / 2 / (8 * d)).clamp(1, t);
                let mut panel = Mat::<f64>::zeros(0, 0);
                let mut a = 0;
                while a < t {
                    let p = panel_rows.min(t - a);
                    panel.resize_with(p, d, |_, _| 0.0);
                    source.for_each_block(a..a + p, block_rows, &mut |first, block| {
                        let b = centred(block, &mean, &inv, &mut buf);
                        panel
                            .as_mut()
                            .subrows_mut(first - a, block.nrows())
                            .copy_from(b);
                        Ok(())
                    })?;
                    source.for_each_block(a..t, block_rows, &mut |first, block| {
                        let b = centred(block, &mean, &inv, &mut buf);
                        let rows = block.nrows();
                        matmul(
                            g.as_mut().submatrix_mut(first, a, rows, p),
                            Accum::Add,
                            b,
                            panel.transpose(),
                            1.0,
                            Par::Seq,
                        );
                        clear_upper_simd_state();
                        Ok(())
                    })?;
                    a += p;
                }
                eigen_descending(&g)?
            }
        };
        let n = lambda.len();
        let sigma: Vec<f64> = lambda.iter().map(|&l| l.max(0.0).sqrt()).collect();
        if sigma[0] <= 0.0 || sigma[0].is_nan() {
            return Err(PodError::NoFluctuation);
        }
        let floor = sigma[0] * (f64::EPSILON * n as f64).sqrt();
        let usable = sigma.iter().take_while(|&&s| s > floor).count().max(1);
        let total: f64 = lambda.iter().map(|l| l.max(0.0)).sum();
        let mut acc = 0.0;
        let mut r = usable;
        for (k, l) in lambda.iter().take(usable).enumerate() {
            acc += l.max(0.0);
            if acc >= spec.energy * total * (1.0 - 1e-14) {
                r = k + 1;
                break;
            }
        }
        if let Some(m) = spec.max_modes {
            r = r.min(m.max(1));
        }
        let mut modes = Mat::<f64>::zeros(d, r);
        match method {
            PodMethod::Covariance => {
                modes.copy_from(modes_full_or_v.as_ref().subcols(0, r));
            }
            PodMethod::Snapshots => {
                let v = modes_full_or_v.as_ref().subcols(0, r);
                source.for_each_block(0..t, block_rows, &mut |first, block| {
                    let b = centred(block, &mean, &inv, &mut buf);
                    matmul(
                        modes.as_mut(),
                        Accum::Add,
                        b.transpose(),
                        v.subrows(first, block.nrows()),
                        1.0,
                        Par::Seq,
                    );
                    clear_upper_simd_state();
                    Ok(())
                })?;
                for k in 0..r {
                    let s = 1.0 / sigma[k];
                    for i in 0..d {
                        modes[(i, k)] *= s;
                    }
                }
                orthonormalise(&mut modes);
            }
        }
        // Sign convention: the entry of largest magnitude is positive.
        let mut out = Array2::zeros((d, r));
        for k in 0..r {
            let mut big = 0;
            for i in 0..d {
                if modes[(i, k)].abs() > modes[(big, k)].abs() {
                    big = i;
                }
            }
            let sign = if modes[(big, k)] < 0.0 { -1.0 } else { 1.0 };
            for i in 0..d {
                out[(i, k)] = sign * modes[(i, k)];
            }
        }
        let captured: f64 = lambda.iter().take(r).map(|l| l.max(0.0)).sum::<f64>() / total;
        Ok(Pod {
            summary: PodSummary {
                method,
                snapshots: t,
                dim: d,
                mean_subtracted: true,
                scaling: spec.scaling,
                variables,
                energy_target: spec.energy,
                modes: r,
                energy_captured: captured,
                singular_values: sigma,
            },
            mean,
            column_scale,
            modes: out,
        })
    }

    /// Number of kept modes.
    pub fn rank(&self) -> usize {
        self.modes.ncols()
    }

    fn scaled(&self, x: ArrayView2<'_, f64>) -> Array2<f64> {
        let mut s = x.to_owned();
        for mut row in s.rows_mut() {
            for ((v, m), c) in row.iter_mut().zip(&self.mean).zip(&self.column_scale) {
                *v = (*v - m) / c;
            }
        }
        s
    }

    /// Temporal coefficients of snapshots (rows × D) on the kept modes (rows × r).
    pub fn project(&self, x: ArrayView2<'_, f64>) -> Array2<f64> {
        self.scaled(x).dot(&self.modes)
    }

    /// Snapshots (rows × D, physical units) rebuilt from coefficients (rows × r).
    pub fn reconstruct(&self, coefficients: ArrayView2<'_, f64>) -> Array2<f64> {
        let mut x = coefficients.dot(&self.modes.t());
        for mut row in x.rows_mut() {
            for ((v, m), c) in row.iter_mut().zip(&self.mean).zip(&self.column_scale) {
                *v = *v * c + m;
            }
        }
        x
    }

    /// ‖x̃ − ΦΦᵀx̃‖ / ‖x̃‖ (Frobenius) of snapshots x in the centred, scaled space: the share of
    /// their fluctuation that the kept modes cannot represent — the floor of any reduced model
    /// on these modes.
    pub fn relative_error(&self, x: ArrayView2<'_, f64>) -> f64 {
        let s = self.scaled(x);
        let back = s.dot(&self.modes).dot(&self.modes.t());
        let num: f64 = (&s - &back).iter().map(|v| v * v).sum();
        let den: f64 = s.iter().map(|v| v * v).sum();
        (num / den).sqrt()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{RngExt, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    /// T × D snapshots with a decaying spectrum and a non-zero mean.
    fn snapshots(t: usize, d: usize, seed: u64) -> Array2<f64> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let k = 6;
        let a = Array2::from_shape_fn((t, k), |_| rng.random::<f64>() - 0.5);
        let b = Array2::from_shape_fn((k, d), |(i, _)| {
            (rng.random::<f64>() - 0.5) * 0.3f64.powi(i as i32)
        });
        let mut x = a.dot(&b);
        x.iter_mut()
            .for_each(|v| *v += 3.0 + 1e-6 * (rng.random::<f64>() - 0.5));
        x
    }

    fn check(t: usize, d: usize, memory: usize) -> Pod {
        let x = snapshots(t, d, 7);
        let spec = PodSpec {
            energy: 1.0,
            memory,
            scaling: Scaling::None,
            ..PodSpec::default()
        };
        let pod = Pod::fit(&mut InMemory::new(x.view()), &[("x".into(), 0..d)], &spec).unwrap();
        // Modes orthonormal.
        let g = pod.modes.t().dot(&pod.modes);
        for i in 0..g.nrows() {
            for j in 0..g.ncols() {
                let want = if i == j { 1.0 } else { 0.0 };
                assert!((g[(i, j)] - want).abs() < 1e-9, "{i} {j} {}", g[(i, j)]);
            }
        }
        // With every non-zero mode, reconstruction of the training snapshots is exact.
        let back = pod.reconstruct(pod.project(x.view()).view());
        let err = (&back - &x).iter().fold(0.0f64, |m, v| m.max(v.abs()));
        assert!(err < 1e-10, "{err}");
        assert!(pod.relative_error(x.view()) < 1e-9);
        pod
    }

    #[test]
    fn both_methods_agree_and_memory_does_not_change_the_result() {
        // D < T: covariance; T ≤ D: method of snapshots (small memory forces several panels).
        let cov = check(40, 12, 1 << 20);
        assert_eq!(cov.summary.method, PodMethod::Covariance);
        let snap = check(12, 40, 1 << 20);
        assert_eq!(snap.summary.method, PodMethod::Snapshots);
        let tiny = check(12, 40, 8 * 40 * 3);
        assert_eq!(snap.summary.singular_values.len(), 12);
        for (a, b) in snap
            .summary
            .singular_values
            .iter()
            .zip(&tiny.summary.singular_values)
        {
            // Other block sizes change the rounding, which reaches σₖ as about ε σ₁² / σₖ.
            let s1 = snap.summary.singular_values[0];
            let tol = 1e-12 * s1 + 16.0 * f64::EPSILON * s1 * s1 / b;
            assert!((a - b).abs() <= tol, "{a} {b}");
        }
        // The same matrix and its transpose have the same singular values; the covariance of
        // 40 snapshots of 12 values against the Gram of the transposed problem is a different
        // matrix, so compare the singular values of one matrix by both routes instead.
        let x = snapshots(30, 30, 3);
        let mut s1 = InMemory::new(x.view());
        let spec = PodSpec {
            energy: 1.0,
            scaling: Scaling::None,
            ..PodSpec::default()
        };
        let a = Pod::fit(&mut s1, &[("x".into(), 0..30)], &spec).unwrap();
        let wide = ndarray::concatenate![ndarray::Axis(1), x, x];
        let b = Pod::fit(
            &mut InMemory::new(wide.view()),
            &[("x".into(), 0..60)],
            &spec,
        )
        .unwrap();
        // Duplicating every column multiplies every singular value by √2.
        for (p, q) in a
            .summary
            .singular_values
            .iter()
            .zip(&b.summary.singular_values)
            .take(6)
        {
            assert!(
                (p * 2f64.sqrt() - q).abs() < 1e-9 * a.summary.singular_values[0],
                "{p} {q}"
            );
        }
    }

    #[test]
    fn energy_fraction_picks_the_fewest_modes_and_scaling_is_recorded() {
        let x = snapshots(50, 20, 5);
        let mut y = x.clone();
        y.slice_mut(ndarray::s![.., 10..])
            .mapv_inplace(|v| 1000.0 * v);
        let spec = PodSpec {
            energy: 0.9,
            ..PodSpec::default()
        };
        let groups = [("a".to_string(), 0..10), ("b".to_string(), 10..20)];
        let pod = Pod::fit(&mut InMemory::new(y.view()), &groups, &spec).unwrap();
        let s = &pod.summary.singular_values;
        let total: f64 = s.iter().map(|v| v * v).sum();
        let e = |r: usize| s[..r].iter().map(|v| v * v).sum::<f64>() / total;
        let r = pod.rank();
        assert!(e(r) >= 0.9 && (r == 1 || e(r - 1) < 0.9), "r = {r}");
        assert!((pod.summary.energy_captured - e(r)).abs() < 1e-12);
        let sb = pod.summary.variables[1].scale;
        let sa = pod.summary.variables[0].scale;
        assert!(sb > 100.0 * sa, "{sa} {sb}");
        // Stacking the same data as two runs gives the same decomposition.
        let (top, bottom) = y.view().split_at(ndarray::Axis(0), 17);
        let pod2 = Pod::fit(&mut InMemory::stacked(vec![top, bottom]), &groups, &spec).unwrap();
        for (a, b) in pod2.summary.singular_values.iter().zip(&s[..6]) {
            assert!((a - b).abs() <= 1e-12 * s[0], "{a} {b}");
        }
        let e = Pod::fit(
            &mut InMemory::new(y.view()),
            &[("a".to_string(), 0..10)],
            &spec,
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("cover columns 10") && e.contains("20"), "{e}");
        let mut z = y.clone();
        z.slice_mut(ndarray::s![.., 10..]).fill(2.0);
        let e = Pod::fit(&mut InMemory::new(z.view()), &groups, &spec)
            .unwrap_err()
            .to_string();
        assert!(e.contains("'b'") && e.contains("does not vary"), "{e}");
    }
}
