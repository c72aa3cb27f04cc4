//! Echo state network: a leaky reservoir with a sparse random recurrent matrix scaled to a target
//! spectral radius, and a ridge readout on [1, r, r² on half the units] predicting the increment of
//! the standardised state. One pass over the largest training subset yields the readout of every
//! nested prefix.
//!
//! Update: r(t+1) = (1 − α) r(t) + α tanh(W r(t) + W_in u(t) + b); prediction
//! û(t+1) = u(t) + W_out φ(r(t+1)), φ(r) = [1, r, r²_{0..D/2}].
//! References: Jaeger (2001), GMD Report 148; Lukoševičius (2012), "A practical guide to applying
//! echo state networks", LNCS 7700; Pathak et al. (2018), Phys. Rev. Lett. 120, 024102 (squared
//! half of the units in the readout).

mod batch;
mod parts;
mod sequence;

pub use parts::{export, EsnParts};
pub use sequence::{fit_sequence_nested, EsnSequence};

use super::closure::memory_form;
use super::family::{
    read_settings, ridge_memory, settings_json, ClosureData, FamilyError, ModelFamily,
    Registration, RelativeCost, ClosureFits, ClosureScore, Equations, FineTuning, Fits, ForecastScore, Train, Trainer,
    TrainingMemory, TrainingShape,
};
use super::finetune::{fine_tune_readouts, ValidFineTuneParams};
use super::ridge::{
    nested_pass, nested_readouts, Block, NormalEquations, Penalty, ReadoutScore, RidgeSelection, RowSource, Rows,
};
use super::{
    out_of_range, standardisation, FitSummary, Forecaster, ModelError, RidgeScaling,
    SettingProblems,
};
use ndarray::ArrayView2;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};
use std::path::Path;
use std::sync::Arc;

/// Echo state network settings as written in a study file.
///
/// | key | default | meaning | valid |
/// |---|---|---|---|
/// | `reservoir-size` | 300 | reservoir units D | 10 ..= 5000 |
/// | `degree` | 6 | nonzeros per row of W | 1 ..= D |
/// | `spectral-radius` | 0.9 | target spectral radius of W | (0, 2] |
/// | `input-scaling` | 0.5 | W_in entries uniform in ±this | (0, 10] |
/// | `bias-scaling` | 0.4 | b entries uniform in ±this | [0, 10] |
/// | `leak-rate` | 1.0 | α | (0, 1] |
/// | `ridge` | 1e-5 | λ (per training pair when `ridge-scaling = "per-sample"`) | (0, 1e3] |
/// | `ridge-scaling` | per-sample | penalty λ·n (per-sample) or λ (fixed) | per-sample, fixed |
/// | `ridge-selection` | fixed | `ridge` with `ridge-scaling`, or λ chosen per subset size by generalised cross-validation (`gcv`), or by forecasts from the study's validation initial conditions (`forecast`; closures run coupled in the coarse solver) | fixed, gcv, forecast |
/// | `washout` | 100 | initial reservoir steps left out of the fit | 0 ..= 100000 |
///
/// `ridge-selection` defaults to `fixed` by measurement (300 units, nested sizes 1000–16000,
/// valid time over 20 initial conditions): GCV doubled the valid time on Lorenz-63 sampled every
/// 0.01 (5.1–10.6 against 3.9–4.7 time units) but on the two-scale Lorenz-96 system and on
/// Lorenz-96 (K = 8) it matched the fixed default from 4000 samples on and fell well short below
/// (two-scale at 1000 samples: 0.04 against 0.35 time units), where it chose far too small a
/// penalty.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields, default)]
pub struct EsnParams {
    pub reservoir_size: usize,
    pub degree: usize,
    pub spectral_radius: f64,
    pub input_scaling: f64,
    pub bias_scaling: f64,
    pub leak_rate: f64,
    pub ridge: f64,
    pub ridge_scaling: RidgeScaling,
    pub ridge_selection: RidgeSelection,
    pub washout: usize,
}

impl Default for EsnParams {
    fn default() -> Self {
        Self {
            reservoir_size: 300,
            degree: 6,
            spectral_radius: 0.9,
            input_scaling: 0.5,
            bias_scaling: 0.4,
            leak_rate: 1.0,
            ridge: 1e-5,
            ridge_scaling: RidgeScaling::PerSample,
            ridge_selection: RidgeSelection::Fixed,
            washout: 100,
        }
    }
}

/// Checked echo state network settings; only [`EsnParams::check`] makes one.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidEsnParams(EsnParams);

impl ValidEsnParams {
    pub fn get(&self) -> &EsnParams {
        &self.0
    }
}

impl EsnParams {
    /// The readout's penalty setting: `ridge`, `ridge-scaling` and `ridge-selection`.
    pub fn penalty(&self) -> Penalty {
        Penalty {
            ridge: self.ridge,
            scaling: self.ridge_scaling,
            selection: self.ridge_selection,
        }
    }

    /// Checks every setting against its valid range (see the table on [`EsnParams`]).
    pub fn check(self) -> Result<ValidEsnParams, ModelError> {
        let p = &self;
        let mut bad = SettingProblems::default();
        if !(10..=5000).contains(&p.reservoir_size) {
            bad.out_of_range(
                "reservoir-size",
                p.reservoir_size.to_string(),
                "10 to 5000",
            );
        }
        if p.degree == 0 || p.degree > p.reservoir_size {
            bad.out_of_range("degree", p.degree.to_string(), "1 to reservoir-size");
        }
        let in_range = |v: f64, lo: f64, hi: f64, lo_open: bool| {
            v.is_finite() && v <= hi && if lo_open { v > lo } else { v >= lo }
        };
        if !in_range(p.spectral_radius, 0.0, 2.0, true) {
            bad.out_of_range(
                "spectral-radius",
                p.spectral_radius.to_string(),
                "greater than 0 and at most 2",
            );
        }
        if !in_range(p.input_scaling, 0.0, 10.0, true) {
            bad.out_of_range(
                "input-scaling",
                p.input_scaling.to_string(),
                "greater than 0 and at most 10",
            );
        }
        if !in_range(p.bias_scaling, 0.0, 10.0, false) {
            bad.out_of_range("bias-scaling", p.bias_scaling.to_string(), "0 to 10");
        }
        if !in_range(p.leak_rate, 0.0, 1.0, true) {
            bad.out_of_range(
                "leak-rate",
                p.leak_rate.to_string(),
                "greater than 0 and at most 1",
            );
        }
        if !in_range(p.ridge, 0.0, 1e3, true) {
            bad.out_of_range(
                "ridge",
                p.ridge.to_string(),
                "greater than 0 and at most 1000",
            );
        }
        if p.washout > 100_000 {
            bad.out_of_range("washout", p.washout.to_string(), "0 to 100000");
        }
        bad.finish(ValidEsnParams(self))
    }
}

