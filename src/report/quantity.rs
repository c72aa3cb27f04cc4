//! What the learning curves of a document measure, as the report names it: a study's mean valid
//! prediction time in model time units (higher is better), or a metric measured outside the
//! tool (`fit`) in its own units, higher or lower better. Every exporter that names the
//! quantity, its unit or the way it improves asks here.

use crate::curves::Direction;
use crate::study::results::PlanDocument;

/// The quantity behind a document's curves.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Quantity {
    /// Measured outside the tool and read from a CSV (`fit`): no pilot data, no forecasts, no
    /// initial conditions, no model time.
    pub measured_outside: bool,
    /// Which way the quantity improves with more training data.
    pub direction: Direction,
}

impl Quantity {
    /// A study's skill: mean valid prediction time, higher is better.
    pub const VALID_TIME: Quantity = Quantity {
        measured_outside: false,
        direction: Direction::Increasing,
    };

    /// The quantity of a document: measured outside the tool when it has no pilot data.
    pub fn of(doc: &PlanDocument) -> Self {
        Quantity {
            measured_outside: doc.data.is_none(),
            direction: doc.study.direction,
        }
    }

    /// What follows a value of it: " time units", or nothing (the metric's own units).
    pub fn unit(&self) -> &'static str {
        if self.measured_outside {
            ""
        } else {
            " time units"
        }
    }

    /// The value axis of a learning-curve chart.
    pub fn axis(&self) -> String {
        if self.measured_outside {
            format!("measured value ({})", self.direction.better())
        } else {
            "mean valid prediction time (model time units)".into()
        }
    }

    /// What the bootstrap resamples besides the curve families.
    pub fn resampled(&self) -> &'static str {
        if self.measured_outside {
            "replicates (and the rows of each replicate)"
        } else {
            "replicates and test initial conditions"
        }
    }

    /// "rise" or "fall": how a curve gets to a target.
    pub fn moves(&self) -> &'static str {
        match self.direction {
            Direction::Increasing => "rise",
            Direction::Decreasing => "fall",
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixtures::fixture;

    #[test]
    fn a_study_measures_valid_time_and_a_fit_its_own_metric() {
        let mut doc = fixture().document;
        let study = Quantity::of(&doc);
        assert_eq!(study.unit(), " time units");
        assert!(study.axis().contains("model time units"));
        doc.data = None;
        doc.study.direction = Direction::Decreasing;
        let fit = Quantity::of(&doc);
        assert_eq!(fit.unit(), "");
        assert_eq!(fit.axis(), "measured value (lower is better)");
        assert_eq!(fit.moves(), "fall");
        assert!(!fit.resampled().contains("initial conditions"));
    }
}
