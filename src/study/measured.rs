//! Skill measured by the user's own training code: rows `model,n,replicate,skill` read from
//! CSV and analysed exactly like a study's records (families, backtest, bootstrap, inversion),
//! so the planner serves models it cannot train itself.
//!
//! CSV format: a header row naming at least the columns `model`, `n`, `replicate` and `skill`
//! (any order; other columns are ignored); one row per measurement. `n` is the training-set
//! size in samples (a whole number ≥ 1); `replicate` is a label (e.g. a seed); `skill` is the
//! measured value of the metric: larger is better, or, with [`MeasuredOptions::direction`]
//! decreasing, smaller is better (an error or a loss; n* is then where the metric first falls
//! to the target). Several rows with the same model, n and replicate are treated as separate
//! evaluations of one trained model. One value per size (a single replicate) has no replicate
//! spread: the curves are then ordinary least-squares fits with the residual variance.

use super::analysis::{
    analyse_curve, calibrate, curve_warnings, CurveContext, CurveSettings, SetbackWords,
};
use super::results::{ModelResult, PlanDocument, PointResult, StudyInfo, Timings, PLAN_SCHEMA};
use super::seeds::derive_seed;
use crate::curves::{CurvePoint, Direction, SkillGrid};
use crate::data::hash_bytes;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

