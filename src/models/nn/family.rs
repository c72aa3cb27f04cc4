//! The feed-forward network and the LSTM as model families: their registrations, what they
//! refuse, and how the study engine trains them.

use super::{
    fine_tune_lstm_emulator, fine_tune_mlp_emulator, fit_lstm_emulator, fit_lstm_sequence,
    fit_mlp_emulator, train_mlp, LstmEmulator, LstmParams, MlpEmulator, MlpParams, ValidLstmParams,
    ValidMlpParams,
};
use crate::models::closure::{fit_instant, memory_form, ClosureInputs, Regressor};
use crate::models::family::{
    doubles, read_settings, settings_json, ClosureData, FamilyError, ModelFamily, Registration,
    RelativeCost, ClosureFits, ClosureScore, FineTuning, Fits, ForecastScore, Train, Trainer, TrainingMemory, TrainingShape,
};
use crate::models::{out_of_range, FitSummary, ModelError};
use ndarray::ArrayView2;
use std::path::Path;
use std::sync::Arc;

/// The key of the feed-forward family in a `[[model]]` table, and its settings read and checked.
pub const MLP_FAMILY: Registration = Registration {
    key: "mlp",
    build: build_mlp,
};

/// The key of the LSTM family in a `[[model]]` table, and its settings read and checked.
pub const LSTM_FAMILY: Registration = Registration {
    key: "lstm",
    build: build_lstm,
};

fn build_mlp(table: toml::Value, _: &Path) -> Result<Box<dyn ModelFamily>, FamilyError> {
    Ok(Box::new(read_settings::<MlpParams>(table)?.check()?))
}

/// The smallest subset must hold the window and the pairs to fit and validate (as the
/// networks' size check refuses it); closures with one row per sample and variable are not
/// limited this way.
fn window_refused(window: usize, shape: &TrainingShape, sequence: bool) -> Vec<ModelError> {
    let least = window + super::MIN_FIT_SAMPLES + super::MIN_VALIDATION_SAMPLES;
    if (shape.closure && !sequence) || shape.smallest >= least {
        return Vec::new();
    }
    vec![out_of_range(
        "window",
        window.to_string(),
        &format!(
            "a window that leaves {} training pairs in the smallest subset of {} samples; lower \
             `window` or raise the smallest size to at least {least}",
            super::MIN_FIT_SAMPLES + super::MIN_VALIDATION_SAMPLES,
            shape.smallest
        ),
    )]
}

/// The windows of the largest subset as the networks' inputs and targets, and their
/// standardised copies.
fn window_memory(window: usize, shape: &TrainingShape) -> Option<TrainingMemory> {
    let width = window * shape.inputs? + shape.outputs.unwrap_or(1);
    let rows = shape.largest as f64 * shape.rows_per_sample as f64;
    Some(TrainingMemory {
        bytes: doubles(2.0 * rows * width as f64),
        what: format!("the training windows, {rows:.0} rows × {width} values"),
    })
}

fn build_lstm(table: toml::Value, _: &Path) -> Result<Box<dyn ModelFamily>, FamilyError> {
    Ok(Box::new(read_settings::<LstmParams>(table)?.check()?))
}

impl ModelFamily for ValidMlpParams {
    fn label(&self) -> &'static str {
        "feed-forward network"
    }

    fn settings(&self) -> serde_json::Value {
        settings_json(self.get())
    }

    fn relative_cost(&self) -> RelativeCost {
        RelativeCost {
            per_training_sample: 150.0,
            per_forecast_step: 10.0,
        }
    }

    fn closure_unsupported(&self, _inputs: ClosureInputs) -> Option<&'static str> {
        (self.get().window != 1).then_some(
            "window = 1 for a feed-forward closure: the coarse solver asks for the coupling term from the current state at every RK stage (for memory, use an LSTM closure)",
        )
    }

    fn refuses_shape(&self, shape: &TrainingShape) -> Vec<ModelError> {
        window_refused(self.get().window, shape, false)
    }

    fn training_memory(&self, shape: &TrainingShape) -> Option<TrainingMemory> {
        window_memory(self.get().window, shape)
    }

    fn trainer(&self) -> Trainer<'_> {
        Trainer::InProcess(self)
    }
}

