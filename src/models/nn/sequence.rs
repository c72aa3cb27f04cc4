//! The LSTM as a regression with memory, for closures: the coupling term at a saved sample from
//! the window of resolved states that ends there (sequence-to-one, as in training), one channel
//! (global closure inputs).

use super::emulator::check_sizes;
use super::lstm::{train_lstm, Lstm, LstmScratch};
use super::{derive_seed, ValidLstmParams};
use crate::models::closure::{SequenceMemory, SequenceRegressor};
use crate::models::{FitSummary, ModelError};
use ndarray::{s, ArrayView2};
use rayon::prelude::*;

/// A trained LSTM regression from the window of input rows ending at a sample to the target row
/// at that sample.
#[derive(Debug, Clone)]
pub struct LstmSequence {
    net: Lstm,
}

impl LstmSequence {
    /// The network.
    pub fn network(&self) -> &Lstm {
        &self.net
    }
}

/// Trains one LSTM regression per subset size n on the first n rows of `inputs` and `targets`
/// (one row per saved sample): sample t ≥ window − 1 pairs the input rows t − window + 1, …, t
/// with the target row t, so a prefix of n samples gives n − window + 1 pairs, the last of
/// which form the validation window (see [`train_lstm`]). Sizes train independently (in
/// parallel) from the seed [`derive_seed`]`(seed, n)`.
pub fn fit_lstm_sequence(
    params: &ValidLstmParams,
    inputs: ArrayView2<f64>,
    targets: ArrayView2<f64>,
    sizes: &[usize],
    seed: u64,
) -> Result<Vec<(LstmSequence, FitSummary)>, ModelError> {
    let w = params.get().window;
    check_sizes(inputs, sizes, w)?;
    check_sizes(targets, sizes, w)?;
    sizes
        .par_iter()
        .map(|&n| {
            let (net, report) = train_lstm(
                params,
                inputs.slice(s![..n, ..]),
                targets.slice(s![..n, ..]),
                derive_seed(seed, n),
                None,
            )?;
            Ok((
                LstmSequence { net },
                FitSummary {
                    n,
                    training_pairs: n + 1 - w,
                    ridge_penalty: None,
                    training_rmse: Some(report.training_mse.sqrt()),
                    ridge_selection: None,
                },
            ))
        })
        .collect()
}

/// The last window − 1 committed rows of every channel (oldest first) and working buffers.
struct LstmMemory<'a> {
    net: &'a Lstm,
    /// Per channel: window × inputs values; the last row is filled by `predict`.
    windows: Vec<Vec<f64>>,
    /// Rows committed per channel (until the window is full, the oldest is repeated in front).
    committed: Vec<usize>,
    scratch: LstmScratch,
}

impl SequenceMemory for LstmMemory<'_> {
    fn predict(&mut self, c: usize, z: &[f64], out: &mut [f64]) {
        let p = self.net.inputs();
        let w = self.net.window();
        let buf = &mut self.windows[c];
        if self.committed[c] == 0 {
            // No past yet: pad with the state itself, as the emulators pad a short history.
            for row in buf.chunks_exact_mut(p) {
                row.copy_from_slice(z);
            }
        }
        buf[(w - 1) * p..].copy_from_slice(z);
        self.net.predict_with(&mut self.scratch, buf, out);
    }

    fn commit(&mut self, c: usize, z: &[f64]) {
        let p = self.net.inputs();
        let w = self.net.window();
        let buf = &mut self.windows[c];
        if self.committed[c] == 0 {
            for row in buf.chunks_exact_mut(p) {
                row.copy_from_slice(z);
            }
        } else if w > 1 {
            // Rows 0 .. w − 1 hold the past; shift it by one and append z as the newest.
            buf.copy_within(p..(w - 1) * p, 0);
            buf[(w - 2) * p..(w - 1) * p].copy_from_slice(z);
        }
        self.committed[c] += 1;
    }
}

impl SequenceRegressor for LstmSequence {
    fn inputs(&self) -> usize {
        self.net.inputs()
    }

    fn outputs(&self) -> usize {
        self.net.outputs()
    }

    fn memory(&self, channels: usize) -> Box<dyn SequenceMemory + '_> {
        let len = self.net.window() * self.net.inputs();
        Box::new(LstmMemory {
            net: &self.net,
            windows: vec![vec![0.0; len]; channels],
            committed: vec![0; channels],
            scratch: self.net.scratch(),
        })
    }
}

#[cfg(test)]
mod tests {
    use super::super::LstmParams;
    use super::*;
    use ndarray::Array2;

    /// Each size trains on its own prefix from its own seed, with the standardisation of that
    /// prefix's fitted rows, so the network at a size is the same bit for bit whatever other
    /// sizes are listed with it (parameters, standardisation and summary).
    #[test]
    fn network_at_a_size_does_not_depend_on_the_other_sizes() {
        use crate::models::test_support::{assert_bits_eq, lorenz96, subsets};
        let data = lorenz96(400, 13);
        let (x, y) = (data.slice(s![.., ..4]), data.slice(s![.., 4..]));
        let params = LstmParams {
            hidden: 4,
            window: 3,
            gradient_steps: 30,
            ..Default::default()
        }
        .check()
        .unwrap();
        let sizes = [200, 260, 330, 400];
        let all = fit_lstm_sequence(&params, x, y, &sizes, 2).unwrap();
        let mut lists = subsets(&sizes);
        lists.push(vec![330]);
        for some in lists {
            for (m, s) in fit_lstm_sequence(&params, x, y, &some, 2).unwrap() {
                let (a, sa) = &all[sizes.iter().position(|&n| n == s.n).unwrap()];
                let what = format!("n {} with {some:?}", s.n);
                assert_bits_eq(a.network().parameters(), m.network().parameters(), &what);
                assert_eq!(a.network().scaling(), m.network().scaling(), "{what}");
                assert_eq!(sa, &s, "{what}");
            }
        }
    }

    /// The memory interface reproduces the training relation: teacher-forced through
    /// commit/predict, the prediction at sample t equals the network applied to the window of
    /// rows t − window + 1, …, t (bit for bit), once the window is full.
    #[test]
    fn memory_windows_match_the_training_windows() {
        let x = Array2::from_shape_fn((200, 2), |(t, j)| (0.1 * t as f64 + j as f64).sin());
        let y = x.mapv(|v| v * v);
        let params = LstmParams {
            hidden: 4,
            window: 3,
            gradient_steps: 50,
            ..Default::default()
        }
        .check()
        .unwrap();
        let fits = fit_lstm_sequence(&params, x.view(), y.view(), &[200], 1).unwrap();
        let model = &fits[0].0;
        let mut memory = model.memory(1);
        let (mut a, mut b) = ([0.0; 2], [0.0; 2]);
        for t in 0..20 {
            let z = x.row(t).to_vec();
            memory.predict(0, &z, &mut a);
            memory.commit(0, &z);
            if t >= 2 {
                let window: Vec<f64> = x.slice(s![t - 2..=t, ..]).iter().copied().collect();
                model.network().predict(&window, &mut b);
                assert_eq!(a, b, "sample {t}");
            }
        }
    }
}
