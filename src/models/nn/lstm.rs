//! Sequence-to-one LSTM: one layer of LSTM cells with forget gates run over a window of input
//! vectors from a zero state, and a linear readout of the last hidden state; gradients by
//! backpropagation through time over the whole window.
//!
//! Cell (σ the logistic function, ⊙ the elementwise product, gates in the order i, f, g, o):
//! i = σ(W_i [x; h] + b_i), f = σ(W_f [x; h] + b_f), g = tanh(W_g [x; h] + b_g),
//! o = σ(W_o [x; h] + b_o), c ← f ⊙ c + i ⊙ g, h ← o ⊙ tanh(c); output ŷ = W_y h_last + b_y.
//! References: Hochreiter & Schmidhuber (1997); Gers, Schmidhuber & Cummins (2000) (forget gate,
//! initialised open with bias 1 as in Jozefowicz, Zaremba & Sutskever 2015, ICML); Werbos (1990).

use super::kernels::{self, gemm, sigmoid, simd_dispatch, transpose};
use super::mlp::check_shapes;
use super::train::{self, Network, Samples, TrainReport, CHUNK_ROWS};
use super::{glorot, ModelError, Scaling, ValidLstmParams};
use ndarray::ArrayView2;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::cell::RefCell;

/// A trained sequence-to-one LSTM with its input and output standardisation.
///
/// Parameters are one flat vector: W_x (`inputs × 4·hidden`, row-major, gate blocks i, f, g, o
/// along a row), W_h (`hidden × 4·hidden`), b (`4·hidden`), W_y (`hidden × outputs`), b_y.
#[derive(Debug, Clone, PartialEq)]
pub struct Lstm {
    inputs: usize,
    hidden: usize,
    outputs: usize,
    window: usize,
    params: Vec<f64>,
    scaling: Scaling,
}

/// Working memory for [`Lstm::predict_with`] and training; make one per thread with
/// [`Lstm::scratch`]. Buffers grow to the largest number of rows seen, then stay. Per-step
/// buffers hold one rows × width block per step.
#[derive(Debug, Clone, Default)]
pub struct LstmScratch {
    /// Standardised inputs per step (window × rows × inputs).
    x: Vec<f64>,
    /// Gate activations i, f, g, o per step (window × rows × 4·hidden).
    gates: Vec<f64>,
    /// Cell states c₀ = 0, c₁, …, c_window ((window + 1) × rows × hidden).
    c: Vec<f64>,
    /// Hidden states h₀ = 0, h₁, …, h_window.
    h: Vec<f64>,
    /// tanh(c_t) for t = 1..=window.
    tc: Vec<f64>,
    /// Outputs (rows × outputs).
    y: Vec<f64>,
    dy: Vec<f64>,
    dz: Vec<f64>,
    dh: Vec<f64>,
    dc: Vec<f64>,
    /// W_h transposed (4·hidden × hidden) and W_y transposed (outputs × hidden).
    wh_t: Vec<f64>,
    wy_t: Vec<f64>,
}

struct Offsets {
    wh: usize,
    b: usize,
    wy: usize,
    by: usize,
    len: usize,
}

impl Lstm {
    fn offsets(&self) -> Offsets {
        Self::offsets_for(self.inputs, self.hidden, self.outputs)
    }

    fn offsets_for(p: usize, h: usize, q: usize) -> Offsets {
        let wh = p * 4 * h;
        let b = wh + h * 4 * h;
        let wy = b + 4 * h;
        let by = wy + h * q;
        Offsets {
            wh,
            b,
            wy,
            by,
            len: by + q,
        }
    }

    /// Glorot-uniform weights (each gate's [W_x; W_h] block has fan-in inputs + hidden and
    /// fan-out hidden), zero biases except the forget gate's, which start at 1.
    pub(super) fn glorot(
        inputs: usize,
        hidden: usize,
        outputs: usize,
        window: usize,
        scaling: Scaling,
        rng: &mut ChaCha8Rng,
    ) -> Self {
        let o = Self::offsets_for(inputs, hidden, outputs);
        let mut params = vec![0.0; o.len];
        glorot(rng, &mut params[..o.wh], inputs + hidden, hidden);
        glorot(rng, &mut params[o.wh..o.b], inputs + hidden, hidden);
        params[o.b + hidden..o.b + 2 * hidden].fill(1.0);
        glorot(rng, &mut params[o.wy..o.by], hidden, outputs);
        Self {
            inputs,
            hidden,
            outputs,
            window,
            params,
            scaling,
        }
    }

