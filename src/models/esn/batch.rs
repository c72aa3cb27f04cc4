//! Forecasts of one echo state network from many initial conditions at once.
//!
//! The states of all active forecasts sit side by side (unit-major: the M values of reservoir
//! unit i are contiguous), so every sparse recurrent weight, input weight and readout weight is
//! applied to M forecasts in one contiguous, vectorisable loop instead of M scattered ones.
//! Each forecast's arithmetic is performed in exactly the order of [`Esn::forecast`], so the
//! values are identical bit for bit (tested). Finished forecasts are swapped out of the batch.

use super::{fast_tanh, Esn};
use ndarray::ArrayView2;

/// Column-swap storage of `rows` quantities for `width` active forecasts.
struct Batch {
    width: usize,
    cap: usize,
    data: Vec<f64>,
}

impl Batch {
    fn new(rows: usize, width: usize) -> Self {
        Self {
            width,
            cap: width,
            data: vec![0.0; rows * width],
        }
    }

    #[inline]
    fn row(&self, i: usize) -> &[f64] {
        &self.data[i * self.cap..i * self.cap + self.width]
    }

    #[inline]
    fn row_mut(&mut self, i: usize) -> &mut [f64] {
        &mut self.data[i * self.cap..i * self.cap + self.width]
    }

    /// Moves column `last` into column `slot` in every row.
    fn move_column(&mut self, last: usize, slot: usize) {
        let rows = self.data.len() / self.cap;
        for i in 0..rows {
            self.data[i * self.cap + slot] = self.data[i * self.cap + last];
        }
    }
}

impl Esn {
    pub(super) fn forecast_many(
        &self,
        histories: &[ArrayView2<f64>],
        steps: usize,
        sink: &mut dyn FnMut(usize, usize, &[f64]) -> bool,
    ) {
        crate::models::ridge::clear_upper_simd_state();
        let res = &*self.reservoir;
        let (n, d) = (res.size, self.mean.len());
        let half = res.squared_units();
        let m = histories.len();
        if m == 0 {
            return;
        }
        // Warm-up: each history has its own length; drive them one by one (cheap, short).
        let mut r = Batch::new(n, m);
        let mut u = Batch::new(d, m);
        {
            let mut ri = vec![0.0; n];
            let mut scratch = vec![0.0; n];
            let mut ui = vec![0.0; d];
            for (c, h) in histories.iter().enumerate() {
                ri.fill(0.0);
                let len = h.nrows();
                for t in 0..len {
                    for j in 0..d {
                        ui[j] = (h[[t, j]] - self.mean[j]) / self.scale[j];
                    }
                    if t + 1 < len {
                        res.step(&mut ri, &ui, &mut scratch);
                    }
                }
                for (i, v) in ri.iter().enumerate() {
                    r.data[i * m + c] = *v;
                }
                for (j, v) in ui.iter().enumerate() {
                    u.data[j * m + c] = *v;
                }
            }
        }
        // Which history each active column holds.
        let mut who: Vec<usize> = (0..m).collect();
        let mut pre = Batch::new(n, m);
        let mut sq = Batch::new(half, m);
        let mut acc = vec![0.0; m];
        let mut x = vec![0.0; d];
        let alpha = res.leak;
        let f = res.features();
        for k in 1..=steps {
            let w = who.len();
            if w == 0 {
                return;
            }
            r.width = w;
            u.width = w;
            pre.width = w;
            sq.width = w;
            // pre = W r (same order over nonzeros as `recurrent_product`), + bias, + W_in u.
            for i in 0..n {
                let (a, b) = (res.row_start[i], res.row_start[i + 1]);
                let out = &mut pre.data[i * m..i * m + w];
                out.fill(0.0);
                for (&c, &v) in res.col[a..b].iter().zip(&res.val[a..b]) {
                    let rc = &r.data[c * m..c * m + w];
                    for (o, x) in out.iter_mut().zip(rc) {
                        *o += v * x;
                    }
                }
                let bias = res.bias[i];
                out.iter_mut().for_each(|o| *o += bias);
                for j in 0..d {
                    let wij = res.w_in[i * res.inputs + j];
                    let uj = &u.data[j * m..j * m + w];
                    for (o, x) in out.iter_mut().zip(uj) {
                        *o += wij * x;
                    }
                }
            }
            for i in 0..n {
                let (ri, pi) = (&mut r.data[i * m..i * m + w], &pre.data[i * m..i * m + w]);
                for (rv, p) in ri.iter_mut().zip(pi) {
                    *rv = (1.0 - alpha) * *rv + alpha * fast_tanh(*p);
                }
            }
            for i in 0..half {
                for (o, v) in sq.row_mut(i).iter_mut().zip(r.row(i)) {
                    *o = v * v;
                }
            }
            // Readout, in the order of `forecast`: Σ_f W[j, f] φ_f with φ = [1, r, r²_half].
            for j in 0..d {
                let wrow = &self.readout[j * f..(j + 1) * f];
                // 0 + w₀·1 = w₀ exactly, as in the sequential sum.
                acc[..w].fill(wrow[0]);
                for i in 0..n {
                    let wf = wrow[1 + i];
                    for (a, v) in acc[..w].iter_mut().zip(r.row(i)) {
                        *a += wf * v;
                    }
                }
                for i in 0..half {
                    let wf = wrow[1 + n + i];
                    for (a, v) in acc[..w].iter_mut().zip(sq.row(i)) {
                        *a += wf * v;
                    }
                }
                for (uv, a) in u.row_mut(j).iter_mut().zip(&acc[..w]) {
                    *uv += a;
                }
            }
            // Hand each forecast to the sink; swap finished ones out (from the back, so the
            // columns still to visit keep their places).
            let mut c = w;
            while c > 0 {
                c -= 1;
                for (j, xj) in x.iter_mut().enumerate() {
                    *xj = u.data[j * m + c] * self.scale[j] + self.mean[j];
                }
                if !sink(who[c], k, &x) {
                    let last = who.len() - 1;
                    r.move_column(last, c);
                    u.move_column(last, c);
                    who.swap(c, last);
                    who.pop();
                }
            }
        }
    }
}
