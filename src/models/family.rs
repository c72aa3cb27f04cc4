//! The one trait every model family implements, [`ModelFamily`], and the entry of a family in
//! the registry ([`Registration`]): the study engine trains, describes, keys and prices every
//! family through these alone, so a new family is its own file plus one line in the list that
//! declares the families in [`crate::models`] (read through [`super::registry`]).
//!
//! A family is trained in this process — it implements [`Train`] (a nested fit over the subset
//! sizes as an emulator, a fit as a closure, a base model fine-tuned for a new regime) and the
//! study engine calls it through [`Trainable`] — or outside it, one point at a time
//! ([`ExternalTrainer`]: the user's own training command).

use super::closure::{ClosureForm, ClosureInputs};
use super::finetune::{FineTuneMethod, ValidFineTuneParams};
use super::ridge::NormalEquations;
use super::{FitSummary, Forecaster, ModelError};
use crate::skill::{IcSkill, SkillSpec};
use ndarray::ArrayView2;
use std::path::Path;
use std::sync::Arc;

pub use super::closure::ClosureData;

/// One trained model on one subset size, as the forecasting stage scores it.
pub type Fit = (Arc<dyn Forecaster>, FitSummary);

/// Trained models of one concrete type, as [`Fit`]s.
fn fits<F: Forecaster + 'static>(v: Vec<(F, FitSummary)>) -> Vec<Fit> {
    v.into_iter()
        .map(|(f, s)| (Arc::new(f) as Arc<dyn Forecaster>, s))
        .collect()
}

/// A base model and, for every fine-tuning size k, a model trained from scratch on the first k
/// new-regime samples and the base adapted with them.
pub struct TransferFits {
    pub base: Arc<dyn Forecaster>,
    pub scratch: Vec<Fit>,
    pub fine_tuned: Vec<Fit>,
}

/// Relative cost of a family's point of a study, in arbitrary units shared by all families
/// (orders of magnitude from the demo's measured costs): for balancing shards and sizing
/// progress bars, where measured costs are not needed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RelativeCost {
    /// Per training sample.
    pub per_training_sample: f64,
    /// Per forecast step.
    pub per_forecast_step: f64,
}

/// What a family trains on in a study, known before any data is read: the subset sizes and the
/// shape of its regression, for the checks and the work estimate of `check`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TrainingShape {
    /// Smallest subset size, samples.
    pub smallest: usize,
    /// Largest subset size, samples.
    pub largest: usize,
    /// Inputs of one regression row (`None`: not known before the data are read, e.g. the
    /// modes an energy fraction of a POD keeps).
    pub inputs: Option<usize>,
    /// Outputs of one regression row (`None` as for `inputs`).
    pub outputs: Option<usize>,
    /// Regression rows per saved sample: the number of slow variables for a closure with
    /// local inputs (one row per variable), else 1.
    pub rows_per_sample: usize,
    /// Trained as a closure.
    pub closure: bool,
}

/// The largest block of memory one fit holds at once.
#[derive(Debug, Clone, PartialEq)]
pub struct TrainingMemory {
    /// Bytes.
    pub bytes: f64,
    /// What it is, e.g. "the normal equations of 451 features".
    pub what: String,
}

/// Bytes of `values` doubles.
pub fn doubles(values: f64) -> f64 {
    values * std::mem::size_of::<f64>() as f64
}

/// The memory of a streaming ridge fit with `features` features: the Gram matrix, the copy a
/// subset size ending inside a block is solved from, and the factor of the solve (three F × F
/// matrices), as [`super::ridge`] holds them.
pub fn ridge_memory(features: usize, outputs: usize) -> TrainingMemory {
    let f = features as f64;
    TrainingMemory {
        bytes: doubles(3.0 * f * f + 3.0 * f * outputs as f64),
        what: format!("the normal equations of {features} features"),
    }
}

/// What the study engine needs of a model family: its checked settings, what it refuses, how
/// it is trained. Implemented once per family, on its checked settings.
pub trait ModelFamily: Send + Sync + std::fmt::Debug {
    /// Short label of the family ("echo state network").
    fn label(&self) -> &'static str;

    /// The settings as given, defaults resolved (reported in `budget.json`).
    fn settings(&self) -> serde_json::Value;

