//! Polynomial regression on all monomials of standardised inputs: ordinary least squares by QR,
//! or ridge by SVD with the penalty fixed or chosen by generalised cross-validation; used as an
//! emulator (state → increment) and as a closure, e.g. the local closure of the two-scale
//! Lorenz-96 system.
//!
//! * [`features`]: the monomials and their order;
//! * [`fit`]: one polynomial fitted by QR least squares or SVD ridge ([`fit_polynomial`]);
//! * [`emulator`]: the emulator fitted on every subset size, and fine-tuned for a new regime
//!   through the nested pass;
//! * [`closure`]: the polynomial as a closure's regression.
//!
//! References: Golub, G. H., Heath, M. & Wahba, G. (1979), "Generalized cross-validation as a
//! method for choosing a good ridge parameter", Technometrics 21(2), 215–223; Wilks, D. S.
//! (2005), "Effects of stochastic parametrizations in the Lorenz '96 system", Q. J. R. Meteorol.
//! Soc. 131, 389–407 (the polynomial closure U(X)); NIST StRD linear regression datasets
//! (Longley, Norris, Filip) for the least-squares checks.

pub mod closure;
pub mod emulator;
pub mod features;
pub mod fit;

pub use emulator::{fine_tune_emulator_nested, fit_emulator_nested, PolynomialEmulator};
pub use features::{monomial_count, MonomialMap};
pub use fit::{fit_polynomial, least_squares_qr_multi, PolyFitInfo, Polynomial};

use super::family::{
    doubles, read_settings, settings_json, ClosureData, FamilyError, ModelFamily, Registration,
    RelativeCost, ClosureFits, ClosureScore, Equations, FineTuning, Fits, ForecastScore, Train, Trainer, TrainingMemory,
    TrainingShape,
};
use super::closure::fit_instant;
use super::ridge::RidgeSelection;
use super::{out_of_range, ModelError};
use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// Highest polynomial degree accepted.
pub const MAX_DEGREE: usize = 5;

/// Most monomials (constant included) one polynomial may have; a larger feature map is refused
/// (lower `degree` or use fewer inputs).
pub const MAX_FEATURES: usize = 2000;

/// Largest stencil half-width accepted.
pub const MAX_STENCIL: usize = 16;

/// Generalised cross-validation grid of per-row penalties λ: 10^−10, 10^−9.75, …, 10^1 (45
/// values, four per decade), as (lowest decade, highest decade, points) for
/// [`super::ridge::relative_grid`].
pub const GCV_GRID_DECADES: (f64, f64, usize) = (-10.0, 1.0, 45);

/// Polynomial regression settings as written in a study file.
///
/// | key | default | meaning | valid |
/// |---|---|---|---|
/// | `degree` | 3 | highest total degree of the monomials | 1 ..= 5 |
/// | `ridge` | 0 | per-row penalty λ: the fit minimises Σ‖y − ŷ‖² + λ·m·‖w‖² over m rows (intercept not penalised); 0 is plain least squares by QR | 0 ..= 1000; must be 0 with `gcv` |
/// | `ridge-selection` | fixed | `fixed` uses `ridge`; `gcv` picks λ per fit by generalised cross-validation | fixed, gcv |
/// | `stencil` | 0 | local closure only: half-width s of the inputs X_{k−s..k+s} (cyclic in k) | 0 ..= 16, and 2s + 1 ≤ K |
///
/// A polynomial has C(d + degree, degree) monomials for d inputs; more than [`MAX_FEATURES`]
/// is refused when fitting.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields, default)]
pub struct PolynomialParams {
    pub degree: usize,
    pub ridge: f64,
    pub ridge_selection: RidgeSelection,
    pub stencil: usize,
}

impl Default for PolynomialParams {
    fn default() -> Self {
        Self {
            degree: 3,
            ridge: 0.0,
            ridge_selection: RidgeSelection::Fixed,
            stencil: 0,
        }
    }
}

/// Checked polynomial settings; only [`PolynomialParams::check`] makes one.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidPolynomialParams(PolynomialParams);

