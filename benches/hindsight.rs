//! Hindsight benchmark of the answer beyond the data: would the analysis of a pilot stopped at
//! a quarter or an eighth of its largest size have predicted what the larger sizes measured?
//!
//! Three built-in studies (`benches/hindsight/*.toml`: Lorenz-63 with ESN, NG-RC and a
//! polynomial map; Lorenz-96 with NG-RC, ESN and a polynomial map; two-scale Lorenz-96 with
//! ESN, NG-RC and the quartic closure), sizes a factor √2 apart. Their points are computed once
//! and kept in `target/hindsight-bench/<study>/` (a rerun reuses them). For each model and each
//! truncation (the sizes ≤ n_max/4, ≤ n_max/8), the levels are the study's targets and four
//! levels between the truncated and the full isotonic maximum; a case is a level the truncated
//! data do not reach and the full data do (its measured n* by in-data interpolation).
//!
//! Two analyses on the same points:
//! - **old**: the selected family (backtest weights) inverted for n̂, and the families'
//!   bootstrap interval with its lower end floored at the smallest size (the rule before the
//!   calibrated answer);
//! - **new**: [`analyse_curve`] with the calibration from the truncated curves of the study's
//!   models (only what the truncated pilot had).
//!
//! Printed per analysis: cases, share answered with a number, median |ln(n̂/n_meas)| and share
//! within 25% over the answered cases, share of cases with a bounded interval and coverage of
//! those intervals, share of statements that hold (a one-sided bound that holds counts), and
//! share said to be beyond support. Run with `cargo bench --bench hindsight`.

use closure_budget::curves::isotonic::{isotonic_means, measured_n_star};
use closure_budget::curves::{self, Direction, Family, FitScale, Inversion, SkillGrid};
use closure_budget::study::analysis::{analyse_curve, calibrate, CurveContext, CurveSettings};
use closure_budget::study::results::EstimateStatus;
use closure_budget::study::{load_plan, run_study, RunOptions};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

const STUDIES: [&str; 3] = ["lorenz63", "lorenz96", "two-scale"];
const LEVEL: f64 = 0.9;
const DRAWS: usize = 100;

/// One method's outcome on one case.
#[derive(Clone, Copy)]
struct Outcome {
    n: Option<f64>,
    bounded: bool,
    covered: Option<bool>,
    holds: Option<bool>,
    beyond: bool,
}

#[derive(Default)]
struct Tally {
    cases: usize,
    answered: Vec<f64>,
    bounded: usize,
    bounded_covered: usize,
    stated: usize,
    held: usize,
    beyond: usize,
}

impl Tally {
    fn add(&mut self, o: Outcome, measured: f64) {
        self.cases += 1;
        if let Some(n) = o.n {
            self.answered.push((n / measured).ln().abs());
        }
        if o.bounded {
            self.bounded += 1;
            if o.covered == Some(true) {
                self.bounded_covered += 1;
            }
        }
        if let Some(h) = o.holds {
            self.stated += 1;
            self.held += h as usize;
        }
        self.beyond += o.beyond as usize;
    }

    fn line(&self, name: &str) -> String {
        let share = |a: usize, b: usize| {
            if b == 0 {
                "—".to_string()
            } else {
                format!("{:.0}%", 100.0 * a as f64 / b as f64)
            }
        };
        let mut e = self.answered.clone();
        e.sort_by(f64::total_cmp);
        let median = if e.is_empty() {
            "—".to_string()
        } else {
            let m = e.len();
            let v = if m % 2 == 1 {
                e[m / 2]
            } else {
                0.5 * (e[m / 2 - 1] + e[m / 2])
            };
            format!("{v:.3} (×{:.2})", v.exp())
        };
        let within = e.iter().filter(|v| **v <= 1.25f64.ln()).count();
        format!(
            "{name:>4}: cases {:>3} | answered {:>4} | median |ln(n̂/n)| {median:>14} | within 25% {:>4} | bounded {:>4}, covered {:>4} of them | statements held {:>4} of {:>3} | beyond support {:>4}",
            self.cases,
            share(e.len(), self.cases),
            share(within, e.len()),
            share(self.bounded, self.cases),
            share(self.bounded_covered, self.bounded),
            share(self.held, self.stated),
            self.stated,
            share(self.beyond, self.cases),
        )
    }
}