/// Readout features of a reservoir of `size` units: φ(r) = [1, r, r²_{0..D/2}].
fn reservoir_features(size: usize) -> usize {
    1 + size + size / 2 // the bias, the states and the squares of the first ⌊D/2⌋
}

/// The fixed random part of an echo state network: recurrent matrix (CSR), input matrix, bias.
#[derive(Debug, Clone)]
struct Reservoir {
    size: usize,
    inputs: usize,
    leak: f64,
    row_start: Vec<usize>,
    col: Vec<usize>,
    val: Vec<f64>,
    /// size × inputs, row-major.
    w_in: Vec<f64>,
    bias: Vec<f64>,
    /// The spectral radius asked for, the estimate of the drawn matrix before scaling, and the
    /// factor its entries were multiplied by (1 when the estimate was 0).
    radius: SpectralScaling,
}

/// How the recurrent matrix was scaled to its target spectral radius.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct SpectralScaling {
    /// `spectral-radius` as set.
    pub target: f64,
    /// The estimate of the drawn matrix's spectral radius before scaling (Gelfand's formula).
    pub estimated_before_scaling: f64,
    /// The factor every recurrent weight was multiplied by: target / estimate.
    pub factor: f64,
}

/// tanh(x) from one exponential: 1 − 2/(e^{2x} + 1); exact in real arithmetic, absolute error
/// near machine epsilon, and about twice as fast as `f64::tanh` in the reservoir loop.
#[inline]
fn fast_tanh(x: f64) -> f64 {
    1.0 - 2.0 / ((2.0 * x).exp() + 1.0)
}

impl Reservoir {
    fn new(p: &EsnParams, inputs: usize, seed: u64) -> Self {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let n = p.reservoir_size;
        let mut row_start = Vec::with_capacity(n + 1);
        let mut col = Vec::with_capacity(n * p.degree);
        let mut val = Vec::with_capacity(n * p.degree);
        row_start.push(0);
        for _ in 0..n {
            let mut cols: Vec<usize> = Vec::with_capacity(p.degree);
            while cols.len() < p.degree {
                let c = rng.random_range(0..n);
                if !cols.contains(&c) {
                    cols.push(c);
                }
            }
            cols.sort_unstable();
            for c in cols {
                col.push(c);
                val.push(rng.random_range(-1.0..1.0));
            }
            row_start.push(col.len());
        }
        let w_in = (0..n * inputs)
            .map(|_| rng.random_range(-p.input_scaling..p.input_scaling))
            .collect();
        let bias = (0..n)
            .map(|_| {
                if p.bias_scaling > 0.0 {
                    rng.random_range(-p.bias_scaling..p.bias_scaling)
                } else {
                    0.0
                }
            })
            .collect();
        let start: Vec<f64> = (0..n).map(|_| rng.random_range(-1.0..1.0)).collect();
        let mut res = Reservoir {
            size: n,
            inputs,
            leak: p.leak_rate,
            row_start,
            col,
            val,
            w_in,
            bias,
            radius: SpectralScaling {
                target: p.spectral_radius,
                estimated_before_scaling: 0.0,
                factor: 1.0,
            },
        };
        let rho = res.spectral_radius_estimate(start);
        res.radius.estimated_before_scaling = rho;
        if rho > 0.0 {
            let scale = p.spectral_radius / rho;
            res.val.iter_mut().for_each(|v| *v *= scale);
            res.radius.factor = scale;
        }
        res
    }

    /// Deterministic spectral radius estimate by Gelfand's formula ρ = lim ‖Aᵏv‖^{1/k}: the mean
    /// log growth of a renormalised vector between iterations 100 and 600 (relative error of
    /// order 0.5·ln(6)/500 ≈ 0.2% for a random matrix whose eigenvalues fill a disc).
    fn spectral_radius_estimate(&self, mut v: Vec<f64>) -> f64 {
        let mut w = vec![0.0; self.size];
        let mut log_growth = 0.0;
        for it in 0..600 {
            self.recurrent_product(&v, &mut w);
            let norm = w.iter().map(|x| x * x).sum::<f64>().sqrt();
            if norm == 0.0 {
                return 0.0; // nilpotent matrix
            }
            if it >= 100 {
                log_growth += norm.ln();
            }
            v.iter_mut().zip(&w).for_each(|(a, b)| *a = b / norm);
        }
        (log_growth / 500.0).exp()
    }

    fn recurrent_product(&self, r: &[f64], out: &mut [f64]) {
        for (i, o) in out.iter_mut().enumerate() {
            let (a, b) = (self.row_start[i], self.row_start[i + 1]);
            *o = self.col[a..b]
                .iter()
                .zip(&self.val[a..b])
                .map(|(&c, &v)| v * r[c])
                .sum();
        }
    }

    /// One reservoir update in place; `scratch` has the reservoir size.
    #[inline]
    fn step(&self, r: &mut [f64], u: &[f64], scratch: &mut [f64]) {
        self.recurrent_product(r, scratch);
        let alpha = self.leak;
        for i in 0..self.size {
            let w_row = &self.w_in[i * self.inputs..(i + 1) * self.inputs];
            let mut pre = scratch[i] + self.bias[i];
            for (w, x) in w_row.iter().zip(u) {
                pre += w * x;
            }
            r[i] = (1.0 - alpha) * r[i] + alpha * fast_tanh(pre);
        }
    }

    /// How many units have their square as a feature: the first ⌊D/2⌋ (units 0 … ⌊D/2⌋ − 1).
    fn squared_units(&self) -> usize {
        self.size / 2
    }

    fn features(&self) -> usize {
        reservoir_features(self.size)
    }

    /// φ(r) = [1, r, r²_{0..⌊D/2⌋}] into `out`.
    #[inline]
    fn write_features(&self, r: &[f64], out: &mut [f64]) {
        out[0] = 1.0;
        out[1..=self.size].copy_from_slice(r);
        let half = self.squared_units();
        for (o, x) in out[1 + self.size..].iter_mut().zip(&r[..half]) {
            *o = x * x;
        }
    }
}

