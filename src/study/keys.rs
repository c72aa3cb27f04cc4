//! Content-hash keys of skill records: a record is reused by a later run exactly when
//! everything that determines it is unchanged.
//!
//! A point's key is the SHA-256 of a canonical JSON document ([`point_identity`]: sorted keys,
//! no white space) naming: the results version
//! ([`RESULTS_VERSION`]), the model's family and the identity its family gives (its settings
//! as serialised for `budget.json`, plus the content of the files a command names), its use and
//! seed, the subset the model is standardised on when that is not its own subset, the subset
//! size n, the content of the n training samples actually used (and their coupling terms for
//! closures), the held-out test data with the skill definition, and for closures the coarse
//! solver and the checks run on it. The study file's name, the thread count and the other sizes
//! do not enter: they do not change the record. Nor do the names of the settings' Rust types
//! and fields: only the documented names of the study file's keys.

use super::plan::{ClosurePlan, ModelPlan, ModelUse};
use crate::data::Split;
use crate::models::closure::Coupling;
use crate::skill::SkillSpec;
use ndarray::ArrayView2;
use sha2::{Digest, Sha256};

/// Version of the computations behind a record and of the key document ([`point_identity`]).
/// Raise it when a change alters any record's values (a model's arithmetic, the skill
/// definition, the split) or what enters a key and how it is written: every stored point then
/// becomes stale once. Changes that leave records and keys bit-for-bit equal keep it, so their
/// results stay reusable. Version 2: keys hash a canonical JSON document of the settings
/// instead of a text of Rust type and field names.
pub const RESULTS_VERSION: u32 = 2;

/// Hex SHA-256 of the rows `start .. start + n` of `a` (and of `b`, when given) for every n of
/// `sizes` (ascending), in one pass.
pub fn prefix_hashes(
    a: ArrayView2<f64>,
    b: Option<ArrayView2<f64>>,
    start: usize,
    sizes: &[usize],
) -> Vec<String> {
    let mut h = Sha256::new();
    h.update((a.ncols() as u64).to_le_bytes());
    if let Some(b) = b {
        h.update((b.ncols() as u64).to_le_bytes());
    }
    let mut out = Vec::with_capacity(sizes.len());
    let mut row = start;
    let mut bytes = Vec::new();
    for &n in sizes {
        while row < start + n {
            bytes.clear();
            for v in a.row(row) {
                bytes.extend_from_slice(&v.to_le_bytes());
            }
            if let Some(b) = b {
                for v in b.row(row) {
                    bytes.extend_from_slice(&v.to_le_bytes());
                }
            }
            h.update(&bytes);
            row += 1;
        }
        out.push(hex(&h.clone().finalize()));
    }
    out
}

/// Hex SHA-256 of the held-out test data (truth of the held-out region, with the coupling term
/// when given), the initial conditions and the skill definition.
pub fn test_hash(
    values: ArrayView2<f64>,
    subgrid: Option<ArrayView2<f64>>,
    split: &Split,
    skill: &SkillSpec,
) -> String {
    region_hash(
        values,
        subgrid,
        split.held_out.clone(),
        &split.initial_conditions,
        skill,
    )
}

/// Hex SHA-256 of the validation data (truth of the validation region, its initial conditions
/// and the skill definition), for the points of models tuned by forecasts from them; `None`
/// when the split has no validation initial conditions.
pub fn validation_hash(
    values: ArrayView2<f64>,
    split: &Split,
    skill: &SkillSpec,
) -> Option<String> {
    (!split.validation_conditions.is_empty()).then(|| {
        region_hash(
            values,
            None,
            split.validation.clone(),
            &split.validation_conditions,
            skill,
        )
    })
}

