//! Candidate models behind one [`Forecaster`] trait: the echo state network and next-generation
//! reservoir computing (trained on every nested prefix in one pass through streaming ridge
//! normal equations), polynomial regression, feed-forward and LSTM networks, the user's own
//! training command, closures coupled to the coarse solver, and the floors every report shows
//! (persistence, climatology).
//!
//! Every family implements [`family::ModelFamily`] once and is listed in [`registry`]; the
//! study engine knows the families only through these.

/// Declares the model-family modules, one line each with the registrations the module
/// exports ([`family::Registration`]); [`registry::FAMILIES`] lists them in this order. A new
/// family is its own file plus one line here.
macro_rules! families {
    ($($module:ident::{$($registration:ident),+}),+ $(,)?) => {
        $(pub mod $module;)+

        /// The registrations declared by `families!`, as an array expression (for
        /// [`registry::FAMILIES`]).
        macro_rules! registrations {
            () => {
                [$($(crate::models::$module::$registration,)+)+]
            };
        }
    };
}

families! {
    esn::{FAMILY},
    ngrc::{FAMILY},
    nn::{MLP_FAMILY, LSTM_FAMILY},
    polynomial::{FAMILY},
    command::{FAMILY},
}

pub mod climatology;
pub mod closure;
pub mod family;
pub mod finetune;
pub mod registry;
pub mod ridge;

use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};

/// Errors from building or training a model.
#[derive(Debug, thiserror::Error)]
pub enum ModelError {
    #[error("model setting `{key}` = {value} is out of range; allowed: {allowed}")]
    InvalidParameter {
        key: String,
        value: String,
        allowed: String,
    },
    /// Several settings out of range, each an [`ModelError::InvalidParameter`].
    #[error("{}", .0.iter().map(|e| e.to_string()).collect::<Vec<_>>().join("; "))]
    InvalidParameters(Vec<ModelError>),
    #[error("no subset sizes to train on")]
    NoSizes,
    #[error(
        "subset of {size} samples is larger than the {available} samples available for training"
    )]
    SubsetTooLarge { size: usize, available: usize },
    #[error("subset of {size} samples leaves no training pairs after a washout of {washout}; use subsets larger than washout + 1 or lower `washout`")]
    SubsetBelowWashout { size: usize, washout: usize },
    #[error("reservoir state turned non-finite at training step {step}; lower `input-scaling` or `spectral-radius`")]
    NonFinite { step: usize },
    #[error("model '{model}' is the user's own training command: command models are run point by point by the runner (models::command::run_command_point), not trained in process")]
    CommandModel { model: String },
    #[error("readout for the subset of {size} samples failed: {source}")]
    Ridge {
        size: usize,
        source: ridge::RidgeError,
    },
}

/// The error for a setting out of its range: `key` as written in a study file, the value given
/// and what is allowed.
pub(crate) fn out_of_range(key: &str, value: String, allowed: &str) -> ModelError {
    ModelError::InvalidParameter {
        key: key.to_string(),
        value,
        allowed: allowed.to_string(),
    }
}

/// The out-of-range settings of one family's table, all of them (so a study file's check
/// reports every one at once); [`SettingProblems::finish`] turns them into one error.
#[derive(Debug, Default)]
pub(crate) struct SettingProblems(Vec<ModelError>);

impl SettingProblems {
    /// Records a setting out of range (see [`out_of_range`]).
    pub(crate) fn out_of_range(&mut self, key: &str, value: String, allowed: &str) {
        self.0.push(out_of_range(key, value, allowed));
    }

    /// Records the problems of a nested settings check.
    pub(crate) fn add(&mut self, result: Result<(), ModelError>) {
        if let Err(e) = result {
            match e {
                ModelError::InvalidParameters(v) => self.0.extend(v),
                e => self.0.push(e),
            }
        }
    }

    /// `ok` when no setting was out of range; else the one problem, or all of them.
    pub(crate) fn finish<T>(mut self, ok: T) -> Result<T, ModelError> {
        match self.0.len() {
            0 => Ok(ok),
            1 => Err(self.0.pop().expect("one problem")),
            _ => Err(ModelError::InvalidParameters(self.0)),
        }
    }
}

impl ModelError {
    /// The settings out of range this error names, one error each (itself for any other error).
    pub fn into_settings(self) -> Vec<ModelError> {
        match self {
            ModelError::InvalidParameters(v) => v,
            e => vec![e],
        }
    }
}

/// Column means and standard deviations of `rows` for standardising a model's inputs (or
/// targets), a NaN, zero or negative deviation replaced by 1 so that a constant column passes
/// through centred instead of turning every value non-finite.
pub(crate) fn standardisation(rows: ArrayView2<f64>) -> (Vec<f64>, Vec<f64>) {
    let (mean, mut scale) = crate::data::column_stats(rows);
    for s in &mut scale {
        if s.is_nan() || *s <= 0.0 {
            *s = 1.0;
        }
    }
    (mean, scale)
}

/// How the ridge penalty depends on the number of training pairs n.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum RidgeScaling {
    /// Penalty λ·n: the same prior strength per sample at every subset size (the default: a
    /// fixed penalty lets autonomous forecasts turn unstable as n grows).
    PerSample,
    /// Penalty λ at every size.
    Fixed,
}

/// What one fit on one subset recorded besides the model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct FitSummary {
    /// Subset size in samples.
    pub n: usize,
    /// Input/target pairs used by the fit.
    pub training_pairs: usize,
    /// Ridge penalty actually used (after scaling), for ridge readouts.
    pub ridge_penalty: Option<f64>,
    /// Root-mean-square one-step training residual in standardised units (offline fit quality).
    pub training_rmse: Option<f64>,
    /// How the ridge penalty was chosen (fixed or by GCV, with its score), for ridge readouts.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ridge_selection: Option<ridge::RidgeChoice>,
}

