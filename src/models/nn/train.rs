//! The training loop both networks share: seeded minibatches, gradients of fixed chunks computed
//! in parallel and summed in chunk order (bit-identical at any thread count), Adam, and early
//! stopping on a trailing validation window that restores the best weights.

use super::optim::Adam;
use super::Training;
use rand::seq::SliceRandom;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

/// Samples per gradient chunk. A minibatch is cut into chunks of this many samples in batch
/// order; chunk gradients are computed in parallel and summed in chunk order, so the cut (and
/// the result) does not depend on the number of threads.
pub const CHUNK_ROWS: usize = 16;

/// What one training run did. Deterministic (no wall time).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct TrainReport {
    /// Epochs run (at most the budget; fewer when early stopping ended training).
    pub epochs: usize,
    /// Epoch budget from the training-budget rule.
    pub epoch_budget: usize,
    /// Epoch whose weights were kept (0: the initial weights were never beaten).
    pub best_epoch: usize,
    /// Adam steps taken.
    pub gradient_steps: usize,
    /// Samples fitted (the leading part of the given samples).
    pub fit_samples: usize,
    /// Samples in the trailing validation window.
    pub validation_samples: usize,
    /// Mean squared error of the kept weights on the fitted samples, standardised output units
    /// (mean over samples and outputs).
    pub training_mse: f64,
    /// Mean squared error of the kept weights on the validation window, standardised units.
    pub validation_mse: f64,
    /// Validation error after each epoch; entry 0 is the initial weights.
    pub validation_history: Vec<f64>,
}

/// Standardised training data. Sample s reads `span` consecutive input rows starting at row s
/// and one target row s.
pub(crate) struct Samples {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub inputs: usize,
    pub outputs: usize,
    pub span: usize,
}

impl Samples {
    pub fn len(&self) -> usize {
        self.y.len() / self.outputs
    }

    /// Input rows s .. s + span, row-major.
    #[inline]
    pub fn input(&self, s: usize) -> &[f64] {
        &self.x[s * self.inputs..(s + self.span) * self.inputs]
    }

    #[inline]
    pub fn target(&self, s: usize) -> &[f64] {
        &self.y[s * self.outputs..(s + 1) * self.outputs]
    }
}

/// A network trainable by [`run`]: a flat parameter vector and the summed squared error of a
/// chunk of samples with its gradient.
pub(crate) trait Network: Sync {
    type Scratch: Send;
    fn scratch(&self) -> Self::Scratch;
    fn params(&self) -> &[f64];
    fn params_mut(&mut self) -> &mut [f64];
    /// Which parameters weight decay applies to (weights, not biases).
    fn decays(&self) -> Vec<bool>;
    /// Σ over `samples` of Σₖ (ŷₖ − yₖ)² in standardised units; when `grad` is given, adds the
    /// gradient of that sum with respect to the parameters to it.
    fn squared_error(
        &self,
        data: &Samples,
        samples: &[usize],
        scratch: &mut Self::Scratch,
        grad: Option<&mut [f64]>,
    ) -> f64;
}

/// Mean squared error over `samples` (standardised units), chunks evaluated in parallel and
/// summed in order.
pub(crate) fn mean_squared_error<N: Network>(net: &N, data: &Samples, samples: &[usize]) -> f64 {
    if samples.is_empty() {
        return f64::NAN;
    }
    let parts: Vec<f64> = samples
        .par_chunks(CHUNK_ROWS)
        .map_init(
            || net.scratch(),
            |scratch, chunk| {
                crate::models::ridge::clear_upper_simd_state();
                net.squared_error(data, chunk, scratch, None)
            },
        )
        .collect();
    parts.iter().sum::<f64>() / (samples.len() * data.outputs) as f64
}

struct ChunkWork<S> {
    grad: Vec<f64>,
    scratch: S,
    sse: f64,
}

/// Trains `net` in place on the first `fit` samples of `data`, validating on the rest; returns
/// with the best weights restored. A non-finite training error ends training early.
pub(crate) fn run<N: Network>(
    net: &mut N,
    data: &Samples,
    fit: usize,
    t: &Training,
    rng: &mut ChaCha8Rng,
) -> TrainReport {
    let n = data.len();
    let validation: Vec<usize> = (fit..n).collect();
    let mut order: Vec<usize> = (0..fit).collect();
    let budget = t.epoch_budget(fit);
    let len = net.params().len();
    let decays = net.decays();
    let mut adam = Adam::new(len);
    let chunks_per_batch = t.batch_size.min(fit).div_ceil(CHUNK_ROWS);
    let mut work: Vec<ChunkWork<N::Scratch>> = (0..chunks_per_batch)
        .map(|_| ChunkWork {
            grad: vec![0.0; len],
            scratch: net.scratch(),
            sse: 0.0,
        })
        .collect();
    let mut grad = vec![0.0; len];

    let mut best_val = mean_squared_error(net, data, &validation);
    let mut best = net.params().to_vec();
    let mut best_epoch = 0;
    let mut history = vec![best_val];
    let mut steps = 0;
    let mut epochs = 0;
    for epoch in 1..=budget {
        order.shuffle(rng);
        let mut diverged = false;
        for batch in order.chunks(t.batch_size) {
            let nchunks = batch.len().div_ceil(CHUNK_ROWS);
            {
                let net: &N = net;
                work[..nchunks]
                    .par_iter_mut()
                    .zip(batch.par_chunks(CHUNK_ROWS))
                    .for_each(|(w, rows)| {
                        crate::models::ridge::clear_upper_simd_state();
                        w.grad.iter_mut().for_each(|g| *g = 0.0);
                        w.sse = net.squared_error(data, rows, &mut w.scratch, Some(&mut w.grad));
                    });
            }
            grad.copy_from_slice(&work[0].grad);
            for w in &work[1..nchunks] {
                grad.iter_mut().zip(&w.grad).for_each(|(g, c)| *g += c);
            }
            let sse: f64 = work[..nchunks].iter().map(|w| w.sse).sum();
            if !sse.is_finite() {
                diverged = true;
                break;
            }
            // Gradient of the batch mean squared error (mean over samples and outputs).
            let norm = 1.0 / (batch.len() * data.outputs) as f64;
            grad.iter_mut().for_each(|g| *g *= norm);
            adam.step(
                net.params_mut(),
                &grad,
                t.learning_rate,
                t.weight_decay,
                &decays,
            );
            steps += 1;
        }
        epochs = epoch;
        if diverged {
            break;
        }
        let val = mean_squared_error(net, data, &validation);
        history.push(val);
        if val < best_val {
            best_val = val;
            best.copy_from_slice(net.params());
            best_epoch = epoch;
        } else if epoch - best_epoch >= t.patience {
            break;
        }
    }
    net.params_mut().copy_from_slice(&best);
    let fit_samples: Vec<usize> = (0..fit).collect();
    TrainReport {
        epochs,
        epoch_budget: budget,
        best_epoch,
        gradient_steps: steps,
        fit_samples: fit,
        validation_samples: n - fit,
        training_mse: mean_squared_error(net, data, &fit_samples),
        validation_mse: best_val,
        validation_history: history,
    }
}
