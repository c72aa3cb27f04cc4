//! The work a study asks for, estimated before any work from what the study file says: the
//! samples to simulate and their integrator steps, the training points, and the memory of the
//! data and of the largest fit. `check` shows it; a study above the limits — more than
//! [`MAX_STEPS`] integrator steps in one simulation, more memory than the machine has — is
//! refused with the estimate and the limit.

use super::{DataSource, Timing};
use crate::models::family::TrainingMemory;
use crate::systems::{SimulationSpec, MAX_STEPS};

/// Memory assumed where the machine does not report its own (no /proc/meminfo).
pub const FALLBACK_MEMORY: f64 = 16e9;

/// The work estimate of a plan.
#[derive(Debug, Clone, PartialEq)]
pub struct WorkEstimate {
    /// The simulations of the study: the pilot's and the new regime's, when simulated.
    pub simulations: Vec<SimulationWork>,
    /// Models × sizes × replicates: the points of the learning curves.
    pub training_points: usize,
    /// How `training_points` is made up, e.g. "2 models × 4 sizes × 3 replicates".
    pub points_detail: String,
    /// Fine-tuned and from-scratch points of the new regime.
    pub transfer_points: usize,
    /// Test forecasts of the learning curves.
    pub forecasts: usize,
    /// Validation forecasts of the models tuned by them (every candidate penalty at every
    /// size and replicate).
    pub validation_forecasts: usize,
    /// The data held in memory, each part with what it holds and its bytes (parts not known
    /// before the data are read are left out).
    pub data: Vec<(String, String, f64)>,
    /// The fit with the most memory, with its model's name.
    pub largest_fit: Option<(String, TrainingMemory)>,
    /// Models whose fit memory is not known before the data are read (or that train outside
    /// the tool).
    pub fits_unknown: Vec<String>,
    /// The memory limit and where it comes from.
    pub memory_limit: f64,
    pub memory_source: &'static str,
}

/// One simulation of the study.
#[derive(Debug, Clone, PartialEq)]
pub struct SimulationWork {
    /// The table it is set in: `data.simulate` or `transfer.data.simulate`.
    pub key: &'static str,
    /// Saved samples.
    pub samples: usize,
    /// RK4 steps in all, and those of the spin-up.
    pub steps: f64,
    pub spin_up_steps: f64,
    /// Steps between saved samples.
    pub steps_per_sample: f64,
    /// About how long the steps take on one core.
    pub seconds: f64,
    /// Bytes of the saved values.
    pub bytes: f64,
}

impl SimulationWork {
    /// The simulation of `data` (under `key`) when it is simulated: as many samples as the
    /// training pool and the test need.
    pub fn of(key: &'static str, data: &DataSource, timing: &Timing) -> Option<SimulationWork> {
        let DataSource::Simulate {
            system,
            dt,
            sample_interval,
            spin_up,
            training_pool,
            seed,
        } = data
        else {
            return None;
        };
        let samples = timing
            .split(*sample_interval)
            .total_for_pool(*training_pool);
        let spec = SimulationSpec {
            system: system.clone(),
            dt: *dt,
            sample_interval: *sample_interval,
            spin_up: *spin_up,
            samples,
            seed: *seed,
        };
        let steps = spec.integrator_steps();
        let spin_up_steps = SimulationSpec {
            samples: 1,
            ..spec.clone()
        }
        .integrator_steps();
        Some(SimulationWork {
            key,
            samples,
            steps,
            spin_up_steps,
            steps_per_sample: (sample_interval / dt).round(),
            seconds: system.integration_seconds(steps),
            bytes: spec.saved_bytes(),
        })
    }

    /// Whether the steps exceed [`MAX_STEPS`].
    pub fn too_long(&self) -> bool {
        self.steps > MAX_STEPS
    }

