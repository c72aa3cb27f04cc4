//! What a checked plan will do, in words (the `check` command).

use super::{DataSource, StudyPlan, TransferGoal};

/// A plain-text description of what a plan will do (for `check`).
pub fn describe(plan: &StudyPlan) -> String {
    use std::fmt::Write;
    let mut s = String::new();
    let _ = writeln!(s, "study '{}' is valid: {}", plan.name, plan.title);
    match &plan.data {
        DataSource::Simulate {
            system,
            dt,
            sample_interval,
            training_pool,
            seed,
            ..
        } => {
            let params: Vec<String> = system
                .parameters()
                .iter()
                .map(|(k, v)| format!("{k}={v}"))
                .collect();
            let _ = writeln!(
                s,
                "data: simulate {} ({}), dt {dt}, sample interval {sample_interval}, training pool {training_pool} samples, seed {seed}",
                system.label(),
                params.join(" ")
            );
        }
        DataSource::File {
            fields: Some(f), ..
        } => {
            let _ = writeln!(s, "{}", crate::study::own_data::describe(f));
        }
        DataSource::File { path, .. } => {
            let _ = writeln!(s, "data: file {}", path.display());
        }
    }
    let t = &plan.timing;
    let _ = writeln!(
        s,
        "test: {} initial conditions, gap {}, spacing {}, warm-up {}, max lead {}, threshold {}",
        t.initial_conditions, t.gap, t.spacing, t.warm_up, t.max_lead, t.threshold
    );
    let _ = writeln!(
        s,
        "sizes: {:?} × {} replicates",
        plan.sizes, plan.replicates
    );
    for m in &plan.models {
        let _ = writeln!(s, "model {}: {}", m.name, m.kind.describe());
    }
    let _ = writeln!(s, "targets (mean valid time): {:?}", plan.targets);
    if let Some(tp) = &plan.transfer {
        let names: Vec<&str> = tp
            .models
            .iter()
            .map(|&i| plan.models[i].name.as_str())
            .collect();
        let data = match &tp.data {
            DataSource::Simulate { system, .. } => {
                let params: Vec<String> = system
                    .parameters()
                    .iter()
                    .map(|(k, v)| format!("{k}={v}"))
                    .collect();
                format!("simulated {} {}", system.label(), params.join(" "))
            }
            DataSource::File { path, .. } => format!("file {}", path.display()),
        };
        let goal = match &tp.goal {
            TransferGoal::Absolute(v) => format!("targets (mean valid time) {v:?}"),
            TransferGoal::FractionOfBase(v) => {
                format!("targets {v:?} × each base model's own skill")
            }
        };
        let _ = writeln!(
            s,
            "new regime: {data}; fine-tuning sizes {:?} × {} replicates; {goal}; models {}",
            tp.sizes,
            tp.replicates,
            names.join(", ")
        );
    }
    s.push_str(&plan.work.describe());
    s
}