type Grids = BTreeMap<String, Vec<SkillGrid>>;

/// The study's skill grids per model (sizes ascending), its persistence floor and its targets.
fn points(root: &Path, study: &str) -> (Grids, Option<f64>, Vec<f64>) {
    let file = root.join("benches/hindsight").join(format!("{study}.toml"));
    let plan = load_plan(&file).expect("benchmark study validates");
    let out_dir = root.join("target/hindsight-bench").join(study);
    let t = std::time::Instant::now();
    let results = run_study(
        &plan,
        &RunOptions {
            out_dir,
            threads: None,
            progress: false,
            stop: None,
            adopt: false,
            drop_damaged: false,
        },
    )
    .expect("benchmark study runs");
    eprintln!(
        "{study}: points ready in {:.0} s ({} computed now)",
        t.elapsed().as_secs_f64(),
        results.document.points.map_or(0, |p| p.computed)
    );
    let records = results
        .forecasts
        .expect("a study has its forecasts")
        .records;
    let mut grids: BTreeMap<String, Vec<SkillGrid>> = BTreeMap::new();
    for model in &plan.models {
        let grid = plan
            .sizes
            .iter()
            .map(|&n| {
                let mut at: Vec<_> = records
                    .iter()
                    .filter(|r| r.model == model.name && r.n == n)
                    .collect();
                at.sort_by_key(|r| r.replicate);
                SkillGrid {
                    n: n as f64,
                    values: at
                        .iter()
                        .map(|r| r.initial_conditions.iter().map(|i| i.valid_time).collect())
                        .collect(),
                    censored: at
                        .iter()
                        .any(|r| r.initial_conditions.iter().any(|i| i.censored)),
                }
            })
            .collect();
        grids.insert(model.name.clone(), grid);
    }
    let floor = results.document.persistence.map(|p| p.mean);
    (grids, floor, plan.targets.clone())
}

/// The old rule: the selected family's crossing and the families' bootstrap interval (ends
/// `None` when unbounded).
fn old_analysis(grid: &[SkillGrid], levels: &[f64]) -> Vec<(Option<f64>, [Option<f64>; 2])> {
    let samples: Vec<_> = grid.iter().map(|g| g.replicate_means()).collect();
    let points = curves::summarise(&samples);
    let fits: Vec<_> = Family::ALL
        .iter()
        .filter_map(|&f| curves::fit_family_on(f, &points, FitScale::Linear).ok())
        .collect();
    if fits.is_empty() {
        return vec![(None, [None, None]); levels.len()];
    }
    let bt = curves::backtest(&samples, &Family::ALL, &fits, FitScale::Linear);
    let Some(selected) = bt
        .selected()
        .and_then(|f| fits.iter().find(|x| x.family == f))
    else {
        return vec![(None, [None, None]); levels.len()];
    };
    let smallest = points[0].n;
    let draws = curves::bootstrap_targets(grid, &bt.weights, &fits, levels, DRAWS, LEVEL, 11);
    levels
        .iter()
        .zip(draws)
        .map(|(&level, d)| {
            let n = match selected.invert(level) {
                Inversion::Reached { n } => Some(n),
                Inversion::Unreachable { .. } => None,
            };
            (n, [d.lower.map(|l| l.max(smallest)), d.upper])
        })
        .collect()
}