    /// The refusal of a simulation above [`MAX_STEPS`], with what its steps are made of and
    /// what to change.
    pub fn refusal(&self) -> String {
        format!(
            "the simulation would take {:.3e} integrator steps ({:.3e} for the spin-up, then {} samples × {} step{} each), {} on one core; the limit is {MAX_STEPS:.0e} steps: {}",
            self.steps,
            self.spin_up_steps,
            self.samples,
            self.steps_per_sample,
            if self.steps_per_sample == 1.0 { "" } else { "s" },
            duration_words(self.seconds),
            if self.spin_up_steps > self.steps / 2.0 {
                "shorten `spin-up` or raise `dt`"
            } else if self.steps_per_sample > 1000.0 {
                "raise `dt` (or lower `sample-interval`)"
            } else {
                "reduce the subset sizes (or `training-pool`), the test initial conditions or their spacing, or raise `dt`"
            }
        )
    }
}

impl WorkEstimate {
    /// Bytes held at once: the data and the largest fit (one training unit at a time; every
    /// unit running alongside it adds its own fit).
    pub fn peak_bytes(&self) -> f64 {
        self.data_bytes() + self.largest_fit.as_ref().map_or(0.0, |(_, m)| m.bytes)
    }

    /// Bytes of the data held.
    pub fn data_bytes(&self) -> f64 {
        self.data.iter().map(|(_, _, b)| b).sum()
    }

    /// The parts of [`WorkEstimate::peak_bytes`] in words.
    pub fn memory_parts(&self) -> String {
        let mut parts: Vec<String> = self
            .data
            .iter()
            .map(|(what, holds, b)| format!("{what} {} ({holds})", bytes_words(*b)))
            .collect();
        if let Some((model, m)) = &self.largest_fit {
            parts.push(format!(
                "the largest fit {} (model {model}: {})",
                bytes_words(m.bytes),
                m.what
            ));
        }
        parts.join(", ")
    }

    /// Whether the peak memory exceeds the machine's.
    pub fn too_much_memory(&self) -> bool {
        self.peak_bytes() > self.memory_limit
    }

    /// The lines `check` shows.
    pub fn describe(&self) -> String {
        use std::fmt::Write;
        let mut s = String::from("work estimate (before any work):\n");
        for sim in &self.simulations {
            let _ = writeln!(
                s,
                "  simulate ({}): {} samples, {:.3e} integrator steps, {} on one core (limit {MAX_STEPS:.0e} steps)",
                sim.key,
                sim.samples,
                sim.steps,
                duration_words(sim.seconds)
            );
        }
        let _ = write!(
            s,
            "  training: {} points ({}), {} test forecasts",
            self.training_points, self.points_detail, self.forecasts
        );
        if self.validation_forecasts > 0 {
            let _ = write!(
                s,
                ", {} validation forecasts (penalties tuned by forecasts)",
                self.validation_forecasts
            );
        }
        if self.transfer_points > 0 {
            let _ = write!(s, "; new regime: {} points", self.transfer_points);
        }
        s.push('\n');
        let _ = write!(
            s,
            "  memory: about {} at once ({}); limit {} ({})",
            bytes_words(self.peak_bytes()),
            if self.data.is_empty() && self.largest_fit.is_none() {
                "not known before the data are read".to_string()
            } else {
                self.memory_parts()
            },
            bytes_words(self.memory_limit),
            self.memory_source
        );
        if !self.fits_unknown.is_empty() {
            let _ = write!(
                s,
                "; not counted: the fits of {}",
                self.fits_unknown.join(", ")
            );
        }
        s.push('\n');
        s
    }
}

/// The machine's memory and where the figure comes from.
pub fn memory_limit() -> (f64, &'static str) {
    match crate::systems::total_memory() {
        Some(b) => (b, "this machine's memory"),
        None => (
            FALLBACK_MEMORY,
            "a fixed limit: this system does not report its memory",
        ),
    }
}

/// Bytes in kB, MB or GB to three significant figures.
pub fn bytes_words(bytes: f64) -> String {
    let (v, unit) = if bytes >= 1e9 {
        (bytes / 1e9, "GB")
    } else if bytes >= 1e6 {
        (bytes / 1e6, "MB")
    } else if bytes >= 1e3 {
        (bytes / 1e3, "kB")
    } else {
        return format!("{bytes:.0} bytes");
    };
    let decimals = if v >= 100.0 {
        0
    } else if v >= 10.0 {
        1
    } else {
        2
    };
    format!("{v:.decimals$} {unit}")
}

