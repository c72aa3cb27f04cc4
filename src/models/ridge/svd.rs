//! Ridge regression on an explicit design whose first column is an unpenalised constant, by the
//! thin SVD of the centred design: one decomposition gives the fit and its generalised
//! cross-validation score at any penalty. The polynomial fit uses it (its designs are held in
//! memory, and the SVD keeps the accuracy the normal equations lose on ill-conditioned
//! monomials).
//!
//! Centring the other columns and the targets removes the intercept from the penalised problem;
//! the thin SVD Φ̃ = U S Vᵀ then gives, for the per-row penalty λ, λ' = λ·m over m rows and
//! c = Uᵀỹ: w = V diag(s/(s² + λ')) c, RSS(λ) = ‖ỹ − Uc‖² + Σ (λ'/(s² + λ'))² c² and
//! df(λ) = 1 + Σ s²/(s² + λ'); GCV(λ) = m·RSS(λ)/(m − df(λ))², summed over outputs.
//!
//! Reference: Golub, Heath & Wahba (1979), "Generalized cross-validation as a method for
//! choosing a good ridge parameter", Technometrics 21(2), 215–223.

use super::clear_upper_simd_state;
use faer::diag::Diag;
use faer::dyn_stack::{MemBuffer, MemStack};
use faer::linalg::svd::{svd, svd_scratch, ComputeSvdVectors};
use faer::{Mat, Par};
use ndarray::ArrayView2;

/// The SVD of a centred design and the projections of the centred targets, from which
/// [`CentredSvd::solve`] and [`CentredSvd::gcv`] evaluate any per-row penalty.
#[derive(Debug, Clone)]
pub struct CentredSvd {
    /// Rows m.
    rows: usize,
    /// Mean of every design column but the constant.
    col_mean: Vec<f64>,
    /// Mean of every target.
    y_mean: Vec<f64>,
    /// Singular values, descending.
    s: Vec<f64>,
    /// c = Uᵀỹ (rank × outputs).
    c: Mat<f64>,
    /// Right singular vectors (features − 1 × rank).
    v: Mat<f64>,
    /// ‖ỹ − Uc‖², the residual outside the column space, computed directly.
    rss_outside: f64,
}

impl CentredSvd {
    /// Decomposes the design `phi` (rows × features, column 0 the constant) for the targets `y`
    /// (rows × outputs). The SVD runs sequentially (independent of the thread count). `None` if
    /// it fails.
    pub fn new(phi: ArrayView2<f64>, y: ArrayView2<f64>) -> Option<Self> {
        let (m, f) = phi.dim();
        let k = y.ncols();
        let p = f - 1;
        let col_mean: Vec<f64> = (1..f).map(|j| phi.column(j).sum() / m as f64).collect();
        let y_mean: Vec<f64> = (0..k).map(|j| y.column(j).sum() / m as f64).collect();
        let a = Mat::<f64>::from_fn(m, p, |i, j| phi[[i, j + 1]] - col_mean[j]);
        let yc = Mat::<f64>::from_fn(m, k, |i, j| y[[i, j]] - y_mean[j]);
        let r = m.min(p);
        let mut s = Diag::<f64>::zeros(r);
        let mut u = Mat::<f64>::zeros(m, r);
        let mut v = Mat::<f64>::zeros(p, r);
        let par = Par::Seq;
        let mut mem = MemBuffer::new(svd_scratch::<f64>(
            m,
            p,
            ComputeSvdVectors::Thin,
            ComputeSvdVectors::Thin,
            par,
            Default::default(),
        ));
        svd(
            a.as_ref(),
            s.as_mut(),
            Some(u.as_mut()),
            Some(v.as_mut()),
            par,
            MemStack::new(&mut mem),
            Default::default(),
        )
        .ok()?;
        let s: Vec<f64> = (0..r).map(|i| s[i]).collect();
        // c = Uᵀ ỹ (r × k) and the residual outside the column space, computed directly.
        let c = u.transpose() * &yc;
        let fitted = &u * &c;
        clear_upper_simd_state();
        let mut rss_outside = 0.0;
        for j in 0..k {
            for i in 0..m {
                rss_outside += (yc[(i, j)] - fitted[(i, j)]).powi(2);
            }
        }
        Some(Self {
            rows: m,
            col_mean,
            y_mean,
            s,
            c,
            v,
            rss_outside,
        })
    }

    /// GCV(λ) = m·RSS(λ)/(m − df(λ))² for the per-row penalty `lambda`, summed over outputs;
    /// +∞ when m ≤ df(λ).
    pub fn gcv(&self, lambda: f64) -> f64 {
        let mf = self.rows as f64;
        let lp = lambda * mf;
        let mut rss = self.rss_outside;
        let mut df = 1.0;
        for (i, &si) in self.s.iter().enumerate() {
            let shrink = lp / (si * si + lp);
            df += si * si / (si * si + lp);
            for j in 0..self.c.ncols() {
                rss += (shrink * self.c[(i, j)]).powi(2);
            }
        }
        if mf - df > 0.0 {
            mf * rss / ((mf - df) * (mf - df))
        } else {
            f64::INFINITY
        }
    }

    /// The coefficients at the per-row penalty `lambda`, outputs × features row-major (feature 0
    /// the constant); `None` if any is not finite.
    pub fn solve(&self, lambda: f64) -> Option<Vec<f64>> {
        let k = self.c.ncols();
        let f = self.col_mean.len() + 1;
        let lp = lambda * self.rows as f64;
        let mut coef = vec![0.0; k * f];
        for j in 0..k {
            let w = &mut coef[j * f..(j + 1) * f];
            for (i, &si) in self.s.iter().enumerate() {
                let g = if si > 0.0 { si / (si * si + lp) } else { 0.0 };
                let gc = g * self.c[(i, j)];
                for (q, wq) in w[1..].iter_mut().enumerate() {
                    *wq += self.v[(q, i)] * gc;
                }
            }
            w[0] = self.y_mean[j]
                - w[1..]
                    .iter()
                    .zip(&self.col_mean)
                    .map(|(a, b)| a * b)
                    .sum::<f64>();
        }
        coef.iter().all(|x| x.is_finite()).then_some(coef)
    }

    /// Ratio of the largest to the smallest singular value of the centred design (+∞ when the
    /// smallest is 0).
    pub fn condition(&self) -> f64 {
        match (self.s.first(), self.s.last()) {
            (Some(&hi), Some(&lo)) if lo > 0.0 => hi / lo,
            _ => f64::INFINITY,
        }
    }
}
