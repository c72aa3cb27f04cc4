//! Plain text for the terminal: the answer (printed after `run` and `fit`) and the breakdown of
//! a stand-alone cost question (printed by `cost`).

use super::format::{bytes, grid_points, number, percent, samples, sig3, thousands};
use super::verdict::{picks, ratio_words, Answer};
use crate::cost::CostReport;
use crate::study::results::{EstimateStatus, PlanDocument, TargetEstimate, TransferResult};
use std::fmt::Write;

/// "low–high", "low–unbounded", "up to high" or "unbounded", as in the HTML report.
fn range(lo: Option<f64>, hi: Option<f64>, f: &dyn Fn(f64) -> String) -> String {
    match (lo, hi) {
        (Some(l), Some(h)) => format!("{}–{}", f(l), f(h)),
        (Some(l), None) => format!("{}–unbounded", f(l)),
        (None, Some(h)) => format!("up to {}", f(h)),
        (None, None) => "unbounded".into(),
    }
}

/// The answer as plain text for the terminal: first, per target, the recommended model (the
/// cheapest answering with a number) with n* and core-hours and their intervals; then per model
/// and target, samples, simulated time, core-hours and storage with intervals; then, for a new
/// regime, the zero-shot gap and per
/// model and target k* fine-tuned and from scratch and the saving; then warnings.
pub fn text_summary(doc: &PlanDocument) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "{}", doc.study.title);
    if let Some(p) = &doc.persistence {
        let _ = writeln!(
            s,
            "persistence floor: mean valid time {} time units",
            sig3(p.mean)
        );
    }
    if let Some(c) = &doc.climatology {
        let _ = writeln!(
            s,
            "climatology floor: mean valid time {} time units",
            sig3(c.mean)
        );
    }
    if let Some(p) = &doc.points {
        let _ = writeln!(
            s,
            "points: {} planned, {} reused from the records store{}, {} computed{}{}",
            p.planned,
            p.reused,
            if p.from_shards > 0 {
                format!(" ({} merged from finished shard stores)", p.from_shards)
            } else {
                String::new()
            },
            p.computed,
            if p.stale > 0 {
                format!(" ({} stale: their data or settings changed)", p.stale)
            } else {
                String::new()
            },
            if p.kept > 0 {
                format!(
                    "; {} kept in the store though not planned (`closure-budget prune` removes them)",
                    p.kept
                )
            } else {
                String::new()
            }
        );
    }
    let level = (doc.study.confidence * 100.0).round();
    answer_block(&mut s, doc, level);
    for m in &doc.models {
        let selected = m.selected.map(|f| f.label()).unwrap_or("none");
        let _ = writeln!(s, "\nmodel {} ({}; curve: {selected})", m.name, m.kind);
        for e in &m.estimates {
            let _ = writeln!(
                s,
                "  target {:>6}: {}",
                sig3(e.target),
                answer_line(e, level)
            );
        }
    }
    if let Some(t) = &doc.transfer {
        transfer_summary(&mut s, t, level);
    }
    for w in &doc.warnings {
        let _ = writeln!(s, "warning: {w}");
    }
    s
}

/// Per target, the recommended model: "target 0.200 time units: esn-tiny, 3,070 samples (90%
/// 1,840–6,200), 212,000 core-hours (90% 175,000–306,000); next esn-b, 2.1× dearer".
fn answer_block(s: &mut String, doc: &PlanDocument, level: f64) {
    let unit = super::quantity::Quantity::of(doc).unit();
    let hours = doc
        .campaign
        .as_ref()
        .map_or("core-hours", |c| c.device.hours_label());
    let _ = writeln!(
        s,
        "\nanswer (per target, the cheapest model that reaches it with a number or an upper bound):"
    );
    for p in picks(doc) {
        let t = format!("  to reach {}{unit}: ", sig3(p.target));
        let Some((m, e, answer)) = p.choice else {
            let _ = writeln!(s, "{t}no model reaches it");
            continue;
        };
        let line = match answer {
            Answer::Number {
                samples: n,
                interval: [lo, hi],
            } => {
                let mut l = format!(
                    "{}, {} samples ({level}% {})",
                    m.name,
                    samples(n),
                    if e.upper_beyond_data {
                        e.samples_range(samples)
                    } else {
                        range(Some(lo), Some(hi), &samples)
                    }
                );
                if let Some(b) = &e.budget {
                    let _ = write!(
                        l,
                        ", {} {hours} ({level}% {})",
                        sig3(b.core_hours),
                        range(
                            e.budget_low.map(|b| b.core_hours),
                            e.budget_high.map(|b| b.core_hours),
                            &sig3
                        )
                    );
                }
                let _ = write!(l, "; {}", e.status.label());
                if let Some((r, ratio)) = p.runner_up {
                    let _ = write!(l, "; next {}, {}", r.name, ratio_words(ratio));
                }
                l
            }
            Answer::Bound {
                at_most: Some(n), ..
            } => format!(
                "{}, n* ≤ {} samples (reached at the smallest measured size; fewer may do)",
                m.name,
                samples(n)
            ),
            Answer::Bound { at_least, .. } => format!(
                "no model gives a number; best bound {}, n* ≥ {} samples ({})",
                m.name,
                at_least.map(samples).unwrap_or_else(|| "?".into()),
                e.status.label()
            ),
            Answer::NotAnswerable => "not answerable".into(),
            Answer::NoTraining => "no training needed (at or below the persistence floor)".into(),
        };
        let _ = writeln!(s, "{t}{line}");
    }
}

