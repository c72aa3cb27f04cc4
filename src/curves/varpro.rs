//! Variable projection for the learning-curve families: the parameters that enter linearly
//! (offset θ₀ and amplitude θ ≥ 0 of `θ₀ + θ·ψ(n; ν)`, see [`super::families`]) are solved in
//! closed form by weighted linear least squares for every trial ν, and only the at most two
//! nonlinear parameters ln ν are searched, within the bounds of [`super::bounds`].
//!
//! Search: a grid over the bounded box of ln ν (41 nodes in one dimension, 21 × 21 in two),
//! then a bounded Levenberg–Marquardt refinement of the reduced problem from the best grid
//! nodes that are local minima of the grid (at most three). The reduced Jacobian is the exact
//! one of Golub & Pereyra (1973), `∂r/∂ν_k = P⊥·(∂A/∂ν_k)·θ̂ − (A⁺)ᵀ·(∂A/∂ν_k)ᵀ·r` with A
//! the weighted design matrix, r the weighted residual and P⊥ the projector onto the
//! orthogonal complement of the columns of A; with two columns it is written out in closed
//! form. Bounds are enforced by projection, with the components that sit on a bound and
//! whose gradient points outward held fixed (a projected Gauss–Newton step with
//! Levenberg–Marquardt damping, after Kanzow, Yamashita & Fukushima 2004; from memory).
//!
//! The amplitude θ must be ≥ 0 (the curve is monotone in its direction exactly then); when the
//! unconstrained solution has θ < 0, the constrained one is θ = 0 (a flat curve), and a fit
//! that ends flat is rejected by the caller. Censored points (lower bounds on the skill)
//! contribute one-sided residuals `w·min(0, f − y)`; for fixed ν the linear subproblem is
//! then a convex piecewise quadratic, solved by iterating on the set of active bounds.
//!
//! On the log scale, residuals `w·(ln f − ln y)` are not linear in θ₀ and θ: the grid and the
//! first refinement use the linearisation `ln f − ln y ≈ (f − y)/y` (weights w/y, the same
//! variable-projection problem), and the result is polished by the bounded Levenberg–Marquardt
//! iteration on all parameters with the exact log-scale residuals.
//!
//! No allocation happens per iteration: a workspace holds every buffer, sized once per
//! data set.
//!
//! References: Golub & Pereyra (1973), "The differentiation of pseudo-inverses and nonlinear
//! least squares problems whose variables separate", SIAM J. Numer. Anal. 10, 413–432; Golub &
//! Pereyra (2003), "Separable nonlinear least squares: the variable projection method and its
//! applications", Inverse Problems 19, R1–R26; Kaufman (1975), BIT 15, 49–57 (the simplified
//! Jacobian, not used here); Levenberg (1944); Marquardt (1963); Moré (1978), MINPACK (the
//! gradient test `|J_kᵀr| ≤ gtol·‖J_k‖·‖r‖`).

use super::families::{Direction, Family, Nonlinear};

/// Largest number of parameters of the full log-scale problem (offset, θ, two ν).
const MAX_DIM: usize = 4;

/// The data of one fit, prepared once: sizes, their logarithms, values, residual weights and
/// censoring flags.
#[derive(Debug, Clone)]
pub(crate) struct Data {
    pub n: Vec<f64>,
    pub ln_n: Vec<f64>,
    pub y: Vec<f64>,
    pub w: Vec<f64>,
    pub censored: Vec<bool>,
    pub ln_nref: f64,
}

impl Data {
    pub(crate) fn new(n: Vec<f64>, y: Vec<f64>, w: Vec<f64>, censored: Vec<bool>) -> Self {
        let ln_n: Vec<f64> = n.iter().map(|v| v.ln()).collect();
        let ln_nref = ln_n.iter().sum::<f64>() / ln_n.len().max(1) as f64;
        Data {
            n,
            ln_n,
            y,
            w,
            censored,
            ln_nref,
        }
    }

    pub(crate) fn len(&self) -> usize {
        self.n.len()
    }
}

/// Buffers of the solver, reused across evaluations and fits of the same size.
#[derive(Debug, Clone, Default)]
pub(crate) struct Workspace {
    psi: Vec<f64>,
    dpsi: [Vec<f64>; 2],
    omega: Vec<f64>,
    f: Vec<f64>,
    r: Vec<f64>,
    jac: [Vec<f64>; MAX_DIM],
    grid: Vec<f64>,
}

