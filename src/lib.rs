//! closure-budget: plan how much high-fidelity simulation (DNS or resolved LES) a machine-learned
//! closure or emulator needs to reach a target forecast skill, and what that costs.
//!
//! Data flow: study file → [`study`] plan → [`data`] (simulated by [`systems`] or read from files)
//! → [`models`] trained on nested subsets → [`skill`] over many test initial conditions →
//! [`curves`] fitted and inverted → [`cost`] of the campaign → [`report`]. [`slurm`] writes a
//! script that runs a study as a Slurm array of shards and merges them.

pub mod atomic;
pub mod cli;
pub mod cost;
pub mod curves;
pub mod data;
pub mod models;
pub mod report;
pub mod skill;
pub mod slurm;
pub mod study;
pub mod systems;
