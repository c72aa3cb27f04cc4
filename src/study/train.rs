//! Training of one (model, replicate) unit on every nested subset size, for both uses of a
//! model: emulators forecast the resolved state themselves; closures learn the subgrid coupling
//! term and are wrapped in the coarse solver ([`CoupledModel`]), so the forecasting stage scores
//! both the same way. The families themselves are reached only through
//! [`crate::models::family`].

use super::plan::{ModelPlan, ModelUse};
use crate::models::closure::{ClosureForm, CoupledModel, Coupling};
use crate::models::family::{
    ClosureData, ClosureScore, ForecastScore, Trainable, Trainer, TransferFits, TransferScores,
};
use crate::models::finetune::ValidFineTuneParams;
use crate::models::{FitSummary, Forecaster, ModelError};
use ndarray::ArrayView2;
use std::sync::Arc;

/// One trained model on one subset.
pub struct Fitted {
    pub summary: FitSummary,
    pub forecaster: Arc<dyn Forecaster>,
    /// For closures: the coupled coarse model (the same object as `forecaster`).
    pub coupled: Option<Arc<CoupledModel>>,
}

/// The in-process trainer of `model`, or the error for a model the runner runs point by point.
fn trainable(model: &ModelPlan) -> Result<&dyn Trainable, ModelError> {
    match model.kind.trainer() {
        Trainer::InProcess(t) => Ok(t),
        Trainer::External(_) => Err(ModelError::CommandModel {
            model: model.name.clone(),
        }),
    }
}

/// What a unit's training can use besides its data: the coarse solver closures are coupled to,
/// and the validation forecasts that score candidates of families tuned by them.
#[derive(Clone, Copy, Default)]
pub struct UnitAids<'a> {
    pub coupling: Option<Coupling>,
    pub score: Option<ForecastScore<'a>>,
}

/// Trains `model` on the prefixes `wanted` (a subset of the study's `sizes`, ascending) of `x`
/// (resolved states) and, for closures, `u` (the coupling term at the same samples). Each fit
/// equals the one a pass over all of `sizes` would give, bit for bit: families standardised on
/// the smallest size are given it too ([`crate::models::family::ModelFamily::standardised_on_smallest`]).
pub fn train_unit(
    model: &ModelPlan,
    x: ArrayView2<f64>,
    u: Option<ArrayView2<f64>>,
    sizes: &[usize],
    wanted: &[usize],
    seed: u64,
    aids: UnitAids,
) -> Result<Vec<Fitted>, ModelError> {
    let UnitAids { coupling, score } = aids;
    let trainer = trainable(model)?;
    let mut fit_sizes = wanted.to_vec();
    if super::keys::standardised_on_smallest(model) {
        fit_sizes.push(*sizes.first().ok_or(ModelError::NoSizes)?);
    }
    fit_sizes.sort_unstable();
    fit_sizes.dedup();
    let mut fits = match model.usage {
        ModelUse::Emulator => trainer
            .fit_emulator(x, &fit_sizes, seed, score)?
            .into_iter()
            .map(|(forecaster, summary)| Fitted {
                summary,
                forecaster,
                coupled: None,
            })
            .collect(),
        ModelUse::Closure(inputs) => {
            let u = u.expect("closure plans are checked to have coupling data");
            let coupling = coupling.expect("closure plans are checked to have a coarse solver");
            CoupledModel::substeps(coupling.coarse_dt, coupling.sample_interval)?;
            let data = ClosureData {
                x: x.view(),
                u: u.view(),
                inputs,
            };
            // A candidate closure is scored coupled in the coarse solver, from the validation
            // initial conditions.
            let coupled_score = |form: ClosureForm| -> f64 {
                match (score, CoupledModel::coupled(form, &coupling)) {
                    (Some(s), Ok(model)) => s(&model),
                    _ => f64::NAN,
                }
            };
            let closure_score: Option<ClosureScore> = score.is_some().then_some(&coupled_score);
            trainer
                .fit_closure(data, &fit_sizes, seed, closure_score)?
                .into_iter()
                .map(|(form, summary)| {
                    let coupled = Arc::new(CoupledModel::coupled(form, &coupling)?);
                    Ok(Fitted {
                        summary,
                        forecaster: coupled.clone(),
                        coupled: Some(coupled),
                    })
                })
                .collect::<Result<Vec<_>, ModelError>>()?
        }
    };
    fits.retain(|f| wanted.contains(&f.summary.n));
    Ok(fits)
}

/// Trains an emulator's base on the pilot prefix of the largest of the study's `sizes` (exactly
/// the model the study measures at that size with this seed), then trains from scratch on and
/// fine-tunes with every prefix `ks` of `target` ([`crate::models::family::Trainable::fit_transfer`]).
#[allow(clippy::too_many_arguments)]
pub fn train_transfer_unit(
    model: &ModelPlan,
    tune: &ValidFineTuneParams,
    pilot: ArrayView2<f64>,
    sizes: &[usize],
    target: ArrayView2<f64>,
    ks: &[usize],
    seed: u64,
    scores: TransferScores,
) -> Result<TransferFits, ModelError> {
    trainable(model)?.fit_transfer(tune, pilot, sizes, target, ks, seed, scores)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::study::plan::ModelKind;

    #[test]
    fn command_models_are_not_trained_here() {
        let table = toml::from_str("program = \"python3\"\ntimeout = 10.0").unwrap();
        let model = ModelPlan {
            name: "my-net".into(),
            kind: ModelKind::build("command", table, std::path::Path::new(".")).unwrap(),
            usage: ModelUse::Emulator,
        };
        let x = ndarray::Array2::<f64>::zeros((20, 2));
        let e = train_unit(
            &model,
            x.view(),
            None,
            &[10, 20],
            &[10, 20],
            1,
            UnitAids::default(),
        )
        .err()
        .unwrap()
        .to_string();
        assert!(
            e.contains("'my-net'") && e.contains("run point by point by the runner"),
            "{e}"
        );
    }
}