/// One target's answer after its label: the status, n* with its interval or the bound the
/// status gives, the simulated time, core-hours with their interval and storage when priced,
/// or the note.
fn answer_line(e: &TargetEstimate, level: f64) -> String {
    let hours = |b: &Option<crate::cost::Budget>| b.as_ref().map(|b| b.core_hours);
    match (e.status, &e.budget) {
        (status, Some(b)) if status.has_budget() => {
            let (lo, hi) = (hours(&e.budget_low), hours(&e.budget_high));
            let hours_range = match (lo, hi) {
                (Some(l), Some(h)) if e.upper_beyond_data => {
                    format!("{} to more than {}", sig3(l), sig3(h))
                }
                _ => range(lo, hi, &sig3),
            };
            format!(
                "{}: {} samples ({level}% {}), {} time units, {} core-hours ({}), {}",
                status.label(),
                samples(b.samples),
                e.samples_range(samples),
                sig3(b.simulated_time),
                hours_or_overflow(b.core_hours),
                hours_range,
                bytes(b.storage_bytes)
            )
        }
        (status, _) if status.has_budget() => format!(
            "{}: {} samples ({level}% {}); {}",
            status.label(),
            e.samples.map(samples).unwrap_or_default(),
            e.samples_range(samples),
            e.note
        ),
        (EstimateStatus::AtSmallestSize | EstimateStatus::BeyondSupport, _) => {
            let bound = match e.status {
                EstimateStatus::AtSmallestSize => {
                    hours(&e.budget_high).map(|h| format!(", at most {} core-hours", sig3(h)))
                }
                _ => hours(&e.budget_low).map(|h| format!(", more than {} core-hours", sig3(h))),
            };
            format!(
                "{}: {} samples{}; {}",
                e.status.label(),
                e.samples_range(samples),
                bound.unwrap_or_default(),
                e.note
            )
        }
        _ => format!("{}: {}", e.status.label(), e.note),
    }
}

/// One k*: "1,200 samples (90% 800–2,000)", with the status when it is not plainly reachable,
/// or the status alone when it gives no sample count.
fn k_star(e: Option<&TargetEstimate>, status: EstimateStatus, level: f64) -> String {
    match e.and_then(|e| e.samples.filter(|_| status.has_budget()).map(|n| (e, n))) {
        Some((e, n)) => {
            let mut k = format!(
                "{} samples ({level}% {})",
                samples(n),
                e.samples_range(samples)
            );
            if status != EstimateStatus::ReachedInData {
                let _ = write!(k, ", {}", status.label());
            }
            k
        }
        None => status.label().to_string(),
    }
}

/// The new-regime block: its data and floor, then per model the zero-shot gap and per target
/// k* fine-tuned and from scratch and what fine-tuning saves.
fn transfer_summary(s: &mut String, t: &TransferResult, level: f64) {
    let hours = t
        .campaign
        .as_ref()
        .map_or("core-hours", |c| c.device.hours_label());
    let d = &t.data;
    let params: Vec<String> = d
        .parameters
        .iter()
        .map(|(k, v)| format!("{k} = {}", number(*v)))
        .collect();
    let _ = writeln!(
        s,
        "\nnew regime: {}{}; {} samples, {} test initial conditions; persistence floor {} time units",
        d.system.as_deref().unwrap_or(&d.source),
        if params.is_empty() {
            String::new()
        } else {
            format!(" ({})", params.join(", "))
        },
        thousands(d.samples as f64),
        thousands(d.test_initial_conditions as f64),
        sig3(t.persistence.mean)
    );
    for m in &t.models {
        let _ = writeln!(
            s,
            "transfer {} ({}): zero-shot {} time units against {} in its own regime, gap {} ({})",
            m.name,
            m.kind,
            sig3(m.zero_shot),
            sig3(m.base_skill),
            sig3(m.gap),
            percent(m.gap / m.base_skill)
        );
        for saving in &m.savings {
            let (ft, scratch) = super::saving_estimates(m, saving);
            // A negative saving reads as the extra that fine-tuning needs.
            let saved = |v: f64, [lo, hi]: [Option<f64>; 2], f: &dyn Fn(f64) -> String, unit| {
                let span = range(lo, hi, f);
                if v >= 0.0 {
                    format!("saves {} {unit} ({span})", f(v))
                } else {
                    format!("needs {} {unit} more (saving {span})", f(-v))
                }
            };
            let saved = match (saving.core_hours_saved, saving.samples_saved) {
                (Some(h), _) => saved(h, saving.core_hours_saved_interval, &sig3, hours),
                (None, Some(n)) => saved(n, saving.samples_saved_interval, &samples, "samples"),
                (None, None) if !saving.note.is_empty() => saving.note.clone(),
                (None, None) => "saving unknown".to_string(),
            };
            let _ = writeln!(
                s,
                "  k* for {:>6}: fine-tuned {}; from scratch {}; {saved}",
                sig3(saving.target),
                k_star(ft, saving.fine_tuned_status, level),
                k_star(scratch, saving.scratch_status, level),
            );
        }
    }
}