impl ValidPolynomialParams {
    /// The checked settings.
    pub fn get(&self) -> &PolynomialParams {
        &self.0
    }
}

impl PolynomialParams {
    /// Checks every setting against its valid range (see the table on [`PolynomialParams`]).
    pub fn check(self) -> Result<ValidPolynomialParams, ModelError> {
        let mut bad = crate::models::SettingProblems::default();
        if !(1..=MAX_DEGREE).contains(&self.degree) {
            bad.out_of_range("degree", self.degree.to_string(), "1 to 5");
        }
        if !(self.ridge.is_finite() && (0.0..=1e3).contains(&self.ridge)) {
            bad.out_of_range("ridge", self.ridge.to_string(), "0 to 1000");
        }
        if self.ridge_selection == RidgeSelection::Forecast {
            bad.out_of_range(
                "ridge-selection",
                "\"forecast\"".to_string(),
                "\"fixed\" or \"gcv\" (tuning by forecasts is for the reservoir readouts: esn, ngrc)",
            );
        }
        if self.ridge_selection == RidgeSelection::Gcv && self.ridge != 0.0 {
            bad.out_of_range(
                "ridge",
                self.ridge.to_string(),
                "0 when ridge-selection = \"gcv\" (the penalty is chosen per fit)",
            );
        }
        if self.stencil > MAX_STENCIL {
            bad.out_of_range("stencil", self.stencil.to_string(), "0 to 16");
        }
        bad.finish(ValidPolynomialParams(self))
    }
}

/// The key of the family in a `[[model]]` table, and its settings table read and checked. In a
/// study, `stencil` must stay 0: a closure's stencil is the model's `half-width`.
pub const FAMILY: Registration = Registration {
    key: "polynomial",
    build,
};

fn build(table: toml::Value, _: &Path) -> Result<Box<dyn ModelFamily>, FamilyError> {
    let p: PolynomialParams = read_settings(table)?;
    if p.stencil != 0 {
        return Err(out_of_range(
            "stencil",
            p.stencil.to_string(),
            "0 in a study: a closure's stencil is the model's `half-width`",
        )
        .into());
    }
    Ok(Box::new(p.check()?))
}

impl ModelFamily for ValidPolynomialParams {
    fn label(&self) -> &'static str {
        "polynomial regression"
    }

    fn settings(&self) -> serde_json::Value {
        settings_json(self.get())
    }

    fn relative_cost(&self) -> RelativeCost {
        RelativeCost {
            per_training_sample: 5.0,
            per_forecast_step: 2.0,
        }
    }

    /// More monomials than [`MAX_FEATURES`] are refused, as [`fit_polynomial`] refuses them.
    fn refuses_shape(&self, shape: &TrainingShape) -> Vec<ModelError> {
        let degree = self.get().degree;
        match shape.inputs {
            Some(d) if monomial_count(d, degree) > MAX_FEATURES => vec![out_of_range(
                "degree",
                degree.to_string(),
                &format!(
                    "a degree whose C({d} + degree, degree) monomials of {d} inputs stay within \
                     {MAX_FEATURES} (degree {degree} gives {}); lower `degree`, or use fewer inputs",
                    monomial_count(d, degree)
                ),
            )],
            _ => Vec::new(),
        }
    }

    /// The design matrix of the largest subset (one row per training pair) and the copy its
    /// factorisation works on: two such matrices for least squares by QR, three for the SVD
    /// of a ridge fit.
    fn training_memory(&self, shape: &TrainingShape) -> Option<TrainingMemory> {
        let f = monomial_count(shape.inputs?, self.get().degree);
        let rows = shape.largest as f64 * shape.rows_per_sample as f64;
        let p = self.get();
        let copies = if p.ridge_selection == RidgeSelection::Fixed && p.ridge == 0.0 {
            2.0
        } else {
            3.0
        };
        Some(TrainingMemory {
            bytes: doubles(copies * rows * f as f64),
            what: format!("the design matrix of {rows:.0} rows × {f} monomials"),
        })
    }

    fn trainer(&self) -> Trainer<'_> {
        Trainer::InProcess(self)
    }
}

