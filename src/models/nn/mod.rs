//! Neural networks written from scratch (CPU, f64): a feed-forward network ([`Mlp`]) and a
//! sequence-to-one LSTM ([`Lstm`]), one shared training protocol (minibatch Adam, early stopping on
//! a trailing validation window, bit-identical results at any rayon thread count), and emulators
//! that predict the state increment from a window of past states.
//!
//! References: Glorot & Bengio (2010), "Understanding the difficulty of training deep feedforward
//! neural networks", AISTATS (uniform initialisation); Kingma & Ba (2015), "Adam: a method for
//! stochastic optimization", ICLR; Loshchilov & Hutter (2019), "Decoupled weight decay
//! regularization", ICLR; Hochreiter & Schmidhuber (1997), Neural Computation 9(8) (LSTM);
//! Gers, Schmidhuber & Cummins (2000), Neural Computation 12(10) (forget gate); Werbos (1990),
//! Proc. IEEE 78(10) (backpropagation through time).

mod emulator;
mod family;
mod kernels;
mod lstm;
mod mlp;
mod optim;
mod sequence;
mod train;

pub use emulator::{
    fine_tune_lstm_emulator, fine_tune_mlp_emulator, fit_lstm_emulator, fit_mlp_emulator,
    LstmEmulator, MlpEmulator,
};
pub use family::{LSTM_FAMILY, MLP_FAMILY};
pub use lstm::{train_lstm, Lstm, LstmScratch};
pub use mlp::{train_mlp, Mlp, MlpScratch};
pub use sequence::{fit_lstm_sequence, LstmSequence};
pub use train::{TrainReport, CHUNK_ROWS};

use super::{out_of_range, ModelError};
use serde::{Deserialize, Serialize};

/// Nonlinearity of the hidden layers of a feed-forward network.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Activation {
    /// Hyperbolic tangent (the default: smooth, so trained maps are smooth too).
    #[default]
    Tanh,
    /// Rectified linear unit max(0, x); derivative taken as 0 at 0.
    Relu,
}

impl Activation {
    /// The label used in study files.
    pub fn label(self) -> &'static str {
        match self {
            Activation::Tanh => "tanh",
            Activation::Relu => "relu",
        }
    }
}

/// Fewest samples in the validation window.
pub const MIN_VALIDATION_SAMPLES: usize = 4;
/// Fewest samples left to fit after the validation window.
pub const MIN_FIT_SAMPLES: usize = 4;

/// Feed-forward network settings as written in a study file.
///
/// | key | default | meaning | valid |
/// |---|---|---|---|
/// | `hidden` | [64, 64] | units per hidden layer (empty: a linear model) | 0 ..= 8 layers of 1 ..= 4096 |
/// | `activation` | tanh | hidden-layer nonlinearity | tanh, relu |
/// | `window` | 1 | past states fed to an emulator (newest last) | 1 ..= 1000 |
/// | `learning-rate` | 1e-3 | Adam step size α | [0, 1] |
/// | `batch-size` | 64 | samples per gradient step | 1 ..= 65536 |
/// | `gradient-steps` | 4000 | target number of gradient steps S (sets the epoch budget) | 1 ..= 10⁷ |
/// | `min-epochs` | 2 | least epoch budget | 1 ..= `max-epochs` |
/// | `max-epochs` | 1000 | largest epoch budget | 1 ..= 100000 |
/// | `patience` | 10 | epochs without a better validation error before stopping | 1 ..= 100000 |
/// | `validation-fraction` | 0.1 | trailing share of the samples held out for early stopping | (0, 0.5] |
/// | `weight-decay` | 0 | decoupled weight decay per step (AdamW), weights only | [0, 1] |
///
/// The epoch budget is `clamp(ceil(S · batch-size / fit samples), min-epochs, max-epochs)`: a
/// small subset gets many epochs, a large one about S steps (see [`train_mlp`]).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields, default)]
pub struct MlpParams {
    pub hidden: Vec<usize>,
    pub activation: Activation,
    pub window: usize,
    pub learning_rate: f64,
    pub batch_size: usize,
    pub gradient_steps: usize,
    pub min_epochs: usize,
    pub max_epochs: usize,
    pub patience: usize,
    pub validation_fraction: f64,
    pub weight_decay: f64,
}

