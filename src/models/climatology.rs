//! Climatology: the training mean at every lead, the floor a forecast must beat once the
//! initial condition is forgotten.

use super::Forecaster;
use crate::data::column_stats;
use ndarray::ArrayView2;

/// Forecasts the training mean of each variable at every lead.
#[derive(Debug, Clone, PartialEq)]
pub struct Climatology {
    /// Mean of each variable over the training subset.
    pub mean: Vec<f64>,
}

impl Climatology {
    /// The climatology of the training subset `train` (samples × variables).
    pub fn fit(train: ArrayView2<f64>) -> Self {
        Self {
            mean: column_stats(train).0,
        }
    }
}

impl Forecaster for Climatology {
    /// Ignores the history except for stopping: every lead gets the training mean.
    fn forecast(
        &self,
        _history: ArrayView2<f64>,
        steps: usize,
        sink: &mut dyn FnMut(usize, &[f64]) -> bool,
    ) {
        for k in 1..=steps {
            if !sink(k, &self.mean) {
                return;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    /// The forecast is the column mean of the training rows (hand-computed), at every lead,
    /// whatever the initial condition, and stops when the sink asks.
    #[test]
    fn forecasts_the_training_mean_at_every_lead() {
        let train = array![[1.0, -2.0], [3.0, 0.0], [8.0, 5.0]];
        let clim = Climatology::fit(train.view());
        assert_eq!(clim.mean, vec![4.0, 1.0]);
        let history = array![[100.0, 100.0], [-7.0, 9.0]];
        let mut seen = Vec::new();
        clim.forecast(history.view(), 10, &mut |k, x| {
            seen.push((k, x.to_vec()));
            k < 4
        });
        assert_eq!(seen.len(), 4);
        assert!(seen
            .iter()
            .enumerate()
            .all(|(i, (k, x))| *k == i + 1 && x == &vec![4.0, 1.0]));
    }
}
