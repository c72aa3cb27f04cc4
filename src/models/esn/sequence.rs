//! The echo state network as a regression with memory, for closures: the reservoir is driven by
//! input rows (the resolved state, or a local stencil of it) and the readout maps φ(r) to the
//! target row (the subgrid coupling term) at the same sample, instead of to an increment.
//!
//! Channels (one per k for local closure inputs) share the reservoir and the readout but each
//! has its own reservoir state, so a local closure is translation-invariant like the physics it
//! stands for and every saved sample gives one training row per channel.

use super::{Reservoir, ValidEsnParams};
use crate::data::column_stats;
use crate::models::closure::{SequenceMemory, SequenceRegressor};
use crate::models::ridge::{block_rows, fit_readout, NormalEquations, Penalty, BLOCK_ROWS};
use crate::models::{FitSummary, ModelError};
use ndarray::ArrayView2;
use std::borrow::Cow;
use std::sync::Arc;

/// A trained echo state network regression: reservoir, input and target standardisation, readout.
#[derive(Debug, Clone)]
pub struct EsnSequence {
    reservoir: Arc<Reservoir>,
    in_mean: Vec<f64>,
    in_scale: Vec<f64>,
    out_mean: Vec<f64>,
    out_scale: Vec<f64>,
    /// outputs × features, row-major.
    readout: Vec<f64>,
}

fn positive_scale(scale: &mut [f64]) {
    scale.iter_mut().for_each(|s| {
        if s.is_nan() || *s <= 0.0 {
            *s = 1.0;
        }
    });
}

/// Trains the readout of one reservoir on every nested prefix at once.
///
/// `inputs` and `targets` hold `channels` rows per saved sample, time-major (rows t·C … t·C + C − 1
/// are sample t), as [`crate::models::closure::ClosureInputs::rows`] writes them. `sizes` are
/// prefix lengths in saved samples (ascending); a prefix of n samples gives (n − washout)·C
/// training rows: each channel's reservoir is driven by its input row at sample t, and the
/// readout of the state after that step predicts the target row at the same sample.
/// Standardisation of inputs and targets comes from the smallest prefix, which every larger one
/// contains. Blocks of [`BLOCK_ROWS`] rows sit at fixed positions from the first training row
/// (see [`BLOCK_ROWS`]), so the fit at a size is the same bit for bit whatever other sizes are
/// listed with it (given the same smallest size).
pub fn fit_sequence_nested(
    params: &ValidEsnParams,
    inputs: ArrayView2<f64>,
    targets: ArrayView2<f64>,
    channels: usize,
    sizes: &[usize],
    seed: u64,
) -> Result<Vec<(EsnSequence, FitSummary)>, ModelError> {
    let p = params.get();
    let c_count = channels.max(1);
    let (p_in, q) = (inputs.ncols(), targets.ncols());
    let smallest = *sizes.first().ok_or(ModelError::NoSizes)?;
    let largest = *sizes.last().expect("non-empty");
    let available = inputs.nrows().min(targets.nrows()) / c_count;
    if largest > available {
        return Err(ModelError::SubsetTooLarge {
            size: largest,
            available,
        });
    }
    if smallest <= p.washout {
        return Err(ModelError::SubsetBelowWashout {
            size: smallest,
            washout: p.washout,
        });
    }
    let first_rows = ndarray::s![..smallest * c_count, ..];
    let (in_mean, mut in_scale) = column_stats(inputs.slice(first_rows));
    let (out_mean, mut out_scale) = column_stats(targets.slice(first_rows));
    positive_scale(&mut in_scale);
    positive_scale(&mut out_scale);
    let reservoir = Arc::new(Reservoir::new(p, p_in, seed));
    let d = reservoir.size;
    let f = reservoir.features();
    let mut ne = NormalEquations::zeros(f, q);
    let mut states = vec![0.0; c_count * d];
    let mut scratch = vec![0.0; d];
    let mut z = vec![0.0; p_in];
    // Column-major feature block: feature j of row i at j · BLOCK_ROWS + i (see `add`).
    let mut phi_block = vec![0.0; BLOCK_ROWS * f];
    let mut phi_row = vec![0.0; f];
    let mut y_block = vec![0.0; BLOCK_ROWS * q];
    let mut rows = 0;
    let mut out = Vec::with_capacity(sizes.len());
    let mut next_size = 0;
    for t in 0..largest {
        for c in 0..c_count {
            let row = t * c_count + c;
            for (j, zj) in z.iter_mut().enumerate() {
                *zj = (inputs[[row, j]] - in_mean[j]) / in_scale[j];
            }
            let r = &mut states[c * d..(c + 1) * d];
            reservoir.step(r, &z, &mut scratch);
            if t >= p.washout {
                reservoir.write_features(r, &mut phi_row);
                for (j, v) in phi_row.iter().enumerate() {
                    phi_block[j * BLOCK_ROWS + rows] = *v;
                }
                for j in 0..q {
                    y_block[rows * q + j] = (targets[[row, j]] - out_mean[j]) / out_scale[j];
                }
                rows += 1;
            }
            // A block joins the equations when full or when no row follows (then no copy is
            // made at the last size).
            if rows == BLOCK_ROWS || (t + 1 == largest && c + 1 == c_count) {
                let (phi, y) = block_rows(&phi_block, &y_block, rows, f, q);
                ne.add(phi, y);
                rows = 0;
            }
        }
        if !states.iter().all(|x| x.is_finite()) {
            return Err(ModelError::NonFinite { step: t });
        }
        let at = if t + 1 == sizes[next_size] {
            let (phi, y) = block_rows(&phi_block, &y_block, rows, f, q);
            ne.with_rows(phi, y)
        } else {
            Cow::Borrowed(&ne)
        };
        while next_size < sizes.len() && t + 1 == sizes[next_size] {
            let size = sizes[next_size];
            let readout = fit_readout(
                &at,
                &Penalty {
                    ridge: p.ridge,
                    scaling: p.ridge_scaling,
                    selection: p.ridge_selection,
                },
            )
            .map_err(|source| ModelError::Ridge { size, source })?;
            out.push((
                EsnSequence {
                    reservoir: reservoir.clone(),
                    in_mean: in_mean.clone(),
                    in_scale: in_scale.clone(),
                    out_mean: out_mean.clone(),
                    out_scale: out_scale.clone(),
                    readout: readout.weights,
                },
                FitSummary {
                    n: size,
                    training_pairs: at.count,
                    ridge_penalty: Some(readout.lambda),
                    training_rmse: Some(readout.rmse),
                    ridge_selection: Some(readout.choice),
                },
            ));
            next_size += 1;
        }
    }
    debug_assert_eq!(out.len(), sizes.len());
    Ok(out)
}