    /// Input vector length per step.
    pub fn inputs(&self) -> usize {
        self.inputs
    }

    /// Number of outputs.
    pub fn outputs(&self) -> usize {
        self.outputs
    }

    /// LSTM units.
    pub fn hidden(&self) -> usize {
        self.hidden
    }

    /// Input steps per prediction.
    pub fn window(&self) -> usize {
        self.window
    }

    /// The flat parameter vector (layout on [`Lstm`]).
    pub fn parameters(&self) -> &[f64] {
        &self.params
    }

    /// Input and output standardisation.
    pub fn scaling(&self) -> &Scaling {
        &self.scaling
    }

    /// Working memory for [`Lstm::predict_with`].
    pub fn scratch(&self) -> LstmScratch {
        let mut s = LstmScratch::default();
        self.reserve(&mut s, 1);
        s
    }

    /// Grows `s` to hold `rows` rows of this network.
    fn reserve(&self, s: &mut LstmScratch, rows: usize) {
        let (p, h, q, w) = (self.inputs, self.hidden, self.outputs, self.window);
        for (buf, len) in [
            (&mut s.x, w * rows * p),
            (&mut s.gates, w * rows * 4 * h),
            (&mut s.c, (w + 1) * rows * h),
            (&mut s.h, (w + 1) * rows * h),
            (&mut s.tc, w * rows * h),
            (&mut s.y, rows * q),
            (&mut s.dy, rows * q),
            (&mut s.dz, rows * 4 * h),
            (&mut s.dh, rows * h),
            (&mut s.dc, rows * h),
            (&mut s.wh_t, 4 * h * h),
            (&mut s.wy_t, q * h),
        ] {
            if buf.len() < len {
                buf.resize(len, 0.0);
            }
        }
    }

    /// Predicts `out` (length [`Lstm::outputs`]) from `window` ([`Lstm::window`] input vectors of
    /// length [`Lstm::inputs`], oldest first, concatenated) in the original units; allocates
    /// nothing once `scratch` has been used with this network.
    pub fn predict_with(&self, scratch: &mut LstmScratch, window: &[f64], out: &mut [f64]) {
        simd_dispatch!(Lstm, self.predict_impl(scratch: &mut LstmScratch, window: &[f64], out: &mut [f64]) -> ())
    }

    #[inline(always)]
    fn predict_impl(&self, scratch: &mut LstmScratch, window: &[f64], out: &mut [f64]) {
        self.reserve(scratch, 1);
        let p = self.inputs;
        // With one row, step t's block of `x` is window[t·p..(t + 1)·p].
        for (t, chunk) in scratch.x[..self.window * p].chunks_exact_mut(p).enumerate() {
            self.scaling
                .standardise_input(&window[t * p..(t + 1) * p], chunk);
        }
        self.forward(1, scratch);
        self.scaling.restore_output(&scratch.y, out);
    }

    /// Like [`Lstm::predict_with`], with a per-thread scratch buffer allocated on a thread's
    /// first call (and grown when a larger network needs it).
    pub fn predict(&self, window: &[f64], out: &mut [f64]) {
        thread_local! {
            static SCRATCH: RefCell<LstmScratch> = RefCell::new(LstmScratch::default());
        }
        SCRATCH.with(|cell| self.predict_with(&mut cell.borrow_mut(), window, out));
    }