/// A trained echo state network: reservoir, standardisation and readout.
#[derive(Debug, Clone)]
pub struct Esn {
    reservoir: Arc<Reservoir>,
    mean: Vec<f64>,
    scale: Vec<f64>,
    /// outputs × features, row-major.
    readout: Vec<f64>,
}

/// Trains the readout of one reservoir on every nested prefix of `train` at once.
///
/// `sizes` are prefix lengths in samples (ascending, each at most `train.nrows()`); a prefix of n
/// samples gives n − 1 − washout training pairs. Input standardisation uses the smallest prefix,
/// which every larger prefix contains, so all prefixes share one feature map. The fit at a size
/// depends only on that prefix, the smallest size, the seed and the settings: it is the same bit
/// for bit whatever other sizes are listed (see [`BLOCK_ROWS`](super::ridge::BLOCK_ROWS)).
pub fn fit_nested(
    params: &ValidEsnParams,
    train: ArrayView2<f64>,
    sizes: &[usize],
    seed: u64,
) -> Result<Vec<(Esn, FitSummary)>, ModelError> {
    fit_nested_scored(params, train, sizes, seed, None)
}

/// [`fit_nested`] with the penalty at every size chosen by `score` under
/// `ridge-selection = "forecast"` (the candidate readouts share the reservoir and
/// standardisation; only the readout differs).
pub fn fit_nested_scored(
    params: &ValidEsnParams,
    train: ArrayView2<f64>,
    sizes: &[usize],
    seed: u64,
    score: Option<ForecastScore>,
) -> Result<Vec<(Esn, FitSummary)>, ModelError> {
    let p = params.get();
    let d = train.ncols();
    let smallest = *sizes.first().ok_or(ModelError::NoSizes)?;
    let largest = *sizes.last().expect("non-empty");
    if largest > train.nrows() {
        return Err(ModelError::SubsetTooLarge {
            size: largest,
            available: train.nrows(),
        });
    }
    if smallest <= p.washout + 1 {
        return Err(ModelError::SubsetBelowWashout {
            size: smallest,
            washout: p.washout,
        });
    }
    let (mean, scale) = standardisation(train.slice(ndarray::s![..smallest, ..]));
    let reservoir = Arc::new(Reservoir::new(p, d, seed));
    let penalty = p.penalty();
    let mut pairs = ReservoirPairs::new(&reservoir, &mean, &scale, p.washout, train.view());
    let (r, m, sc) = (&reservoir, &mean, &scale);
    let mut candidate = score.map(|s| {
        move |w: &[f64]| {
            s(&Esn {
                reservoir: r.clone(),
                mean: m.clone(),
                scale: sc.clone(),
                readout: w.to_vec(),
            })
        }
    });
    let scorer = candidate.as_mut().map(|c| c as ReadoutScore);
    Ok(
        nested_readouts(&mut pairs, sizes, |n| n - 1 - p.washout, &penalty, scorer)?
            .into_iter()
            .map(|(readout, summary)| {
                let esn = Esn {
                    reservoir: reservoir.clone(),
                    mean: mean.clone(),
                    scale: scale.clone(),
                    readout: readout.weights,
                };
                (esn, summary)
            })
            .collect(),
    )
}

/// The training pairs of a reservoir driven from a zero state by the standardised rows of
/// `data`: pair t (t ≥ `washout`) has the features after the step with u(t) and the target
/// u(t+1) − u(t); row r of the problem is pair `washout` + r. The reservoir advances as rows are
/// asked for; a state that turns non-finite ends the pass.
struct ReservoirPairs<'a> {
    reservoir: &'a Reservoir,
    mean: &'a [f64],
    scale: &'a [f64],
    washout: usize,
    data: ArrayView2<'a, f64>,
    r: Vec<f64>,
    scratch: Vec<f64>,
    /// u(t) and u(t + 1) for the next step t.
    u: Vec<f64>,
    u_next: Vec<f64>,
    phi: Vec<f64>,
    y: Vec<f64>,
    /// The next step t.
    t: usize,
}

impl<'a> ReservoirPairs<'a> {
    fn new(
        reservoir: &'a Reservoir,
        mean: &'a [f64],
        scale: &'a [f64],
        washout: usize,
        data: ArrayView2<'a, f64>,
    ) -> Self {
        let d = data.ncols();
        Self {
            reservoir,
            mean,
            scale,
            washout,
            data,
            r: vec![0.0; reservoir.size],
            scratch: vec![0.0; reservoir.size],
            u: vec![0.0; d],
            u_next: vec![0.0; d],
            phi: vec![0.0; reservoir.features()],
            y: vec![0.0; d],
            t: 0,
        }
    }

    /// Standardised row `t` of the data into `out`.
    fn standardise(&self, t: usize, out: &mut [f64]) {
        for (j, o) in out.iter_mut().enumerate() {
            *o = (self.data[[t, j]] - self.mean[j]) / self.scale[j];
        }
    }
}

impl RowSource for ReservoirPairs<'_> {
    fn features(&self) -> usize {
        self.reservoir.features()
    }

    fn outputs(&self) -> usize {
        self.data.ncols()
    }

    fn fill(&mut self, block: &mut Block, rows: Rows) -> Result<(), ModelError> {
        for (i, row) in rows.each() {
            let pair = self.washout + row;
            loop {
                let t = self.t;
                if t == 0 {
                    let mut u = std::mem::take(&mut self.u);
                    self.standardise(0, &mut u);
                    self.u = u;
                }
                self.reservoir.step(&mut self.r, &self.u, &mut self.scratch);
                let mut u_next = std::mem::take(&mut self.u_next);
                self.standardise(t + 1, &mut u_next);
                self.u_next = u_next;
                if t == pair {
                    self.reservoir.write_features(&self.r, &mut self.phi);
                    for (y, (next, now)) in self.y.iter_mut().zip(self.u_next.iter().zip(&self.u)) {
                        *y = next - now;
                    }
                    block.set_row(i, &self.phi, &self.y);
                }
                std::mem::swap(&mut self.u, &mut self.u_next);
                self.t += 1;
                if !self.r.iter().all(|x| x.is_finite()) {
                    return Err(ModelError::NonFinite { step: t });
                }
                if t == pair {
                    break;
                }
            }
        }
        Ok(())
    }
}

impl Esn {
    /// The readout, outputs × features, row-major (features [1, r, r² of the first half]).
    pub fn readout(&self) -> &[f64] {
        &self.readout
    }