    /// What determines the family's results, for the cache keys of its points: the settings
    /// unless something outside them matters too (a script's content).
    fn identity(&self) -> serde_json::Value {
        self.settings()
    }

    /// One line for `check`: the label unless there is more to say.
    fn describe(&self) -> String {
        self.label().to_string()
    }

    /// Relative cost per training sample and per forecast step.
    fn relative_cost(&self) -> RelativeCost;

    /// Whether the family carries memory of past samples (as a closure: a [`MemoryClosure`],
    /// whose memory advances once per saved sample).
    ///
    /// [`MemoryClosure`]: super::closure::MemoryClosure
    fn has_memory(&self) -> bool {
        false
    }

    /// Whether the family tunes a setting at every size by forecasts from validation initial
    /// conditions (`ridge-selection = "forecast"`): the study then lays out validation
    /// conditions, keys the family's points by them and hands the family a
    /// [`ForecastScore`]; for closures [`ClosureScore`].
    fn tunes_by_forecasts(&self) -> bool {
        false
    }

    /// Whether a fit at size n also depends on the smallest size of the study (as a closure when
    /// `closure`, else as an emulator): the nested ridge families standardise their inputs on
    /// the smallest subset, which every larger one contains. Other fits depend on their own
    /// prefix alone.
    fn standardised_on_smallest(&self, closure: bool) -> bool {
        let _ = closure;
        false
    }

    /// Why the family cannot serve as a closure with these inputs, if it cannot: the setting
    /// to use instead.
    fn closure_unsupported(&self, inputs: ClosureInputs) -> Option<&'static str> {
        let _ = inputs;
        None
    }

    /// Settings that cannot work on data of this shape (a washout as long as the smallest
    /// subset, more features than a fit accepts), each keyed by its setting as
    /// [`ModelError::InvalidParameter`]: found by `check`, before any work.
    fn refuses_shape(&self, shape: &TrainingShape) -> Vec<ModelError> {
        let _ = shape;
        Vec::new()
    }

    /// The largest block of memory of one fit on the largest subset (`None`: not known, e.g.
    /// trained outside the tool or the inputs not known before the data are read).
    fn training_memory(&self, shape: &TrainingShape) -> Option<TrainingMemory> {
        let _ = shape;
        None
    }

    /// How the family's models are trained.
    fn trainer(&self) -> Trainer<'_>;
}

/// How a family's models are trained.
pub enum Trainer<'a> {
    /// In this process.
    InProcess(&'a dyn Trainable),
    /// Outside it, one point at a time.
    External(&'a dyn ExternalTrainer),
}

/// A family trained in this process, as the study engine calls it (implemented for every
/// [`Train`] family).
pub trait Trainable: Send + Sync {
    /// Emulators fitted on the prefixes `sizes` (ascending) of the resolved states `x`, one per
    /// size in that order, each the same bit for bit whatever other sizes are listed (given the
    /// same smallest size, for families standardised on it). `score` measures a candidate by
    /// its forecasts from validation initial conditions, for families that tune by it.
    fn fit_emulator(
        &self,
        x: ArrayView2<f64>,
        sizes: &[usize],
        seed: u64,
        score: Option<ForecastScore>,
    ) -> Fits<Arc<dyn Forecaster>>;

    /// Closures fitted on the prefixes `sizes` of `data`, in the same way: the coupling term as
    /// a function of the stage state (an instant closure) or of it and the saved samples before
    /// it (a closure with memory).
    fn fit_closure(
        &self,
        data: ClosureData,
        sizes: &[usize],
        seed: u64,
        score: Option<ClosureScore>,
    ) -> ClosureFits;

    /// The emulator the study measures at its largest size `sizes.last()` on `pilot`, then, for
    /// every prefix k of `ks` of the new regime's `target`, that base fine-tuned by `tune` and a
    /// model trained from scratch with the same seed (each tuned by `scores` of its regime, for
    /// families tuned by forecasts).
    #[allow(clippy::too_many_arguments)]
    fn fit_transfer(
        &self,
        tune: &ValidFineTuneParams,
        pilot: ArrayView2<f64>,
        sizes: &[usize],
        target: ArrayView2<f64>,
        ks: &[usize],
        seed: u64,
        scores: TransferScores,
    ) -> Result<TransferFits, ModelError>;
}

/// Validation forecasts of both regimes of a transfer, for families tuned by them: the base is
/// tuned on the pilot's, a model trained from scratch on the new regime's.
#[derive(Clone, Copy, Default)]
pub struct TransferScores<'a> {
    pub pilot: Option<ForecastScore<'a>>,
    pub target: Option<ForecastScore<'a>>,
}

