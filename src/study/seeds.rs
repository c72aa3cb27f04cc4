//! Seeds of a study's random parts, derived from the study seed so that every model, replicate
//! and curve draws from its own stream whatever the order in which they run.

use sha2::{Digest, Sha256};

/// Seed of a model's random parts, derived from the study seed, model name and replicate.
pub fn derive_seed(study_seed: u64, model: &str, replicate: usize) -> u64 {
    let mut h = Sha256::new();
    h.update(study_seed.to_le_bytes());
    h.update(model.as_bytes());
    h.update((replicate as u64).to_le_bytes());
    let d = h.finalize();
    u64::from_le_bytes(d[..8].try_into().expect("8 bytes"))
}