    /// Standardised forward pass of `rows` windows held in `s.x`; keeps every step's gates and
    /// states in `s` and the outputs in `s.y`.
    #[inline(always)]
    fn forward(&self, rows: usize, s: &mut LstmScratch) {
        let (p, h, q) = (self.inputs, self.hidden, self.outputs);
        let (g4, rh) = (4 * h, rows * h);
        let o = self.offsets();
        let (wx, wh) = (&self.params[..o.wh], &self.params[o.wh..o.b]);
        let b = &self.params[o.b..o.wy];
        s.c[..rh].fill(0.0);
        s.h[..rh].fill(0.0);
        for t in 0..self.window {
            let z = &mut s.gates[t * rows * g4..(t + 1) * rows * g4];
            for row in z.chunks_exact_mut(g4) {
                row.copy_from_slice(b);
            }
            gemm::<false>(rows, g4, p, &s.x[t * rows * p..(t + 1) * rows * p], wx, z);
            if t > 0 {
                gemm::<false>(rows, g4, h, &s.h[t * rh..(t + 1) * rh], wh, z);
            }
            for row in z.chunks_exact_mut(g4) {
                let (zi, rest) = row.split_at_mut(h);
                let (zf, rest) = rest.split_at_mut(h);
                let (zg, zo) = rest.split_at_mut(h);
                zi.iter_mut().for_each(|v| *v = sigmoid(*v));
                zf.iter_mut().for_each(|v| *v = sigmoid(*v));
                zg.iter_mut().for_each(|v| *v = kernels::tanh(*v));
                zo.iter_mut().for_each(|v| *v = sigmoid(*v));
            }
            let (c_old, c_new) = s.c[t * rh..(t + 2) * rh].split_at_mut(rh);
            let h_new = &mut s.h[(t + 1) * rh..(t + 2) * rh];
            let tc = &mut s.tc[t * rh..(t + 1) * rh];
            for (r, gates) in z.chunks_exact(g4).enumerate() {
                let (i, f) = (&gates[..h], &gates[h..2 * h]);
                let (g, og) = (&gates[2 * h..3 * h], &gates[3 * h..]);
                let span = r * h..(r + 1) * h;
                for (j, ((cn, co), (th, hn))) in c_new[span.clone()]
                    .iter_mut()
                    .zip(&c_old[span.clone()])
                    .zip(tc[span.clone()].iter_mut().zip(&mut h_new[span.clone()]))
                    .enumerate()
                {
                    *cn = f[j] * co + i[j] * g[j];
                    *th = kernels::tanh(*cn);
                    *hn = og[j] * *th;
                }
            }
        }
        let y = &mut s.y[..rows * q];
        for row in y.chunks_exact_mut(q) {
            row.copy_from_slice(&self.params[o.by..]);
        }
        let last = &s.h[self.window * rh..(self.window + 1) * rh];
        gemm::<false>(rows, q, h, last, &self.params[o.wy..o.by], y);
    }
}

impl Network for Lstm {
    type Scratch = LstmScratch;

    fn scratch(&self) -> LstmScratch {
        let mut s = LstmScratch::default();
        self.reserve(&mut s, CHUNK_ROWS);
        s
    }

    fn params(&self) -> &[f64] {
        &self.params
    }

    fn params_mut(&mut self) -> &mut [f64] {
        &mut self.params
    }

    fn decays(&self) -> Vec<bool> {
        let o = self.offsets();
        let mut d = vec![true; o.len];
        d[o.b..o.wy].fill(false);
        d[o.by..].fill(false);
        d
    }

    fn squared_error(
        &self,
        data: &Samples,
        samples: &[usize],
        s: &mut LstmScratch,
        grad: Option<&mut [f64]>,
    ) -> f64 {
        simd_dispatch!(Lstm, self.squared_error_impl(data: &Samples, samples: &[usize], s: &mut LstmScratch, grad: Option<&mut [f64]>) -> f64)
    }
}