/// A candidate model's skill on validation data (the mean valid prediction time from the
/// study's validation initial conditions): higher is better.
pub type ForecastScore<'a> = &'a (dyn Fn(&dyn Forecaster) -> f64 + Sync);

/// A candidate closure's skill on validation data: the mean valid prediction time of the coarse
/// solver with it coupled in, from the study's validation initial conditions (higher is
/// better).
pub type ClosureScore<'a> = &'a (dyn Fn(ClosureForm) -> f64 + Sync);

/// Fitted models of one type with their fit summaries, one per subset size.
pub type Fits<M> = Result<Vec<(M, FitSummary)>, ModelError>;

/// Fitted closures with their fit summaries, one per subset size.
pub type ClosureFits = Result<Vec<(ClosureForm, FitSummary)>, ModelError>;

/// Normal equations of a model's feature map on some data.
pub type Equations = Result<NormalEquations, ModelError>;

/// What fine-tuning a base model works with: the method, the base's own normal equations when
/// the method pools, the new regime's data and its prefix lengths k, the unit's seed.
#[derive(Clone, Copy)]
pub struct FineTuning<'a> {
    pub tune: &'a ValidFineTuneParams,
    /// [`Train::equations`] of the base on its training prefix (pooled method only).
    pub equations: Option<&'a NormalEquations>,
    pub target: ArrayView2<'a, f64>,
    /// Prefix lengths k of `target`, ascending.
    pub ks: &'a [usize],
    pub seed: u64,
}

/// What a family trained in this process implements, with its model type: the nested fit as an
/// emulator, the fit as a closure, and fine-tuning a base model. [`Trainable`] follows.
pub trait Train: ModelFamily {
    /// The family's trained emulator.
    type Model: Forecaster + 'static;

    /// Emulators fitted on the prefixes `sizes` of `x` (see [`Trainable::fit_emulator`]);
    /// `score` rates candidates by validation forecasts for families tuned by them
    /// ([`ModelFamily::tunes_by_forecasts`]), the others ignore it.
    fn fit(
        &self,
        x: ArrayView2<f64>,
        sizes: &[usize],
        seed: u64,
        score: Option<ForecastScore>,
    ) -> Fits<Self::Model>;

    /// Closures fitted on the prefixes `sizes` of `data` (see [`Trainable::fit_closure`]);
    /// `score` rates candidates coupled in the coarse solver, as for [`Train::fit`].
    fn fit_as_closure(
        &self,
        data: ClosureData,
        sizes: &[usize],
        seed: u64,
        score: Option<ClosureScore>,
    ) -> ClosureFits;

    /// `base` fine-tuned on every prefix k of the new regime's data, in the order of the ks,
    /// each the same bit for bit whatever other sizes are listed.
    fn fine_tune(&self, base: &Self::Model, on: FineTuning) -> Fits<Self::Model>;

    /// The normal equations of `base`'s feature map on `data` (its training prefix), for
    /// families with ridge readouts: the pooled fine-tuning method needs them. `None` for the
    /// others.
    fn equations(&self, base: &Self::Model, data: ArrayView2<f64>) -> Option<Equations> {
        let _ = (base, data);
        None
    }
}

impl<F: Train> Trainable for F {
    fn fit_emulator(
        &self,
        x: ArrayView2<f64>,
        sizes: &[usize],
        seed: u64,
        score: Option<ForecastScore>,
    ) -> Fits<Arc<dyn Forecaster>> {
        Ok(fits(self.fit(x, sizes, seed, score)?))
    }

    fn fit_closure(
        &self,
        data: ClosureData,
        sizes: &[usize],
        seed: u64,
        score: Option<ClosureScore>,
    ) -> ClosureFits {
        self.fit_as_closure(data, sizes, seed, score)
    }

