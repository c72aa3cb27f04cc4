//! What an estimate answers, in one place: a number of samples with its interval, only a bound,
//! or nothing; and, per target, the model to recommend (the cheapest that answers with a
//! number). Every summary (the report's first page, the terminal) reads estimates through
//! [`classify`], so a change of the estimate statuses is mapped here once.
//!
//! | status | answer |
//! |---|---|
//! | reached in the data (between two measured sizes) | a number (its upper end may read "more than the largest size") |
//! | met at the smallest measured size | a bound: n* ≤ that size |
//! | extrapolated, calibrated interval bounded | a number |
//! | extrapolated, interval open above | a bound: n* ≥ its lower end |
//! | beyond what the pilot supports | a bound: n* more than its lower end |
//! | no training needed (at or below the persistence floor) | no training |
//! | near the plateau, unreachable, no fit | not answerable |

use crate::study::results::{EstimateStatus, ModelResult, PlanDocument, TargetEstimate};

/// What one estimate answers.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Answer {
    /// n* with its interval (both ends known).
    Number { samples: f64, interval: [f64; 2] },
    /// Only a bound: n* ≤ `at_most` (reached at the smallest size), or n* ≥ `at_least`.
    Bound {
        at_most: Option<f64>,
        at_least: Option<f64>,
    },
    /// No sample count can be given (the curve levels off below the target, or no fit).
    NotAnswerable,
    /// The target is at or below the persistence floor: no training data needed.
    NoTraining,
}

impl Answer {
    /// Short label of the kind of answer.
    pub fn label(&self) -> &'static str {
        match self {
            Answer::Number { .. } => "answered",
            Answer::Bound { .. } => "bound only",
            Answer::NotAnswerable => "not answerable",
            Answer::NoTraining => "no training needed",
        }
    }
}

/// Classifies an estimate. `_smallest` (the model's smallest measured size) is kept for
/// callers; the status already says whether the target was met there.
pub fn classify(e: &TargetEstimate, _smallest: Option<f64>) -> Answer {
    let finite = |v: Option<f64>| v.filter(|v| v.is_finite() && *v >= 0.0);
    match e.status {
        EstimateStatus::NoTrainingNeeded => Answer::NoTraining,
        EstimateStatus::Unreachable | EstimateStatus::NoFit | EstimateStatus::NearPlateau => {
            Answer::NotAnswerable
        }
        EstimateStatus::AtSmallestSize => match finite(e.samples_interval[1]) {
            Some(n) => Answer::Bound {
                at_most: Some(n),
                at_least: None,
            },
            None => Answer::NotAnswerable,
        },
        EstimateStatus::BeyondSupport => match finite(e.samples_interval[0]) {
            Some(n) => Answer::Bound {
                at_most: None,
                at_least: Some(n),
            },
            None => Answer::NotAnswerable,
        },
        EstimateStatus::ReachedInData | EstimateStatus::Extrapolated => {
            match (finite(e.samples), e.samples_interval) {
                (None, _) => Answer::NotAnswerable,
                (Some(n), [Some(lo), Some(hi)]) => Answer::Number {
                    samples: n,
                    interval: [lo, hi],
                },
                (Some(n), [lo, _]) => Answer::Bound {
                    at_most: None,
                    at_least: Some(lo.unwrap_or(n).min(n)),
                },
            }
        }
    }
}

/// The smallest measured size of a model, in samples.
pub fn smallest_size(m: &ModelResult) -> Option<f64> {
    m.points.iter().map(|p| p.n as f64).reduce(f64::min)
}

/// One target's recommendation.
#[derive(Debug, Clone)]
pub struct Pick<'a> {
    pub target: f64,
    /// The chosen model and its estimate: the cheapest answering with a number (core-hours,
    /// or samples without a cost model); failing that, the smallest bound; `None` when no
    /// model answers at all.
    pub choice: Option<(&'a ModelResult, &'a TargetEstimate, Answer)>,
    /// How many models answer with a number, and how many were estimated.
    pub answered: usize,
    pub models: usize,
    /// The next cheapest model answering with a number, and how many times dearer it is.
    pub runner_up: Option<(&'a ModelResult, f64)>,
}

/// The figure the models are ranked by: core-hours when there is a cost model, else samples.
fn price(e: &TargetEstimate) -> f64 {
    if e.status == EstimateStatus::NoTrainingNeeded {
        return 0.0;
    }
    if e.status == EstimateStatus::AtSmallestSize {
        // An upper bound on the cost: the model is at most this dear.
        return e
            .budget_high
            .as_ref()
            .map(|b| b.core_hours)
            .or(e.samples_interval[1])
            .unwrap_or(f64::INFINITY);
    }
    e.budget
        .as_ref()
        .map(|b| b.core_hours)
        .or(e.samples)
        .unwrap_or(f64::INFINITY)
}

