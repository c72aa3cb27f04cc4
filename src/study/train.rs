//! Training of one (model, replicate) unit on every nested subset size, for both uses of a
//! model: emulators forecast the resolved state themselves; closures learn the subgrid coupling
//! term and are wrapped in the coarse solver ([`CoupledModel`]), so the forecasting stage scores
//! both the same way.

use super::plan::{ModelKind, ModelPlan, ModelUse};
use crate::models::closure::{
    ClosureForm, CoupledModel, LearnedClosure, LearnedMemoryClosure, Regressor, SequenceRegressor,
};
use crate::models::finetune::{FineTuneMethod, ValidFineTuneParams};
use crate::models::ridge::NormalEquations;
use crate::models::{esn, ngrc, nn, polynomial, FitSummary, Forecaster, ModelError};
use ndarray::ArrayView2;
use std::sync::Arc;

/// What the coarse solver of a closure needs.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Coupling {
    /// Forcing F of the resolved equations.
    pub forcing: f64,
    /// Coarse RK4 step.
    pub coarse_dt: f64,
    /// Time between saved samples.
    pub sample_interval: f64,
}

/// One trained model on one subset.
pub struct Fitted {
    pub summary: FitSummary,
    pub forecaster: Arc<dyn Forecaster>,
    /// For closures: the coupled coarse model (the same object as `forecaster`).
    pub coupled: Option<Arc<CoupledModel>>,
}

/// Trains `model` on the prefixes `wanted` (a subset of the study's `sizes`, ascending) of `x`
/// (resolved states) and, for closures, `u` (the coupling term at the same samples). Each fit
/// equals the one a pass over all of `sizes` would give, bit for bit: families standardised on
/// the smallest size are given it too (see [`super::keys::standardised_on_smallest`]).
pub fn train_unit(
    model: &ModelPlan,
    x: ArrayView2<f64>,
    u: Option<ArrayView2<f64>>,
    sizes: &[usize],
    wanted: &[usize],
    seed: u64,
    coupling: Option<Coupling>,
) -> Result<Vec<Fitted>, ModelError> {
    let mut fit_sizes = wanted.to_vec();
    if super::keys::standardised_on_smallest(model) {
        fit_sizes.push(*sizes.first().ok_or(ModelError::NoSizes)?);
    }
    fit_sizes.sort_unstable();
    fit_sizes.dedup();
    let mut fits = train_sizes(model, x, u, &fit_sizes, seed, coupling)?;
    fits.retain(|f| wanted.contains(&f.summary.n));
    Ok(fits)
}

fn train_sizes(
    model: &ModelPlan,
    x: ArrayView2<f64>,
    u: Option<ArrayView2<f64>>,
    sizes: &[usize],
    seed: u64,
    coupling: Option<Coupling>,
) -> Result<Vec<Fitted>, ModelError> {
    if let ModelKind::Command(_) = model.kind {
        return Err(command_model(model));
    }
    match model.usage {
        ModelUse::Emulator => emulator(model, x, sizes, seed),
        ModelUse::Closure(inputs) => {
            let u = u.expect("closure plans are checked to have coupling data");
            let coupling = coupling.expect("closure plans are checked to have a coarse solver");
            let couple = |form: ClosureForm, summary: FitSummary| -> Result<Fitted, ModelError> {
                let coupled = Arc::new(CoupledModel::new(
                    form,
                    coupling.forcing,
                    coupling.coarse_dt,
                    coupling.sample_interval,
                )?);
                Ok(Fitted {
                    summary,
                    forecaster: coupled.clone(),
                    coupled: Some(coupled),
                })
            };
            let k = x.ncols();
            let memory = |regressor: Arc<dyn SequenceRegressor>| {
                ClosureForm::Memory(Arc::new(LearnedMemoryClosure {
                    regressor,
                    inputs,
                    k,
                }))
            };
            let largest = *sizes.last().ok_or(ModelError::NoSizes)?;
            let prefix = ndarray::s![..largest.min(x.nrows()), ..];
            match &model.kind {
                ModelKind::Esn(p) => {
                    let (rows_in, rows_out) = inputs.rows(x.slice(prefix), u.slice(prefix));
                    let channels = inputs.channels(k);
                    esn::fit_sequence_nested(
                        p,
                        rows_in.view(),
                        rows_out.view(),
                        channels,
                        sizes,
                        seed,
                    )?
                    .into_iter()
                    .map(|(m, summary)| couple(memory(Arc::new(m)), summary))
                    .collect()
                }
                ModelKind::Lstm(p) => nn::fit_lstm_sequence(p, x, u, sizes, seed)?
                    .into_iter()
                    .map(|(m, summary)| couple(memory(Arc::new(m)), summary))
                    .collect(),
                _ => sizes
                    .iter()
                    .map(|&n| {
                        let (xs, us) =
                            (x.slice(ndarray::s![..n, ..]), u.slice(ndarray::s![..n, ..]));
                        let (rows_in, rows_out) = inputs.rows(xs, us);
                        let (regressor, mut summary) =
                            fit_regressor(model, rows_in.view(), rows_out.view(), seed)?;
                        summary.n = n;
                        couple(
                            ClosureForm::Instant(Arc::new(LearnedClosure { regressor, inputs })),
                            summary,
                        )
                    })
                    .collect(),
            }
        }
    }
}