impl Default for MlpParams {
    fn default() -> Self {
        let t = Training::default();
        Self {
            hidden: vec![64, 64],
            activation: Activation::Tanh,
            window: 1,
            learning_rate: t.learning_rate,
            batch_size: t.batch_size,
            gradient_steps: t.gradient_steps,
            min_epochs: t.min_epochs,
            max_epochs: t.max_epochs,
            patience: t.patience,
            validation_fraction: t.validation_fraction,
            weight_decay: t.weight_decay,
        }
    }
}

/// LSTM settings as written in a study file.
///
/// | key | default | meaning | valid |
/// |---|---|---|---|
/// | `hidden` | 32 | LSTM units | 1 ..= 1024 |
/// | `window` | 8 | input steps per sample (backpropagation through time spans the window) | 1 ..= 1000 |
///
/// and the training keys of [`MlpParams`] with the same defaults and ranges (`learning-rate`,
/// `batch-size`, `gradient-steps`, `min-epochs`, `max-epochs`, `patience`,
/// `validation-fraction`, `weight-decay`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields, default)]
pub struct LstmParams {
    pub hidden: usize,
    pub window: usize,
    pub learning_rate: f64,
    pub batch_size: usize,
    pub gradient_steps: usize,
    pub min_epochs: usize,
    pub max_epochs: usize,
    pub patience: usize,
    pub validation_fraction: f64,
    pub weight_decay: f64,
}

impl Default for LstmParams {
    fn default() -> Self {
        let t = Training::default();
        Self {
            hidden: 32,
            window: 8,
            learning_rate: t.learning_rate,
            batch_size: t.batch_size,
            gradient_steps: t.gradient_steps,
            min_epochs: t.min_epochs,
            max_epochs: t.max_epochs,
            patience: t.patience,
            validation_fraction: t.validation_fraction,
            weight_decay: t.weight_decay,
        }
    }
}

/// The training keys both networks share, checked.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Training {
    pub learning_rate: f64,
    pub batch_size: usize,
    pub gradient_steps: usize,
    pub min_epochs: usize,
    pub max_epochs: usize,
    pub patience: usize,
    pub validation_fraction: f64,
    pub weight_decay: f64,
}

impl Default for Training {
    fn default() -> Self {
        Self {
            learning_rate: 1e-3,
            batch_size: 64,
            gradient_steps: 4000,
            min_epochs: 2,
            max_epochs: 1000,
            patience: 10,
            validation_fraction: 0.1,
            weight_decay: 0.0,
        }
    }
}

impl Training {
    fn check(self) -> Result<Self, ModelError> {
        let mut bad = crate::models::SettingProblems::default();
        let t = &self;
        if !(t.learning_rate.is_finite() && (0.0..=1.0).contains(&t.learning_rate)) {
            bad.out_of_range(
                "learning-rate",
                t.learning_rate.to_string(),
                "0 to 1",
            );
        }
        if !(1..=65536).contains(&t.batch_size) {
            bad.out_of_range(
                "batch-size",
                t.batch_size.to_string(),
                "1 to 65536",
            );
        }
        if !(1..=10_000_000).contains(&t.gradient_steps) {
            bad.out_of_range(
                "gradient-steps",
                t.gradient_steps.to_string(),
                "1 to 10000000",
            );
        }
        if !(1..=100_000).contains(&t.max_epochs) {
            bad.out_of_range(
                "max-epochs",
                t.max_epochs.to_string(),
                "1 to 100000",
            );
        }
        if t.min_epochs == 0 || t.min_epochs > t.max_epochs {
            bad.out_of_range(
                "min-epochs",
                t.min_epochs.to_string(),
                "1 to max-epochs",
            );
        }
        if !(1..=100_000).contains(&t.patience) {
            bad.out_of_range(
                "patience",
                t.patience.to_string(),
                "1 to 100000",
            );
        }
        if !(t.validation_fraction.is_finite()
            && t.validation_fraction > 0.0
            && t.validation_fraction <= 0.5)
        {
            bad.out_of_range(
                "validation-fraction",
                t.validation_fraction.to_string(),
                "greater than 0 and at most 0.5",
            );
        }
        if !(t.weight_decay.is_finite() && (0.0..=1.0).contains(&t.weight_decay)) {
            bad.out_of_range(
                "weight-decay",
                t.weight_decay.to_string(),
                "0 to 1",
            );
        }
        bad.finish(self)
    }

