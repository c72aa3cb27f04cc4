//! A stand-alone cost question (for a `cost` command): given a number of saved samples, or a
//! sampled model time, and the `[cost]` inputs, the full breakdown as a serialisable report.
//! The plain-text rendering is `report::cost_text`.

use super::campaign::{Breakdown, Campaign};
use super::{CostError, CostInputs};
use serde::{Deserialize, Serialize};

/// Version tag of [`CostReport`] as JSON.
pub const COST_SCHEMA: &str = "closure-budget/cost/1";

/// How much data the question asks about.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Amount {
    /// Saved training samples.
    Samples(f64),
    /// Sampled model time (spin-up excluded), model time units: samples = time ÷ saving interval.
    SampledTime(f64),
}

/// Everything a `cost` command needs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct CostSpec {
    pub amount: Amount,
    /// Time between saved samples, model time units.
    pub sample_interval: f64,
    /// State variables per sample, the default values per sample.
    pub variables: usize,
    pub inputs: CostInputs,
}

/// The answer to a [`CostSpec`]: the checked campaign and its breakdown.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub struct CostReport {
    /// Always [`COST_SCHEMA`].
    pub schema: String,
    pub samples: f64,
    pub campaign: Campaign,
    pub breakdown: Breakdown,
    /// The scaling law with its source and assumptions, when one is used.
    pub scaling_description: Option<String>,
}

/// Checks the spec and computes the breakdown.
pub fn cost_report(spec: &CostSpec) -> Result<CostReport, CostError> {
    let campaign = spec.inputs.campaign(spec.variables, spec.sample_interval)?;
    let samples = match spec.amount {
        Amount::Samples(n) => {
            if !(n.is_finite() && n > 0.0) {
                return Err(CostError::Invalid {
                    key: "samples",
                    value: n.to_string(),
                    allowed: "a positive number of saved samples",
                });
            }
            n
        }
        Amount::SampledTime(t) => {
            if !(t.is_finite() && t > 0.0) {
                return Err(CostError::Invalid {
                    key: "sampled-time",
                    value: t.to_string(),
                    allowed: "a positive number of model time units",
                });
            }
            t / campaign.sample_interval
        }
    };
    let breakdown = campaign.breakdown(samples);
    if !(breakdown.total.device_hours.is_finite() && breakdown.simulated_time.is_finite()) {
        return Err(CostError::Overflow {
            samples,
            unit: campaign.device.hours_label(),
        });
    }
    Ok(CostReport {
        schema: COST_SCHEMA.into(),
        samples,
        breakdown,
        scaling_description: campaign.scaling.map(|s| s.law.describe()),
        campaign,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sampled_time_and_samples_agree() {
        let inputs = CostInputs {
            core_hours_per_time_unit: Some(10.0),
            ..CostInputs::default()
        };
        let spec = |amount| CostSpec {
            amount,
            sample_interval: 0.01,
            variables: 8,
            inputs: inputs.clone(),
        };
        let a = cost_report(&spec(Amount::Samples(5000.0))).unwrap();
        let b = cost_report(&spec(Amount::SampledTime(50.0))).unwrap();
        assert!((a.breakdown.total.device_hours - 500.0).abs() < 1e-9);
        assert!((b.samples - 5000.0).abs() < 1e-9);
        let e = cost_report(&spec(Amount::Samples(-1.0)))
            .unwrap_err()
            .to_string();
        assert!(e.contains("samples") && e.contains("-1"), "{e}");
        // Beyond what a double holds: an overflow said as such, not a cost of "—".
        let mut huge = spec(Amount::Samples(1e12));
        huge.inputs.core_hours_per_time_unit = Some(1e300);
        let e = cost_report(&huge).unwrap_err().to_string();
        assert!(
            e.starts_with(
                "overflow: the cost of 1e12 samples exceeds 1.7976931348623157e308 core-hours"
            ),
            "{e}"
        );
        let json = serde_json::to_string(&a).unwrap();
        let back: CostReport = serde_json::from_str(&json).unwrap();
        assert_eq!(back.schema, COST_SCHEMA);
    }
}
