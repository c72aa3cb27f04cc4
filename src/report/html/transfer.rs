//! Transfer to a new regime: the answer per goal, the zero-shot gap, both learning curves over the
//! fine-tuning size, and samples and cost saved per model and target.

use super::cells::{
    capitalised, close_curve_caption, confidence, data_description, data_source, interval,
    persistence_floor, samples_cell, status_badge, status_cell,
};
use crate::report::format::{escape, opt, percent, samples, sig3, thousands};
use crate::report::svg;
use crate::report::{best_transfer, saving_estimates};
use crate::study::results::{
    EstimateStatus, PlanDocument, TargetEstimate, TransferModel, TransferResult, TransferSaving,
};
use std::fmt::Write;

/// Device-hours label of the new regime's campaign ("core-hours" without one).
fn transfer_hours(t: &TransferResult) -> &'static str {
    t.campaign
        .as_ref()
        .map_or("core-hours", |c| c.device.hours_label())
}

/// The target of goal `i` in words: "2.50 time units", with its share of the base skill when
/// the goal is a fraction of it.
fn transfer_goal(t: &TransferResult, i: usize, target: f64) -> String {
    match t
        .goal_values
        .get(i)
        .filter(|_| t.goal == "fraction-of-base")
    {
        Some(f) => format!(
            "{} time units ({} of its skill in its own regime)",
            sig3(target),
            percent(*f)
        ),
        None => format!("{} time units", sig3(target)),
    }
}

/// Why a curve gives no budget for a target, in words.
fn no_budget_reason(curve: &str, e: Option<&TargetEstimate>, status: EstimateStatus) -> String {
    match status {
        EstimateStatus::Unreachable => {
            let mut s = format!("even the {curve} curve saturates below the target");
            if let Some(a) = e.and_then(|e| e.asymptote) {
                let _ = write!(s, " (fitted asymptote {} time units)", sig3(a));
            }
            s
        }
        EstimateStatus::NoFit => format!("no curve could be fitted to the {curve} skill"),
        other => format!("the {curve} estimate is {}", other.label()),
    }
}

/// The answer for goal `i`: what fine-tuning the best-transferring model needs and saves, or
/// why no model reaches the goal by fine-tuning.
fn transfer_lead(doc: &PlanDocument, t: &TransferResult, i: usize) -> String {
    let hours = transfer_hours(t);
    let Some((m, s)) = best_transfer(t, i) else {
        let mut reasons = Vec::new();
        let mut goal = None;
        for m in &t.models {
            let Some(s) = m.savings.get(i) else { continue };
            goal.get_or_insert_with(|| transfer_goal(t, i, s.target));
            let (ft, _) = saving_estimates(m, s);
            reasons.push(format!(
                "with <strong>{}</strong>, {}",
                escape(&m.name),
                no_budget_reason("fine-tuned", ft, s.fine_tuned_status)
            ));
        }
        return format!(
            "No model reaches {} in the new regime by fine-tuning: {}.",
            goal.unwrap_or_default(),
            reasons.join("; ")
        );
    };
    let (ft, scratch) = saving_estimates(m, s);
    let n = s.fine_tuned_samples.or_else(|| ft.and_then(|e| e.samples));
    let range = ft.map_or_else(String::new, |e| e.samples_range(samples));
    let mut lead = format!(
        "With <strong>{}</strong>, fine-tuning needs about <strong>{} samples</strong> ({} {}) \
         of the new regime to reach {}",
        escape(&m.name),
        opt(n, samples),
        confidence(doc),
        range,
        transfer_goal(t, i, s.target)
    );
    match s.fine_tuned_status {
        EstimateStatus::ReachedInData => {
            lead.push_str(" (a measured fine-tuning size already reaches it)")
        }
        EstimateStatus::Extrapolated => {
            let _ = write!(
                lead,
                " (extrapolated to {}× the largest fine-tuning size measured)",
                ft.and_then(|e| e.extrapolation)
                    .map(sig3)
                    .unwrap_or_else(|| "?".into())
            );
        }
        _ => {}
    }
    let [clo, chi] = s.core_hours_saved_interval;
    let [slo, shi] = s.samples_saved_interval;
    match (s.core_hours_saved, s.samples_saved) {
        (Some(y), _) if y >= 0.0 => {
            let _ = write!(
                lead,
                ", saving <strong>{} {hours}</strong> ({}) against training from scratch.",
                sig3(y),
                interval(clo, chi, sig3)
            );
        }
        (Some(y), _) => {
            let _ = write!(
                lead,
                ", costing <strong>{} {hours} more</strong> than training from scratch (saving \
                 {}).",
                sig3(-y),
                interval(clo, chi, sig3)
            );
        }
        (None, Some(d)) => {
            let _ = write!(
                lead,
                ", {} <strong>{} samples</strong> ({}) against training from scratch; the new \
                 regime has no cost model to put this in {hours}.",
                if d >= 0.0 {
                    "saving"
                } else {
                    "needing more by"
                },
                samples(d.abs()),
                interval(slo, shi, samples)
            );
        }
        (None, None) if !s.scratch_status.has_budget() => {
            let _ = write!(
                lead,
                "; training from scratch does not reach it: {}.",
                no_budget_reason("from-scratch", scratch, s.scratch_status)
            );
        }
        (None, None) if !s.note.is_empty() => {
            let _ = write!(lead, "; {}.", escape(&s.note));
        }
        (None, None) => lead.push_str("; the saving against training from scratch is unknown."),
    }
    lead
}

