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
    /// For states of POD coefficients: the truth's energy outside the kept modes, so that the
    /// error is that of the reconstructed field (`None`: the state is the field itself).
    pub unresolved: Option<std::sync::Arc<Unresolved>>,
}

/// The truth's part outside a reduced basis, for skill on the reconstructed field.
///
/// With orthonormal modes Φ in a scaled space, a truth snapshot z = Φa + r and a forecast
/// ẑ = Φâ: ‖z − ẑ‖² = ‖a − â‖² + ‖r‖². The normalised error at lead k from initial condition
/// i is then e = sqrt((Σ_j (â_j − a_j)² + ‖r(i + k)‖²) / D): coefficients enter unweighted (they
/// are already in the scaled space), and σ serves only the blow-up check.
#[derive(Debug, Clone, PartialEq)]
pub struct Unresolved {
    /// ‖r‖² of the truth at every row of the truth array.
    pub energy: Vec<f64>,
    /// Values per snapshot of the scaled field (D).
    pub field_dim: f64,
}

impl Unresolved {
    /// The valid time of a perfect reduced model (â = a) from `ic`: the truncation error alone.
    pub fn perfect_valid_time(&self, ic: usize, spec: &SkillSpec) -> IcSkill {
        let mut last = 0;
        let mut exceeded = false;
        for k in 1..=spec.max_lead {
            if (self.energy[ic + k] / self.field_dim).sqrt() > spec.threshold {
                exceeded = true;
                break;
            }
            last = k;
        }
        IcSkill {
            valid_time: last as f64 * spec.sample_interval,
            censored: !exceeded && last == spec.max_lead,
            blew_up: false,
        }
    }
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
        let reduced = self.spec.unresolved.as_deref();
        let mut sq = 0.0;
        for j in 0..d {
            let z = match reduced {
                Some(_) => x[j] - row[j],
                None => (x[j] - row[j]) * self.inv_sigma[j],
            };
            sq += z * z;
            let excursion = (x[j] - self.spec.mean[j]) * self.inv_sigma[j];
            // NaN counts as a blow-up: a stated choice, not an accident of comparison.
            if excursion.is_nan() || excursion.abs() > BLOW_UP_SIGMAS {
                self.blew_up = true;
            }
        }
        let err = match reduced {
            Some(u) => ((sq + u.energy[self.ic + k]) / u.field_dim).sqrt(),
            None => (sq / d as f64).sqrt(),
        };
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
            unresolved: None,
        }
    }

    /// Two coefficients with zero forecast error and the truth's unresolved energy growing by
    /// 0.05 per row over D = 4 values: e(k) = sqrt(0.05 (10 + k) / 4) passes θ = 0.5 (e² = 0.25,
    /// energy 1.0) at row 20, so from initial condition 10 the error stays valid up to k = 10
    /// (energy 1.0, e = 0.5 exactly) and fails at k = 11: valid time 1.0 time units. The perfect
    /// model's floor is the same, since the forecast error is zero.
    #[test]
    fn unresolved_energy_enters_the_error_by_hand() {
        let truth = Array2::from_shape_fn((40, 2), |(t, j)| (t + j) as f64);
        let u = std::sync::Arc::new(Unresolved {
            energy: (0..40).map(|t| t as f64 / 20.0).collect(),
            field_dim: 4.0,
        });
        let mut sp = spec(20);
        sp.mean = vec![0.0, 0.0];
        sp.sigma = vec![100.0, 100.0];
        sp.unresolved = Some(u.clone());
        struct Oracle(Array2<f64>);
        impl Forecaster for Oracle {
            fn forecast(
                &self,
                history: ArrayView2<f64>,
                steps: usize,
                sink: &mut dyn FnMut(usize, &[f64]) -> bool,
            ) {
                let t0 = history[[history.nrows() - 1, 0]] as usize;
                for k in 1..=steps {
                    let row: Vec<f64> = self.0.row(t0 + k).to_vec();
                    if !sink(k, &row) {
                        return;
                    }
                }
            }
        }
        let s = valid_time(&Oracle(truth.clone()), truth.view(), 10, &sp);
        assert!((s.valid_time - 1.0).abs() < 1e-12, "{s:?}");
        assert!(!s.censored);
        assert_eq!(u.perfect_valid_time(10, &sp), s);
        // Without the unresolved energy the oracle is perfect: censored at the maximum lead.
        sp.unresolved = None;
        let s = valid_time(&Oracle(truth.clone()), truth.view(), 10, &sp);
        assert!(s.censored && (s.valid_time - 2.0).abs() < 1e-12, "{s:?}");
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
