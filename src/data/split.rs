//! The split of one trajectory into held-out test initial conditions, optional validation
//! initial conditions, and a training pool (used as nested prefixes) after them, separated by
//! gaps.
//!
//! Layout along time: `[ warm-up, IC₀, IC₁ … IC_{M−1}, maximum lead | gap | training pool ]`, or
//! with V validation initial conditions
//! `[ test region | gap | warm-up, VC₀ … VC_{V−1}, maximum lead | gap | training pool ]`.
//! Each initial condition needs `warm-up` samples of truth before it and `max-lead` samples
//! after it; consecutive initial conditions are `spacing` samples apart, and each region starts
//! `gap` samples after the last forecast window before it ends, so no test window touches
//! validation or training data and no validation window touches training data. Validation
//! forecasts tune a model (its ridge penalty at every size); the test forecasts then measure it
//! on data neither its fit nor its tuning saw.
//!
//! The test region comes first so that the split is stable when data are appended: more samples
//! only lengthen the training pool, while the test initial conditions, and every prefix of the
//! pool, keep their content. Reruns after new data arrive can then reuse every earlier result.

use super::DataError;
use std::ops::Range;

/// Requested split, in samples.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SplitSpec {
    pub initial_conditions: usize,
    pub gap: usize,
    pub spacing: usize,
    pub warm_up: usize,
    pub max_lead: usize,
    /// Validation initial conditions between the test region and the pool (0: none, and the
    /// layout is the one without them).
    pub validation_conditions: usize,
}

/// Resolved split of a trajectory.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Split {
    /// Training pool (sample indices): from the end of the gap to the end of the data.
    pub pool: Range<usize>,
    /// The held-out test region (sample indices): warm-up windows, initial conditions and
    /// forecast windows.
    pub held_out: Range<usize>,
    /// Sample index of every test initial condition.
    pub initial_conditions: Vec<usize>,
    /// The validation region (empty when there are no validation initial conditions).
    pub validation: Range<usize>,
    /// Sample index of every validation initial condition.
    pub validation_conditions: Vec<usize>,
    pub spec: SplitSpec,
}

impl SplitSpec {
    /// Samples a region of `conditions` initial conditions occupies.
    fn region(&self, conditions: usize) -> usize {
        self.warm_up + conditions.saturating_sub(1) * self.spacing + self.max_lead + 1
    }

    /// Samples the test region occupies.
    pub fn test_region(&self) -> usize {
        self.region(self.initial_conditions)
    }

    /// Samples the validation region and the gap after it occupy (0 without validation).
    pub fn validation_region(&self) -> usize {
        if self.validation_conditions == 0 {
            0
        } else {
            self.region(self.validation_conditions) + self.gap
        }
    }

    /// Total samples needed for a training pool of `pool` samples.
    pub fn total_for_pool(&self, pool: usize) -> usize {
        pool + self.gap + self.test_region() + self.validation_region()
    }
}

impl Split {
    /// Splits `total` samples; the pool must hold at least `min_pool` samples.
    pub fn new(total: usize, spec: SplitSpec, min_pool: usize) -> Result<Split, DataError> {
        let needed = spec.total_for_pool(min_pool);
        if spec.initial_conditions == 0 || total < needed {
            return Err(DataError::SplitTooShort {
                available: total,
                needed,
                detail: format!(
                    "a training pool of {min_pool} samples, a gap of {}, and {} test{} initial conditions \
                     spaced {} apart with {} warm-up and {} forecast samples each",
                    spec.gap,
                    spec.initial_conditions,
                    if spec.validation_conditions > 0 {
                        format!(" and {} validation", spec.validation_conditions)
                    } else {
                        String::new()
                    },
                    spec.spacing,
                    spec.warm_up,
                    spec.max_lead
                ),
            });
        }
        let test_end = spec.test_region();
        let conditions = |first: usize, count: usize| -> Vec<usize> {
            (0..count)
                .map(|i| first + spec.warm_up + i * spec.spacing)
                .collect()
        };
        let validation_start = test_end + spec.gap;
        let validation = if spec.validation_conditions == 0 {
            validation_start..validation_start
        } else {
            validation_start..validation_start + spec.region(spec.validation_conditions)
        };
        Ok(Split {
            pool: test_end + spec.gap + spec.validation_region()..total,
            held_out: 0..test_end,
            initial_conditions: conditions(0, spec.initial_conditions),
            validation_conditions: conditions(validation.start, spec.validation_conditions),
            validation,
            spec,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec() -> SplitSpec {
        SplitSpec {
            initial_conditions: 3,
            gap: 10,
            spacing: 5,
            warm_up: 4,
            max_lead: 6,
            validation_conditions: 0,
        }
    }

    #[test]
    fn test_windows_never_touch_the_pool_and_fit_the_data() {
        let s = Split::new(100, spec(), 50).unwrap();
        // test region: 4 + 2*5 + 6 + 1 = 21; pool = 21 + 10 .. 100
        assert_eq!(s.held_out, 0..21);
        assert_eq!(s.pool, 31..100);
        assert_eq!(s.initial_conditions, vec![4, 9, 14]);
        assert_eq!(s.initial_conditions[0] - spec().warm_up, 0);
        let last_forecast = *s.initial_conditions.last().unwrap() + spec().max_lead;
        assert_eq!(s.pool.start - (last_forecast + 1), spec().gap);
    }

    /// Appending samples only lengthens the pool: test conditions and pool start stay put.
    #[test]
    fn appended_data_only_lengthen_the_pool() {
        let a = Split::new(100, spec(), 50).unwrap();
        let b = Split::new(250, spec(), 50).unwrap();
        assert_eq!(a.initial_conditions, b.initial_conditions);
        assert_eq!(a.held_out, b.held_out);
        assert_eq!(a.pool.start, b.pool.start);
        assert_eq!(b.pool.len(), a.pool.len() + 150);
    }

    /// Validation initial conditions sit between the test region and the pool, a gap from
    /// each: no validation window touches a test window or the pool; without them the layout
    /// is unchanged.
    #[test]
    fn validation_conditions_sit_between_test_and_pool() {
        let plain = Split::new(200, spec(), 50).unwrap();
        assert!(plain.validation.is_empty() && plain.validation_conditions.is_empty());
        let v = SplitSpec {
            validation_conditions: 2,
            ..spec()
        };
        let s = Split::new(200, v, 50).unwrap();
        assert_eq!(s.held_out, plain.held_out);
        assert_eq!(s.initial_conditions, plain.initial_conditions);
        // validation region: 21 + 10 = 31 .. 31 + (4 + 5 + 6 + 1) = 47; pool from 47 + 10.
        assert_eq!(s.validation, 31..47);
        assert_eq!(s.validation_conditions, vec![35, 40]);
        assert_eq!(s.pool, 57..200);
        let last_test = *s.initial_conditions.last().unwrap() + v.max_lead;
        assert_eq!(s.validation.start - (last_test + 1), v.gap);
        let last_validation = *s.validation_conditions.last().unwrap() + v.max_lead;
        assert_eq!(last_validation + 1, s.validation.end);
        assert_eq!(s.pool.start - s.validation.end, v.gap);
        assert_eq!(v.total_for_pool(50), 107);
        assert!(Split::new(106, v, 50).is_err() && Split::new(107, v, 50).is_ok());
    }

    #[test]
    fn too_short_data_says_what_is_needed() {
        let e = Split::new(80, spec(), 50).unwrap_err().to_string();
        assert!(e.contains("80 samples") && e.contains("needs 81"), "{e}");
    }
}