/// Errors in a file of measured skill.
#[derive(Debug, thiserror::Error)]
pub enum MeasuredError {
    #[error("cannot read {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("{path}, line {line}: {reason}")]
    Line {
        path: PathBuf,
        line: u64,
        reason: String,
    },
    #[error("{path}: the header lacks the column '{column}'; required columns: model, n, replicate, skill")]
    MissingColumn { path: PathBuf, column: &'static str },
    #[error("{path} has no measurements (only a header, or nothing)")]
    Empty { path: PathBuf },
    #[error("{path}: model '{model}' has skill at {sizes} training-set size(s); a learning curve needs at least 3 distinct sizes")]
    TooFewSizes {
        path: PathBuf,
        model: String,
        sizes: usize,
    },
    #[error("{path}: every skill value of model '{model}' equals {value}; a learning curve needs skill that changes with n")]
    Constant {
        path: PathBuf,
        model: String,
        value: f64,
    },
    #[error("invalid setting: {0}")]
    Setting(String),
}

/// Settings of a fit of measured skill.
#[derive(Debug, Clone)]
pub struct MeasuredOptions {
    pub targets: Vec<f64>,
    /// Scale of the curve-fit residuals.
    pub scale: crate::curves::FitScale,
    pub draws: usize,
    pub confidence: f64,
    pub trust_factor: f64,
    pub seed: u64,
    /// Higher is better (skill) or lower is better (an error or a loss).
    pub direction: Direction,
}

/// How the warnings about values that move against the chosen direction speak of them.
const SETBACKS: SetbackWords = SetbackWords {
    noun: "value",
    causes: "check those measurements, and whether higher or lower is better for this metric (--lower-is-better)",
};

/// Largest skill magnitude accepted: the fits sum squares of skill over thousands of rows and
/// bootstrap draws, which must stay far from overflow (f64 overflows near 1.8e308).
pub const MAX_SKILL: f64 = 1e100;

/// Parses a measured-skill CSV (`bytes`, read from `path`) into one size grid per model (sizes
/// ascending, replicates in label order).
pub fn parse_measured(
    path: &Path,
    bytes: &[u8],
) -> Result<BTreeMap<String, Vec<SkillGrid>>, MeasuredError> {
    let line_err = |line: u64, reason: String| MeasuredError::Line {
        path: path.to_path_buf(),
        line,
        reason,
    };
    if bytes.iter().all(u8::is_ascii_whitespace) {
        return Err(MeasuredError::Empty {
            path: path.to_path_buf(),
        });
    }
    let mut rdr = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .flexible(false)
        .from_reader(bytes);
    let header = rdr
        .headers()
        .map_err(|e| line_err(1, e.to_string()))?
        .clone();
    let mut seen = std::collections::BTreeSet::new();
    for h in header.iter() {
        if !h.is_empty() && !seen.insert(h.to_ascii_lowercase()) {
            return Err(line_err(
                1,
                format!("the header names the column '{h}' twice; give every column its own name"),
            ));
        }
    }
    let col = |name: &'static str| {
        header
            .iter()
            .position(|h| h.eq_ignore_ascii_case(name))
            .ok_or(MeasuredError::MissingColumn {
                path: path.to_path_buf(),
                column: name,
            })
    };
    let (cm, cn, cr, cs) = (col("model")?, col("n")?, col("replicate")?, col("skill")?);
    // model → n → replicate → values
    type Cells = BTreeMap<String, BTreeMap<u64, BTreeMap<String, Vec<f64>>>>;
    let mut cells: Cells = BTreeMap::new();
    let mut rows = 0usize;
    for record in rdr.records() {
        let record = record.map_err(|e| {
            let line = e.position().map(|p| p.line()).unwrap_or(0);
            line_err(
                line,
                format!("{e}; every row needs one cell per header column"),
            )
        })?;
        let line = record.position().map(|p| p.line()).unwrap_or(0);
        let model = record[cm].to_string();
        if model.is_empty() {
            return Err(line_err(line, "the model name is empty".into()));
        }
        let n_text = &record[cn];
        let n: f64 = n_text
            .parse()
            .map_err(|_| line_err(line, format!("n = '{n_text}' is not a number")))?;
        if !(n.is_finite() && n >= 1.0 && n.fract() == 0.0 && n <= 1e15) {
            return Err(line_err(
                line,
                format!("n = {n_text} is not a whole number of samples of at least 1"),
            ));
        }
        let s_text = &record[cs];
        let skill: f64 = s_text
            .parse()
            .map_err(|_| line_err(line, format!("skill = '{s_text}' is not a number")))?;
        if !skill.is_finite() {
            return Err(line_err(
                line,
                format!("skill = {s_text} is not finite; give a finite number"),
            ));
        }
        if skill.abs() > MAX_SKILL {
            return Err(line_err(
                line,
                format!(
                    "skill = {s_text} is too large to fit: allowed magnitudes are up to {MAX_SKILL:e} (sums of squares must stay finite); check this row"
                ),
            ));
        }
        cells
            .entry(model)
            .or_default()
            .entry(n as u64)
            .or_default()
            .entry(record[cr].to_string())
            .or_default()
            .push(skill);
        rows += 1;
    }
    if rows == 0 {
        return Err(MeasuredError::Empty {
            path: path.to_path_buf(),
        });
    }
    let mut out = BTreeMap::new();
    for (model, by_n) in cells {
        if by_n.len() < 3 {
            return Err(MeasuredError::TooFewSizes {
                path: path.to_path_buf(),
                model,
                sizes: by_n.len(),
            });
        }
        let first = *by_n
            .values()
            .next()
            .and_then(|r| r.values().next())
            .and_then(|v| v.first())
            .expect("non-empty");
        if by_n
            .values()
            .flat_map(|r| r.values().flatten())
            .all(|v| *v == first)
        {
            return Err(MeasuredError::Constant {
                path: path.to_path_buf(),
                model,
                value: first,
            });
        }
        let grid = by_n
            .into_iter()
            .map(|(n, reps)| SkillGrid {
                n: n as f64,
                values: reps.into_values().collect(),
                censored: false,
            })
            .collect();
        out.insert(model, grid);
    }
    Ok(out)
}