/// A fine-tuning size k* with its interval and status badge, or the status alone when it
/// gives no budget.
fn k_cell(doc: &PlanDocument, e: Option<&TargetEstimate>, status: EstimateStatus) -> String {
    match e {
        Some(e) if e.status.has_budget() => {
            format!("{}{}", samples_cell(doc, e, "k*"), status_badge(e.status))
        }
        Some(e) => status_cell(crate::report::quantity::Quantity::of(doc), e),
        None => status_badge(status),
    }
}

/// A saving with its conservative interval, or "—" when there is none.
fn saved_cell(
    value: Option<f64>,
    [lo, hi]: [Option<f64>; 2],
    f: fn(f64) -> String,
    unit: &str,
) -> String {
    let Some(v) = value else {
        return "—".into();
    };
    format!(
        "<span class=\"big\">{}</span>{unit}<span class=\"sub\">conservative interval {}</span>",
        f(v),
        interval(lo, hi, f)
    )
}

fn transfer_row(doc: &PlanDocument, m: &TransferModel, s: &TransferSaving) -> String {
    let (ft, scratch) = saving_estimates(m, s);
    format!(
        "<tr><td>{}</td><td>{} time units</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
         <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>\n",
        escape(&m.name),
        sig3(s.target),
        k_cell(doc, ft, s.fine_tuned_status),
        k_cell(doc, scratch, s.scratch_status),
        saved_cell(
            s.samples_saved,
            s.samples_saved_interval,
            samples,
            " samples"
        ),
        saved_cell(s.core_hours_saved, s.core_hours_saved_interval, sig3, ""),
        escape(&s.note),
    )
}

