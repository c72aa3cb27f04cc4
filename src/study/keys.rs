//! Content-hash keys of skill records: a record is reused by a later run exactly when
//! everything that determines it is unchanged.
//!
//! A point's key is the SHA-256 of a canonical text naming: the results version
//! ([`RESULTS_VERSION`]), the model's specification (family, settings, use) and seed, the
//! subset the model is standardised on when that is not its own subset, the subset size n, the
//! content of the n training samples actually used (and their coupling terms for closures), the
//! held-out test data with the skill definition, and for closures the coarse solver and the
//! checks run on it. The study file's name, the thread count and the other sizes do not enter:
//! they do not change the record.

use super::plan::{ClosurePlan, ModelKind, ModelPlan, ModelUse};
use super::train::Coupling;
use crate::data::Split;
use crate::skill::SkillSpec;
use ndarray::ArrayView2;
use sha2::{Digest, Sha256};

/// Version of the computations behind a record. Raise it when a change alters any record's
/// values (a model's arithmetic, the skill definition, the split); changes that leave records
/// bit-for-bit equal keep it, so their results stay reusable.
pub const RESULTS_VERSION: u32 = 1;

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
    let rows = ndarray::s![split.held_out.clone(), ..];
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
            split.initial_conditions,
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

/// Whether a model's fit at size n also depends on the smallest size of the study: the nested
/// ridge families standardise their inputs on the smallest subset, which every larger one
/// contains. Other families fit each size on its own prefix alone.
pub fn standardised_on_smallest(model: &ModelPlan) -> bool {
    matches!(
        (&model.kind, model.usage),
        (ModelKind::Esn(_), _)
            | (
                ModelKind::Ngrc(_) | ModelKind::Polynomial(_),
                ModelUse::Emulator
            )
    )
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
    /// Closures: the coarse solver and the checks.
    pub closure: Option<(Coupling, &'a ClosurePlan)>,
}

/// The key of one point.
pub fn point_key(p: &PointIdentity) -> String {
    let standardisation = if standardised_on_smallest(p.model) {
        format!("first {} samples", p.smallest)
    } else {
        "own subset".into()
    };
    let closure = match &p.closure {
        Some((c, plan)) => format!(
            "forcing {:?}, coarse dt {:?}, sample interval {:?}, free runs {} over {:?}",
            c.forcing, c.coarse_dt, c.sample_interval, plan.free_runs, plan.free_run_horizon
        ),
        None => "none".into(),
    };
    let model = match &p.model.kind {
        ModelKind::Command(c) => format!("the user's command\n{}", c.identity()),
        kind => format!("{kind:?}"),
    };
    let text = format!(
        "closure-budget point, results version {RESULTS_VERSION}\nmodel {model}\nuse {:?}\nseed {}\n\
         standardised on {standardisation}\nn {}\ntraining data {}\ntest {}\ncoarse solver {closure}\n",
        p.model.usage, p.seed, p.n, p.data, p.test
    );
    hex(&Sha256::digest(text.as_bytes()))
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::Array2;

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