fn main() {
    let root = PathBuf::from(env!("CARGO_MANIFEST_DIR"));
    let mut old = BTreeMap::<usize, Tally>::new();
    let mut new = BTreeMap::<usize, Tally>::new();
    for study in STUDIES {
        let (grids, floor, targets) = points(&root, study);
        for fraction in [4usize, 8] {
            let truncated: Vec<(String, Vec<SkillGrid>)> = grids
                .iter()
                .map(|(name, g)| {
                    let cut = g.last().map_or(0.0, |x| x.n) / fraction as f64;
                    let kept = g.iter().filter(|x| x.n <= cut * (1.0 + 1e-9)).count();
                    (name.clone(), g[..kept].to_vec())
                })
                .collect();
            let usable: Vec<(&str, &[SkillGrid])> = truncated
                .iter()
                .filter(|(_, g)| g.len() >= 4)
                .map(|(n, g)| (n.as_str(), g.as_slice()))
                .collect();
            let calibration = calibrate(&usable, FitScale::Linear, Direction::Increasing, LEVEL);
            eprintln!(
                "{study} at 1/{fraction}: {} hindsight pairs ({} finite), support {:?}",
                calibration.pairs.len(),
                calibration.finite,
                calibration.support
            );
            for (name, head) in &truncated {
                let full = &grids[name];
                if head.len() < 3 {
                    continue;
                }
                let summary = |g: &[SkillGrid]| {
                    curves::summarise(&g.iter().map(|x| x.replicate_means()).collect::<Vec<_>>())
                };
                let full_points = summary(full);
                let head_points = summary(head);
                let top = |p: &[curves::CurvePoint]| {
                    isotonic_means(p, Direction::Increasing)
                        .into_iter()
                        .fold(f64::NEG_INFINITY, f64::max)
                };
                let (t_top, f_top) = (top(&head_points), top(&full_points));
                let mut levels: Vec<f64> = Vec::new();
                levels.extend(targets.iter().copied());
                levels.extend((1..=4).map(|i| t_top + (f_top - t_top) * i as f64 / 5.0));
                let cases: Vec<(f64, f64)> = levels
                    .into_iter()
                    .filter(|&l| l > t_top && floor.is_none_or(|f| l > f))
                    .filter_map(|l| {
                        measured_n_star(&full_points, l, Direction::Increasing).map(|m| (l, m))
                    })
                    .filter(|&(_, m)| m > head_points.last().map_or(0.0, |p| p.n))
                    .collect();
                if cases.is_empty() {
                    continue;
                }
                let ls: Vec<f64> = cases.iter().map(|c| c.0).collect();
                let olds = old_analysis(head, &ls);
                let a = analyse_curve(
                    head,
                    &ls,
                    &CurveSettings {
                        scale: FitScale::Linear,
                        draws: DRAWS,
                        level: LEVEL,
                        trust_factor: 1e6,
                        seed: 11,
                        direction: Direction::Increasing,
                    },
                    None,
                    &CurveContext {
                        calibration: &calibration,
                        floor,
                    },
                );
                for (i, &(_, measured)) in cases.iter().enumerate() {
                    let (n, [lo, hi]) = olds[i];
                    let inside =
                        lo.is_none_or(|l| measured >= l) && hi.is_none_or(|h| measured <= h);
                    let stated = lo.is_some() || hi.is_some();
                    old.entry(fraction).or_default().add(
                        Outcome {
                            n,
                            bounded: lo.is_some() && hi.is_some(),
                            covered: stated.then_some(inside),
                            holds: stated.then_some(inside),
                            beyond: false,
                        },
                        measured,
                    );
                    let e = &a.estimates[i];
                    let [lo, hi] = e.samples_interval;
                    let bounded = lo.is_some() && hi.is_some() && !e.upper_beyond_data;
                    new.entry(fraction).or_default().add(
                        Outcome {
                            n: e.samples,
                            bounded,
                            covered: e.holds_for(measured),
                            holds: e.holds_for(measured),
                            beyond: e.status == EstimateStatus::BeyondSupport,
                        },
                        measured,
                    );
                }
            }
        }
    }
    for fraction in [4usize, 8] {
        println!("pilot stopped at 1/{fraction} of the largest size ({STUDIES:?}):");
        println!("{}", old.entry(fraction).or_default().line("old"));
        println!("{}", new.entry(fraction).or_default().line("new"));
    }
}