/// The error for a command model, which the runner runs point by point instead.
fn command_model(model: &ModelPlan) -> ModelError {
    ModelError::CommandModel {
        model: model.name.clone(),
    }
}

fn emulator(
    model: &ModelPlan,
    x: ArrayView2<f64>,
    sizes: &[usize],
    seed: u64,
) -> Result<Vec<Fitted>, ModelError> {
    fn wrap<F: Forecaster + 'static>(v: Vec<(F, FitSummary)>) -> Vec<Fitted> {
        v.into_iter()
            .map(|(f, summary)| Fitted {
                summary,
                forecaster: Arc::new(f),
                coupled: None,
            })
            .collect()
    }
    Ok(match &model.kind {
        ModelKind::Esn(p) => wrap(esn::fit_nested(p, x, sizes, seed)?),
        ModelKind::Ngrc(p) => wrap(ngrc::fit_nested(p, x, sizes)?),
        ModelKind::Mlp(p) => wrap(nn::fit_mlp_emulator(p, x, sizes, seed)?),
        ModelKind::Lstm(p) => wrap(nn::fit_lstm_emulator(p, x, sizes, seed)?),
        ModelKind::Polynomial(p) => wrap(polynomial::fit_emulator_nested(p, x, sizes)?),
        ModelKind::Command(_) => return Err(command_model(model)),
    })
}

/// Fits a memoryless closure's regression from stencil (or global) inputs to coupling terms.
fn fit_regressor(
    model: &ModelPlan,
    rows_in: ArrayView2<f64>,
    rows_out: ArrayView2<f64>,
    seed: u64,
) -> Result<(Arc<dyn Regressor>, FitSummary), ModelError> {
    match &model.kind {
        ModelKind::Ngrc(p) => {
            let (r, summary) = ngrc::fit_regression(p, rows_in, rows_out)?;
            Ok((Arc::new(r), summary))
        }
        ModelKind::Mlp(p) => {
            let (net, report) = nn::train_mlp(p, rows_in, rows_out, seed, None)?;
            Ok((
                Arc::new(net),
                FitSummary {
                    n: 0,
                    training_pairs: rows_in.nrows(),
                    ridge_penalty: None,
                    training_rmse: Some(report.training_mse.sqrt()),
                    ridge_selection: None,
                },
            ))
        }
        ModelKind::Polynomial(p) => polynomial::closure::fit_regression(p, rows_in, rows_out),
        ModelKind::Esn(_) | ModelKind::Lstm(_) => {
            unreachable!("models with memory are fitted as sequence regressions")
        }
        ModelKind::Command(_) => Err(command_model(model)),
    }
}

impl Regressor for ngrc::NgrcRegression {
    fn inputs(&self) -> usize {
        ngrc::NgrcRegression::inputs(self)
    }
    fn outputs(&self) -> usize {
        ngrc::NgrcRegression::outputs(self)
    }
    fn predict(&self, x: &[f64], out: &mut [f64]) {
        ngrc::NgrcRegression::predict(self, x, out)
    }
}

impl Regressor for nn::Mlp {
    fn inputs(&self) -> usize {
        nn::Mlp::inputs(self)
    }
    fn outputs(&self) -> usize {
        nn::Mlp::outputs(self)
    }
    fn predict(&self, x: &[f64], out: &mut [f64]) {
        nn::Mlp::predict(self, x, out)
    }
}

/// A base model and, for every fine-tuning size k, a model trained from scratch on the first k
/// new-regime samples and the base adapted with them.
pub struct TransferFits {
    pub base: Arc<dyn Forecaster>,
    pub scratch: Vec<(Arc<dyn Forecaster>, FitSummary)>,
    pub fine_tuned: Vec<(Arc<dyn Forecaster>, FitSummary)>,
}