/// Reservoir states of every channel, and working buffers.
struct EsnMemory<'a> {
    model: &'a EsnSequence,
    states: Vec<f64>,
    peek: Vec<f64>,
    scratch: Vec<f64>,
    z: Vec<f64>,
    phi: Vec<f64>,
}

impl EsnMemory<'_> {
    fn standardise(&mut self, z: &[f64]) {
        let m = self.model;
        for ((o, v), (mean, scale)) in self
            .z
            .iter_mut()
            .zip(z)
            .zip(m.in_mean.iter().zip(&m.in_scale))
        {
            *o = (v - mean) / scale;
        }
    }
}

impl SequenceMemory for EsnMemory<'_> {
    fn predict(&mut self, c: usize, z: &[f64], out: &mut [f64]) {
        self.standardise(z);
        let res = &self.model.reservoir;
        let d = res.size;
        self.peek.copy_from_slice(&self.states[c * d..(c + 1) * d]);
        res.step(&mut self.peek, &self.z, &mut self.scratch);
        res.write_features(&self.peek, &mut self.phi);
        let f = self.phi.len();
        let m = self.model;
        for (j, o) in out.iter_mut().enumerate() {
            let w = &m.readout[j * f..(j + 1) * f];
            let y: f64 = w.iter().zip(&self.phi).map(|(a, b)| a * b).sum();
            *o = y * m.out_scale[j] + m.out_mean[j];
        }
    }

    fn commit(&mut self, c: usize, z: &[f64]) {
        self.standardise(z);
        let res = &self.model.reservoir;
        let d = res.size;
        res.step(
            &mut self.states[c * d..(c + 1) * d],
            &self.z,
            &mut self.scratch,
        );
    }
}

impl SequenceRegressor for EsnSequence {
    fn inputs(&self) -> usize {
        self.in_mean.len()
    }

    fn outputs(&self) -> usize {
        self.out_mean.len()
    }

