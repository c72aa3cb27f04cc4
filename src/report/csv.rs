//! `skill.csv`: every skill measurement of a study, one row per (model, replicate, subset size,
//! test initial condition), plus the persistence floor. Column meanings are in the
//! [module docs of `report`](super).

use crate::skill::IcSkill;
use crate::study::records::SkillRecord;
use crate::study::results::ForecastSkill;

/// The header of `skill.csv`, in column order.
pub const HEADER: [&str; 10] = [
    "model",
    "replicate",
    "n",
    "initial_condition",
    "valid_time",
    "valid_lyapunov_times",
    "censored",
    "blew_up",
    "ridge_penalty",
    "training_rmse",
];

/// Model name used for the persistence rows.
pub const PERSISTENCE: &str = "persistence";
/// Model name used for the climatology rows.
pub const CLIMATOLOGY: &str = "climatology";

/// One row before formatting; `None` prints as an empty field.
struct Row<'a> {
    model: &'a str,
    replicate: Option<usize>,
    n: Option<usize>,
    ic: usize,
    skill: IcSkill,
    ridge_penalty: Option<f64>,
    training_rmse: Option<f64>,
}

fn rows_of_record(r: &SkillRecord) -> impl Iterator<Item = Row<'_>> {
    r.initial_conditions
        .iter()
        .enumerate()
        .map(move |(ic, s)| Row {
            model: &r.model,
            replicate: Some(r.replicate),
            n: Some(r.n),
            ic,
            skill: *s,
            ridge_penalty: r.fit.ridge_penalty,
            training_rmse: r.fit.training_rmse,
        })
}

/// Shortest decimal that reads back to the same `f64` (deterministic); empty for `None`.
fn float(x: Option<f64>) -> String {
    x.map(|v| format!("{v}")).unwrap_or_default()
}

fn count(x: Option<usize>) -> String {
    x.map(|v| v.to_string()).unwrap_or_default()
}

/// `skill.csv` as bytes, with `valid_lyapunov_times` from the document's largest Lyapunov
/// exponent when it has one. Rows are sorted by model, n, replicate and initial condition; the
/// persistence rows (empty `replicate` and `n`) sort under the model name `persistence`.
pub fn skill_csv(forecasts: &ForecastSkill, lyapunov: Option<f64>) -> Vec<u8> {
    let mut rows: Vec<Row<'_>> = forecasts.records.iter().flat_map(rows_of_record).collect();
    rows.extend(forecasts.persistence.iter().enumerate().map(|(ic, s)| Row {
        model: PERSISTENCE,
        replicate: None,
        n: None,
        ic,
        skill: *s,
        ridge_penalty: None,
        training_rmse: None,
    }));
    rows.extend(forecasts.climatology.iter().enumerate().map(|(ic, s)| Row {
        model: CLIMATOLOGY,
        replicate: None,
        n: None,
        ic,
        skill: *s,
        ridge_penalty: None,
        training_rmse: None,
    }));
    rows.sort_by(|a, b| (a.model, a.n, a.replicate, a.ic).cmp(&(b.model, b.n, b.replicate, b.ic)));

    let mut w = ::csv::Writer::from_writer(Vec::new());
    w.write_record(HEADER).expect("writing to memory");
    for r in &rows {
        w.write_record([
            r.model.to_string(),
            count(r.replicate),
            count(r.n),
            r.ic.to_string(),
            float(Some(r.skill.valid_time)),
            float(lyapunov.map(|l| r.skill.valid_time * l)),
            r.skill.censored.to_string(),
            r.skill.blew_up.to_string(),
            float(r.ridge_penalty),
            float(r.training_rmse),
        ])
        .expect("writing to memory");
    }
    w.into_inner().expect("flushing to memory")
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixtures::fixture;

    #[test]
    fn header_row_count_and_order() {
        let results = fixture();
        let forecasts = results.forecasts.as_ref().unwrap();
        let lyapunov = results.document.skill.as_ref().unwrap().lyapunov_exponent;
        let bytes = skill_csv(forecasts, lyapunov);
        let mut reader = ::csv::Reader::from_reader(bytes.as_slice());
        let header: Vec<String> = reader.headers().unwrap().iter().map(String::from).collect();
        assert_eq!(header, HEADER);
        let rows: Vec<::csv::StringRecord> = reader.records().map(Result::unwrap).collect();
        let expected: usize = forecasts
            .records
            .iter()
            .map(|r| r.initial_conditions.len())
            .sum::<usize>()
            + forecasts.persistence.len()
            + forecasts.climatology.len();
        assert_eq!(rows.len(), expected);

        let key = |r: &::csv::StringRecord| {
            let num = |s: &str| s.parse::<usize>().ok();
            (
                r[0].to_string(),
                num(&r[2]),
                num(&r[1]),
                num(&r[3]).unwrap(),
            )
        };
        let keys: Vec<_> = rows.iter().map(key).collect();
        assert!(keys.windows(2).all(|w| w[0] < w[1]), "sorted and unique");

        let persistence: Vec<_> = rows.iter().filter(|r| &r[0] == PERSISTENCE).collect();
        assert_eq!(persistence.len(), forecasts.persistence.len());
        assert!(persistence
            .iter()
            .all(|r| r[1].is_empty() && r[2].is_empty()));
        // The fixture sets a Lyapunov exponent of 0.5.
        let first = &rows[0];
        let vt: f64 = first[4].parse().unwrap();
        let lt: f64 = first[5].parse().unwrap();
        assert_eq!(lt, vt * 0.5);
    }
}