impl Workspace {
    fn size(&mut self, m: usize) {
        for v in [&mut self.psi, &mut self.omega, &mut self.f, &mut self.r]
            .into_iter()
            .chain(self.dpsi.iter_mut())
            .chain(self.jac.iter_mut())
        {
            v.resize(m, 0.0);
        }
    }
}

/// The linear parameters found for one ν.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Linear {
    pub theta0: f64,
    pub theta: f64,
    /// θ = 0 was imposed (or the shape is constant over the data): the curve is flat.
    pub flat: bool,
}

/// A problem for the bounded Levenberg–Marquardt iteration: residuals and Jacobian columns at
/// a parameter vector.
trait Residuals {
    fn dim(&self) -> usize;
    /// Residuals (and the Jacobian when `jac`) at `x`; the sum of squares, or `None` when the
    /// model cannot be evaluated there.
    fn eval(&mut self, x: &[f64], jac: bool) -> Option<f64>;
    fn residuals(&self) -> &[f64];
    fn column(&self, k: usize) -> &[f64];
}

/// The reduced (variable-projection) problem of one family on the linear scale with weights
/// `w` (the log-scale linearisation passes w/y).
struct Reduced<'a> {
    family: Family,
    direction: Direction,
    data: &'a Data,
    w: &'a [f64],
    ws: &'a mut Workspace,
    last: Linear,
}