    /// The normal equations of this network's feature map (its reservoir and standardisation) on
    /// every pair of `data` after `washout` reservoir steps from a zero state — the equations
    /// its own fit solved when `data` is its training prefix. [`fine_tune_nested`] needs them
    /// for [`FineTuneMethod::Pooled`](super::finetune::FineTuneMethod::Pooled).
    pub fn normal_equations(
        &self,
        data: ArrayView2<f64>,
        washout: usize,
    ) -> Result<NormalEquations, ModelError> {
        self.check_inputs(data)?;
        let rows = data.nrows().saturating_sub(1 + washout);
        let mut pairs = ReservoirPairs::new(
            &self.reservoir,
            &self.mean,
            &self.scale,
            washout,
            data.view(),
        );
        nested_pass(&mut pairs, &[rows], &mut |_, _| Ok(()))
    }

    fn check_inputs(&self, data: ArrayView2<f64>) -> Result<(), ModelError> {
        if data.ncols() == self.reservoir.inputs {
            Ok(())
        } else {
            Err(out_of_range(
                "variables",
                data.ncols().to_string(),
                &format!("the base network's {}", self.reservoir.inputs),
            ))
        }
    }
}

/// Fine-tunes the readout of `base` on every prefix length k of `ks` (ascending) of the target
/// data `target`, in one nested pass: the reservoir and the input standardisation stay those
/// of the base (so the base's feature map applies unchanged), and the readout is refitted by
/// `tune`'s method (see [`super::finetune`]). `params` are the base's settings: its `washout`
/// applies to the target data (a prefix of k samples gives k − 1 − washout pairs) and its
/// `ridge` and `ridge-scaling` are the fixed penalty when `tune` asks for it.
/// `base_equations` ([`Esn::normal_equations`] of the base training data) are needed by the
/// pooled method only. The result at k is the same bit for bit whatever other sizes `ks` holds.
///
/// The summaries record k, the target pairs, the penalty, the training residual of the final
/// readout on the target pairs (standardised units) and, for the prior-centred method, how λ
/// was chosen (`ridge_selection` is `None` for the pooled method, whose λ and base weight come
/// from the validation window).
pub fn fine_tune_nested(
    base: &Esn,
    params: &ValidEsnParams,
    tune: &ValidFineTuneParams,
    base_equations: Option<&NormalEquations>,
    target: ArrayView2<f64>,
    ks: &[usize],
) -> Result<Vec<(Esn, FitSummary)>, ModelError> {
    let p = params.get();
    base.check_inputs(target)?;
    let fixed = Penalty {
        selection: RidgeSelection::Fixed,
        ..p.penalty()
    };
    let tuned = fine_tune_readouts(
        tune,
        &base.readout,
        fixed,
        base_equations,
        p.washout,
        ks,
        target.nrows(),
        &mut ReservoirPairs::new(
            &base.reservoir,
            &base.mean,
            &base.scale,
            p.washout,
            target.view(),
        ),
    )?;
    Ok(tuned
        .into_iter()
        .map(|(readout, summary)| {
            (
                Esn {
                    readout,
                    ..base.clone()
                },
                summary,
            )
        })
        .collect())
}

impl Forecaster for Esn {
    fn forecast(
        &self,
        history: ArrayView2<f64>,
        steps: usize,
        sink: &mut dyn FnMut(usize, &[f64]) -> bool,
    ) {
        super::ridge::clear_upper_simd_state();
        let res = &self.reservoir;
        let d = self.mean.len();
        let f = res.features();
        let mut r = vec![0.0; res.size];
        let mut scratch = vec![0.0; res.size];
        let mut phi = vec![0.0; f];
        let mut u = vec![0.0; d];
        let mut x = vec![0.0; d];
        let h = history.nrows();
        for t in 0..h {
            for j in 0..d {
                u[j] = (history[[t, j]] - self.mean[j]) / self.scale[j];
            }
            if t + 1 < h {
                res.step(&mut r, &u, &mut scratch);
            }
        }
        for k in 1..=steps {
            res.step(&mut r, &u, &mut scratch);
            res.write_features(&r, &mut phi);
            for j in 0..d {
                let w = &self.readout[j * f..(j + 1) * f];
                let inc: f64 = w.iter().zip(&phi).map(|(a, b)| a * b).sum();
                u[j] += inc;
                x[j] = u[j] * self.scale[j] + self.mean[j];
            }
            if !sink(k, &x) {
                return;
            }
        }
    }

    fn forecast_batch(
        &self,
        histories: &[ArrayView2<f64>],
        steps: usize,
        sink: &mut dyn FnMut(usize, usize, &[f64]) -> bool,
    ) {
        self.forecast_many(histories, steps, sink);
    }
}

/// The key of the family in a `[[model]]` table, and its settings table read and checked.
pub const FAMILY: Registration = Registration { key: "esn", build };

fn build(table: toml::Value, _: &Path) -> Result<Box<dyn ModelFamily>, FamilyError> {
    Ok(Box::new(read_settings::<EsnParams>(table)?.check()?))
}

impl ModelFamily for ValidEsnParams {
    fn label(&self) -> &'static str {
        "echo state network"
    }

    fn tunes_by_forecasts(&self) -> bool {
        self.get().ridge_selection == RidgeSelection::Forecast
    }

    fn settings(&self) -> serde_json::Value {
        settings_json(self.get())
    }

    fn relative_cost(&self) -> RelativeCost {
        // Reservoirs step slowest.
        RelativeCost {
            per_training_sample: 20.0,
            per_forecast_step: 40.0,
        }
    }

    fn has_memory(&self) -> bool {
        true
    }

    fn standardised_on_smallest(&self, _closure: bool) -> bool {
        true
    }

    /// The smallest subset must leave training pairs after the washout: more than washout + 1
    /// samples as an emulator (a pair needs the next sample), more than washout as a closure.
    fn refuses_shape(&self, shape: &TrainingShape) -> Vec<ModelError> {
        let washout = self.get().washout;
        let least = if shape.closure { washout + 1 } else { washout + 2 };
        if shape.smallest >= least {
            return Vec::new();
        }
        vec![out_of_range(
            "washout",
            washout.to_string(),
            &format!(
                "at most {} so that the smallest subset of {} samples leaves training pairs after \
                 the washout; lower `washout` or raise the smallest size to at least {least}",
                shape.smallest.saturating_sub(least - washout),
                shape.smallest
            ),
        )]
    }

    fn training_memory(&self, shape: &TrainingShape) -> Option<TrainingMemory> {
        let features = reservoir_features(self.get().reservoir_size);
        Some(ridge_memory(features, shape.outputs.unwrap_or(1)))
    }

    fn trainer(&self) -> Trainer<'_> {
        Trainer::InProcess(self)
    }
}

