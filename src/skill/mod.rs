//! Forecast skill over many test initial conditions: valid prediction time (with right-censoring
//! at the maximum lead and blow-up detection), in model time units and Lyapunov times.
//!
//! Valid prediction time: the largest lead t such that the normalised error
//! e(t) = sqrt(mean_j ((x̂_j(t) − x_j(t)) / σ_j)²) has stayed at or below θ for every lead up to
//! t, σ_j the climatological standard deviation of variable j in the training pool. Default
//! θ = 0.5 (the threshold used for valid prediction time by Vlachas et al. 2020, Neural Networks
//! 126, 191–217; from memory). Lyapunov times are t·λ₁.

use crate::models::Forecaster;
use ndarray::ArrayView2;
use serde::{Deserialize, Serialize};

/// A forecast whose state leaves mean ± `BLOW_UP_SIGMAS`·σ in any variable has failed.
pub const BLOW_UP_SIGMAS: f64 = 50.0;

/// How skill is measured, resolved to samples.
#[derive(Debug, Clone, PartialEq)]
pub struct SkillSpec {
    /// Error threshold θ on the normalised error.
    pub threshold: f64,
    /// Truth samples fed to the model before each forecast.
    pub warm_up: usize,
    /// Forecast length in samples.
    pub max_lead: usize,
    /// Time between samples in model time units.
    pub sample_interval: f64,
    /// Climatological mean and standard deviation per variable.
    pub mean: Vec<f64>,
    pub sigma: Vec<f64>,
}

/// Outcome of one forecast from one initial condition.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct IcSkill {
    /// Valid prediction time in model time units.
    pub valid_time: f64,
    /// Still valid at the maximum lead: the true valid time is at least `valid_time`.
    pub censored: bool,
    /// The forecast turned non-finite or left the blow-up bound.
    pub blew_up: bool,
}

/// Scores one forecast lead by lead against the truth.
struct Scorer<'t, 'a> {
    truth: ArrayView2<'t, f64>,
    ic: usize,
    spec: &'a SkillSpec,
    inv_sigma: &'a [f64],
    last_valid: usize,
    exceeded: bool,
    blew_up: bool,
}

impl Scorer<'_, '_> {
    /// Scores lead k; false once the forecast is no longer valid.
    fn lead(&mut self, k: usize, x: &[f64]) -> bool {
        let d = self.truth.ncols();
        let row = self.truth.row(self.ic + k);
        let mut sq = 0.0;
        for j in 0..d {
            let z = (x[j] - row[j]) * self.inv_sigma[j];
            sq += z * z;
            let excursion = (x[j] - self.spec.mean[j]) * self.inv_sigma[j];
            // NaN counts as a blow-up: a stated choice, not an accident of comparison.
            if excursion.is_nan() || excursion.abs() > BLOW_UP_SIGMAS {
                self.blew_up = true;
            }
        }
        let err = (sq / d as f64).sqrt();
        if self.blew_up || err.is_nan() || err > self.spec.threshold {
            self.exceeded = true;
            return false;
        }
        self.last_valid = k;
        true
    }

    fn result(&self) -> IcSkill {
        IcSkill {
            valid_time: self.last_valid as f64 * self.spec.sample_interval,
            censored: !self.exceeded && self.last_valid == self.spec.max_lead,
            blew_up: self.blew_up,
        }
    }
}

/// Valid prediction time of `model` from the initial condition at sample `ic` of `truth`.
///
/// The forecast stops at the first lead where the error exceeds θ, so poor models cost little.
pub fn valid_time(
    model: &dyn Forecaster,
    truth: ArrayView2<f64>,
    ic: usize,
    spec: &SkillSpec,
) -> IcSkill {
    valid_times(model, truth, &[ic], spec)[0]
}