impl Train for ValidMlpParams {
    type Model = MlpEmulator;

    fn fit(
        &self,
        x: ArrayView2<f64>,
        sizes: &[usize],
        seed: u64,
        _score: Option<ForecastScore>,
    ) -> Fits<MlpEmulator> {
        fit_mlp_emulator(self, x, sizes, seed)
    }

    fn fit_as_closure(
        &self,
        data: ClosureData,
        sizes: &[usize],
        seed: u64,
        _score: Option<ClosureScore>,
    ) -> ClosureFits {
        fit_instant(data, sizes, |rows_in, rows_out| {
            let (net, report) = train_mlp(self, rows_in, rows_out, seed, None)?;
            let summary = FitSummary {
                n: 0,
                training_pairs: rows_in.nrows(),
                ridge_penalty: None,
                training_rmse: Some(report.training_mse.sqrt()),
                ridge_selection: None,
            };
            Ok((Arc::new(net) as Arc<dyn Regressor>, summary))
        })
    }

    /// A warm start from the base's weights (no normal equations needed).
    fn fine_tune(&self, base: &MlpEmulator, on: FineTuning) -> Fits<MlpEmulator> {
        fine_tune_mlp_emulator(base, self, on.tune, on.target, on.ks, on.seed)
    }
}

impl ModelFamily for ValidLstmParams {
    fn label(&self) -> &'static str {
        "LSTM network"
    }

    fn settings(&self) -> serde_json::Value {
        settings_json(self.get())
    }

    fn relative_cost(&self) -> RelativeCost {
        // Recurrent networks train slowest.
        RelativeCost {
            per_training_sample: 300.0,
            per_forecast_step: 10.0,
        }
    }

    fn has_memory(&self) -> bool {
        true
    }

    fn closure_unsupported(&self, inputs: ClosureInputs) -> Option<&'static str> {
        (inputs != ClosureInputs::Global).then_some(
            "inputs = \"global\" for an LSTM closure: it is trained on the windows of consecutive saved samples of all resolved variables",
        )
    }

    fn refuses_shape(&self, shape: &TrainingShape) -> Vec<ModelError> {
        window_refused(self.get().window, shape, true)
    }

    fn training_memory(&self, shape: &TrainingShape) -> Option<TrainingMemory> {
        window_memory(self.get().window, shape)
    }

    fn trainer(&self) -> Trainer<'_> {
        Trainer::InProcess(self)
    }
}

impl Train for ValidLstmParams {
    type Model = LstmEmulator;

    fn fit(
        &self,
        x: ArrayView2<f64>,
        sizes: &[usize],
        seed: u64,
        _score: Option<ForecastScore>,
    ) -> Fits<LstmEmulator> {
        fit_lstm_emulator(self, x, sizes, seed)
    }

    /// A closure with memory of the window of saved samples before the current one (global
    /// inputs).
    fn fit_as_closure(
        &self,
        data: ClosureData,
        sizes: &[usize],
        seed: u64,
        _score: Option<ClosureScore>,
    ) -> ClosureFits {
        let k = data.x.ncols();
        Ok(fit_lstm_sequence(self, data.x, data.u, sizes, seed)?
            .into_iter()
            .map(|(m, summary)| (memory_form(Arc::new(m), data.inputs, k), summary))
            .collect())
    }

    /// A warm start from the base's weights (no normal equations needed).
    fn fine_tune(&self, base: &LstmEmulator, on: FineTuning) -> Fits<LstmEmulator> {
        fine_tune_lstm_emulator(base, self, on.tune, on.target, on.ks, on.seed)
    }
}

impl Regressor for super::Mlp {
    fn inputs(&self) -> usize {
        super::Mlp::inputs(self)
    }
    fn outputs(&self) -> usize {
        super::Mlp::outputs(self)
    }
    fn predict(&self, x: &[f64], out: &mut [f64]) {
        super::Mlp::predict(self, x, out)
    }
}