impl Reduced<'_> {
    /// ψ and its derivatives at every point for ν = exp(u).
    fn shapes(&mut self, u: [f64; 2]) {
        let v = Nonlinear::new(u);
        let mut d = [0.0; 2];
        for i in 0..self.data.len() {
            self.ws.psi[i] = self.family.shape(
                self.direction,
                &v,
                self.data.n[i],
                self.data.ln_n[i],
                self.data.ln_nref,
                &mut d,
            );
            self.ws.dpsi[0][i] = d[0];
            self.ws.dpsi[1][i] = d[1];
        }
    }

    /// Weighted least squares for (θ₀, θ) with effective weights ω, θ ≥ 0.
    fn solve_linear(&self) -> Linear {
        let (om, psi, y) = (&self.ws.omega, &self.ws.psi, &self.data.y);
        let m = psi.len();
        if self.family.has_offset() {
            let mut s = 0.0;
            let (mut sx, mut sy) = (0.0, 0.0);
            for i in 0..m {
                let w2 = om[i] * om[i];
                s += w2;
                sx += w2 * psi[i];
                sy += w2 * y[i];
            }
            if s <= 0.0 {
                return Linear {
                    theta0: 0.0,
                    theta: 0.0,
                    flat: true,
                };
            }
            let (xb, yb) = (sx / s, sy / s);
            let (mut sxx, mut sxy, mut spp) = (0.0, 0.0, 0.0);
            for i in 0..m {
                let w2 = om[i] * om[i];
                let dx = psi[i] - xb;
                sxx += w2 * dx * dx;
                sxy += w2 * dx * (y[i] - yb);
                spp += w2 * psi[i] * psi[i];
            }
            let theta = sxy / sxx;
            if sxx.is_nan() || sxx <= 1e-24 * spp || !theta.is_finite() || theta <= 0.0 {
                return Linear {
                    theta0: yb,
                    theta: 0.0,
                    flat: true,
                };
            }
            Linear {
                theta0: yb - theta * xb,
                theta,
                flat: false,
            }
        } else {
            let (mut spp, mut spy) = (0.0, 0.0);
            for i in 0..m {
                let w2 = om[i] * om[i];
                spp += w2 * psi[i] * psi[i];
                spy += w2 * psi[i] * y[i];
            }
            let theta = spy / spp;
            if spp.is_nan() || spp <= 0.0 || !theta.is_finite() || theta <= 0.0 {
                return Linear {
                    theta0: 0.0,
                    theta: 0.0,
                    flat: true,
                };
            }
            Linear {
                theta0: 0.0,
                theta,
                flat: false,
            }
        }
    }

    /// Fitted values, residuals and RSS for the linear parameters `lin` with the current ω.
    fn residuals_for(&mut self, lin: &Linear) -> f64 {
        let mut rss = 0.0;
        for i in 0..self.data.len() {
            let f = lin.theta0 + lin.theta * self.ws.psi[i];
            self.ws.f[i] = f;
            let r = self.ws.omega[i] * (f - self.data.y[i]);
            self.ws.r[i] = r;
            rss += r * r;
        }
        rss
    }

    /// Solves the linear subproblem at the current shapes, iterating on the active censored
    /// points; leaves f, r and ω of the solution in the workspace.
    fn project(&mut self) -> (Linear, f64) {
        let m = self.data.len();
        for i in 0..m {
            self.ws.omega[i] = self.w[i];
        }
        let mut lin = self.solve_linear();
        let rss = self.residuals_for(&lin);
        if !self.data.censored.iter().any(|&c| c) {
            return (lin, rss);
        }
        // Active set: a censored point counts only while the curve lies below its bound.
        for _ in 0..20 {
            let mut changed = false;
            for i in 0..m {
                if self.data.censored[i] {
                    let active = self.ws.f[i] < self.data.y[i];
                    let was = self.ws.omega[i] != 0.0;
                    if active != was {
                        changed = true;
                        self.ws.omega[i] = if active { self.w[i] } else { 0.0 };
                    }
                }
            }
            if !changed {
                break;
            }
            lin = self.solve_linear();
            self.residuals_for(&lin);
        }
        // One-sided residuals of the final linear parameters (an active set that did not
        // settle leaves a censored point above its bound: its residual is 0).
        let mut rss = 0.0;
        for i in 0..m {
            if self.data.censored[i] {
                let active = self.ws.f[i] < self.data.y[i];
                self.ws.omega[i] = if active { self.w[i] } else { 0.0 };
                self.ws.r[i] = self.ws.omega[i] * (self.ws.f[i] - self.data.y[i]);
            }
            rss += self.ws.r[i] * self.ws.r[i];
        }
        (lin, rss)
    }

    /// The Golub–Pereyra Jacobian of the reduced residual (see the module doc), for the
    /// current shapes, ω, residuals and linear parameters.
    fn jacobian(&mut self, lin: &Linear, k_dim: usize) {
        let m = self.data.len();
        if lin.flat {
            for k in 0..k_dim {
                self.ws.jac[k].iter_mut().for_each(|v| *v = 0.0);
            }
            return;
        }
        let om = &self.ws.omega;
        let psi = &self.ws.psi;
        if self.family.has_offset() {
            let (mut s, mut sx) = (0.0, 0.0);
            for i in 0..m {
                let w2 = om[i] * om[i];
                s += w2;
                sx += w2 * psi[i];
            }
            let xb = sx / s;
            let sxx: f64 = (0..m).map(|i| (om[i] * (psi[i] - xb)).powi(2)).sum();
            for k in 0..k_dim {
                // D = ω·∂ψ/∂u_k; P⊥D = D − q0(q0·D) − q1(q1·D) with q0 = ω/√S,
                // q1 = ω(ψ − x̄)/√Sxx; A(AᵀA)⁻¹e_θ = ω(ψ − x̄)/Sxx.
                let (mut q0d, mut q1d, mut dr) = (0.0, 0.0, 0.0);
                for i in 0..m {
                    let d = om[i] * self.ws.dpsi[k][i];
                    q0d += om[i] * d;
                    q1d += om[i] * (psi[i] - xb) * d;
                    dr += d * self.ws.r[i];
                }
                let (q0d, q1d) = (q0d / s, q1d / sxx);
                for i in 0..m {
                    let d = om[i] * self.ws.dpsi[k][i];
                    let h = om[i] * (psi[i] - xb);
                    let perp = d - om[i] * q0d - h * q1d;
                    self.ws.jac[k][i] = lin.theta * perp - dr * h / sxx;
                }
            }
        } else {
            let spp: f64 = (0..m).map(|i| (om[i] * psi[i]).powi(2)).sum();
            for k in 0..k_dim {
                let (mut ad, mut dr) = (0.0, 0.0);
                for i in 0..m {
                    let d = om[i] * self.ws.dpsi[k][i];
                    ad += om[i] * psi[i] * d;
                    dr += d * self.ws.r[i];
                }
                let ad = ad / spp;
                for i in 0..m {
                    let d = om[i] * self.ws.dpsi[k][i];
                    let a = om[i] * psi[i];
                    self.ws.jac[k][i] = lin.theta * (d - a * ad) - dr * a / spp;
                }
            }
        }
    }
}

impl Residuals for Reduced<'_> {
    fn dim(&self) -> usize {
        self.family.nonlinear_kinds().len()
    }

    fn eval(&mut self, x: &[f64], jac: bool) -> Option<f64> {
        let mut u = [0.0; 2];
        u[..x.len()].copy_from_slice(x);
        self.shapes(u);
        let (lin, rss) = self.project();
        self.last = lin;
        if !rss.is_finite() || !lin.theta0.is_finite() || !lin.theta.is_finite() {
            return None;
        }
        if jac {
            let k = self.dim();
            self.jacobian(&lin, k);
            if (0..k).any(|j| self.ws.jac[j].iter().any(|v| !v.is_finite())) {
                return None;
            }
        }
        Some(rss)
    }

    fn residuals(&self) -> &[f64] {
        &self.ws.r
    }

    fn column(&self, k: usize) -> &[f64] {
        &self.ws.jac[k]
    }
}

