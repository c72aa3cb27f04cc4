//! The echo state network as a regression with memory, for closures: the reservoir is driven by
//! input rows (the resolved state, or a local stencil of it) and the readout maps φ(r) to the
//! target row (the subgrid coupling term) at the same sample, instead of to an increment.
//!
//! Channels (one per k for local closure inputs) share the reservoir and the readout but each
//! has its own reservoir state, so a local closure is translation-invariant like the physics it
//! stands for and every saved sample gives one training row per channel.

use super::{Reservoir, ValidEsnParams};
use crate::models::closure::{SequenceMemory, SequenceRegressor};
use crate::models::ridge::{nested_readouts, Block, RowSource, Rows};
use crate::models::{standardisation, FitSummary, ModelError};
use ndarray::ArrayView2;
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

/// Trains the readout of one reservoir on every nested prefix at once.
///
/// `inputs` and `targets` hold `channels` rows per saved sample, time-major (rows t·C … t·C + C − 1
/// are sample t), as [`crate::models::closure::ClosureInputs::rows`] writes them. `sizes` are
/// prefix lengths in saved samples (ascending); a prefix of n samples gives (n − washout)·C
/// training rows: each channel's reservoir is driven by its input row at sample t, and the
/// readout of the state after that step predicts the target row at the same sample.
/// Standardisation of inputs and targets comes from the smallest prefix, which every larger one
/// contains. The rows go through the nested pass
/// ([`nested_readouts`](crate::models::ridge::nested_readouts)), so the fit at a size is the
/// same bit for bit whatever other sizes are listed with it (given the same smallest size).
pub fn fit_sequence_nested(
    params: &ValidEsnParams,
    inputs: ArrayView2<f64>,
    targets: ArrayView2<f64>,
    channels: usize,
    sizes: &[usize],
    seed: u64,
) -> Result<Vec<(EsnSequence, FitSummary)>, ModelError> {
    fit_sequence_nested_scored(params, inputs, targets, channels, sizes, seed, None)
}

/// [`fit_sequence_nested`] with the penalty at every size chosen by `score` under
/// `ridge-selection = "forecast"` (each candidate shares the reservoir and standardisation).
pub fn fit_sequence_nested_scored(
    params: &ValidEsnParams,
    inputs: ArrayView2<f64>,
    targets: ArrayView2<f64>,
    channels: usize,
    sizes: &[usize],
    seed: u64,
    score: Option<&dyn Fn(EsnSequence) -> f64>,
) -> Result<Vec<(EsnSequence, FitSummary)>, ModelError> {
    let p = params.get();
    let c_count = channels.max(1);
    let p_in = inputs.ncols();
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
    let (in_mean, in_scale) = standardisation(inputs.slice(first_rows));
    let (out_mean, out_scale) = standardisation(targets.slice(first_rows));
    let reservoir = Arc::new(Reservoir::new(p, p_in, seed));
    let penalty = p.penalty();
    let model = EsnSequence {
        reservoir,
        in_mean,
        in_scale,
        out_mean,
        out_scale,
        readout: Vec::new(),
    };
    let mut rows = ChannelRows::new(&model, inputs.view(), targets.view(), c_count, p.washout);
    let base = &model;
    let mut candidate = score.map(|s| {
        move |w: &[f64]| {
            s(EsnSequence {
                readout: w.to_vec(),
                ..base.clone()
            })
        }
    });
    let scorer = candidate
        .as_mut()
        .map(|c| c as crate::models::ridge::ReadoutScore);
    let fits = nested_readouts(
        &mut rows,
        sizes,
        |n| (n - p.washout) * c_count,
        &penalty,
        scorer,
    )?;
    Ok(fits
        .into_iter()
        .map(|(readout, summary)| {
            let fitted = EsnSequence {
                readout: readout.weights,
                ..model.clone()
            };
            (fitted, summary)
        })
        .collect())
}

/// The training rows of a reservoir regression: `channels` reservoir states, each driven from
/// zero by its channel's standardised input rows; row r of the problem is channel r mod C at
/// sample washout + r / C, with the features after that step and the standardised target row of
/// the same sample. The washout samples are stepped before the first row.
struct ChannelRows<'a> {
    model: &'a EsnSequence,
    inputs: ArrayView2<'a, f64>,
    targets: ArrayView2<'a, f64>,
    channels: usize,
    washout: usize,
    states: Vec<f64>,
    scratch: Vec<f64>,
    z: Vec<f64>,
    phi: Vec<f64>,
    y: Vec<f64>,
    warmed: bool,
}

impl<'a> ChannelRows<'a> {
    fn new(
        model: &'a EsnSequence,
        inputs: ArrayView2<'a, f64>,
        targets: ArrayView2<'a, f64>,
        channels: usize,
        washout: usize,
    ) -> Self {
        let res = &model.reservoir;
        Self {
            model,
            inputs,
            targets,
            channels,
            washout,
            states: vec![0.0; channels * res.size],
            scratch: vec![0.0; res.size],
            z: vec![0.0; inputs.ncols()],
            phi: vec![0.0; res.features()],
            y: vec![0.0; targets.ncols()],
            warmed: false,
        }
    }

    /// Steps channel `c` with input row `row`; whether its state stayed finite.
    fn step(&mut self, c: usize, row: usize) -> bool {
        let m = self.model;
        for (j, zj) in self.z.iter_mut().enumerate() {
            *zj = (self.inputs[[row, j]] - m.in_mean[j]) / m.in_scale[j];
        }
        let d = m.reservoir.size;
        let r = &mut self.states[c * d..(c + 1) * d];
        m.reservoir.step(r, &self.z, &mut self.scratch);
        r.iter().all(|x| x.is_finite())
    }
}

impl RowSource for ChannelRows<'_> {
    fn features(&self) -> usize {
        self.model.reservoir.features()
    }

    fn outputs(&self) -> usize {
        self.targets.ncols()
    }

    fn fill(&mut self, block: &mut Block, rows: Rows) -> Result<(), ModelError> {
        if !self.warmed {
            for t in 0..self.washout {
                let mut finite = true;
                for c in 0..self.channels {
                    finite &= self.step(c, t * self.channels + c);
                }
                if !finite {
                    return Err(ModelError::NonFinite { step: t });
                }
            }
            self.warmed = true;
        }
        let m = self.model;
        let d = m.reservoir.size;
        for (i, r) in rows.each() {
            let (t, c) = (self.washout + r / self.channels, r % self.channels);
            let row = t * self.channels + c;
            if !self.step(c, row) {
                return Err(ModelError::NonFinite { step: t });
            }
            m.reservoir
                .write_features(&self.states[c * d..(c + 1) * d], &mut self.phi);
            for (j, y) in self.y.iter_mut().enumerate() {
                *y = (self.targets[[row, j]] - m.out_mean[j]) / m.out_scale[j];
            }
            block.set_row(i, &self.phi, &self.y);
        }
        Ok(())
    }
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