/// Hex SHA-256 of the truth in `region` (with the coupling term when given), its initial
/// conditions `ics` and the skill definition.
fn region_hash(
    values: ArrayView2<f64>,
    subgrid: Option<ArrayView2<f64>>,
    region: std::ops::Range<usize>,
    ics: &[usize],
    skill: &SkillSpec,
) -> String {
    let rows = ndarray::s![region, ..];
    let mut h = Sha256::new();
    h.update(crate::data::hash_array(values.slice(rows)).as_bytes());
    if let Some(u) = subgrid {
        h.update(crate::data::hash_array(u.slice(rows)).as_bytes());
    }
    if let Some(r) = &skill.unresolved {
        // Skill on a reconstructed field: the truth's unresolved energy and the field size.
        h.update(format!("unresolved over {:?} values\n", r.field_dim).as_bytes());
        r.energy.iter().for_each(|e| h.update(e.to_le_bytes()));
    }
    h.update(
        format!(
            "ics {:?}\nthreshold {:?}\nwarm-up {}\nmax-lead {}\nsample-interval {:?}\nmean {:?}\nsigma {:?}\n",
            ics,
            skill.threshold,
            skill.warm_up,
            skill.max_lead,
            skill.sample_interval,
            skill.mean,
            skill.sigma
        )
        .as_bytes(),
    );
    hex(&h.finalize())
}

/// Whether a model's fit at size n also depends on the smallest size of the study, for its use
/// (see [`crate::models::family::ModelFamily::standardised_on_smallest`]).
pub fn standardised_on_smallest(model: &ModelPlan) -> bool {
    model
        .kind
        .standardised_on_smallest(model.usage.is_closure())
}

/// What a point's key is made of.
pub struct PointIdentity<'a> {
    pub model: &'a ModelPlan,
    pub seed: u64,
    /// The study's smallest size.
    pub smallest: usize,
    pub n: usize,
    /// [`prefix_hashes`] of the training samples used.
    pub data: &'a str,
    /// [`test_hash`].
    pub test: &'a str,
    /// [`validation_hash`], for a model tuned by forecasts from the validation initial
    /// conditions (`None` otherwise: the key then has no `validation` entry at all, so the keys
    /// of other models do not change).
    pub validation: Option<&'a str>,
    /// Closures: the coarse solver and the checks.
    pub closure: Option<(Coupling, &'a ClosurePlan)>,
}

/// The document a point's key hashes, before canonical serialisation.
pub fn point_identity(p: &PointIdentity) -> serde_json::Value {
    let standardised_on = if standardised_on_smallest(p.model) {
        serde_json::json!(p.smallest)
    } else {
        serde_json::Value::Null
    };
    let model_use = match p.model.usage {
        ModelUse::Emulator => serde_json::json!({ "role": "emulator" }),
        ModelUse::Closure(inputs) => serde_json::json!({ "role": "closure", "inputs": inputs }),
    };
    let closure = p.closure.map(|(c, plan)| {
        serde_json::json!({
            "forcing": c.forcing,
            "coarse-dt": c.coarse_dt,
            "sample-interval": c.sample_interval,
            "free-runs": plan.free_runs,
            "free-run-horizon": plan.free_run_horizon,
        })
    });
    let mut identity = serde_json::json!({
        "results-version": RESULTS_VERSION,
        "family": p.model.kind.key(),
        "model": p.model.kind.identity(),
        "use": model_use,
        "seed": p.seed,
        "standardised-on-first-samples": standardised_on,
        "n": p.n,
        "training-data": p.data,
        "test": p.test,
        "coarse-solver": closure,
    });
    if let Some(v) = p.validation {
        identity["validation"] = serde_json::json!(v);
    }
    identity
}

/// The key of one point: hex SHA-256 of the canonical JSON of [`point_identity`].
pub fn point_key(p: &PointIdentity) -> String {
    document_key(&point_identity(p))
}

/// Hex SHA-256 of the canonical JSON of `doc` ([`canonical_json`]): the key of whatever `doc`
/// names in full.
pub fn document_key(doc: &serde_json::Value) -> String {
    let mut text = String::new();
    canonical_json(doc, &mut text);
    hex_sha256(text.as_bytes())
}