/// All parameters (θ₀ when the family has an offset, θ, ln ν) on the log scale:
/// r = w·(ln f − ln y), one-sided for censored points.
struct LogScale<'a> {
    family: Family,
    direction: Direction,
    data: &'a Data,
    ws: &'a mut Workspace,
}

impl LogScale<'_> {
    fn split(&self, x: &[f64]) -> (f64, f64, [f64; 2]) {
        let off = usize::from(self.family.has_offset());
        let theta0 = if off == 1 { x[0] } else { 0.0 };
        let theta = x[off];
        let mut u = [0.0; 2];
        let k = self.family.nonlinear_kinds().len();
        u[..k].copy_from_slice(&x[off + 1..off + 1 + k]);
        (theta0, theta, u)
    }
}

impl Residuals for LogScale<'_> {
    fn dim(&self) -> usize {
        self.family.n_linear() + self.family.nonlinear_kinds().len()
    }

    #[allow(clippy::needless_range_loop)] // small dense arrays indexed in step
    fn eval(&mut self, x: &[f64], jac: bool) -> Option<f64> {
        let (theta0, theta, u) = self.split(x);
        let v = Nonlinear::new(u);
        let off = usize::from(self.family.has_offset());
        let k = self.family.nonlinear_kinds().len();
        let mut d = [0.0; 2];
        let mut rss = 0.0;
        for i in 0..self.data.len() {
            let psi = self.family.shape(
                self.direction,
                &v,
                self.data.n[i],
                self.data.ln_n[i],
                self.data.ln_nref,
                &mut d,
            );
            let f = theta0 + theta * psi;
            if f.is_nan() || f <= 0.0 || f.is_infinite() {
                return None;
            }
            let w = self.data.w[i];
            let mut r = w * (f.ln() - self.data.y[i].ln());
            let active = !(self.data.censored[i] && r >= 0.0);
            if !active {
                r = 0.0;
            }
            self.ws.r[i] = r;
            rss += r * r;
            if jac {
                let g = if active { w / f } else { 0.0 };
                if off == 1 {
                    self.ws.jac[0][i] = g;
                }
                self.ws.jac[off][i] = g * psi;
                for j in 0..k {
                    self.ws.jac[off + 1 + j][i] = g * theta * d[j];
                }
            }
        }
        rss.is_finite().then_some(rss)
    }

    fn residuals(&self) -> &[f64] {
        &self.ws.r
    }

    fn column(&self, k: usize) -> &[f64] {
        &self.ws.jac[k]
    }
}

/// Outcome of the bounded Levenberg–Marquardt iteration.
#[derive(Debug, Clone, Copy)]
struct LmOutcome {
    x: [f64; MAX_DIM],
    rss: f64,
    converged: bool,
}

/// Cholesky solve of the symmetric positive definite system `a·x = b` (dimension `k`, in
/// place in `b`); `false` when `a` is not positive definite.
#[allow(clippy::needless_range_loop)] // small dense arrays indexed in step
fn cholesky_solve(a: &mut [[f64; MAX_DIM]; MAX_DIM], b: &mut [f64; MAX_DIM], k: usize) -> bool {
    for j in 0..k {
        let mut d = a[j][j];
        for p in 0..j {
            d -= a[j][p] * a[j][p];
        }
        if d.is_nan() || d <= 0.0 || d.is_infinite() {
            return false;
        }
        let d = d.sqrt();
        a[j][j] = d;
        for i in j + 1..k {
            let mut s = a[i][j];
            for p in 0..j {
                s -= a[i][p] * a[j][p];
            }
            a[i][j] = s / d;
        }
    }
    for i in 0..k {
        let mut s = b[i];
        for p in 0..i {
            s -= a[i][p] * b[p];
        }
        b[i] = s / a[i][i];
    }
    for i in (0..k).rev() {
        let mut s = b[i];
        for p in i + 1..k {
            s -= a[p][i] * b[p];
        }
        b[i] = s / a[i][i];
    }
    true
}