impl Train for ValidEsnParams {
    type Model = Esn;

    fn fit(
        &self,
        x: ArrayView2<f64>,
        sizes: &[usize],
        seed: u64,
        score: Option<ForecastScore>,
    ) -> Fits<Esn> {
        fit_nested_scored(self, x, sizes, seed, score)
    }

    /// A closure with memory: one reservoir state per channel (per k for local inputs), driven
    /// by the input rows of the largest prefix. Under forecast selection every candidate
    /// readout runs coupled in the coarse solver.
    fn fit_as_closure(
        &self,
        data: ClosureData,
        sizes: &[usize],
        seed: u64,
        score: Option<ClosureScore>,
    ) -> ClosureFits {
        let largest = *sizes.last().ok_or(ModelError::NoSizes)?;
        let prefix = ndarray::s![..largest.min(data.x.nrows()), ..];
        let (rows_in, rows_out) = data.inputs.rows(data.x.slice(prefix), data.u.slice(prefix));
        let k = data.x.ncols();
        let channels = data.inputs.channels(k);
        let inputs = data.inputs;
        let candidate =
            score.map(|s| move |m: EsnSequence| s(memory_form(Arc::new(m), inputs, k)));
        let sequence_score = candidate
            .as_ref()
            .map(|c| c as &dyn Fn(EsnSequence) -> f64);
        Ok(sequence::fit_sequence_nested_scored(
            self,
            rows_in.view(),
            rows_out.view(),
            channels,
            sizes,
            seed,
            sequence_score,
        )?
        .into_iter()
        .map(|(m, summary)| (memory_form(Arc::new(m), data.inputs, k), summary))
        .collect())
    }

    fn fine_tune(&self, base: &Esn, on: FineTuning) -> Fits<Esn> {
        fine_tune_nested(base, self, on.tune, on.equations, on.target, on.ks)
    }