    /// Splits `samples` time-ordered samples into (fit, validation) counts: the validation window
    /// is the last `ceil(validation-fraction · samples)` samples, at least
    /// [`MIN_VALIDATION_SAMPLES`], and at least [`MIN_FIT_SAMPLES`] must remain.
    pub fn split(&self, samples: usize) -> Result<(usize, usize), ModelError> {
        let val = ((self.validation_fraction * samples as f64).ceil() as usize)
            .max(MIN_VALIDATION_SAMPLES);
        if samples < val + MIN_FIT_SAMPLES {
            return Err(out_of_range(
                "training samples",
                samples.to_string(),
                &format!(
                    "at least {} ({} to validate at validation-fraction = {}, {} to fit); \
                     use a larger subset",
                    val + MIN_FIT_SAMPLES,
                    val,
                    self.validation_fraction,
                    MIN_FIT_SAMPLES
                ),
            ));
        }
        Ok((samples - val, val))
    }

    /// Epoch budget `clamp(ceil(S · batch / fit), min-epochs, max-epochs)`.
    pub fn epoch_budget(&self, fit: usize) -> usize {
        let wanted = (self.gradient_steps as u128 * self.batch_size as u128).div_ceil(fit as u128);
        (wanted.min(self.max_epochs as u128) as usize).max(self.min_epochs)
    }
}

/// Checked feed-forward network settings; only [`MlpParams::check`] makes one.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidMlpParams(MlpParams);

impl ValidMlpParams {
    pub fn get(&self) -> &MlpParams {
        &self.0
    }

    pub(crate) fn training(&self) -> Training {
        let p = &self.0;
        Training {
            learning_rate: p.learning_rate,
            batch_size: p.batch_size,
            gradient_steps: p.gradient_steps,
            min_epochs: p.min_epochs,
            max_epochs: p.max_epochs,
            patience: p.patience,
            validation_fraction: p.validation_fraction,
            weight_decay: p.weight_decay,
        }
    }
}

impl MlpParams {
    /// Checks every setting against its valid range (see the table on [`MlpParams`]).
    pub fn check(self) -> Result<ValidMlpParams, ModelError> {
        let mut bad = crate::models::SettingProblems::default();
        if self.hidden.len() > 8 || self.hidden.iter().any(|&h| !(1..=4096).contains(&h)) {
            bad.out_of_range(
                "hidden",
                format!("{:?}", self.hidden),
                "0 to 8 layers of 1 to 4096 units",
            );
        }
        if !(1..=1000).contains(&self.window) {
            bad.out_of_range("window", self.window.to_string(), "1 to 1000");
        }
        let valid = ValidMlpParams(self);
        bad.add(valid.training().check().map(|_| ()));
        bad.finish(valid)
    }
}

/// Checked LSTM settings; only [`LstmParams::check`] makes one.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidLstmParams(LstmParams);

impl ValidLstmParams {
    pub fn get(&self) -> &LstmParams {
        &self.0
    }

    pub(crate) fn training(&self) -> Training {
        let p = &self.0;
        Training {
            learning_rate: p.learning_rate,
            batch_size: p.batch_size,
            gradient_steps: p.gradient_steps,
            min_epochs: p.min_epochs,
            max_epochs: p.max_epochs,
            patience: p.patience,
            validation_fraction: p.validation_fraction,
            weight_decay: p.weight_decay,
        }
    }
}

impl LstmParams {
    /// Checks every setting against its valid range (see the table on [`LstmParams`]).
    pub fn check(self) -> Result<ValidLstmParams, ModelError> {
        let mut bad = crate::models::SettingProblems::default();
        if !(1..=1024).contains(&self.hidden) {
            bad.out_of_range("hidden", self.hidden.to_string(), "1 to 1024");
        }
        if !(1..=1000).contains(&self.window) {
            bad.out_of_range("window", self.window.to_string(), "1 to 1000");
        }
        let valid = ValidLstmParams(self);
        bad.add(valid.training().check().map(|_| ()));
        bad.finish(valid)
    }
}