/// Reads, fits and inverts measured skill; the result has no data, skill, persistence or cost
/// sections.
pub fn fit_measured(path: &Path, options: &MeasuredOptions) -> Result<PlanDocument, MeasuredError> {
    let started = std::time::Instant::now();
    if options.targets.is_empty() || options.targets.iter().any(|t| !t.is_finite()) {
        return Err(MeasuredError::Setting(
            "give at least one finite --target".into(),
        ));
    }
    if !(options.confidence > 0.5 && options.confidence < 1.0) {
        return Err(MeasuredError::Setting(format!(
            "--confidence {} must be between 0.5 and 1",
            options.confidence
        )));
    }
    if !(options.trust_factor.is_finite() && options.trust_factor >= 1.0) {
        return Err(MeasuredError::Setting(format!(
            "--trust-factor {} must be at least 1",
            options.trust_factor
        )));
    }
    if !(20..=100_000).contains(&options.draws) {
        return Err(MeasuredError::Setting(format!(
            "--draws {} must be 20 to 100000",
            options.draws
        )));
    }
    let bytes = std::fs::read(path).map_err(|source| MeasuredError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let grids = parse_measured(path, &bytes)?;
    let mut targets = options.targets.clone();
    targets.sort_by(f64::total_cmp);
    targets.dedup();
    let mut warnings = Vec::new();
    let mut sizes: Vec<usize> = Vec::new();
    let mut replicates = 0;
    let mut models = Vec::new();
    let named: Vec<(&str, &[SkillGrid])> = grids
        .iter()
        .map(|(name, grid)| (name.as_str(), grid.as_slice()))
        .collect();
    let calibration = calibrate(&named, options.scale, options.direction, options.confidence);
    for (name, grid) in &grids {
        let seed = derive_seed(options.seed, name, usize::MAX);
        let mut curve = analyse_curve(
            grid,
            &targets,
            &CurveSettings {
                scale: options.scale,
                draws: options.draws,
                level: options.confidence,
                trust_factor: options.trust_factor,
                seed,
                direction: options.direction,
            },
            None,
            &CurveContext {
                calibration: &calibration,
                floor: None,
            },
        );
        let points = grid
            .iter()
            .zip(&curve.standard_errors)
            .map(|(g, se)| {
                let means = g.replicate_means().replicate_values;
                let mut all: Vec<f64> = g.values.iter().flatten().copied().collect();
                all.sort_by(f64::total_cmp);
                PointResult {
                    n: g.n as usize,
                    mean: means.iter().sum::<f64>() / means.len() as f64,
                    replicate_means: means,
                    standard_error: *se,
                    q10: crate::skill::quantile(&all, 0.1),
                    q90: crate::skill::quantile(&all, 0.9),
                    censored_share: 0.0,
                    blow_up_share: 0.0,
                    ridge_penalty: None,
                    validation_valid_time: None,
                    training_rmse: None,
                    train_seconds: 0.0,
                    forecast_seconds_per_step: 0.0,
                    closure: None,
                }
            })
            .collect();
        for g in grid {
            sizes.push(g.n as usize);
            replicates = replicates.max(g.values.len());
        }
        let wrong_way = wrong_way(name, grid, options.direction);
        if wrong_way.is_some() {
            // The whole curve runs the other way: one warning says so, not one per step.
            curve.setbacks.clear();
        }
        curve_warnings(name, &curve, &SETBACKS, &mut warnings);
        warnings.extend(wrong_way);
        models.push(ModelResult {
            name: name.clone(),
            kind: "measured outside the tool".into(),
            role: "emulator".into(),
            closure_inputs: None,
            settings: serde_json::Value::Null,
            points,
            fits: curve.fits,
            selected: curve.selected,
            backtest: curve.backtest,
            estimates: curve.estimates,
            hindsight: Vec::new(),
        });
    }
    sizes.sort_unstable();
    sizes.dedup();
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    let fitting = started.elapsed().as_secs_f64();
    Ok(PlanDocument {
        transfer: None,
        calibration: Some(calibration),
        schema: PLAN_SCHEMA.into(),
        tool_version: env!("CARGO_PKG_VERSION").into(),
        study: StudyInfo {
            name: stem.clone(),
            title: format!(
                "Learning curves of a measured metric ({}): {stem}",
                options.direction.better()
            ),
            description: String::new(),
            file: path.display().to_string(),
            file_sha256: hash_bytes(&bytes),
            seed: options.seed,
            sizes,
            replicates,
            targets,
            confidence: options.confidence,
            bootstrap_draws: options.draws,
            trust_factor: options.trust_factor,
            fit_scale: options.scale,
            direction: options.direction,
        },
        data: None,
        skill: None,
        persistence: None,
        climatology: None,
        models,
        cost: None,
        campaign: None,
        warnings,
        points: None,
        timings: Timings {
            fitting,
            total: fitting,
            threads: 1,
            ..Timings::default()
        },
    })
}

/// A warning when a model's values go the other way with n than `direction` says is better:
/// the mean at the largest size is worse than at the smallest by more than twice their combined
/// standard error (by any amount without replicate spread), which usually means the flag that
/// says whether lower is better is missing or wrong.
fn wrong_way(name: &str, grid: &[SkillGrid], direction: Direction) -> Option<String> {
    let points: Vec<CurvePoint> =
        crate::curves::summarise(&grid.iter().map(|g| g.replicate_means()).collect::<Vec<_>>());
    let (first, last) = (points.first()?, points.last()?);
    let sign = direction.sign();
    let noise = (first.standard_error.powi(2) + last.standard_error.powi(2)).sqrt();
    (sign * first.mean - sign * last.mean > 2.0 * noise).then(|| {
        let (moves, flag) = match direction {
            Direction::Increasing => ("fall", "give --lower-is-better"),
            Direction::Decreasing => ("rise", "leave out --lower-is-better"),
        };
        format!(
            "{name}: the measured values {moves} with n (from {:.4} at {} samples to {:.4} at {}), yet the fit takes {}; if the other way is better for this metric, {flag}",
            first.mean,
            first.n,
            last.mean,
            last.n,
            direction.better()
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<BTreeMap<String, Vec<SkillGrid>>, MeasuredError> {
        parse_measured(Path::new("m.csv"), text.as_bytes())
    }

    #[test]
    fn groups_by_model_size_and_replicate_and_ignores_extra_columns() {
        let g = parse(
            "note,skill,n,model,replicate\n\
             x,1.0,100,a,s1\nx,1.2,100,a,s2\nx,1.5,200,a,s1\nx,1.6,200,a,s1\nx,1.9,400,a,s1\n",
        )
        .unwrap();
        let a = &g["a"];
        assert_eq!(a.len(), 3);
        assert_eq!(a[0].n, 100.0);
        assert_eq!(a[0].values, vec![vec![1.0], vec![1.2]]);
        assert_eq!(a[1].values, vec![vec![1.5, 1.6]]);
    }

    #[test]
    fn bad_input_gets_a_clear_error() {
        let cases = [
            ("", "no measurements"),
            ("model,n,replicate,skill\n", "no measurements"),
            ("model,n,skill\na,1,2\n", "lacks the column 'replicate'"),
            (
                "model,n,replicate,skill\na,100,1,0.5\na,100,2,0.6\n",
                "1 training-set size(s)",
            ),
            (
                "model,n,replicate,skill\na,100,1,0.5\na,200,1,0.5\na,400,1,0.5\n",
                "equals 0.5",
            ),
            (
                "model,n,replicate,skill\na,-100,1,0.5\n",
                "line 2: n = -100 is not a whole number",
            ),
            (
                "model,n,replicate,skill\na,100,1,fast\n",
                "line 2: skill = 'fast' is not a number",
            ),
            (
                "model,n,replicate,skill\na,100,1,NaN\n",
                "line 2: skill = NaN is not finite",
            ),
            ("model,n,replicate,skill\na,100,1\n", "line 2"),
        ];
        for (text, expected) in cases {
            let e = parse(text).unwrap_err().to_string();
            assert!(e.contains(expected) && e.contains("m.csv"), "{text:?}: {e}");
        }
    }
}