    fn equations(&self, base: &Esn, data: ArrayView2<f64>) -> Option<Equations> {
        Some(base.normal_equations(data, self.get().washout))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::column_stats;
    use crate::models::finetune::{FineTuneMethod, FineTuneParams};
    use ndarray::Array2;

    fn params(size: usize) -> ValidEsnParams {
        EsnParams {
            reservoir_size: size,
            washout: 20,
            ..EsnParams::default()
        }
        .check()
        .unwrap()
    }

    fn sine_series(n: usize) -> Array2<f64> {
        Array2::from_shape_fn((n, 2), |(t, j)| {
            let s = t as f64 * 0.05;
            if j == 0 {
                s.sin()
            } else {
                s.cos()
            }
        })
    }

    #[test]
    fn spectral_radius_is_scaled_to_target() {
        // A diagonal matrix has a known spectral radius: build one through the same estimator.
        let p = EsnParams {
            reservoir_size: 200,
            degree: 8,
            spectral_radius: 0.7,
            ..EsnParams::default()
        };
        let res = Reservoir::new(&p, 1, 5);
        let mut rng = ChaCha8Rng::seed_from_u64(9);
        let start = (0..200).map(|_| rng.random_range(-1.0..1.0)).collect();
        let rho = res.spectral_radius_estimate(start);
        assert!((rho - 0.7).abs() < 0.7 * 0.02, "rho = {rho}");
    }

    #[test]
    fn fast_tanh_matches_std() {
        for i in -400..=400 {
            let x = i as f64 * 0.05;
            assert!(
                (fast_tanh(x) - x.tanh()).abs() < 4.0 * f64::EPSILON,
                "x = {x}"
            );
        }
        assert_eq!(fast_tanh(1e3), 1.0);
        assert_eq!(fast_tanh(-1e3), -1.0);
    }

    /// The readout of every prefix from one nested pass equals a separate fit on that prefix alone.
    #[test]
    fn nested_pass_equals_separate_fits() {
        let data = sine_series(900);
        let sizes = [300, 600, 900];
        let nested = fit_nested(&params(40), data.view(), &sizes, 3).unwrap();
        for (i, &n) in sizes.iter().enumerate() {
            let single = fit_nested(&params(40), data.view(), &[sizes[0], n], 3).unwrap();
            let (a, sa) = &nested[i];
            let (b, sb) = single.last().unwrap();
            assert_eq!(sa.training_pairs, n - 1 - 20);
            assert_eq!(sa.training_pairs, sb.training_pairs);
            let diff = a
                .readout
                .iter()
                .zip(&b.readout)
                .map(|(x, y)| (x - y).abs())
                .fold(0.0, f64::max);
            assert!(diff < 1e-9, "prefix {n}: max readout difference {diff}");
        }
    }

    /// The fit at a size is the same bit for bit whatever other sizes are listed with it (given
    /// the same smallest size, which fixes the standardisation): readout and summary, for a
    /// fixed penalty and for GCV. The boundaries (in training pairs: 1479, 2279, 3079, 4679)
    /// fall inside blocks of `BLOCK_ROWS`, so a pass that flushed its block at every boundary
    /// would sum the Gram matrix in a different order for each list.
    #[test]
    fn fit_at_a_size_does_not_depend_on_the_other_sizes() {
        use crate::models::test_support::{assert_bits_eq, lorenz96, subsets};
        let data = lorenz96(4700, 1);
        let sizes = [1500, 2300, 3100, 4700];
        for selection in [RidgeSelection::Fixed, RidgeSelection::Gcv] {
            let p = EsnParams {
                reservoir_size: 40,
                washout: 20,
                ridge_selection: selection,
                ..EsnParams::default()
            }
            .check()
            .unwrap();
            let all = fit_nested(&p, data.view(), &sizes, 7).unwrap();
            for some in subsets(&sizes) {
                for (m, s) in fit_nested(&p, data.view(), &some, 7).unwrap() {
                    let (a, sa) = &all[sizes.iter().position(|&n| n == s.n).unwrap()];
                    let what = format!("{selection:?} n {} with {some:?}", s.n);
                    assert_bits_eq(&a.readout, &m.readout, &what);
                    assert_eq!((&a.mean, &a.scale), (&m.mean, &m.scale), "{what}");
                    assert_eq!(sa, &s, "{what}");
                }
            }
        }
    }

    /// Cost of the nested pass (run with `--ignored --nocapture`): CPU seconds, best of 3, of
    /// one fit with the sizes 1000, 2000, …, 32000 against one with 1000 and 32000 only, on the
    /// two-scale Lorenz-96 system, 300 and 600 units, fixed penalty.
    #[test]
    #[ignore = "timing; run on demand"]
    fn nested_curve_cost() {
        use crate::models::test_support::{best_cpu_seconds, two_scale_resolved};
        let data = two_scale_resolved(32000, 1);
        let sizes: Vec<usize> = (0..6).map(|i| 1000 << i).collect();
        for units in [300, 600] {
            let p = EsnParams {
                reservoir_size: units,
                ridge: 1e-6,
                ..EsnParams::default()
            }
            .check()
            .unwrap();
            let all = best_cpu_seconds(3, || fit_nested(&p, data.view(), &sizes, 5).unwrap());
            let two = best_cpu_seconds(3, || {
                fit_nested(&p, data.view(), &[1000, 32000], 5).unwrap()
            });
            eprintln!(
                "ESN D={units}: sizes {sizes:?} {all:.3} s CPU, sizes [1000, 32000] {two:.3} s \
                 CPU; ratio {:.3}",
                all / two
            );
        }
    }

    /// Fine-tuning at a size k is the same bit for bit whatever other sizes are listed with it
    /// (readout and summary), for both methods; the boundaries (the ks and, for validation,
    /// the ends of their fit parts) fall inside blocks of `BLOCK_ROWS`.
    #[test]
    fn fine_tuning_at_a_size_does_not_depend_on_the_other_sizes() {
        use crate::models::test_support::{assert_bits_eq, lorenz96, subsets};
        let p = params(40);
        let pilot = lorenz96(2000, 2);
        let (base, _) = fit_nested(&p, pilot.view(), &[2000], 3).unwrap().remove(0);
        let base_ne = base.normal_equations(pilot.view(), 20).unwrap();
        let target = lorenz96(4700, 4);
        let ks = [1500, 2300, 3100, 4700];
        for method in [FineTuneMethod::PriorCentred, FineTuneMethod::Pooled] {
            let tune = fine_tune(method);
            let tuned = |ks: &[usize]| {
                fine_tune_nested(&base, &p, &tune, Some(&base_ne), target.view(), ks).unwrap()
            };
            let all = tuned(&ks);
            let mut lists = subsets(&ks);
            lists.push(vec![3100]);
            for some in lists {
                for (m, s) in tuned(&some) {
                    let (a, sa) = &all[ks.iter().position(|&n| n == s.n).unwrap()];
                    let what = format!("{method:?} k {} with {some:?}", s.n);
                    assert_bits_eq(&a.readout, &m.readout, &what);
                    assert_eq!(sa, &s, "{what}");
                }
            }
        }
    }

    /// On a periodic orbit (a circle, so the state determines its own future) the network learns to forecast well beyond a few steps.
    /// Batched forecasts give exactly the values of one-by-one forecasts, including when some
    /// forecasts stop early and are swapped out of the batch.
    #[test]
    fn batched_forecasts_equal_single_forecasts_bit_for_bit() {
        let data = sine_series(3000);
        let fitted = fit_nested(&params(80), data.view(), &[2000], 5).unwrap();
        let esn = &fitted[0].0;
        let starts = [2100usize, 2150, 2210, 2333, 2400, 2555, 2601];
        let histories: Vec<_> = starts
            .iter()
            .map(|&s| data.slice(ndarray::s![s - 30..=s, ..]))
            .collect();
        // Forecast i stops after 5 + 3i leads.
        let stop = |i: usize, k: usize| k < 5 + 3 * i;
        let mut single = vec![Vec::new(); starts.len()];
        for (i, h) in histories.iter().enumerate() {
            esn.forecast(*h, 40, &mut |k, x| {
                single[i].push(x.to_vec());
                stop(i, k)
            });
        }
        let mut batched = vec![Vec::new(); starts.len()];
        esn.forecast_batch(&histories, 40, &mut |i, k, x| {
            assert_eq!(batched[i].len() + 1, k, "leads arrive in order");
            batched[i].push(x.to_vec());
            stop(i, k)
        });
        for i in 0..starts.len() {
            assert_eq!(single[i].len(), 5 + 3 * i);
            assert_eq!(single[i], batched[i], "forecast {i}");
        }
    }

    #[test]
    fn forecasts_a_periodic_signal() {
        let data = sine_series(3000);
        let fitted = fit_nested(&params(100), data.view(), &[2000], 11).unwrap();
        let (esn, summary) = &fitted[0];
        assert!(summary.training_rmse.unwrap() < 1e-2);
        let ic = 2500;
        let mut max_err: f64 = 0.0;
        esn.forecast(
            data.slice(ndarray::s![ic - 200..=ic, ..]),
            100,
            &mut |k, x| {
                for j in 0..2 {
                    max_err = max_err.max((x[j] - data[[ic + k, j]]).abs());
                }
                true
            },
        );
        assert!(max_err < 0.01, "max error over 100 steps: {max_err}");
    }

    #[test]
    fn invalid_settings_name_the_key() {
        let e = EsnParams {
            spectral_radius: -1.0,
            ..EsnParams::default()
        }
        .check()
        .unwrap_err()
        .to_string();
        assert!(e.contains("spectral-radius") && e.contains("-1"), "{e}");
    }

    #[test]
    fn sizes_below_washout_are_refused() {
        let data = sine_series(500);
        let e = fit_nested(&params(20), data.view(), &[10, 100], 1)
            .unwrap_err()
            .to_string();
        assert!(e.contains("washout"), "{e}");
    }

    fn fine_tune(method: FineTuneMethod) -> ValidFineTuneParams {
        FineTuneParams {
            method,
            ..FineTuneParams::default()
        }
        .check()
        .unwrap()
    }

    /// The base's normal equations recomputed from its training prefix are those its fit
    /// solved (same readout, bit for bit); fine-tuned networks keep the base's reservoir and
    /// standardisation; the nested pass gives every k the readout of a separate fine-tuning on
    /// that k alone (to round-off, as in `nested_pass_equals_separate_fits`), for both methods.
    #[test]
    fn fine_tuning_keeps_the_feature_map_and_nests() {
        let p = params(40);
        let pilot = sine_series(900);
        let (base, _) = fit_nested(&p, pilot.view(), &[900], 3).unwrap().remove(0);
        let base_ne = base.normal_equations(pilot.view(), 20).unwrap();
        let refit = crate::models::ridge::fit_readout(
            &base_ne,
            &Penalty {
                ridge: p.get().ridge,
                scaling: p.get().ridge_scaling,
                selection: RidgeSelection::Fixed,
            },
        )
        .unwrap();
        assert_eq!(refit.weights, base.readout);
        // Target: a faster oscillation with a larger amplitude.
        let target = Array2::from_shape_fn((700, 2), |(t, j)| {
            let s = t as f64 * 0.06;
            1.2 * if j == 0 { s.sin() } else { s.cos() }
        });
        let ks = [200, 450, 700];
        for method in [FineTuneMethod::PriorCentred, FineTuneMethod::Pooled] {
            let tune = fine_tune(method);
            let nested =
                fine_tune_nested(&base, &p, &tune, Some(&base_ne), target.view(), &ks).unwrap();
            for (i, &k) in ks.iter().enumerate() {
                let (m, summary) = &nested[i];
                assert!(std::sync::Arc::ptr_eq(&m.reservoir, &base.reservoir));
                assert_eq!((&m.mean, &m.scale), (&base.mean, &base.scale));
                assert_eq!((summary.n, summary.training_pairs), (k, k - 1 - 20));
                assert_ne!(m.readout, base.readout);
                let single =
                    fine_tune_nested(&base, &p, &tune, Some(&base_ne), target.view(), &[k])
                        .unwrap();
                let (la, lb) = (
                    summary.ridge_penalty.unwrap(),
                    single[0].1.ridge_penalty.unwrap(),
                );
                assert!((la - lb).abs() <= 1e-9 * la, "penalty {la} vs {lb}");
                let top = m.readout.iter().fold(0.0f64, |a, x| a.max(x.abs()));
                let diff = m
                    .readout
                    .iter()
                    .zip(&single[0].0.readout)
                    .map(|(x, y)| (x - y).abs())
                    .fold(0.0, f64::max)
                    / top;
                // The bound for equations summed in any order: round-off amplified by the
                // solve by up to cond(G + λI) (Higham 2002, §10.1; from memory); the periodic
                // target makes G nearly singular. With blocks at fixed positions the two agree
                // bit for bit (`fine_tuning_at_a_size_does_not_depend_on_the_other_sizes`).
                let ne = base
                    .normal_equations(target.slice(ndarray::s![..k, ..]), 20)
                    .unwrap();
                // Pooled: G_k + wG_base with w ≤ 1, whose largest eigenvalue is at most the sum.
                let e = ne.eigen().unwrap();
                let values = e.eigenvalues();
                let base_top = match method {
                    FineTuneMethod::Pooled => {
                        *base_ne.eigen().unwrap().eigenvalues().last().unwrap()
                    }
                    FineTuneMethod::PriorCentred => 0.0,
                };
                let cond = (values[values.len() - 1] + base_top + la) / (values[0] + la);
                assert!(
                    diff <= 64.0 * f64::EPSILON * cond,
                    "{method:?} k {k}: readouts differ by {diff:e} relative, cond {cond:e}"
                );
            }
        }
        let e = fine_tune_nested(
            &base,
            &p,
            &fine_tune(FineTuneMethod::Pooled),
            None,
            target.view(),
            &ks,
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("pooled"), "{e}");
        let e = fine_tune_nested(
            &base,
            &p,
            &fine_tune(FineTuneMethod::PriorCentred),
            None,
            target.view(),
            &[21, 100],
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("washout"), "{e}");
    }

    fn two_scale(forcing: f64, samples: usize, seed: u64) -> Array2<f64> {
        crate::systems::simulate(
            &crate::systems::SimulationSpec {
                system: crate::systems::SystemSpec::TwoScaleLorenz96 {
                    k: 8,
                    j: 32,
                    h: 1.0,
                    c: 10.0,
                    b: 10.0,
                    forcing,
                },
                dt: 0.005,
                sample_interval: 0.01,
                spin_up: 5.0,
                samples,
                seed,
            },
            None,
        )
        .unwrap()
        .resolved
    }

    /// Valid times (model time units) of `model` from `ics` initial conditions 100 samples apart
    /// on `test`, with a warm-up of 200 samples, at most 300 leads (3 time units), threshold 0.5
    /// and the climatology of `test`, scored as the study runner scores them.
    fn valid_times_on(model: &dyn Forecaster, test: &Array2<f64>, ics: usize) -> Vec<f64> {
        let (mean, sigma) = column_stats(test.view());
        let spec = crate::skill::SkillSpec {
            threshold: 0.5,
            warm_up: 200,
            max_lead: 300,
            sample_interval: 0.01,
            mean,
            sigma,
            unresolved: None,
        };
        let starts: Vec<usize> = (0..ics).map(|i| 200 + 100 * i).collect();
        crate::skill::valid_times(model, test.view(), &starts, &spec)
            .iter()
            .map(|s| s.valid_time)
            .collect()
    }

    fn mean(v: &[f64]) -> f64 {
        v.iter().sum::<f64>() / v.len() as f64
    }

    /// Transfer on the two-scale Lorenz-96 system (K = 8, J = 32, h = 1, b = c = 10, dt 0.005,
    /// sampled every 0.01): an echo state network with the default settings trained on 20,000
    /// samples at forcing F = 20, fine-tuned (prior-centred, default settings) with the first
    /// k = 1000 samples at F = 24, reaches a higher mean valid time on 40 target-regime initial
    /// conditions than the same network trained from scratch on those 1000 samples, in each of
    /// 3 replicates (reservoir seed, pilot and target trajectories all differ). Measured
    /// (time units, replicates 1–3): fine-tuned 0.36, 0.35, 0.32; from scratch 0.19, 0.16,
    /// 0.18; the base used as it is 0.29, 0.28, 0.27 (see the assertion message).
    #[test]
    fn fine_tuning_beats_training_from_scratch_in_a_new_regime() {
        let p = EsnParams::default().check().unwrap();
        let ics = 40;
        let test = two_scale(24.0, 200 + 100 * ics + 300, 999);
        let k = 1000;
        let mut lines = Vec::new();
        let mut wins = 0;
        for rep in 0..3u64 {
            let pilot = two_scale(20.0, 20000, 10 + rep);
            let target = two_scale(24.0, k, 20 + rep);
            let (base, _) = fit_nested(&p, pilot.view(), &[20000], rep + 1)
                .unwrap()
                .remove(0);
            let tune = fine_tune(FineTuneMethod::PriorCentred);
            let (tuned, summary) = fine_tune_nested(&base, &p, &tune, None, target.view(), &[k])
                .unwrap()
                .remove(0);
            let (scratch, _) = fit_nested(&p, target.view(), &[k], rep + 1)
                .unwrap()
                .remove(0);
            let (vt, vs, vb) = (
                mean(&valid_times_on(&tuned, &test, ics)),
                mean(&valid_times_on(&scratch, &test, ics)),
                mean(&valid_times_on(&base, &test, ics)),
            );
            wins += usize::from(vt > vs);
            lines.push(format!(
                "replicate {rep}: fine-tuned {vt:.3} (λ {:.2e}), scratch {vs:.3}, base {vb:.3}",
                summary.ridge_penalty.unwrap()
            ));
        }
        eprintln!("{}", lines.join("\n"));
        assert_eq!(wins, 3, "{}", lines.join("; "));
    }

    /// A base trained on the target regime itself (F = 20 for both) fine-tuned with 1000 more
    /// samples of that regime is no worse than the base: over 3 replicates × 40 initial
    /// conditions, the mean paired difference in valid time (fine-tuned − base) is above −2
    /// standard errors of that mean. Measured: −0.018 ± 0.018 time units (base 0.79–0.95), a
    /// slight loss within the noise, not a gain.
    #[test]
    fn fine_tuning_on_the_base_regime_does_no_harm() {
        let p = EsnParams::default().check().unwrap();
        let ics = 40;
        let test = two_scale(20.0, 200 + 100 * ics + 300, 998);
        let k = 1000;
        let mut diffs = Vec::new();
        let mut lines = Vec::new();
        for rep in 0..3u64 {
            let pilot = two_scale(20.0, 20000, 30 + rep);
            let target = two_scale(20.0, k, 40 + rep);
            let (base, _) = fit_nested(&p, pilot.view(), &[20000], rep + 1)
                .unwrap()
                .remove(0);
            let tune = fine_tune(FineTuneMethod::PriorCentred);
            let (tuned, _) = fine_tune_nested(&base, &p, &tune, None, target.view(), &[k])
                .unwrap()
                .remove(0);
            let (vt, vb) = (
                valid_times_on(&tuned, &test, ics),
                valid_times_on(&base, &test, ics),
            );
            lines.push(format!(
                "replicate {rep}: fine-tuned {:.3}, base {:.3}",
                mean(&vt),
                mean(&vb)
            ));
            diffs.extend(vt.iter().zip(&vb).map(|(a, b)| a - b));
        }
        let m = mean(&diffs);
        let var = diffs.iter().map(|d| (d - m).powi(2)).sum::<f64>() / (diffs.len() - 1) as f64;
        let se = (var / diffs.len() as f64).sqrt();
        let msg = format!("{}; mean difference {m:.4} ± {se:.4}", lines.join("; "));
        eprintln!("{msg}");
        assert!(se > 0.0 && m >= -2.0 * se, "{msg}");
    }

    /// Teacher-forced one-step increment error over samples `start..start + len` (predicting
    /// u(t + 1) − u(t) for t in that range), mean square in standardised units: the reservoir is
    /// driven by the truth from sample 0, as in training.
    fn held_out_one_step_mse(esn: &Esn, data: &Array2<f64>, start: usize, len: usize) -> f64 {
        let res = &esn.reservoir;
        let d = data.ncols();
        let f = res.features();
        let (mut r, mut scratch, mut phi) =
            (vec![0.0; res.size], vec![0.0; res.size], vec![0.0; f]);
        let u = |t: usize, j: usize| (data[[t, j]] - esn.mean[j]) / esn.scale[j];
        let mut acc = 0.0;
        for t in 0..start + len {
            let ut: Vec<f64> = (0..d).map(|j| u(t, j)).collect();
            res.step(&mut r, &ut, &mut scratch);
            if t >= start {
                res.write_features(&r, &mut phi);
                for (j, (w, now)) in esn.readout.chunks(f).zip(&ut).enumerate() {
                    let inc: f64 = w.iter().zip(&phi).map(|(a, b)| a * b).sum();
                    acc += (inc - (u(t + 1, j) - now)).powi(2);
                }
            }
        }
        acc / (len * d) as f64
    }

    /// GCV per subset size never does worse than the fixed default (λ = 1e-5 per training pair)
    /// on one-step increments over the 1000 samples right after each training subset, on
    /// Lorenz-63 sampled every 0.01 time units. Tolerance 1.02×: GCV minimises an estimate of
    /// the in-sample prediction error, so on a held-out window it may tie the fixed penalty up to
    /// sampling noise of a few percent. Measured ratios GCV/fixed: see the assertion message.
    ///
    /// Not a general guarantee: GCV assumes independent residuals, and one-step residuals of a
    /// chaotic series are autocorrelated; with about twice as many training pairs as features it
    /// chose far too small a penalty on Lorenz-96 (K = 8) and the two-scale system (measured
    /// with 300 units at 1000 samples: 2.3× and 55× the fixed default's held-out error). That is
    /// why `fixed` stays the default.
    #[test]
    fn gcv_never_worse_than_fixed_on_held_out_increments() {
        let data = crate::systems::simulate(
            &crate::systems::SimulationSpec {
                system: crate::systems::SystemSpec::with_defaults("lorenz-63").unwrap(),
                dt: 0.0025,
                sample_interval: 0.01,
                spin_up: 50.0,
                samples: 5000,
                seed: 3,
            },
            None,
        )
        .unwrap()
        .resolved;
        let sizes = [1000, 2000, 4000];
        let fit = |selection| {
            let p = EsnParams {
                reservoir_size: 100,
                ridge_selection: selection,
                ..EsnParams::default()
            }
            .check()
            .unwrap();
            fit_nested(&p, data.view(), &sizes, 7).unwrap()
        };
        let (fixed, gcv) = (fit(RidgeSelection::Fixed), fit(RidgeSelection::Gcv));
        let ratios: Vec<f64> = fixed
            .iter()
            .zip(&gcv)
            .map(|((f, s), (g, sg))| {
                assert_eq!(sg.ridge_selection.unwrap().method, RidgeSelection::Gcv);
                held_out_one_step_mse(g, &data, s.n, 999)
                    / held_out_one_step_mse(f, &data, s.n, 999)
            })
            .collect();
        eprintln!("held-out one-step MSE ratios GCV/fixed: {ratios:?}");
        assert!(ratios.iter().all(|&r| r <= 1.02), "ratios {ratios:?}");
    }
}