/// Trains an emulator's base on the pilot prefix of the largest of the study's `sizes` (exactly
/// the model the study measures at that size with this seed: reservoir models take their
/// standardisation from the smallest prefix, so they run the same nested pass), then trains
/// from scratch on and fine-tunes with every prefix `ks` of `target`. Scratch models use the
/// same seed, so a reservoir model keeps its reservoir and only the data differ.
pub fn train_transfer_unit(
    model: &ModelPlan,
    tune: &ValidFineTuneParams,
    pilot: ArrayView2<f64>,
    sizes: &[usize],
    target: ArrayView2<f64>,
    ks: &[usize],
    seed: u64,
) -> Result<TransferFits, ModelError> {
    fn arc<F: Forecaster + 'static>(
        v: Vec<(F, FitSummary)>,
    ) -> Vec<(Arc<dyn Forecaster>, FitSummary)> {
        v.into_iter()
            .map(|(f, s)| (Arc::new(f) as Arc<dyn Forecaster>, s))
            .collect()
    }
    fn base_of<F>(v: Vec<(F, FitSummary)>) -> F {
        v.into_iter().last().expect("one fit per size").0
    }
    // Pooled fine-tuning needs the base's normal equations on its pilot prefix.
    let pooled = tune.get().method == FineTuneMethod::Pooled;
    let equations = |compute: &dyn Fn() -> Result<NormalEquations, ModelError>| {
        pooled.then(compute).transpose()
    };
    let base_n = *sizes.last().ok_or(ModelError::NoSizes)?;
    let pilot = pilot.slice(ndarray::s![..base_n, ..]);
    Ok(match &model.kind {
        ModelKind::Command(_) => return Err(command_model(model)),
        ModelKind::Esn(p) => {
            let base = base_of(esn::fit_nested(p, pilot, sizes, seed)?);
            let eq = equations(&|| base.normal_equations(pilot, p.get().washout))?;
            TransferFits {
                fine_tuned: arc(esn::fine_tune_nested(
                    &base,
                    p,
                    tune,
                    eq.as_ref(),
                    target,
                    ks,
                )?),
                scratch: arc(esn::fit_nested(p, target, ks, seed)?),
                base: Arc::new(base),
            }
        }
        ModelKind::Ngrc(p) => {
            let base = base_of(ngrc::fit_nested(p, pilot, sizes)?);
            let eq = equations(&|| base.normal_equations(pilot))?;
            TransferFits {
                fine_tuned: arc(ngrc::fine_tune_nested(
                    &base,
                    p,
                    tune,
                    eq.as_ref(),
                    target,
                    ks,
                )?),
                scratch: arc(ngrc::fit_nested(p, target, ks)?),
                base: Arc::new(base),
            }
        }
        ModelKind::Polynomial(p) => {
            let base = base_of(polynomial::fit_emulator_nested(p, pilot, sizes)?);
            let eq = equations(&|| base.normal_equations(pilot))?;
            TransferFits {
                fine_tuned: arc(polynomial::fine_tune_emulator_nested(
                    &base,
                    p,
                    tune,
                    eq.as_ref(),
                    target,
                    ks,
                )?),
                scratch: arc(polynomial::fit_emulator_nested(p, target, ks)?),
                base: Arc::new(base),
            }
        }
        ModelKind::Mlp(p) => {
            let base = base_of(nn::fit_mlp_emulator(p, pilot, &[base_n], seed)?);
            TransferFits {
                fine_tuned: arc(nn::fine_tune_mlp_emulator(
                    &base, p, tune, target, ks, seed,
                )?),
                scratch: arc(nn::fit_mlp_emulator(p, target, ks, seed)?),
                base: Arc::new(base),
            }
        }
        ModelKind::Lstm(p) => {
            let base = base_of(nn::fit_lstm_emulator(p, pilot, &[base_n], seed)?);
            TransferFits {
                fine_tuned: arc(nn::fine_tune_lstm_emulator(
                    &base, p, tune, target, ks, seed,
                )?),
                scratch: arc(nn::fit_lstm_emulator(p, target, ks, seed)?),
                base: Arc::new(base),
            }
        }
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::study::command::{CommandParams, Returns};

    #[test]
    fn command_models_are_not_trained_here() {
        let model = ModelPlan {
            name: "my-net".into(),
            kind: ModelKind::Command(
                CommandParams {
                    program: "python3".into(),
                    args: vec![],
                    returns: Returns::Forecasts,
                    timeout: 10.0,
                    workdir: None,
                }
                .check(std::path::Path::new("."))
                .unwrap(),
            ),
            usage: ModelUse::Emulator,
        };
        let x = ndarray::Array2::<f64>::zeros((20, 2));
        let e = train_unit(&model, x.view(), None, &[10, 20], &[10, 20], 1, None)
            .err()
            .unwrap()
            .to_string();
        assert!(
            e.contains("'my-net'") && e.contains("run point by point by the runner"),
            "{e}"
        );
    }
}