impl Lstm {
    /// Body of [`Network::squared_error`], inlined into each vector-width copy: the samples run
    /// through the window together as one rows × width matrix per step.
    #[inline(always)]
    fn squared_error_impl(
        &self,
        data: &Samples,
        samples: &[usize],
        s: &mut LstmScratch,
        grad: Option<&mut [f64]>,
    ) -> f64 {
        let c = samples.len();
        if c == 0 {
            return 0.0;
        }
        self.reserve(s, c);
        let (p, h, q, w) = (self.inputs, self.hidden, self.outputs, self.window);
        let (g4, ch) = (4 * h, c * h);
        for t in 0..w {
            let block = &mut s.x[t * c * p..(t + 1) * c * p];
            for (row, &smp) in block.chunks_exact_mut(p).zip(samples) {
                row.copy_from_slice(&data.input(smp)[t * p..(t + 1) * p]);
            }
        }
        self.forward(c, s);
        let mut sse = 0.0;
        for (r, &smp) in samples.iter().enumerate() {
            for (k, y) in data.target(smp).iter().enumerate() {
                let res = s.y[r * q + k] - y;
                sse += res * res;
                s.dy[r * q + k] = 2.0 * res;
            }
        }
        let Some(grad) = grad else {
            return sse;
        };
        let o = self.offsets();
        let (g_wx, rest) = grad.split_at_mut(o.wh);
        let (g_wh, rest) = rest.split_at_mut(o.b - o.wh);
        let (g_b, rest) = rest.split_at_mut(o.wy - o.b);
        let (g_wy, g_by) = rest.split_at_mut(o.by - o.wy);
        let dy = &s.dy[..c * q];
        // Readout.
        for row in dy.chunks_exact(q) {
            g_by.iter_mut().zip(row).for_each(|(g, d)| *g += d);
        }
        let last = &s.h[w * ch..(w + 1) * ch];
        gemm::<true>(h, q, c, last, dy, g_wy);
        transpose(h, q, &self.params[o.wy..o.by], &mut s.wy_t);
        let dh = &mut s.dh[..ch];
        dh.fill(0.0);
        gemm::<false>(c, h, q, dy, &s.wy_t, dh);
        s.dc[..ch].fill(0.0);
        transpose(h, g4, &self.params[o.wh..o.b], &mut s.wh_t);
        // Backpropagation through time over the window, last step first.
        for t in (0..w).rev() {
            let gates = &s.gates[t * c * g4..(t + 1) * c * g4];
            let c_old = &s.c[t * ch..(t + 1) * ch];
            let tc = &s.tc[t * ch..(t + 1) * ch];
            let dz = &mut s.dz[..c * g4];
            let (dh_all, dc_all) = (&s.dh[..ch], &mut s.dc[..ch]);
            for (r, (gr, dzr)) in gates.chunks_exact(g4).zip(dz.chunks_exact_mut(g4)).enumerate() {
                let span = r * h..(r + 1) * h;
                let (dh, dcr) = (&dh_all[span.clone()], &mut dc_all[span.clone()]);
                let (co, tcr) = (&c_old[span.clone()], &tc[span]);
                let mut j = 0;
                while j + 8 <= h {
                    cell_backward::<8>(j, h, gr, co, tcr, dh, dcr, dzr);
                    j += 8;
                }
                while j < h {
                    cell_backward::<1>(j, h, gr, co, tcr, dh, dcr, dzr);
                    j += 1;
                }
            }
            for row in dz.chunks_exact(g4) {
                g_b.iter_mut().zip(row).for_each(|(gb, d)| *gb += d);
            }
            gemm::<true>(p, g4, c, &s.x[t * c * p..(t + 1) * c * p], dz, g_wx);
            if t > 0 {
                gemm::<true>(h, g4, c, &s.h[t * ch..(t + 1) * ch], dz, g_wh);
                let dh = &mut s.dh[..ch];
                dh.fill(0.0);
                gemm::<false>(c, h, g4, dz, &s.wh_t, dh);
            }
        }
        sse
    }
}