/// Per-column affine standardisation of a network's inputs and outputs, fixed at training.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Scaling {
    /// Input means.
    pub input_mean: Vec<f64>,
    /// Input standard deviations (1 where a column is constant).
    pub input_scale: Vec<f64>,
    /// Output means.
    pub output_mean: Vec<f64>,
    /// Output standard deviations (1 where a column is constant).
    pub output_scale: Vec<f64>,
}

impl Scaling {
    /// Means and population standard deviations of the given rows; a zero or non-finite
    /// deviation is replaced by 1 so a constant column passes through centred.
    pub(crate) fn from_rows(
        inputs: ndarray::ArrayView2<f64>,
        outputs: ndarray::ArrayView2<f64>,
    ) -> Self {
        fn stats(a: ndarray::ArrayView2<f64>) -> (Vec<f64>, Vec<f64>) {
            let (mean, mut sd) = crate::data::column_stats(a);
            sd.iter_mut().for_each(|s| {
                if !s.is_finite() || *s <= 0.0 {
                    *s = 1.0;
                }
            });
            (mean, sd)
        }
        let (input_mean, input_scale) = stats(inputs);
        let (output_mean, output_scale) = stats(outputs);
        Self {
            input_mean,
            input_scale,
            output_mean,
            output_scale,
        }
    }

    /// Standardises one input vector `x` into `z` ((x − mean) / scale, element by element).
    #[inline(always)]
    pub(crate) fn standardise_input(&self, x: &[f64], z: &mut [f64]) {
        for (((z, v), m), sd) in z
            .iter_mut()
            .zip(x)
            .zip(&self.input_mean)
            .zip(&self.input_scale)
        {
            *z = (v - m) / sd;
        }
    }

    /// Writes standardised outputs `y` back in original units into `out`.
    #[inline(always)]
    pub(crate) fn restore_output(&self, y: &[f64], out: &mut [f64]) {
        for (((o, v), m), sd) in out
            .iter_mut()
            .zip(y)
            .zip(&self.output_mean)
            .zip(&self.output_scale)
        {
            *o = v * sd + m;
        }
    }

    /// Standardises the rows of `a` (columns matched to the inputs) into a row-major vector.
    pub(crate) fn inputs(&self, a: ndarray::ArrayView2<f64>) -> Vec<f64> {
        standardise(a, &self.input_mean, &self.input_scale)
    }

    /// Standardises the rows of `a` (columns matched to the outputs) into a row-major vector.
    pub(crate) fn outputs(&self, a: ndarray::ArrayView2<f64>) -> Vec<f64> {
        standardise(a, &self.output_mean, &self.output_scale)
    }
}

fn standardise(a: ndarray::ArrayView2<f64>, mean: &[f64], scale: &[f64]) -> Vec<f64> {
    let mut out = Vec::with_capacity(a.len());
    for row in a.rows() {
        for ((v, m), s) in row.iter().zip(mean).zip(scale) {
            out.push((v - m) / s);
        }
    }
    out
}

/// Glorot/Xavier uniform draws U(−l, l), l = √(6 / (fan_in + fan_out)) (Glorot & Bengio 2010).
pub(crate) fn glorot(
    rng: &mut rand_chacha::ChaCha8Rng,
    out: &mut [f64],
    fan_in: usize,
    fan_out: usize,
) {
    use rand::RngExt;
    let limit = (6.0 / (fan_in + fan_out) as f64).sqrt();
    out.iter_mut()
        .for_each(|w| *w = rng.random_range(-limit..limit));
}

/// A seed for one subset size, derived from the study seed and the size by two rounds of the
/// SplitMix64 finaliser (Steele, Lea & Flood 2014), so every size trains from its own stream.
pub fn derive_seed(seed: u64, n: usize) -> u64 {
    fn mix(mut z: u64) -> u64 {
        z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }
    mix(seed ^ mix(n as u64))
}