/// Transfer to a new regime: the answer per goal, the new regime's data and floor, the
/// zero-shot gap, both learning curves over the fine-tuning size, k* and savings per model and
/// target, and a caution.
pub(super) fn transfer(out: &mut String, doc: &PlanDocument) {
    let Some(t) = &doc.transfer else {
        return;
    };
    let hours = transfer_hours(t);
    out.push_str("<section id=\"transfer\">\n<h2>Transfer to a new regime</h2>\n");
    let goals = t.models.iter().map(|m| m.savings.len()).max().unwrap_or(0);
    if goals == 0 {
        out.push_str("<p>No targets were estimated in the new regime.</p>\n");
    }
    for i in 0..goals {
        let _ = writeln!(out, "<p class=\"lede\">{}</p>", transfer_lead(doc, t, i));
    }
    let d = &t.data;
    let _ = writeln!(
        out,
        "<p class=\"muted\">New regime: {} — {} samples, {} test initial conditions. Fine-tuning \
         sizes k: {}; {} replicate{}; settings <code class=\"hash\">{}</code>. Savings are in the \
         new regime's cost model{}.</p>",
        data_description(d),
        thousands(d.samples as f64),
        thousands(d.test_initial_conditions as f64),
        t.sizes
            .iter()
            .map(|k| thousands(*k as f64))
            .collect::<Vec<_>>()
            .join(", "),
        t.replicates,
        if t.replicates == 1 { "" } else { "s" },
        escape(&t.fine_tune.to_string()),
        if t.cost.is_some() || t.campaign.is_some() {
            ""
        } else {
            " (none was given: savings are in samples only)"
        },
    );
    persistence_floor(out, "Floor in the new regime", &t.persistence);

    out.push_str(
        "<h3>Zero-shot: each base model in the new regime</h3>\n<p>The base model, trained on \
         pilot data, forecasts the new regime's test initial conditions without retraining; the \
         gap is the skill it loses to the change of regime.</p>\n<table>\n<thead><tr>\
         <th>Model</th><th class=\"num\">Base trained on</th>\
         <th class=\"num\">Skill in its own regime</th>\
         <th class=\"num\">Zero-shot in the new regime</th><th class=\"num\">Gap</th></tr>\
         </thead>\n<tbody>\n",
    );
    for m in &t.models {
        let reps: Vec<String> = m.zero_shot_replicates.iter().map(|v| sig3(*v)).collect();
        let _ = writeln!(
            out,
            "<tr><td>{} <span class=\"muted\">({})</span></td><td class=\"num\">{} samples</td>\
             <td class=\"num\">{} time units</td><td class=\"num\">{} time units<span \
             class=\"sub\">replicates: {}</span></td><td class=\"num\"><span class=\"big\">{}\
             </span> time units<span class=\"sub\">{} of its own-regime skill</span></td></tr>",
            escape(&m.name),
            escape(&m.kind),
            thousands(m.base_samples as f64),
            sig3(m.base_skill),
            sig3(m.zero_shot),
            reps.join(", "),
            sig3(m.gap),
            percent(m.gap / m.base_skill),
        );
    }
    out.push_str("</tbody>\n</table>\n");

    for m in &t.models {
        let _ = write!(
            out,
            "<h3>{}: from scratch against fine-tuned</h3>\n<figure>\n{}\n<figcaption>Mean valid \
             prediction time in the new regime against the number k of new-regime samples (log \
             scale). Purple: trained on the first k samples only; blue: the base model (trained \
             on {} pilot samples) fine-tuned with them. Large markers: mean over {} replicates \
             with ± one standard error; small markers: each replicate's mean; bars: 10–90% of \
             single forecasts, from scratch left of each size and fine-tuned right; lines: each \
             curve's selected family.",
            escape(&m.name),
            svg::transfer_curves(t, m),
            thousands(m.base_samples as f64),
            t.replicates,
        );
        let censored = m
            .scratch
            .points
            .iter()
            .chain(&m.fine_tuned.points)
            .any(|p| p.censored_share > 0.0);
        close_curve_caption(out, censored, svg::transfer_x_range(m));
    }

    let _ = write!(
        out,
        "<h3>Samples and cost per model and target</h3>\n<p>k*: new-regime samples needed to \
         reach each target, fine-tuned from the base and trained from scratch, with {} bootstrap \
         intervals. The saving is k*(scratch) − k*(fine-tuned); its interval is conservative \
         (scratch's lower end minus fine-tuned's upper end, and the reverse). Also written as \
         <code>tables/transfer.md</code>, <code>.tex</code> and <code>.csv</code>.</p>\n\
         <table>\n<thead><tr><th>Model</th><th>Target valid time</th>\
         <th class=\"num\">Fine-tuned k*</th><th class=\"num\">From scratch k*</th>\
         <th class=\"num\">Samples saved</th><th class=\"num\">{} saved</th><th>Note</th></tr>\
         </thead>\n<tbody>\n",
        confidence(doc),
        capitalised(hours),
    );
    for m in &t.models {
        for s in &m.savings {
            out.push_str(&transfer_row(doc, m, s));
        }
    }
    out.push_str("</tbody>\n</table>\n");
    let _ = writeln!(
        out,
        "<p><strong>Caution.</strong> These transfer estimates hold for this pair of regimes \
         ({} → {}) and this fine-tuning protocol (sizes, replicates and settings above); another \
         regime or protocol can transfer better or worse. Before relying on a saving, validate \
         it with a small pilot in the new regime: fine-tune at a size near k* and measure the \
         skill.</p>\n</section>",
        data_source(doc),
        data_description(d),
    );
}