/// Backpropagation through one step's cells for units j .. j + N of one row: from the gate
/// activations (`gates`: i, f, g, o blocks of h), the old cell state, tanh of the new one, ∂/∂h
/// and the running ∂/∂c (`dc`, updated to the old cell state's), writes the gate pre-activation
/// deltas to `dz` (same blocks). Units are loaded into and stored from arrays of N, so with N = 8
/// the compiler keeps them in vector registers with no alias checks; the operations per unit and
/// their order do not depend on N.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn cell_backward<const N: usize>(
    j: usize,
    h: usize,
    gates: &[f64],
    c_old: &[f64],
    tc: &[f64],
    dh: &[f64],
    dc: &mut [f64],
    dz: &mut [f64],
) {
    let load = |v: &[f64], at: usize| -> [f64; N] { v[at..at + N].try_into().expect("N units") };
    let (i, f) = (load(gates, j), load(gates, h + j));
    let (g, og) = (load(gates, 2 * h + j), load(gates, 3 * h + j));
    let (co, t, d_h, d_c) = (load(c_old, j), load(tc, j), load(dh, j), load(dc, j));
    let mut out = [[0.0; N]; 5];
    for l in 0..N {
        let dcl = d_c[l] + d_h[l] * og[l] * (1.0 - t[l] * t[l]);
        out[0][l] = dcl * g[l] * i[l] * (1.0 - i[l]);
        out[1][l] = dcl * co[l] * f[l] * (1.0 - f[l]);
        out[2][l] = dcl * i[l] * (1.0 - g[l] * g[l]);
        out[3][l] = d_h[l] * t[l] * og[l] * (1.0 - og[l]);
        out[4][l] = dcl * f[l];
    }
    for (gate, o) in out[..4].iter().enumerate() {
        dz[gate * h + j..gate * h + j + N].copy_from_slice(o);
    }
    dc[j..j + N].copy_from_slice(&out[4]);
}

/// Trains a sequence-to-one LSTM.
///
/// Data layout: `inputs` is a T × p series and `targets` a T × q series on the same time axis.
/// Sample t (for t = window − 1, …, T − 1) reads the input rows t − window + 1 ..= t (oldest
/// first, the recurrence starting from a zero state) and predicts target row t, so there are
/// T − window + 1 samples and the first window − 1 target rows are unused. The training protocol
/// is that of [`super::train_mlp`], over samples in time order: the validation window is the last
/// samples; standardisation comes from the input rows and target rows the fitted samples read.
/// With `init` (warm start) its weights and standardisation are reused; its inputs, outputs,
/// `hidden` and `window` must match.
///
/// Cost: hidden 32, window 8, 8 inputs and targets, 64,000 rows, default training settings
/// (budget 5 epochs, 4,500 steps) trained in 7–9 s on one thread of a 2-core AVX-512 machine that
/// was running other work (release build, measured by hand). A step
/// costs about window × (inputs + hidden) × 4·hidden × 6 flops per sample, so lower `hidden`,
/// `window` or `gradient-steps` for quick studies.
pub fn train_lstm(
    params: &ValidLstmParams,
    inputs: ArrayView2<f64>,
    targets: ArrayView2<f64>,
    seed: u64,
    init: Option<&Lstm>,
) -> Result<(Lstm, TrainReport), ModelError> {
    let p = params.get();
    let t = params.training();
    check_shapes(inputs, targets)?;
    let w = p.window;
    let samples = (inputs.nrows() + 1).saturating_sub(w);
    let (fit, _) = t.split(samples)?;
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut net = match init {
        Some(m) => {
            let want = (inputs.ncols(), p.hidden, targets.ncols(), w);
            let have = (m.inputs, m.hidden, m.outputs, m.window);
            if want.1 != have.1 {
                return Err(super::out_of_range(
                    "hidden",
                    want.1.to_string(),
                    &format!("the initial network's {}", have.1),
                ));
            }
            if want.3 != have.3 {
                return Err(super::out_of_range(
                    "window",
                    want.3.to_string(),
                    &format!("the initial network's {}", have.3),
                ));
            }
            if want != have {
                return Err(super::out_of_range(
                    "training columns",
                    format!("{} inputs, {} targets", want.0, want.2),
                    &format!(
                        "the initial network's {} inputs, {} targets",
                        have.0, have.2
                    ),
                ));
            }
            m.clone()
        }
        None => {
            let scaling = Scaling::from_rows(
                inputs.slice(ndarray::s![..fit + w - 1, ..]),
                targets.slice(ndarray::s![w - 1..fit + w - 1, ..]),
            );
            Lstm::glorot(
                inputs.ncols(),
                p.hidden,
                targets.ncols(),
                w,
                scaling,
                &mut rng,
            )
        }
    };
    let data = Samples {
        x: net.scaling.inputs(inputs),
        y: net.scaling.outputs(targets.slice(ndarray::s![w - 1.., ..])),
        inputs: inputs.ncols(),
        outputs: targets.ncols(),
        span: w,
    };
    let report = train::run(&mut net, &data, fit, &t, &mut rng);
    Ok((net, report))
}