/// Hex SHA-256 of `bytes`.
pub fn hex_sha256(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

/// Writes `v` as JSON with every object's keys in sorted order and no white space, whatever
/// order the value holds them in: the same document always gives the same text. Numbers are
/// written by serde_json (shortest text that reads back to the same value).
pub fn canonical_json(v: &serde_json::Value, out: &mut String) {
    match v {
        serde_json::Value::Object(map) => {
            let mut entries: Vec<(&String, &serde_json::Value)> = map.iter().collect();
            entries.sort_by(|a, b| a.0.cmp(b.0));
            out.push('{');
            for (i, (k, value)) in entries.into_iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                out.push_str(&serde_json::Value::String(k.clone()).to_string());
                out.push(':');
                canonical_json(value, out);
            }
            out.push('}');
        }
        serde_json::Value::Array(items) => {
            out.push('[');
            for (i, item) in items.iter().enumerate() {
                if i > 0 {
                    out.push(',');
                }
                canonical_json(item, out);
            }
            out.push(']');
        }
        scalar => out.push_str(&scalar.to_string()),
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::study::plan::ModelKind;
    use ndarray::Array2;

    fn model(key: &str, table: &str, usage: ModelUse) -> ModelPlan {
        ModelPlan {
            name: "m".into(),
            kind: ModelKind::build(
                key,
                toml::from_str(table).unwrap(),
                std::path::Path::new("."),
            )
            .unwrap(),
            usage,
        }
    }

    fn key_of(model: &ModelPlan, n: usize) -> String {
        point_key(&PointIdentity {
            model,
            seed: 7,
            smallest: 100,
            n,
            data: "d",
            test: "t",
            validation: None,
            closure: None,
        })
    }

    /// Canonical JSON sorts keys at every depth and writes no white space, whatever order the
    /// document was built in.
    #[test]
    fn canonical_json_sorts_keys_at_every_depth() {
        let a: serde_json::Value =
            serde_json::from_str(r#"{"b": [1, {"y": 2.5, "x": null}], "a": "s"}"#).unwrap();
        let b: serde_json::Value =
            serde_json::from_str(r#"{"a": "s", "b": [1, {"x": null, "y": 2.5}]}"#).unwrap();
        let (mut ta, mut tb) = (String::new(), String::new());
        canonical_json(&a, &mut ta);
        canonical_json(&b, &mut tb);
        assert_eq!(ta, r#"{"a":"s","b":[1,{"x":null,"y":2.5}]}"#);
        assert_eq!(ta, tb);
    }

    /// The model part of a key is the family's key and its settings as written to `budget.json`:
    /// the default written out or left implicit gives the same key; any setting, the family,
    /// the use, the size or the seed changes it; the document of a fixed point is pinned, so a
    /// change to what enters a key shows here (raise [`RESULTS_VERSION`] with it).
    #[test]
    fn keys_follow_the_settings_not_how_they_are_written() {
        let esn = model("esn", "reservoir-size = 60", ModelUse::Emulator);
        let explicit = model("esn", "reservoir-size = 60\ndegree = 6", ModelUse::Emulator);
        assert_eq!(key_of(&esn, 200), key_of(&explicit, 200));
        let other = model("esn", "reservoir-size = 61", ModelUse::Emulator);
        assert_ne!(key_of(&esn, 200), key_of(&other, 200));
        assert_ne!(key_of(&esn, 200), key_of(&esn, 400));
        let closure = model(
            "esn",
            "reservoir-size = 60",
            ModelUse::Closure(crate::models::closure::ClosureInputs::Global),
        );
        assert_ne!(key_of(&esn, 200), key_of(&closure, 200));
        let identity = point_identity(&PointIdentity {
            model: &esn,
            seed: 7,
            smallest: 100,
            n: 200,
            data: "d",
            test: "t",
            validation: None,
            closure: None,
        });
        assert_eq!(identity["family"], "esn");
        assert_eq!(identity["model"], esn.kind.settings());
        assert_eq!(identity["standardised-on-first-samples"], 100);
        assert_eq!(identity["results-version"], RESULTS_VERSION);
        let poly = model("polynomial", "degree = 2", ModelUse::Emulator);
        let poly_identity = point_identity(&PointIdentity {
            model: &poly,
            seed: 7,
            smallest: 100,
            n: 200,
            data: "d",
            test: "t",
            validation: None,
            closure: None,
        });
        assert!(poly_identity["standardised-on-first-samples"].is_null());
        let mut text = String::new();
        canonical_json(&identity, &mut text);
        assert_eq!(
            text,
            format!(
                r#"{{"coarse-solver":null,"family":"esn","model":{},"n":200,"results-version":{RESULTS_VERSION},"seed":7,"standardised-on-first-samples":100,"test":"t","training-data":"d","use":{{"role":"emulator"}}}}"#,
                {
                    let mut m = String::new();
                    canonical_json(&esn.kind.settings(), &mut m);
                    m
                }
            )
        );
    }

    /// A model tuned by forecasts keys its points by the validation data too; for every other
    /// model the key document has no `validation` entry, so its keys are those it had before
    /// validation conditions existed. The validation hash follows the validation region only.
    #[test]
    fn validation_data_enter_the_keys_of_tuned_models_only() {
        let esn = model("esn", "reservoir-size = 60", ModelUse::Emulator);
        let identity = |validation: Option<&str>| {
            point_identity(&PointIdentity {
                model: &esn,
                seed: 7,
                smallest: 100,
                n: 200,
                data: "d",
                test: "t",
                validation,
                closure: None,
            })
        };
        assert!(identity(None).get("validation").is_none());
        assert_eq!(identity(Some("v"))["validation"], "v");
        assert_ne!(
            document_key(&identity(Some("v"))),
            document_key(&identity(Some("w")))
        );
        let spec = crate::data::SplitSpec {
            initial_conditions: 2,
            gap: 5,
            spacing: 4,
            warm_up: 3,
            max_lead: 5,
            validation_conditions: 2,
        };
        let values = Array2::from_shape_fn((120, 2), |(i, j)| ((i * 7 + j) % 11) as f64);
        let split = Split::new(120, spec, 40).unwrap();
        let skill = SkillSpec {
            threshold: 0.5,
            warm_up: 3,
            max_lead: 5,
            sample_interval: 0.1,
            mean: vec![0.0; 2],
            sigma: vec![1.0; 2],
            unresolved: None,
        };
        let v = validation_hash(values.view(), &split, &skill).unwrap();
        let mut edited = values.clone();
        edited[[split.pool.start + 3, 0]] = -9.0; // the pool: not validation data
        assert_eq!(validation_hash(edited.view(), &split, &skill).unwrap(), v);
        edited[[split.validation_conditions[1], 1]] = -9.0;
        assert_ne!(validation_hash(edited.view(), &split, &skill).unwrap(), v);
        assert_ne!(v, test_hash(values.view(), None, &split, &skill));
        let plain = Split::new(
            120,
            crate::data::SplitSpec {
                validation_conditions: 0,
                ..spec
            },
            40,
        )
        .unwrap();
        assert!(validation_hash(values.view(), &plain, &skill).is_none());
    }

    #[test]
    fn prefix_hashes_depend_on_the_prefix_only() {
        let a = Array2::from_shape_fn((50, 3), |(i, j)| (i * 3 + j) as f64);
        let mut b = a.clone();
        b[[40, 1]] = -1.0; // beyond the 30-sample prefix
        let ha = prefix_hashes(a.view(), None, 5, &[10, 30]);
        let hb = prefix_hashes(b.view(), None, 5, &[30]);
        assert_eq!(ha[1], hb[0]);
        b[[20, 0]] = -1.0; // inside it
        assert_ne!(ha[1], prefix_hashes(b.view(), None, 5, &[30])[0]);
        // Another start is other data.
        assert_ne!(ha[0], prefix_hashes(a.view(), None, 6, &[10])[0]);
    }
}