/// Gradient Jᵀr and Gauss–Newton matrix JᵀJ of the last evaluation.
#[allow(clippy::needless_range_loop)] // small dense arrays indexed in step
fn normal_equations(p: &impl Residuals) -> ([f64; MAX_DIM], [[f64; MAX_DIM]; MAX_DIM]) {
    let k = p.dim();
    let mut g = [0.0; MAX_DIM];
    let mut h = [[0.0; MAX_DIM]; MAX_DIM];
    let r = p.residuals();
    for a in 0..k {
        let ca = p.column(a);
        g[a] = ca.iter().zip(r).map(|(x, y)| x * y).sum();
        for b in 0..=a {
            let cb = p.column(b);
            let v: f64 = ca.iter().zip(cb).map(|(x, y)| x * y).sum();
            h[a][b] = v;
            h[b][a] = v;
        }
    }
    (g, h)
}

/// Bounded Levenberg–Marquardt from `x0` (clamped into [lo, hi]) with at most `max_evals`
/// evaluations. `None` when the start cannot be evaluated.
#[allow(clippy::needless_range_loop)] // small dense arrays indexed in step
fn bounded_lm(
    p: &mut impl Residuals,
    x0: &[f64],
    lo: &[f64],
    hi: &[f64],
    max_evals: usize,
) -> Option<LmOutcome> {
    const GTOL: f64 = 1e-11;
    const FTOL: f64 = 1e-14;
    const XTOL: f64 = 1e-10;
    let k = p.dim();
    let mut x = [0.0; MAX_DIM];
    for j in 0..k {
        x[j] = x0[j].clamp(lo[j], hi[j]);
    }
    let mut rss = p.eval(&x[..k], true)?;
    let mut evals = 1;
    let (mut g, mut h) = normal_equations(p);
    let mut mu = 1e-3;
    let mut converged = false;
    loop {
        if rss <= 1e-300 {
            converged = true;
            break;
        }
        let mut free = [false; MAX_DIM];
        let mut gmax: f64 = 0.0;
        for j in 0..k {
            let blocked = (x[j] <= lo[j] && g[j] > 0.0) || (x[j] >= hi[j] && g[j] < 0.0);
            free[j] = !blocked;
            if free[j] && h[j][j] > 0.0 {
                gmax = gmax.max(g[j].abs() / (h[j][j] * rss).sqrt());
            }
        }
        let nf = free[..k].iter().filter(|&&f| f).count();
        if nf == 0 || gmax <= GTOL {
            converged = true;
            break;
        }
        if evals >= max_evals {
            break;
        }
        // Damped system on the free components.
        let mut map = [0usize; MAX_DIM];
        let mut c = 0;
        for j in 0..k {
            if free[j] {
                map[c] = j;
                c += 1;
            }
        }
        let mut a = [[0.0; MAX_DIM]; MAX_DIM];
        let mut b = [0.0; MAX_DIM];
        for (ia, &ja) in map[..nf].iter().enumerate() {
            for (ib, &jb) in map[..nf].iter().enumerate() {
                a[ia][ib] = h[ja][jb];
            }
            a[ia][ia] += mu * h[ja][ja].max(1e-300) + 1e-300;
            b[ia] = -g[ja];
        }
        if !cholesky_solve(&mut a, &mut b, nf) {
            mu *= 10.0;
            if mu > 1e20 {
                break;
            }
            continue;
        }
        let mut trial = x;
        let mut step: f64 = 0.0;
        let mut size: f64 = 0.0;
        for (ia, &ja) in map[..nf].iter().enumerate() {
            trial[ja] = (x[ja] + b[ia]).clamp(lo[ja], hi[ja]);
            step = step.max((trial[ja] - x[ja]).abs());
            size = size.max(x[ja].abs());
        }
        if step <= 1e-15 * (1.0 + size) {
            converged = true;
            break;
        }
        let new = p.eval(&trial[..k], true);
        evals += 1;
        match new {
            Some(f) if f < rss => {
                let reduction = (rss - f) / rss;
                x = trial;
                rss = f;
                (g, h) = normal_equations(p);
                mu = (mu / 3.0).max(1e-15);
                if reduction <= FTOL && step <= XTOL * (1.0 + size) {
                    converged = true;
                    break;
                }
            }
            _ => {
                mu *= 4.0;
                if mu > 1e20 {
                    // No reduction possible at machine precision.
                    converged = true;
                    break;
                }
            }
        }
    }
    Some(LmOutcome { x, rss, converged })
}

/// Where the refinement starts and how much it may spend.
#[derive(Debug, Clone, Copy)]
pub(crate) enum Search {
    /// Grid over the box, then refinement from the best local minima of the grid.
    Global,
    /// Refinement from one start only (ln ν), at most `max_evals` evaluations.
    From { u: [f64; 2], max_evals: usize },
    /// Refinement from one start with at most `max_evals` evaluations; when it does not
    /// converge to an interior, non-flat optimum, the global search instead.
    Warm { u: [f64; 2], max_evals: usize },
}