#[cfg(test)]
mod tests {
    use super::super::LstmParams;
    use super::*;
    use ndarray::Array2;
    use rand::RngExt;

    fn uniform(rows: usize, cols: usize, seed: u64) -> Array2<f64> {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        Array2::from_shape_fn((rows, cols), |_| rng.random_range(-1.0..1.0))
    }

    /// Central differences (h = 1e-5) against backpropagation through a window of 5 steps, for
    /// every parameter block; tolerance 1e-6 relative on each block's norm (truncation ≈ h² and
    /// rounding ≈ ε/h are both below 1e-9 relative here).
    #[test]
    fn gradient_matches_central_differences_through_the_window() {
        let (p, h, q, w) = (2, 3, 2, 5);
        let scaling = Scaling {
            input_mean: vec![0.0; p],
            input_scale: vec![1.0; p],
            output_mean: vec![0.0; q],
            output_scale: vec![1.0; q],
        };
        let mut rng = ChaCha8Rng::seed_from_u64(3);
        let mut m = Lstm::glorot(p, h, q, w, scaling, &mut rng);
        // Non-trivial biases and larger recurrent weights so every gate path carries gradient.
        let o = m.offsets();
        for v in &mut m.params[o.wh..o.b] {
            *v *= 2.0;
        }
        for k in (o.b..o.wy).chain(o.by..o.len) {
            m.params[k] += rng.random_range(-0.5..0.5);
        }
        let series = uniform(8, p, 4);
        let targets = uniform(4, q, 5);
        let data = Samples {
            x: series.iter().copied().collect(),
            y: targets.iter().copied().collect(),
            inputs: p,
            outputs: q,
            span: w,
        };
        let rows = [0, 1, 2, 3];
        let mut s = m.scratch();
        let mut grad = vec![0.0; o.len];
        m.squared_error(&data, &rows, &mut s, Some(&mut grad));
        let step = 1e-5;
        let fd: Vec<f64> = (0..o.len)
            .map(|k| {
                let mut a = m.clone();
                a.params[k] += step;
                let mut b = m.clone();
                b.params[k] -= step;
                (a.squared_error(&data, &rows, &mut s, None)
                    - b.squared_error(&data, &rows, &mut s, None))
                    / (2.0 * step)
            })
            .collect();
        let blocks = [
            ("W_x", 0, o.wh),
            ("W_h", o.wh, o.b),
            ("b", o.b, o.wy),
            ("W_y", o.wy, o.by),
            ("b_y", o.by, o.len),
        ];
        for (name, a, b) in blocks {
            let diff = (a..b)
                .map(|k| (grad[k] - fd[k]).powi(2))
                .sum::<f64>()
                .sqrt();
            let norm = (a..b).map(|k| fd[k] * fd[k]).sum::<f64>().sqrt();
            assert!(norm > 1e-6, "{name}: zero gradient");
            assert!(diff / norm < 1e-6, "{name}: relative error {}", diff / norm);
        }
        // W_h acts only through the recurrence (h₀ = 0): its block matching above checks
        // backpropagation through time, provided its gradient is not negligible.
        assert!(grad[o.wh..o.b].iter().any(|g| g.abs() > 1e-3));
    }

    /// The vector-width copy chosen at run time gives the same bits as the baseline build.
    #[test]
    fn dispatched_kernels_equal_the_baseline_build() {
        let (p, h, q, w) = (3, 19, 2, 4);
        let scaling = Scaling {
            input_mean: vec![0.0; p],
            input_scale: vec![1.0; p],
            output_mean: vec![0.0; q],
            output_scale: vec![1.0; q],
        };
        let m = Lstm::glorot(p, h, q, w, scaling, &mut ChaCha8Rng::seed_from_u64(1));
        let data = Samples {
            x: uniform(24, p, 2).iter().copied().collect(),
            y: uniform(21, q, 3).iter().copied().collect(),
            inputs: p,
            outputs: q,
            span: w,
        };
        let rows: Vec<usize> = (0..21).collect();
        let (mut s1, mut s2) = (m.scratch(), m.scratch());
        let mut g1 = vec![0.0; m.params.len()];
        let mut g2 = g1.clone();
        let e1 = m.squared_error(&data, &rows, &mut s1, Some(&mut g1));
        let e2 = m.squared_error_impl(&data, &rows, &mut s2, Some(&mut g2));
        assert_eq!(e1.to_bits(), e2.to_bits());
        assert!(g1.iter().zip(&g2).all(|(a, b)| a.to_bits() == b.to_bits()));
    }