/// Benchmark hook (for `benches/hot_paths.rs`; not part of the interface): seconds of one pass
/// of gradients over `rows` samples in chunks of `chunk` samples on the calling thread, and the
/// floating-point operations of the pass's matrix products.
///
/// `kind` is `"mlp"` (a tanh network 8-64-64-8, the default hidden layers) or `"lstm"` (8 inputs,
/// 32 units, window 4, 8 outputs: a closure-sized network). Weights are Glorot-uniform from a
/// fixed seed, inputs and targets pseudo-random in standardised units, and the samples are visited
/// in one shuffled order, as in an epoch; every chunk adds its gradient into one vector through
/// the same code training uses. A chunk of 1 is the per-sample loop (matrix–vector products);
/// [`CHUNK_ROWS`] is what training does.
///
/// Flops count a multiply-add as 2 and include only the matrix products (the nonlinearities,
/// residuals and bias sums are left out), per sample:
/// - feed-forward, widths n₀ … n_L: forward Σₗ nₗ₋₁·nₗ; backward the weight gradients
///   Σₗ nₗ₋₁·nₗ and the deltas passed down through layers 2 … L, Σₗ₌₂ nₗ₋₁·nₗ
///   (8-64-64-8: 5,120 + 5,120 + 4,608 = 14,848 multiply-adds, 29,696 flops);
/// - LSTM, p inputs, h units, q outputs, window w: forward w·p·4h (input weights) +
///   (w − 1)·h·4h (recurrent weights; h₀ = 0 is skipped) + h·q (readout); backward the same
///   three weight gradients plus h·q for the readout's delta and (w − 1)·4h·h for the deltas
///   through time (8, 32, 8, 4: 16,640 + 29,184 = 45,824 multiply-adds, 91,648 flops).
///
/// Panics on another `kind` or `chunk == 0`.
#[doc(hidden)]
pub fn gradient_pass_seconds(kind: &str, rows: usize, chunk: usize) -> (f64, f64) {
    use rand::seq::SliceRandom;
    use rand::SeedableRng;
    use train::{Network, Samples};
    fn pass<N: Network>(net: &N, data: &Samples, chunk: usize) -> f64 {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(2);
        let mut order: Vec<usize> = (0..data.len()).collect();
        order.shuffle(&mut rng);
        let mut scratch = net.scratch();
        let mut grad = vec![0.0; net.params().len()];
        let start = std::time::Instant::now();
        crate::models::ridge::clear_upper_simd_state();
        let mut sse = 0.0;
        for rows in order.chunks(chunk) {
            sse += net.squared_error(data, rows, &mut scratch, Some(&mut grad));
        }
        std::hint::black_box((sse, &grad));
        start.elapsed().as_secs_f64()
    }
    assert!(chunk > 0, "chunk must hold at least one sample");
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(1);
    let mut uniform = |len: usize| -> Vec<f64> {
        use rand::RngExt;
        (0..len).map(|_| rng.random_range(-1.0..1.0)).collect()
    };
    let unit = |n: usize| Scaling {
        input_mean: vec![0.0; n],
        input_scale: vec![1.0; n],
        output_mean: vec![0.0; n],
        output_scale: vec![1.0; n],
    };
    let (p, q) = (8, 8);
    match kind {
        "mlp" => {
            let sizes = vec![p, 64, 64, q];
            let pairs: Vec<usize> = sizes.windows(2).map(|w| w[0] * w[1]).collect();
            let mads = 2 * pairs.iter().sum::<usize>() + pairs[1..].iter().sum::<usize>();
            let data = Samples {
                x: uniform(rows * p),
                y: uniform(rows * q),
                inputs: p,
                outputs: q,
                span: 1,
            };
            let net = Mlp::glorot(sizes, Activation::Tanh, unit(p), &mut rng);
            (pass(&net, &data, chunk), (2 * mads * rows) as f64)
        }
        "lstm" => {
            let (h, w) = (32, 4);
            let forward = w * p * 4 * h + (w - 1) * h * 4 * h + h * q;
            let mads = 2 * forward + h * q + (w - 1) * 4 * h * h;
            let data = Samples {
                x: uniform((rows + w - 1) * p),
                y: uniform(rows * q),
                inputs: p,
                outputs: q,
                span: w,
            };
            let net = Lstm::glorot(p, h, q, w, unit(p), &mut rng);
            (pass(&net, &data, chunk), (2 * mads * rows) as f64)
        }
        other => panic!("unknown network kind {other:?}; use \"mlp\" or \"lstm\""),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_valid_and_round_trip_through_toml() {
        let m = MlpParams::default();
        assert!(m.clone().check().is_ok());
        let text = toml::to_string(&m).unwrap();
        assert!(text.contains("learning-rate") && text.contains("validation-fraction"));
        let back: MlpParams = toml::from_str(&text).unwrap();
        assert_eq!(back, m);
        let l: LstmParams = toml::from_str("hidden = 16\nwindow = 4").unwrap();
        assert_eq!((l.hidden, l.window, l.batch_size), (16, 4, 64));
        assert!(l.check().is_ok());
        let relu: MlpParams = toml::from_str("activation = \"relu\"").unwrap();
        assert_eq!(relu.activation, Activation::Relu);
        assert!(toml::from_str::<MlpParams>("hiden = [3]").is_err());
    }

    #[test]
    fn invalid_settings_name_the_key() {
        let cases: Vec<(MlpParams, &str, &str)> = vec![
            (
                MlpParams {
                    hidden: vec![8, 0],
                    ..MlpParams::default()
                },
                "hidden",
                "[8, 0]",
            ),
            (
                MlpParams {
                    learning_rate: -0.1,
                    ..MlpParams::default()
                },
                "learning-rate",
                "-0.1",
            ),
            (
                MlpParams {
                    batch_size: 0,
                    ..MlpParams::default()
                },
                "batch-size",
                "0",
            ),
            (
                MlpParams {
                    min_epochs: 20,
                    max_epochs: 10,
                    ..MlpParams::default()
                },
                "min-epochs",
                "20",
            ),
            (
                MlpParams {
                    validation_fraction: 0.9,
                    ..MlpParams::default()
                },
                "validation-fraction",
                "0.9",
            ),
            (
                MlpParams {
                    weight_decay: f64::NAN,
                    ..MlpParams::default()
                },
                "weight-decay",
                "NaN",
            ),
            (
                MlpParams {
                    window: 0,
                    ..MlpParams::default()
                },
                "window",
                "0",
            ),
            (
                MlpParams {
                    patience: 0,
                    ..MlpParams::default()
                },
                "patience",
                "0",
            ),
            (
                MlpParams {
                    gradient_steps: 0,
                    ..MlpParams::default()
                },
                "gradient-steps",
                "0",
            ),
        ];
        for (p, key, value) in cases {
            let e = p.check().unwrap_err().to_string();
            assert!(
                e.contains(&format!("`{key}`")) && e.contains(value),
                "{key}: {e}"
            );
        }
        let e = LstmParams {
            hidden: 0,
            ..LstmParams::default()
        }
        .check()
        .unwrap_err()
        .to_string();
        assert!(e.contains("`hidden`"), "{e}");
        let e = LstmParams {
            max_epochs: 0,
            ..LstmParams::default()
        }
        .check()
        .unwrap_err()
        .to_string();
        assert!(e.contains("`max-epochs`"), "{e}");
    }

    #[test]
    fn split_and_budget_follow_the_stated_rules() {
        let t = Training::default();
        // ceil(0.1 · 1000) = 100 validation samples.
        assert_eq!(t.split(1000).unwrap(), (900, 100));
        // Small sets keep at least 4 validation samples and need 4 to fit.
        assert_eq!(t.split(8).unwrap(), (4, 4));
        let e = t.split(7).unwrap_err().to_string();
        assert!(
            e.contains("training samples") && e.contains("at least 8"),
            "{e}"
        );
        // 4000 steps of 64 over 57,600 samples: ceil(4.44) = 5 epochs.
        assert_eq!(t.epoch_budget(57_600), 5);
        // Huge sets get min-epochs, tiny ones max-epochs.
        assert_eq!(t.epoch_budget(10_000_000), 2);
        assert_eq!(t.epoch_budget(10), 1000);
    }

    #[test]
    fn derived_seeds_differ_by_size_and_seed() {
        assert_ne!(derive_seed(1, 1000), derive_seed(1, 2000));
        assert_ne!(derive_seed(1, 1000), derive_seed(2, 1000));
        assert_eq!(derive_seed(7, 500), derive_seed(7, 500));
    }
}