    /// The base is exactly the model the study measures at its largest size on `pilot` (fitted
    /// with the smallest size too when the family standardises on it, so it equals the study's
    /// bit for bit); it is fine-tuned on every prefix `ks` of `target`, and a model is trained
    /// from scratch on each with the same settings and seed (a reservoir model keeps its
    /// reservoir; only the data differ).
    fn fit_transfer(
        &self,
        tune: &ValidFineTuneParams,
        pilot: ArrayView2<f64>,
        sizes: &[usize],
        target: ArrayView2<f64>,
        ks: &[usize],
        seed: u64,
        scores: TransferScores,
    ) -> Result<TransferFits, ModelError> {
        let base_n = *sizes.last().ok_or(ModelError::NoSizes)?;
        let pilot = pilot.slice(ndarray::s![..base_n, ..]);
        let mut base_sizes = vec![base_n];
        if self.standardised_on_smallest(false) && sizes[0] != base_n {
            base_sizes.insert(0, sizes[0]);
        }
        let (base, _) = self
            .fit(pilot, &base_sizes, seed, scores.pilot)?
            .pop()
            .expect("one fit per size");
        // Pooled fine-tuning needs the base's normal equations on its pilot prefix.
        let equations = match tune.get().method {
            FineTuneMethod::Pooled => self.equations(&base, pilot).transpose()?,
            FineTuneMethod::PriorCentred => None,
        };
        let on = FineTuning {
            tune,
            equations: equations.as_ref(),
            target: target.view(),
            ks,
            seed,
        };
        let fine_tuned = self.fine_tune(&base, on)?;
        let scratch = self.fit(target, ks, seed, scores.target)?;
        Ok(TransferFits {
            base: Arc::new(base),
            scratch: fits(scratch),
            fine_tuned: fits(fine_tuned),
        })
    }
}

/// One point of a study for a family trained outside the tool: what it trains on and is
/// tested on.
#[derive(Debug, Clone, Copy)]
pub struct ExternalPoint<'a> {
    /// The model's name.
    pub model: &'a str,
    /// Subset size in samples.
    pub n: usize,
    pub replicate: usize,
    /// Seed the trainer should use for its random choices.
    pub seed: u64,
    /// n × d training subset (resolved variables).
    pub train: ArrayView2<'a, f64>,
    /// The whole trajectory the test initial conditions index into.
    pub truth: ArrayView2<'a, f64>,
    /// Test initial conditions: sample indices into `truth`.
    pub ics: &'a [usize],
    /// How skill is measured.
    pub skill: &'a SkillSpec,
    /// Names of the d variables.
    pub variables: &'a [String],
    /// A fresh working directory for this point (created when missing).
    pub dir: &'a Path,
}

/// A family trained outside the tool, one point at a time.
pub trait ExternalTrainer: Send + Sync {
    /// Trains and forecasts (or measures) one point: one valid time per test initial condition,
    /// in the order of `point.ics`.
    fn run_point(
        &self,
        point: &ExternalPoint,
    ) -> Result<Vec<IcSkill>, Box<dyn std::error::Error + Send + Sync>>;
}

/// Errors from reading a family's settings table.
#[derive(Debug, thiserror::Error)]
pub enum FamilyError {
    /// The table does not have the shape of the settings (an unknown key, a wrong type).
    #[error("{0}")]
    Parse(String),
    /// A setting is out of range.
    #[error(transparent)]
    Invalid(#[from] ModelError),
}

/// Reads and checks a family's settings table; the path is the study file's directory (the
/// base of relative paths among the settings).
pub type Build = fn(toml::Value, &Path) -> Result<Box<dyn ModelFamily>, FamilyError>;

/// A family's entry in the registry: the key of its table in a `[[model]]` table of a study
/// file, and how that table becomes checked settings.
#[derive(Debug, Clone, Copy)]
pub struct Registration {
    /// The table's key, e.g. `esn` for `esn = { reservoir-size = 300 }`.
    pub key: &'static str,
    /// Reads and checks the table.
    pub build: Build,
}

/// Reads a family's settings table as written into its settings type (whose serde attributes
/// name the keys and refuse unknown ones).
pub fn read_settings<P: serde::de::DeserializeOwned>(table: toml::Value) -> Result<P, FamilyError> {
    table
        .try_into()
        .map_err(|e: toml::de::Error| FamilyError::Parse(e.message().to_string()))
}

/// Settings as JSON, for [`ModelFamily::settings`].
pub fn settings_json<P: serde::Serialize>(settings: &P) -> serde_json::Value {
    serde_json::to_value(settings).expect("settings serialise")
}