/// A duration in the largest unit that keeps it above 1: "about 2.5 hours".
pub fn duration_words(seconds: f64) -> String {
    let (v, unit) = if seconds < 1.0 {
        return "under a second".into();
    } else if seconds < 120.0 {
        (seconds, "seconds")
    } else if seconds < 7200.0 {
        (seconds / 60.0, "minutes")
    } else if seconds < 2.0 * 86400.0 {
        (seconds / 3600.0, "hours")
    } else if seconds < 730.0 * 86400.0 {
        (seconds / 86400.0, "days")
    } else {
        (seconds / (365.25 * 86400.0), "years")
    };
    let decimals = if v < 10.0 { 1 } else { 0 };
    format!("about {v:.decimals$} {unit}")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::systems::SystemSpec;

    fn timing() -> Timing {
        Timing {
            initial_conditions: 4,
            validation_conditions: 0,
            gap: 1.0,
            spacing: 1.0,
            threshold: 0.5,
            warm_up: 1.0,
            max_lead: 2.0,
            lyapunov_exponent: None,
        }
    }

    /// By hand: sample interval 0.1 → gap 10, spacing 10, warm-up 10, lead 20 samples; the test
    /// region of 4 initial conditions is 3 × 10 + 10 + 20 + 1 = 61 samples beyond the pool of
    /// 1000 and the gap; dt 0.01 → 10 steps per sample, spin-up 5 → 500 steps.
    #[test]
    fn simulation_steps_by_hand() {
        let data = DataSource::Simulate {
            system: SystemSpec::Lorenz63 {
                sigma: 10.0,
                rho: 28.0,
                beta: 8.0 / 3.0,
            },
            dt: 0.01,
            sample_interval: 0.1,
            spin_up: 5.0,
            training_pool: 1000,
            seed: 1,
        };
        let t = timing();
        let samples = 1071;
        let w = SimulationWork::of("data.simulate", &data, &t).unwrap();
        assert_eq!(w.samples, samples);
        assert_eq!(w.spin_up_steps, 500.0);
        assert_eq!(w.steps, 500.0 + (samples as f64 - 1.0) * 10.0);
        assert_eq!(w.bytes, samples as f64 * 3.0 * 8.0);
        assert!(!w.too_long());
        // A spin-up of 1e9 time units at dt = 0.01 is 1e11 steps: refused, naming the spin-up.
        let DataSource::Simulate {
            system,
            dt,
            sample_interval,
            training_pool,
            seed,
            ..
        } = data
        else {
            unreachable!("simulated data")
        };
        let long = DataSource::Simulate {
            system,
            dt,
            sample_interval,
            spin_up: 1e9,
            training_pool,
            seed,
        };
        let w = SimulationWork::of("data.simulate", &long, &t).unwrap();
        assert!(w.too_long());
        assert!(
            w.refusal().contains("1.000e11 for the spin-up"),
            "{}",
            w.refusal()
        );
        assert!(w.refusal().contains("shorten `spin-up`"), "{}", w.refusal());
    }

    #[test]
    fn words_for_durations_and_bytes() {
        assert_eq!(duration_words(0.2), "under a second");
        assert_eq!(duration_words(45.0), "about 45 seconds");
        assert_eq!(duration_words(600.0), "about 10 minutes");
        assert_eq!(duration_words(9000.0), "about 2.5 hours");
        assert_eq!(duration_words(5.0 * 86400.0), "about 5.0 days");
        assert_eq!(bytes_words(768e9), "768 GB");
        assert_eq!(bytes_words(2.5e6), "2.50 MB");
        assert_eq!(bytes_words(25.27e9), "25.3 GB");
        assert_eq!(bytes_words(512.0), "512 bytes");
    }
}