/// Per study target, in order: the recommended model.
pub fn picks(doc: &PlanDocument) -> Vec<Pick<'_>> {
    doc.study
        .targets
        .iter()
        .map(|&target| {
            let mut numbers = Vec::new();
            let mut bounds = Vec::new();
            let mut models = 0;
            for m in &doc.models {
                let Some(e) = m.estimates.iter().find(|e| same(e.target, target)) else {
                    continue;
                };
                models += 1;
                match classify(e, smallest_size(m)) {
                    // "≤ n" (met at the smallest size) is a defensible figure too: the model
                    // costs at most that much, so it competes with the numbers.
                    a @ (Answer::Number { .. }
                    | Answer::NoTraining
                    | Answer::Bound {
                        at_most: Some(_), ..
                    }) => numbers.push((m, e, a)),
                    a @ Answer::Bound { .. } => bounds.push((m, e, a)),
                    Answer::NotAnswerable => {}
                }
            }
            // Stable sorts: ties keep the study's model order.
            numbers.sort_by(|a, b| price(a.1).total_cmp(&price(b.1)));
            // A bound "≤ n" beats any "≥ n"; then the smaller figure.
            let bound_key = |a: &Answer| match a {
                Answer::Bound {
                    at_most: Some(n), ..
                } => (0, *n),
                Answer::Bound {
                    at_least: Some(n), ..
                } => (1, *n),
                _ => (2, f64::INFINITY),
            };
            bounds.sort_by(|a, b| {
                let (ka, kb) = (bound_key(&a.2), bound_key(&b.2));
                ka.0.cmp(&kb.0).then(ka.1.total_cmp(&kb.1))
            });
            let runner_up = match numbers.as_slice() {
                [first, second, ..] if price(first.1) > 0.0 => {
                    Some((second.0, price(second.1) / price(first.1)))
                }
                _ => None,
            };
            Pick {
                target,
                answered: numbers.len(),
                models,
                choice: numbers.first().or(bounds.first()).copied(),
                runner_up,
            }
        })
        .collect()
}

fn same(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-9 * a.abs().max(b.abs()).max(1.0)
}

/// A ratio of two costs said the right way round: 0.0154 → "65× cheaper" is never written;
/// `ratio` is other ÷ reference, and the words say how the other compares: "65× dearer",
/// "3.2× cheaper", "about the same".
pub fn ratio_words(ratio: f64) -> String {
    use super::format::sig;
    if !ratio.is_finite() || ratio <= 0.0 {
        return "not comparable".into();
    }
    if (0.95..=1.05).contains(&ratio) {
        "about the same".into()
    } else if ratio > 1.0 {
        format!("{}× dearer", sig(ratio, 2))
    } else {
        format!("{}× cheaper", sig(1.0 / ratio, 2))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixtures::fixture;

    fn estimate(status: EstimateStatus, n: Option<f64>, iv: [Option<f64>; 2]) -> TargetEstimate {
        TargetEstimate {
            status,
            samples: n,
            samples_interval: iv,
            ..TargetEstimate::no_fit(1.0, "")
        }
    }

    #[test]
    fn classifies_each_status() {
        use EstimateStatus::*;
        let small = Some(500.0);
        let number = |s, iv| Answer::Number {
            samples: s,
            interval: iv,
        };
        let c = |st, n, iv| classify(&estimate(st, n, iv), small);
        assert_eq!(
            c(ReachedInData, Some(1000.0), [Some(800.0), Some(1200.0)]),
            number(1000.0, [800.0, 1200.0])
        );
        assert_eq!(
            c(Extrapolated, Some(3000.0), [Some(2000.0), Some(5000.0)]),
            number(3000.0, [2000.0, 5000.0])
        );
        assert_eq!(
            c(Extrapolated, Some(3000.0), [Some(2000.0), None]),
            Answer::Bound {
                at_most: None,
                at_least: Some(2000.0)
            }
        );
        assert_eq!(
            c(AtSmallestSize, None, [None, Some(500.0)]),
            Answer::Bound {
                at_most: Some(500.0),
                at_least: None
            }
        );
        assert_eq!(
            c(BeyondSupport, None, [Some(8000.0), None]),
            Answer::Bound {
                at_most: None,
                at_least: Some(8000.0)
            }
        );
        assert_eq!(c(NoTrainingNeeded, None, [None, None]), Answer::NoTraining);
        for st in [NearPlateau, Unreachable, NoFit] {
            assert_eq!(c(st, None, [None, None]), Answer::NotAnswerable);
        }
    }

    #[test]
    fn picks_the_cheapest_model_answering_with_a_number() {
        let doc = fixture().document;
        let picks = picks(&doc);
        assert_eq!(picks.len(), doc.study.targets.len());
        for p in &picks {
            let Some((m, e, Answer::Number { .. })) = p.choice else {
                continue;
            };
            // No other model answering with a number is cheaper.
            for other in &doc.models {
                let Some(o) = other.estimates.iter().find(|o| same(o.target, p.target)) else {
                    continue;
                };
                if matches!(classify(o, smallest_size(other)), Answer::Number { .. }) {
                    assert!(price(o) >= price(e), "{} beats {}", other.name, m.name);
                }
            }
        }
    }

    #[test]
    fn ratios_read_the_right_way_round() {
        assert_eq!(ratio_words(1.0 / 0.0154), "65× dearer");
        assert_eq!(ratio_words(0.0154), "65× cheaper");
        assert_eq!(ratio_words(1.02), "about the same");
        assert_eq!(ratio_words(3.2), "3.2× dearer");
    }
}
