//! The split of one trajectory into a training pool (used as nested prefixes) and held-out test
//! initial conditions placed after it, separated by a gap and spaced apart.
//!
//! Layout along time: `[ training pool | gap | warm-up, IC₀, IC₁ … IC_{M−1}, maximum lead ]`.
//! Each test initial condition needs `warm-up` samples of truth before it and `max-lead` samples
//! after it; consecutive initial conditions are `spacing` samples apart, and the first warm-up
//! window starts `gap` samples after the last training sample, so no test window touches
//! training data.

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
}

/// Resolved split of a trajectory.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Split {
    /// Training pool (sample indices).
    pub pool: Range<usize>,
    /// Sample index of every test initial condition.
    pub initial_conditions: Vec<usize>,
    pub spec: SplitSpec,
}

impl SplitSpec {
    /// Samples the test region occupies after the gap.
    pub fn test_region(&self) -> usize {
        self.warm_up + self.initial_conditions.saturating_sub(1) * self.spacing + self.max_lead + 1
    }

    /// Total samples needed for a training pool of `pool` samples.
    pub fn total_for_pool(&self, pool: usize) -> usize {
        pool + self.gap + self.test_region()
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
                    "a training pool of {min_pool} samples, a gap of {}, and {} test initial conditions \
                     spaced {} apart with {} warm-up and {} forecast samples each",
                    spec.gap, spec.initial_conditions, spec.spacing, spec.warm_up, spec.max_lead
                ),
            });
        }
        let pool_end = total - spec.gap - spec.test_region();
        let first = pool_end + spec.gap + spec.warm_up;
        let initial_conditions = (0..spec.initial_conditions)
            .map(|i| first + i * spec.spacing)
            .collect();
        Ok(Split {
            pool: 0..pool_end,
            initial_conditions,
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
        }
    }

    #[test]
    fn test_windows_never_touch_the_pool_and_fit_the_data() {
        let s = Split::new(100, spec(), 50).unwrap();
        // test region: 4 + 2*5 + 6 + 1 = 21; pool = 100 - 10 - 21 = 69
        assert_eq!(s.pool, 0..69);
        assert_eq!(s.initial_conditions, vec![83, 88, 93]);
        let first_warm = s.initial_conditions[0] - spec().warm_up;
        assert_eq!(first_warm - s.pool.end, spec().gap);
        assert_eq!(*s.initial_conditions.last().unwrap() + spec().max_lead, 99);
    }

    #[test]
    fn too_short_data_says_what_is_needed() {
        let e = Split::new(80, spec(), 50).unwrap_err().to_string();
        assert!(e.contains("80 samples") && e.contains("needs 81"), "{e}");
    }
}