/// A trained model that forecasts autonomously from an initial condition.
pub trait Forecaster: Send + Sync {
    /// Drives the model with the truth in `history` (the last row is the initial condition, the
    /// rows before it the warm-up), then forecasts `steps` samples ahead, calling `sink(k, x̂)` for
    /// lead k = 1..=steps. Stops early when `sink` returns false. Never panics on a diverging
    /// forecast: non-finite values are passed to the sink, which decides.
    fn forecast(
        &self,
        history: ArrayView2<f64>,
        steps: usize,
        sink: &mut dyn FnMut(usize, &[f64]) -> bool,
    );

    /// [`Forecaster::forecast`] from many initial conditions at once: `sink(i, k, x̂)` for
    /// history i and lead k; returning false stops forecast i only. Models override this to
    /// advance all forecasts together as matrix products; the default runs them one by one.
    /// Overrides must give exactly the values of `forecast`, bit for bit.
    fn forecast_batch(
        &self,
        histories: &[ArrayView2<f64>],
        steps: usize,
        sink: &mut dyn FnMut(usize, usize, &[f64]) -> bool,
    ) {
        for (i, h) in histories.iter().enumerate() {
            self.forecast(*h, steps, &mut |k, x| sink(i, k, x));
        }
    }
}

/// Persistence: x̂(t) = x(0) at every lead.
#[derive(Debug, Clone, Copy, Default)]
pub struct Persistence;

impl Forecaster for Persistence {
    fn forecast(
        &self,
        history: ArrayView2<f64>,
        steps: usize,
        sink: &mut dyn FnMut(usize, &[f64]) -> bool,
    ) {
        let last = history.row(history.nrows() - 1).to_vec();
        for k in 1..=steps {
            if !sink(k, &last) {
                return;
            }
        }
    }
}

/// Data and checks shared by the families' tests.
#[cfg(test)]
pub(crate) mod test_support {
    use ndarray::Array2;

    /// Lorenz-96 with K = 8 and F = 8, integrated with step 0.01 and saved every 0.05 time units
    /// after a spin-up of 10 time units (a chaotic trajectory, cheap to make).
    pub fn lorenz96(samples: usize, seed: u64) -> Array2<f64> {
        crate::systems::simulate(
            &crate::systems::SimulationSpec {
                system: crate::systems::SystemSpec::Lorenz96 { k: 8, forcing: 8.0 },
                dt: 0.01,
                sample_interval: 0.05,
                spin_up: 10.0,
                samples,
                seed,
            },
            None,
        )
        .unwrap()
        .resolved
    }

    /// Panics unless `a` and `b` hold the same values bit for bit (NaNs and signed zeros too).
    #[track_caller]
    pub fn assert_bits_eq(a: &[f64], b: &[f64], what: &str) {
        assert_eq!(a.len(), b.len(), "{what}: lengths");
        if let Some(i) = (0..a.len()).find(|&i| a[i].to_bits() != b[i].to_bits()) {
            panic!("{what}: first difference at {i}: {:e} vs {:e}", a[i], b[i]);
        }
    }

    /// Smallest CPU time of `reps` runs of `f` on this thread, in seconds (from
    /// /proc/thread-self/schedstat, so time spent waiting for a core on a busy machine is left
    /// out; wall time if that file cannot be read).
    pub fn best_cpu_seconds<T>(reps: usize, mut f: impl FnMut() -> T) -> f64 {
        let cpu = || {
            std::fs::read_to_string("/proc/thread-self/schedstat")
                .ok()
                .and_then(|s| s.split_whitespace().next()?.parse::<u64>().ok())
        };
        (0..reps)
            .map(|_| {
                let (c0, w0) = (cpu(), std::time::Instant::now());
                std::hint::black_box(f());
                match (c0, cpu()) {
                    (Some(a), Some(b)) => (b - a) as f64 * 1e-9,
                    _ => w0.elapsed().as_secs_f64(),
                }
            })
            .fold(f64::INFINITY, f64::min)
    }

    /// The resolved variables of the default two-scale Lorenz-96 system (K = 8, J = 32, F = 20)
    /// saved every 0.01 time units (step 0.005, spin-up 5), as the `hot_paths` benchmark uses.
    pub fn two_scale_resolved(samples: usize, seed: u64) -> Array2<f64> {
        crate::systems::simulate(
            &crate::systems::SimulationSpec {
                system: crate::systems::SystemSpec::with_defaults("two-scale-lorenz-96").unwrap(),
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

    /// The subsets of `sizes` the size-independence tests fit again: its smallest size with each
    /// other size, and its smallest with its two largest.
    pub fn subsets(sizes: &[usize]) -> Vec<Vec<usize>> {
        let mut out: Vec<Vec<usize>> = sizes[1..].iter().map(|&n| vec![sizes[0], n]).collect();
        if sizes.len() > 2 {
            out.push(vec![
                sizes[0],
                sizes[sizes.len() - 2],
                sizes[sizes.len() - 1],
            ]);
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn persistence_repeats_the_initial_condition_and_stops_on_request() {
        let h = array![[0.0, 1.0], [2.0, 3.0]];
        let mut seen = Vec::new();
        Persistence.forecast(h.view(), 5, &mut |k, x| {
            seen.push((k, x.to_vec()));
            k < 3
        });
        assert_eq!(seen.len(), 3);
        assert!(seen.iter().all(|(_, x)| x == &vec![2.0, 3.0]));
    }
}