/// The scale of the residuals.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Residual {
    Linear,
    Log,
}

/// A solution in variable-projection coordinates.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Solution {
    pub u: [f64; 2],
    pub linear: Linear,
    pub rss: f64,
    pub converged: bool,
}

/// Why a search found no usable solution.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Failure {
    /// The best curve at every trial shape is flat: the data do not move in the curve's
    /// direction.
    Flat,
    /// The curve could not be evaluated (not finite, or not positive on the log scale).
    NotFinite(&'static str),
}

/// One family, direction and residual scale on one data set, with the box of ln ν.
pub(crate) struct Fitter<'a> {
    pub family: Family,
    pub direction: Direction,
    pub residual: Residual,
    pub data: &'a Data,
    pub lo: [f64; 2],
    pub hi: [f64; 2],
}

/// Evaluations allowed to one refinement of the global search.
const GLOBAL_MAX_EVALS: usize = 200;

impl Fitter<'_> {
    fn k(&self) -> usize {
        self.family.nonlinear_kinds().len()
    }

    /// Weights of the (linearised) variable-projection problem.
    fn linear_weights(&self) -> Vec<f64> {
        match self.residual {
            Residual::Linear => self.data.w.clone(),
            Residual::Log => self
                .data
                .w
                .iter()
                .zip(&self.data.y)
                .map(|(w, y)| w / y)
                .collect(),
        }
    }

    /// Whether ln ν lies on a bound (within a millionth of the box width): the index and side.
    pub(crate) fn at_bound(&self, u: &[f64; 2]) -> Option<(usize, bool)> {
        (0..self.k()).find_map(|j| {
            let tol = 1e-6 * (self.hi[j] - self.lo[j]);
            if u[j] - self.lo[j] <= tol {
                Some((j, false))
            } else if self.hi[j] - u[j] <= tol {
                Some((j, true))
            } else {
                None
            }
        })
    }

    /// Fits by the given search; fails when no start can be evaluated or every grid node
    /// gives a flat curve.
    pub(crate) fn solve(&self, search: Search, ws: &mut Workspace) -> Result<Solution, Failure> {
        ws.size(self.data.len());
        let w = self.linear_weights();
        match search {
            Search::Global => self.global(&w, ws),
            Search::From { u, max_evals } => self.refine(&w, u, max_evals, ws),
            Search::Warm { u, max_evals } => match self.refine(&w, u, max_evals, ws) {
                Ok(s) if s.converged && !s.linear.flat && self.at_bound(&s.u).is_none() => Ok(s),
                _ => self.global(&w, ws),
            },
        }
    }

    fn reduced<'b>(&'b self, w: &'b [f64], ws: &'b mut Workspace) -> Reduced<'b> {
        Reduced {
            family: self.family,
            direction: self.direction,
            data: self.data,
            w,
            ws,
            last: Linear {
                theta0: 0.0,
                theta: 0.0,
                flat: true,
            },
        }
    }

    /// Refines the (linearised) reduced problem from `u`, then polishes on the log scale.
    fn refine(
        &self,
        w: &[f64],
        u: [f64; 2],
        max_evals: usize,
        ws: &mut Workspace,
    ) -> Result<Solution, Failure> {
        let k = self.k();
        let mut red = self.reduced(w, ws);
        let out = if k == 0 {
            let rss = red
                .eval(&[], false)
                .ok_or(Failure::NotFinite("the curve is not finite at the data"))?;
            LmOutcome {
                x: [0.0; MAX_DIM],
                rss,
                converged: true,
            }
        } else {
            bounded_lm(&mut red, &u[..k], &self.lo[..k], &self.hi[..k], max_evals)
                .ok_or(Failure::NotFinite("the curve is not finite at the start"))?
        };
        let mut uu = [0.0; 2];
        uu[..k].copy_from_slice(&out.x[..k]);
        // Linear parameters at the refined point.
        red.eval(&uu[..k], false).ok_or(Failure::NotFinite(
            "the curve is not finite at the solution",
        ))?;
        let linear = red.last;
        let lin_sol = Solution {
            u: uu,
            linear,
            rss: out.rss,
            converged: out.converged,
        };
        match self.residual {
            Residual::Linear => Ok(lin_sol),
            Residual::Log => self.polish_log(&lin_sol, max_evals, ws),
        }
    }

    /// Log-scale polish of a linearised solution with all parameters free within bounds.
    fn polish_log(
        &self,
        start: &Solution,
        max_evals: usize,
        ws: &mut Workspace,
    ) -> Result<Solution, Failure> {
        let k = self.k();
        let off = usize::from(self.family.has_offset());
        let dim = off + 1 + k;
        let mut x0 = [0.0; MAX_DIM];
        let mut lo = [f64::NEG_INFINITY; MAX_DIM];
        let mut hi = [f64::INFINITY; MAX_DIM];
        if off == 1 {
            x0[0] = start.linear.theta0;
        }
        x0[off] = start.linear.theta;
        lo[off] = 0.0;
        for j in 0..k {
            x0[off + 1 + j] = start.u[j];
            lo[off + 1 + j] = self.lo[j];
            hi[off + 1 + j] = self.hi[j];
        }
        let mut prob = LogScale {
            family: self.family,
            direction: self.direction,
            data: self.data,
            ws,
        };
        let out = bounded_lm(&mut prob, &x0[..dim], &lo[..dim], &hi[..dim], max_evals).ok_or(
            Failure::NotFinite("the curve is not positive at every size (needed on the log scale)"),
        )?;
        let (theta0, theta, u) = prob.split(&out.x[..dim]);
        Ok(Solution {
            u,
            linear: Linear {
                theta0,
                theta,
                flat: theta <= 0.0,
            },
            rss: out.rss,
            converged: out.converged,
        })
    }

    /// Grid over the box, then refinement from the best grid-local minima.
    fn global(&self, w: &[f64], ws: &mut Workspace) -> Result<Solution, Failure> {
        let k = self.k();
        if k == 0 {
            return self.refine(w, [0.0; 2], 1, ws);
        }
        let g = if k == 1 { 41 } else { 21 };
        let nodes = if k == 1 { g } else { g * g };
        let node_u = |idx: usize| -> [f64; 2] {
            let mut u = [0.0; 2];
            let mut rest = idx;
            for (j, uj) in u.iter_mut().enumerate().take(k) {
                let i = rest % g;
                rest /= g;
                let t = i as f64 / (g - 1) as f64;
                *uj = self.lo[j] * (1.0 - t) + self.hi[j] * t; // both ends exact
            }
            u
        };
        let mut grid = std::mem::take(&mut ws.grid);
        grid.clear();
        {
            let mut red = self.reduced(w, ws);
            for idx in 0..nodes {
                let u = node_u(idx);
                let v = match red.eval(&u[..k], false) {
                    Some(rss) if !red.last.flat => rss,
                    _ => f64::INFINITY,
                };
                grid.push(v);
            }
        }
        // Grid-local minima (no neighbour lower), best first; ties keep grid order.
        let mut minima: Vec<usize> = (0..nodes)
            .filter(|&idx| {
                let v = grid[idx];
                if !v.is_finite() {
                    return false;
                }
                let (i0, i1) = (idx % g, idx / g);
                let mut ok = true;
                for (di, dj) in [(-1i64, 0i64), (1, 0), (0, -1), (0, 1)] {
                    if k == 1 && dj != 0 {
                        continue;
                    }
                    let (a, b) = (i0 as i64 + di, i1 as i64 + dj);
                    let limit = g as i64;
                    if a < 0 || a >= limit || b < 0 || (k == 2 && b >= limit) || (k == 1 && b != 0)
                    {
                        continue;
                    }
                    if grid[(b * limit + a) as usize] < v {
                        ok = false;
                    }
                }
                ok
            })
            .collect();
        minima.sort_by(|&a, &b| grid[a].total_cmp(&grid[b]));
        minima.truncate(3);
        ws.grid = grid;
        if minima.is_empty() {
            return Err(Failure::Flat);
        }
        let mut best: Option<Solution> = None;
        let mut last_err = Failure::Flat;
        for idx in minima {
            match self.refine(w, node_u(idx), GLOBAL_MAX_EVALS, ws) {
                Ok(s) => {
                    let better = match &best {
                        None => true,
                        Some(b) => (s.converged, -s.rss) > (b.converged, -b.rss),
                    };
                    if better {
                        best = Some(s);
                    }
                }
                Err(e) => last_err = e,
            }
        }
        best.ok_or(last_err)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Data of a noisy curve of `family` (8 sizes 16 … 2048) for the Jacobian checks.
    fn data(family: Family, direction: Direction) -> Data {
        let n: Vec<f64> = (0..8).map(|i| 16.0 * 2f64.powi(i)).collect();
        let v = Nonlinear::new(match family {
            Family::ExponentialSaturation => [300f64.ln(), 0.0],
            Family::ShiftedSaturatingPowerLaw => [0.6f64.ln(), 30f64.ln()],
            Family::MorganMercerFlodin | Family::Weibull => [200f64.ln(), 0.8f64.ln()],
            _ => [0.4f64.ln(), 0.0],
        });
        let ln_nref = n.iter().map(|x: &f64| x.ln()).sum::<f64>() / 8.0;
        let mut d = [0.0; 2];
        let y: Vec<f64> = n
            .iter()
            .enumerate()
            .map(|(i, &x)| {
                let off = if family.has_offset() { 1.0 } else { 0.0 };
                let wiggle = 0.05 * if i % 2 == 0 { 1.0 } else { -1.0 };
                off + 2.0 * family.shape(direction, &v, x, x.ln(), ln_nref, &mut d) + wiggle
            })
            .collect();
        let w = (0..8).map(|i| 1.0 + 0.1 * i as f64).collect();
        Data::new(n, y, w, vec![false; 8])
    }

    /// The Golub–Pereyra Jacobian of the reduced residual equals central differences of the
    /// reduced residual (the linear parameters re-solved at every perturbed point), for every
    /// family with nonlinear parameters, in both directions, at a point away from the optimum.
    #[test]
    fn golub_pereyra_jacobian_matches_finite_differences() {
        for direction in [Direction::Increasing, Direction::Decreasing] {
            for family in Family::ALL {
                let k = family.nonlinear_kinds().len();
                if k == 0 {
                    continue;
                }
                let d = data(family, direction);
                let w = d.w.clone();
                let mut ws = Workspace::default();
                ws.size(d.len());
                let mut red = Reduced {
                    family,
                    direction,
                    data: &d,
                    w: &w,
                    ws: &mut ws,
                    last: Linear {
                        theta0: 0.0,
                        theta: 0.0,
                        flat: true,
                    },
                };
                // Off the optimum: nonlinear parameters shifted by 0.2 in ln.
                let u0 = match family {
                    Family::ExponentialSaturation => [300f64.ln() + 0.2, 0.0],
                    Family::ShiftedSaturatingPowerLaw => [0.6f64.ln() - 0.2, 30f64.ln() + 0.2],
                    Family::MorganMercerFlodin | Family::Weibull => {
                        [200f64.ln() + 0.2, 0.8f64.ln() - 0.2]
                    }
                    _ => [0.4f64.ln() + 0.2, 0.0],
                };
                red.eval(&u0[..k], true).unwrap();
                assert!(!red.last.flat, "{direction:?} {family:?}");
                let jac: Vec<Vec<f64>> = (0..k).map(|j| red.column(j).to_vec()).collect();
                for j in 0..k {
                    let h = 1e-6;
                    let (mut up, mut um) = (u0, u0);
                    up[j] += h;
                    um[j] -= h;
                    red.eval(&up[..k], false).unwrap();
                    let rp = red.residuals().to_vec();
                    red.eval(&um[..k], false).unwrap();
                    let rm = red.residuals().to_vec();
                    for i in 0..d.len() {
                        let fd = (rp[i] - rm[i]) / (2.0 * h);
                        // Central differences: error O(h²) ≈ 1e-12 relative; allow 1e-6.
                        assert!(
                            (fd - jac[j][i]).abs() <= 1e-6 * (1.0 + jac[j][i].abs()),
                            "{direction:?} {family:?} ∂r{i}/∂u{j}: {fd} vs {}",
                            jac[j][i]
                        );
                    }
                }
            }
        }
    }

    /// The bounded iteration stops on a bound when the unconstrained optimum lies beyond it,
    /// and reports convergence there.
    #[test]
    fn bounded_search_stops_on_the_bound() {
        // A power law with exponent 0.4 fitted with the exponent capped at 0.3.
        let d = data(Family::PowerLaw, Direction::Increasing);
        let fitter = Fitter {
            family: Family::PowerLaw,
            direction: Direction::Increasing,
            residual: Residual::Linear,
            data: &d,
            lo: [0.02f64.ln(), 0.0],
            hi: [0.3f64.ln(), 0.0],
        };
        let mut ws = Workspace::default();
        let s = fitter.solve(Search::Global, &mut ws).unwrap();
        assert!(s.converged);
        assert!((s.u[0] - 0.3f64.ln()).abs() < 1e-12, "{:?}", s.u);
        assert_eq!(fitter.at_bound(&s.u), Some((0, true)));
    }
}
