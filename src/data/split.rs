//! The split of one trajectory into held-out test initial conditions and a training pool (used
//! as nested prefixes) after them, separated by a gap.
//!
//! Layout along time: `[ warm-up, IC₀, IC₁ … IC_{M−1}, maximum lead | gap | training pool ]`.
//! Each test initial condition needs `warm-up` samples of truth before it and `max-lead` samples
//! after it; consecutive initial conditions are `spacing` samples apart, and the training pool
//! starts `gap` samples after the last forecast window ends, so no test window touches training
//! data.
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
        let test_end = spec.test_region();
        let initial_conditions = (0..spec.initial_conditions)
            .map(|i| spec.warm_up + i * spec.spacing)
            .collect();
        Ok(Split {
            pool: test_end + spec.gap..total,
            held_out: 0..test_end,
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

    #[test]
    fn too_short_data_says_what_is_needed() {
        let e = Split::new(80, spec(), 50).unwrap_err().to_string();
        assert!(e.contains("80 samples") && e.contains("needs 81"), "{e}");
    }
}