    fn delay_task(n: usize, lag: usize, seed: u64) -> (Array2<f64>, Array2<f64>) {
        let x = uniform(n, 1, seed);
        let y = Array2::from_shape_fn(
            (n, 1),
            |(t, _)| if t >= lag { x[[t - lag, 0]] } else { 0.0 },
        );
        (x, y)
    }

    fn delay_params(window: usize) -> ValidLstmParams {
        LstmParams {
            hidden: 8,
            window,
            learning_rate: 1e-2,
            batch_size: 32,
            gradient_steps: 1500,
            patience: 20,
            ..LstmParams::default()
        }
        .check()
        .unwrap()
    }

    /// y_t = x_{t−3} with x i.i.d. uniform: a window-8 LSTM recalls the input three steps back to
    /// a validation MSE below 0.02 in standardised units (2% of the target variance), checked
    /// also on fresh data; a window-1 LSTM sees only x_t, independent of the target, so it cannot
    /// go below the target variance (MSE ≥ 0.9 after sampling noise).
    #[test]
    fn learns_a_delay_that_needs_memory() {
        let (x, y) = delay_task(2000, 3, 60);
        let (m, r) = train_lstm(&delay_params(8), x.view(), y.view(), 1, None).unwrap();
        assert!(r.validation_mse < 0.02, "{r:?}");
        let (xt, yt) = delay_task(300, 3, 61);
        let mut out = [0.0];
        let mut se = 0.0;
        for t in 7..300 {
            let window: Vec<f64> = (t - 7..=t).map(|k| xt[[k, 0]]).collect();
            m.predict(&window, &mut out);
            se += (out[0] - yt[[t, 0]]).powi(2);
        }
        let test_mse = se / 293.0 / m.scaling().output_scale[0].powi(2);
        assert!(test_mse < 0.02, "test MSE {test_mse}");
        let (_, r1) = train_lstm(&delay_params(1), x.view(), y.view(), 1, None).unwrap();
        assert!(r1.validation_mse > 0.9, "{r1:?}");
    }

    /// Bit-identical weights in pools of 1 and 2 threads, and a zero-rate warm start returns the
    /// initial network unchanged.
    #[test]
    fn deterministic_across_threads_and_warm_start_keeps_init() {
        let (x, y) = delay_task(400, 2, 70);
        let p = LstmParams {
            hidden: 6,
            window: 4,
            gradient_steps: 100,
            weight_decay: 1e-3,
            ..LstmParams::default()
        }
        .check()
        .unwrap();
        let train = |threads: usize| {
            rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap()
                .install(|| train_lstm(&p, x.view(), y.view(), 8, None).unwrap())
        };
        let (a, ra) = train(1);
        let (b, rb) = train(2);
        let bits = |m: &Lstm| {
            m.parameters()
                .iter()
                .map(|v| v.to_bits())
                .collect::<Vec<_>>()
        };
        assert_eq!(bits(&a), bits(&b));
        assert_eq!(ra, rb);

        let frozen = LstmParams {
            learning_rate: 0.0,
            ..p.get().clone()
        }
        .check()
        .unwrap();
        let (x2, y2) = delay_task(300, 1, 71);
        let (c, rc) = train_lstm(&frozen, x2.view(), y2.view(), 2, Some(&a)).unwrap();
        assert_eq!(c, a);
        assert_eq!(rc.best_epoch, 0);
        let other = LstmParams {
            window: 5,
            ..p.get().clone()
        }
        .check()
        .unwrap();
        let e = train_lstm(&other, x2.view(), y2.view(), 2, Some(&a))
            .unwrap_err()
            .to_string();
        assert!(e.contains("`window`"), "{e}");
    }
}