impl Train for ValidPolynomialParams {
    type Model = PolynomialEmulator;

    fn fit(
        &self,
        x: ArrayView2<f64>,
        sizes: &[usize],
        _seed: u64,
        _score: Option<ForecastScore>,
    ) -> Fits<PolynomialEmulator> {
        fit_emulator_nested(self, x, sizes)
    }

    fn fit_as_closure(
        &self,
        data: ClosureData,
        sizes: &[usize],
        _seed: u64,
        _score: Option<ClosureScore>,
    ) -> ClosureFits {
        fit_instant(data, sizes, |rows_in, rows_out| {
            closure::fit_regression(self, rows_in, rows_out)
        })
    }

    fn fine_tune(&self, base: &PolynomialEmulator, on: FineTuning) -> Fits<PolynomialEmulator> {
        fine_tune_emulator_nested(base, self, on.tune, on.equations, on.target, on.ks)
    }

    fn equations(&self, base: &PolynomialEmulator, data: ArrayView2<f64>) -> Option<Equations> {
        Some(base.normal_equations(data))
    }
}

#[cfg(test)]
pub(super) mod tests {
    use super::*;

    /// Checked settings of the given degree and penalty (stencil 0).
    pub fn params(degree: usize, ridge: f64, sel: RidgeSelection) -> ValidPolynomialParams {
        PolynomialParams {
            degree,
            ridge,
            ridge_selection: sel,
            stencil: 0,
        }
        .check()
        .unwrap()
    }

    #[test]
    fn settings_parse_and_check() {
        let p: PolynomialParams = toml::from_str("").unwrap();
        assert_eq!(p, PolynomialParams::default());
        let p: PolynomialParams =
            toml::from_str("degree = 4\nridge-selection = \"gcv\"\nstencil = 1").unwrap();
        assert_eq!(
            (p.degree, p.ridge_selection, p.stencil),
            (4, RidgeSelection::Gcv, 1)
        );
        assert!(p.check().is_ok());
        assert!(toml::from_str::<PolynomialParams>("order = 3").is_err());
        assert!(toml::from_str::<PolynomialParams>("ridge-selection = \"loo\"").is_err());
        let bad = |p: PolynomialParams, key: &str, value: &str| {
            let e = p.check().unwrap_err().to_string();
            assert!(e.contains(&format!("`{key}` = {value}")), "{e}");
        };
        let d = PolynomialParams::default;
        bad(PolynomialParams { degree: 0, ..d() }, "degree", "0");
        bad(PolynomialParams { degree: 6, ..d() }, "degree", "6");
        bad(PolynomialParams { ridge: -1.0, ..d() }, "ridge", "-1");
        bad(
            PolynomialParams {
                ridge: f64::NAN,
                ..d()
            },
            "ridge",
            "NaN",
        );
        bad(
            PolynomialParams {
                ridge: 0.1,
                ridge_selection: RidgeSelection::Gcv,
                ..d()
            },
            "ridge",
            "0.1",
        );
        bad(PolynomialParams { stencil: 17, ..d() }, "stencil", "17");
    }

    /// In a study, the polynomial's table is read and checked by its registration: `stencil`
    /// must stay 0 there, and unknown keys are refused with the key named.
    #[test]
    fn study_tables_refuse_a_stencil_and_unknown_keys() {
        let table = |text: &str| -> toml::Value { toml::from_str(text).unwrap() };
        let family = (FAMILY.build)(table("degree = 4"), Path::new(".")).unwrap();
        assert_eq!(family.settings()["degree"], 4);
        let e = (FAMILY.build)(table("stencil = 1"), Path::new("."))
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("`stencil` = 1") && e.contains("half-width"),
            "{e}"
        );
        let e = (FAMILY.build)(table("order = 3"), Path::new("."))
            .unwrap_err()
            .to_string();
        assert!(e.contains("unknown field `order`"), "{e}");
    }
}