    fn memory(&self, channels: usize) -> Box<dyn SequenceMemory + '_> {
        let d = self.reservoir.size;
        Box::new(EsnMemory {
            model: self,
            states: vec![0.0; channels * d],
            peek: vec![0.0; d],
            scratch: vec![0.0; d],
            z: vec![0.0; self.in_mean.len()],
            phi: vec![0.0; self.reservoir.features()],
        })
    }
}

#[cfg(test)]
mod tests {
    use super::super::EsnParams;
    use super::*;
    use ndarray::Array2;

    /// The fit at a size is the same bit for bit whatever other sizes are listed with it (given
    /// the same smallest size): readout, standardisation and summary, two channels. The
    /// boundaries (in training rows: 1560, 2560, 3760, 5360) fall inside blocks of
    /// `BLOCK_ROWS`.
    #[test]
    fn fit_at_a_size_does_not_depend_on_the_other_sizes() {
        use crate::models::test_support::{assert_bits_eq, lorenz96, subsets};
        let (t_len, channels) = (2700, 2);
        let data = lorenz96(t_len, 5);
        // Channel c: inputs X_{2c}, X_{2c+1}; target X_{2c+4}.
        let x = Array2::from_shape_fn((t_len * channels, 2), |(row, j)| {
            data[[row / channels, 2 * (row % channels) + j]]
        });
        let y = Array2::from_shape_fn((t_len * channels, 1), |(row, _)| {
            data[[row / channels, 2 * (row % channels) + 4]]
        });
        let params = EsnParams {
            reservoir_size: 40,
            washout: 20,
            ..Default::default()
        }
        .check()
        .unwrap();
        let sizes = [800, 1300, 1900, 2700];
        let fit = |sizes: &[usize]| {
            fit_sequence_nested(&params, x.view(), y.view(), channels, sizes, 5).unwrap()
        };
        let all = fit(&sizes);
        for some in subsets(&sizes) {
            for (m, s) in fit(&some) {
                let (a, sa) = &all[sizes.iter().position(|&n| n == s.n).unwrap()];
                let what = format!("n {} with {some:?}", s.n);
                assert_bits_eq(&a.readout, &m.readout, &what);
                assert_eq!(
                    (&a.in_mean, &a.in_scale, &a.out_mean, &a.out_scale),
                    (&m.in_mean, &m.in_scale, &m.out_mean, &m.out_scale),
                    "{what}"
                );
                assert_eq!(sa, &s, "{what}");
            }
        }
    }

    /// A target that needs memory: y(t) = x(t − 1) (the previous input), which no function of
    /// x(t) alone can give. The reservoir, driven by x, holds it; the readout recovers it with a
    /// small error, channels share the map, and teacher-forced prediction through the memory
    /// interface matches the training relation.
    #[test]
    fn recovers_a_delayed_input_through_its_memory() {
        let (t_len, channels) = (3000, 2);
        let x = Array2::from_shape_fn((t_len * channels, 1), |(row, _)| {
            let (t, c) = ((row / channels) as f64, (row % channels) as f64);
            (0.37 * t + c).sin() + 0.5 * (0.113 * t + 2.0 * c).cos()
        });
        let y = Array2::from_shape_fn((t_len * channels, 1), |(row, _)| {
            if row < channels {
                0.0
            } else {
                x[[row - channels, 0]]
            }
        });
        let params = EsnParams {
            reservoir_size: 100,
            ridge: 1e-8,
            washout: 50,
            ..Default::default()
        }
        .check()
        .unwrap();
        let fits =
            fit_sequence_nested(&params, x.view(), y.view(), channels, &[1000, 3000], 5).unwrap();
        assert_eq!(fits[1].1.training_pairs, (3000 - 50) * channels);
        let model = &fits[1].0;
        let mut memory = model.memory(channels);
        let (mut sse, mut sst) = (0.0, 0.0);
        let mut out = [0.0];
        for t in 0..t_len {
            for c in 0..channels {
                let row = t * channels + c;
                let z = [x[[row, 0]]];
                memory.predict(c, &z, &mut out);
                memory.commit(c, &z);
                if t >= 100 {
                    sse += (out[0] - y[[row, 0]]).powi(2);
                    sst += y[[row, 0]].powi(2);
                }
            }
        }
        let r2 = 1.0 - sse / sst;
        assert!(r2 > 0.99, "R² {r2}");
    }
}