/// [`valid_time`] from every initial condition in `ics`, forecast together through
/// [`Forecaster::forecast_batch`] (identical values, faster for models that batch).
pub fn valid_times(
    model: &dyn Forecaster,
    truth: ArrayView2<f64>,
    ics: &[usize],
    spec: &SkillSpec,
) -> Vec<IcSkill> {
    let inv_sigma: Vec<f64> = spec.sigma.iter().map(|s| 1.0 / s).collect();
    let histories: Vec<ArrayView2<f64>> = ics
        .iter()
        .map(|&ic| truth.slice(ndarray::s![ic - spec.warm_up..=ic, ..]))
        .collect();
    let mut scorers: Vec<Scorer<'_, '_>> = ics
        .iter()
        .map(|&ic| Scorer {
            truth,
            ic,
            spec,
            inv_sigma: &inv_sigma,
            last_valid: 0,
            exceeded: false,
            blew_up: false,
        })
        .collect();
    model.forecast_batch(&histories, spec.max_lead, &mut |i, k, x| {
        scorers[i].lead(k, x)
    });
    scorers.iter().map(Scorer::result).collect()
}

/// Summary of valid times over initial conditions.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct SkillSummary {
    pub mean: f64,
    pub median: f64,
    pub q10: f64,
    pub q90: f64,
    pub censored_share: f64,
    pub blow_up_share: f64,
}

/// Mean, quantiles (linear interpolation between order statistics) and shares.
pub fn summarise(values: &[IcSkill]) -> SkillSummary {
    let n = values.len().max(1) as f64;
    let mut t: Vec<f64> = values.iter().map(|v| v.valid_time).collect();
    t.sort_by(f64::total_cmp);
    SkillSummary {
        mean: t.iter().sum::<f64>() / n,
        median: quantile(&t, 0.5),
        q10: quantile(&t, 0.1),
        q90: quantile(&t, 0.9),
        censored_share: values.iter().filter(|v| v.censored).count() as f64 / n,
        blow_up_share: values.iter().filter(|v| v.blew_up).count() as f64 / n,
    }
}

/// Quantile of sorted data by linear interpolation (Hyndman & Fan 1996, type 7).
pub fn quantile(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::models::Persistence;
    use ndarray::Array2;

    fn spec(max_lead: usize) -> SkillSpec {
        SkillSpec {
            threshold: 0.5,
            warm_up: 2,
            max_lead,
            sample_interval: 0.1,
            mean: vec![0.0],
            sigma: vec![1.0],
        }
    }

    /// A linear ramp x(t) = 0.1·t: persistence error after k steps is 0.1k, so it stays valid
    /// (≤ 0.5) up to k = 5 and fails at k = 6: valid time 0.5 time units.
    #[test]
    fn persistence_on_a_ramp_by_hand() {
        let truth = Array2::from_shape_fn((40, 1), |(t, _)| 0.1 * t as f64);
        let s = valid_time(&Persistence, truth.view(), 10, &spec(20));
        assert!((s.valid_time - 0.5).abs() < 1e-12, "{s:?}");
        assert!(!s.censored && !s.blew_up);
        // With a maximum lead of 4 steps the forecast is still valid: censored at 0.4.
        let s = valid_time(&Persistence, truth.view(), 10, &spec(4));
        assert!((s.valid_time - 0.4).abs() < 1e-12 && s.censored, "{s:?}");
    }

    struct Exploding;
    impl Forecaster for Exploding {
        fn forecast(
            &self,
            _: ArrayView2<f64>,
            steps: usize,
            sink: &mut dyn FnMut(usize, &[f64]) -> bool,
        ) {
            for k in 1..=steps {
                let v = if k >= 3 { f64::NAN } else { 0.0 };
                if !sink(k, &[v]) {
                    return;
                }
            }
        }
    }

    #[test]
    fn non_finite_forecast_scores_its_failure_time() {
        let truth = Array2::zeros((40, 1));
        let s = valid_time(&Exploding, truth.view(), 10, &spec(20));
        assert!(s.blew_up && !s.censored);
        assert!((s.valid_time - 0.2).abs() < 1e-12);
    }

    #[test]
    fn quantiles_and_shares() {
        let v: Vec<IcSkill> = (0..5)
            .map(|i| IcSkill {
                valid_time: i as f64,
                censored: i == 4,
                blew_up: false,
            })
            .collect();
        let s = summarise(&v);
        assert_eq!(s.mean, 2.0);
        assert_eq!(s.median, 2.0);
        assert!((s.q10 - 0.4).abs() < 1e-12);
        assert!((s.censored_share - 0.2).abs() < 1e-12);
    }
}
