//! The readers of user and store files meet damaged input: 10,000 seeded mutations of valid
//! files each (flipped and lost bytes, cuts, repeated and dropped lines, extreme and malformed
//! cells), and none may panic; what a reader accepts must be well formed.

mod common;
use closure_budget::study::history;
use closure_budget::study::records::{read_records, repair, RECORDS_FILE};
use common::mutate::mutants;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::Path;

const MUTANTS: usize = 10_000;

/// Runs `check` on every mutant, collecting panics (with the input that caused the first).
fn no_panics(name: &str, inputs: &[Vec<u8>], mut check: impl FnMut(&[u8])) {
    let mut panics = 0;
    let mut first = None;
    for input in inputs {
        if catch_unwind(AssertUnwindSafe(|| check(input))).is_err() {
            panics += 1;
            first.get_or_insert_with(|| String::from_utf8_lossy(input).into_owned());
        }
    }
    assert_eq!(
        panics, 0,
        "{name}: {panics} panics; first input:\n{first:?}"
    );
}

fn lorenz_csv(rows: usize) -> Vec<u8> {
    let mut s = String::from("x,y,z\n");
    let (mut x, mut y, mut z) = (1.0f64, 1.0f64, 1.0f64);
    for _ in 0..rows {
        let (dx, dy, dz) = (10.0 * (y - x), x * (28.0 - z) - y, x * y - 8.0 / 3.0 * z);
        x += 0.01 * dx;
        y += 0.01 * dy;
        z += 0.01 * dz;
        s.push_str(&format!("{x},{y},{z}\n"));
    }
    s.into_bytes()
}

#[test]
fn data_csv_reader_survives_mutations() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("d.csv");
    let inputs = mutants(&[lorenz_csv(12), lorenz_csv(3)], MUTANTS, 11);
    let mut accepted = 0;
    no_panics("csv", &inputs, |bytes| {
        std::fs::write(&path, bytes).unwrap();
        if let Ok(t) = closure_budget::data::read_trajectory(&path, Some(0.01)) {
            accepted += 1;
            assert!(t.values.iter().all(|v| v.is_finite()));
            assert_eq!(t.values.ncols(), t.meta.variables.len());
            let names: std::collections::HashSet<&String> = t.meta.variables.iter().collect();
            assert_eq!(names.len(), t.meta.variables.len(), "distinct names");
            // A header row of numbers alone is a sample, not names: refused.
            assert!(!t.meta.variables.iter().all(|v| v.parse::<f64>().is_ok()));
        }
    });
    assert!(accepted > 100 && accepted < MUTANTS, "{accepted}");
}

#[test]
fn npy_reader_survives_mutations() {
    let dir = tempfile::tempdir().unwrap();
    let good = dir.path().join("good.npy");
    let a = ndarray::Array2::from_shape_fn((6, 3), |(i, j)| (i * 3 + j) as f64 * 0.5);
    closure_budget::data::write_npy(&good, &a).unwrap();
    let seed = std::fs::read(&good).unwrap();
    let path = dir.path().join("m.npy");
    let inputs = mutants(&[seed], MUTANTS, 12);
    no_panics("npy", &inputs, |bytes| {
        std::fs::write(&path, bytes).unwrap();
        if let Ok(b) = closure_budget::data::read_npy::<ndarray::Ix2>(&path, "samples × variables")
        {
            assert!(b.len() * 8 <= bytes.len(), "no more values than bytes");
        }
    });
}

#[test]
fn skill_csv_reader_survives_mutations() {
    let mut text = String::from("model,n,replicate,skill\n");
    for n in [100, 200, 400, 800] {
        for r in 0..2 {
            text.push_str(&format!(
                "esn,{n},seed{r},{}\n",
                0.1 * (n as f64).ln() + 0.01 * r as f64
            ));
        }
    }
    let path = Path::new("skill.csv");
    let inputs = mutants(&[text.into_bytes()], MUTANTS, 13);
    let mut accepted = 0;
    no_panics("skill csv", &inputs, |bytes| {
        if let Ok(grids) = closure_budget::study::measured::parse_measured(path, bytes) {
            accepted += 1;
            for g in grids.values().flatten() {
                assert!(g.n >= 1.0 && g.n.is_finite());
                assert!(g.values.iter().flatten().all(
                    |v| v.is_finite() && v.abs() <= closure_budget::study::measured::MAX_SKILL
                ));
            }
        }
    });
    assert!(accepted > 100 && accepted < MUTANTS, "{accepted}");
}