/// The breakdown of a stand-alone cost question as plain text for the terminal.
/// Core-hours with three significant figures, or an overflow said as such (never a bare "—").
fn hours_or_overflow(x: f64) -> String {
    if x == f64::INFINITY {
        format!("overflow: the cost exceeds {:.1e}", f64::MAX)
    } else {
        sig3(x)
    }
}

pub fn cost_text(r: &CostReport) -> String {
    let c = &r.campaign;
    let b = &r.breakdown;
    let unit = c.device.hours_label();
    let mut s = String::new();
    let _ = writeln!(s, "Campaign for {} saved samples", thousands(r.samples));
    let _ = writeln!(s, "\nRate");
    let _ = writeln!(
        s,
        "  pilot rate        {} {unit} per model time unit",
        sig3(c.pilot_rate)
    );
    if let (Some(sc), Some(d)) = (&c.scaling, &r.scaling_description) {
        let _ = writeln!(
            s,
            "  scaled rate       {} {unit} per model time unit (Re {} → {}, rate × {})",
            sig3(c.rate),
            sig3(sc.pilot_reynolds),
            sig3(sc.target_reynolds),
            sig3(sc.rate_factor)
        );
        let _ = writeln!(s, "  law               {d}");
    }
    if let Some(n) = c.grid_points {
        let _ = writeln!(s, "  grid points       {}", grid_points(n));
    }
    let _ = writeln!(s, "\nShape");
    let _ = writeln!(s, "  runs              {}", b.runs);
    let steps = |x: Option<f64>| {
        x.map(|v| format!(" ({} solver steps)", sig3(v)))
            .unwrap_or_default()
    };
    let _ = writeln!(
        s,
        "  spin-up per run   {} time units{}",
        sig3(b.spin_up_per_run),
        steps(b.spin_up_steps_per_run)
    );
    let _ = writeln!(
        s,
        "  sampling per run  {} time units{}",
        sig3(b.sampling_time_per_run),
        steps(b.sampling_steps_per_run)
    );
    let _ = writeln!(
        s,
        "  simulated time    {} time units{} (model time integrated, spin-up included)",
        sig3(b.simulated_time),
        steps(b.solver_steps)
    );
    if b.simulated_time > 0.0 {
        let _ = writeln!(
            s,
            "  spin-up share     {} of the simulated time ({} runs × {} time units, discarded)",
            percent(b.runs as f64 * b.spin_up_per_run / b.simulated_time),
            b.runs,
            sig3(b.spin_up_per_run)
        );
    }
    let _ = writeln!(s, "\nCharges");
    let _ = writeln!(
        s,
        "  base              {} {unit} (simulated time × rate)",
        sig3(b.base_device_hours)
    );
    if let Some(ck) = &c.checkpointing {
        let _ = writeln!(
            s,
            "  checkpointing     every {} wall-hours (Young 1974, √(2δM), δ = {} h, M = {} h): +{:.1}%",
            sig3(ck.interval_hours),
            ck.cost_hours,
            ck.mtbf_hours,
            100.0 * ck.overhead_fraction
        );
    }
    let line = |s: &mut String, name: &str, ch: &crate::cost::Charges| {
        let mut parts = vec![format!("{} {unit}", sig3(ch.device_hours))];
        if let Some(h) = ch.node_hours {
            parts.push(format!("{} node-hours", sig3(h)));
        }
        if let Some(h) = ch.whole_node_device_hours {
            parts.push(format!("{} {unit} charged for whole nodes", sig3(h)));
        }
        if let Some(g) = ch.gpu_charge {
            parts.push(format!("{} GPU charge", sig3(g)));
        }
        if let Some(u) = ch.service_units {
            parts.push(format!("{} SU", sig3(u)));
        }
        let _ = writeln!(s, "  {name:<17} {}", parts.join(", "));
    };
    line(&mut s, "production", &b.production);
    line(
        &mut s,
        &format!("contingency ×{}", c.contingency_factor),
        &b.contingency,
    );
    line(&mut s, "total", &b.total);
    if let Some(w) = &b.wall {
        let _ = writeln!(s, "\nWall-clock");
        let _ = writeln!(
            s,
            "  per run           {} hours on {} {}{}",
            sig3(w.hours_per_run),
            w.devices_per_run,
            c.device.plural(),
            w.nodes_per_run
                .map(|k| format!(" ({k} nodes)"))
                .unwrap_or_default()
        );
        let _ = writeln!(
            s,
            "  campaign          {} hours with {} run(s) at once; {} hours one after another",
            sig3(w.parallel_hours),
            w.concurrent_runs,
            sig3(w.serial_hours)
        );
    }
    let st = &b.storage;
    let _ = writeln!(s, "\nStorage");
    let _ = writeln!(
        s,
        "  snapshots         {} ({} each)",
        bytes(st.snapshot_bytes),
        bytes(st.snapshot_bytes_each)
    );
    let _ = writeln!(s, "  checkpoint file   {}", bytes(st.checkpoint_bytes_each));
    let _ = writeln!(s, "  scratch           {}", bytes(st.scratch_bytes));
    let _ = writeln!(s, "  archive           {}", bytes(st.archive_bytes));
    s
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::cost::{Amount, CostInputs, CostSpec};

    #[test]
    fn summary_lists_every_target_and_warning() {
        let doc = crate::report::fixtures::fixture().document;
        let text = text_summary(&doc);
        for m in &doc.models {
            assert!(text.contains(&format!("model {}", m.name)), "{text}");
        }
        let targets = doc.models.iter().map(|m| m.estimates.len()).sum::<usize>();
        assert_eq!(text.matches("  target ").count(), targets, "{text}");
        for w in &doc.warnings {
            assert!(text.contains(w.as_str()));
        }
        // The answer comes first: one line per target, before the models.
        let answer = text.find("\nanswer (").expect("answer block");
        assert!(answer < text.find("\nmodel ").unwrap(), "{text}");
        assert_eq!(
            text.matches("  to reach ").count(),
            doc.study.targets.len(),
            "{text}"
        );
    }
    #[test]
    fn summary_ends_with_the_new_regime() {
        let plain = text_summary(&crate::report::fixtures::fixture().document);
        assert!(!plain.contains("new regime"), "{plain}");
        let text = text_summary(&crate::report::fixtures::transfer_fixture().document);
        let block = &text[text.find("\nnew regime: ").expect("new-regime block")..];
        assert!(text.find("model esn-500").unwrap() < text.find("new regime").unwrap());
        assert!(
            block.starts_with(
                "\nnew regime: two-scale-lorenz96 (F = 24, h = 1); 5,000 samples, 3 test \
                 initial conditions; persistence floor 0.0700 time units\n"
            ),
            "{block}"
        );
        assert!(
            block.contains(
                "transfer esn-500 (esn): zero-shot 1.30 time units against 2.85 in its own \
                 regime, gap 1.55 (54%)"
            ),
            "{block}"
        );
        assert_eq!(block.matches("  k* for ").count(), 4, "{block}");
        assert!(
            block.contains(
                "  k* for   2.50: fine-tuned 1,200 samples (90% 800–2,000); from scratch 5,000 \
                 samples (90% more than 3,000); saves 340 core-hours (120–unbounded)\n"
            ),
            "{block}"
        );
        assert!(
            block.contains(
                "  k* for   3.50: fine-tuned unreachable; from scratch unreachable; both curves saturate below 3.5"
            ),
            "{block}"
        );
        assert!(
            block.contains("fine-tuned 3,000 samples (90% 2,000–6,000), extrapolated"),
            "{block}"
        );
        // The warnings stay last.
        assert!(text.find("new regime").unwrap() < text.find("warning: ").unwrap());
    }

    #[test]
    fn cost_text_names_every_section() {
        let report = crate::cost::cost_report(&CostSpec {
            amount: Amount::Samples(10_000.0),
            sample_interval: 0.01,
            variables: 8,
            inputs: CostInputs {
                core_hours_per_time_unit: Some(100.0),
                scaling_law: Some("isotropic-turbulence".into()),
                pilot_reynolds: Some(100.0),
                target_reynolds: Some(200.0),
                cores_per_run: Some(100),
                ..CostInputs::default()
            },
        })
        .unwrap();
        let text = cost_text(&report);
        for part in [
            "Rate",
            "Pope 2000",
            "Shape",
            "Charges",
            "contingency",
            "Wall-clock",
            "Storage",
            "800 core-hours",
        ] {
            assert!(text.contains(part), "{part}: {text}");
        }
    }
}