/// A store of three records written by a real run's format.
fn store_seed() -> Vec<u8> {
    let line = r#"{"key":"K","model":"esn","replicate":0,"n":N,"seed":1,"window-start":0,"fit":{"n":N,"training-pairs":9,"ridge-penalty":null,"training-rmse":null,"ridge-selection":null},"initial-conditions":[{"valid-time":0.5,"censored":false,"blew-up":false}],"summary":SUMMARY,"cost":{"train-seconds":0.1,"forecast-seconds-per-step":0.001}}"#;
    let summary = serde_json::to_string(&closure_budget::skill::summarise(&[
        closure_budget::skill::IcSkill {
            valid_time: 0.5,
            censored: false,
            blew_up: false,
        },
    ]))
    .unwrap();
    let mut out = Vec::new();
    for (k, n) in [("a", 10), ("b", 20), ("c", 40)] {
        let l = line
            .replace("\"K\"", &format!("\"{k}\""))
            .replace("N", &n.to_string())
            .replace("SUMMARY", &summary);
        out.extend_from_slice(l.as_bytes());
        out.push(b'\n');
    }
    out
}

#[test]
fn records_store_reader_and_repair_survive_mutations() {
    let dir = tempfile::tempdir().unwrap();
    let seed = store_seed();
    let path = dir.path().join(RECORDS_FILE);
    std::fs::write(&path, &seed).unwrap();
    assert_eq!(
        read_records(&path).unwrap().len(),
        3,
        "the seed is a valid store"
    );
    let inputs = mutants(&[seed], MUTANTS, 14);
    let mut seen = 0;
    let mut repaired = 0;
    no_panics("records", &inputs, |bytes| {
        std::fs::write(&path, bytes).unwrap();
        let read = read_records(&path);
        // Every hundredth mutant is also repaired: afterwards the store reads cleanly and holds
        // every record that was intact.
        seen += 1;
        if seen % 100 == 0 {
            repaired += 1;
            let r = repair(&path).unwrap();
            let after = read_records(&path).unwrap();
            assert_eq!(after.len(), r.kept);
            if let Ok(before) = read {
                assert_eq!(before, after);
            }
        }
    });
    assert_eq!(repaired, inputs.len() / 100);
}

#[test]
fn history_reader_survives_mutations() {
    let dir = tempfile::tempdir().unwrap();
    let entry = closure_budget::study::results::HistoryEntry {
        finished: "2026-12-02T00:00:00Z".into(),
        tool_version: "0".into(),
        study_sha256: "s".into(),
        data_sha256: "d".into(),
        samples: 10,
        training_pool: 5,
        largest_size: 4,
        points: Default::default(),
        estimates: vec![],
    };
    for _ in 0..3 {
        history::append(dir.path(), &entry).unwrap();
    }
    let path = dir.path().join(history::HISTORY_FILE);
    let seed = std::fs::read(&path).unwrap();
    let inputs = mutants(&[seed], MUTANTS, 15);
    no_panics("history", &inputs, |bytes| {
        std::fs::write(&path, bytes).unwrap();
        let read = history::read(&path).unwrap();
        assert!(read.len() <= bytes.iter().filter(|&&b| b == b'\n').count() + 1);
    });
    // Appending after damage keeps the new entry readable.
    let all = history::append(dir.path(), &entry).unwrap();
    assert_eq!(history::read(&path).unwrap().last(), all.last());
}

/// The study-file reader and its checks meet 10,000 mutations of the quick demo's study (and of
/// the demo's): none may panic, and a mutant `load_plan` accepts is a plan `run` could start —
/// sizes ascending, positive and within the pool, at least one model and one target.
#[test]
fn study_file_reader_survives_mutations() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("study.toml");
    let seeds = ["studies/demo-quick.toml", "studies/demo.toml"]
        .map(|f| std::fs::read(Path::new(env!("CARGO_MANIFEST_DIR")).join(f)).unwrap());
    let inputs = mutants(&seeds, MUTANTS, 17);
    let mut accepted = 0;
    no_panics("study", &inputs, |bytes| {
        std::fs::write(&path, bytes).unwrap();
        if let Ok(plan) = closure_budget::study::load_plan(&path) {
            accepted += 1;
            assert!(!plan.sizes.is_empty() && plan.sizes[0] > 0);
            assert!(
                plan.sizes.windows(2).all(|w| w[0] < w[1]),
                "{:?}",
                plan.sizes
            );
            assert!(!plan.models.is_empty() && !plan.targets.is_empty());
            assert!(plan.targets.iter().all(|t| t.is_finite()));
        }
    });
    // The mutations keep some files valid (e.g. changes inside comments or the description).
    assert!(accepted > 0, "no mutant was accepted");
}
