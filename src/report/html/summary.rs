//! The first page: per target, the recommended model (the cheapest that answers with a number,
//! see [`verdict`](crate::report::verdict)), its n* and core-hours with their intervals and
//! status, one sentence per target, the floors and the terms used; printed on a page of its own.

use super::cells::{confidence, estimate_interval, interval, lyapunov_note, status_badge};
use crate::report::format::{escape, percent, samples, sig3};
use crate::report::quantity::Quantity;
use crate::report::verdict::{picks, ratio_words, Answer, Pick};
use crate::study::results::PlanDocument;
use std::fmt::Write;

pub(super) fn summary(out: &mut String, doc: &PlanDocument) {
    let q = Quantity::of(doc);
    let unit = q.unit();
    let level = confidence(doc);
    let picks = picks(doc);
    let hours = doc
        .campaign
        .as_ref()
        .map_or("core-hours", |c| c.device.hours_label());
    let ics = doc
        .data
        .as_ref()
        .map(|d| {
            format!(
                " over {} test initial conditions",
                d.test_initial_conditions
            )
        })
        .unwrap_or_default();
    let targets = if q.measured_outside {
        format!("target value of the metric ({})", q.direction.better())
    } else {
        format!("target skill (mean valid prediction time{ics})")
    };
    let _ = write!(
        out,
        "<section id=\"summary\" class=\"summary\">\n<h2>The answer in brief</h2>\n\
         <p>For each {targets}: the cheapest of the {} \
         model{} that reaches it with a number, the training samples n* it needs and{} with \
         {level} intervals. The sections after this page are the evidence.</p>\n\
         <div class=\"scroll\"><table class=\"summary\">\n<thead><tr><th>Target</th>\
         <th>Recommended model</th><th class=\"num\">Samples n*</th><th class=\"num\">{}</th>\
         <th>Status</th></tr></thead>\n<tbody>\n",
        doc.models.len(),
        if doc.models.len() == 1 { "" } else { "s" },
        if doc.cost.is_some() {
            format!(" what simulating them costs in {hours},")
        } else {
            String::new()
        },
        capital(hours),
    );
    let lyapunov = doc.skill.as_ref().and_then(|k| k.lyapunov_exponent);
    for p in &picks {
        let target = match lyapunov {
            Some(l) => format!(
                "{} time units<span class=\"sub\">{} Lyapunov times</span>",
                sig3(p.target),
                sig3(p.target * l)
            ),
            None => format!("{}{unit}", sig3(p.target)),
        };
        let _ = write!(out, "<tr><td>{target}</td>");
        match &p.choice {
            Some((m, e, answer)) => {
                let others = match p.runner_up {
                    Some((r, ratio)) => {
                        format!("; next: {} ({})", escape(&r.name), ratio_words(ratio))
                    }
                    None => String::new(),
                };
                let n_cell = match answer {
                    Answer::Number { samples: n, interval: [lo, hi] } => format!(
                        "<span class=\"big\">{}</span><span class=\"sub\">{level} {}</span>",
                        samples(*n),
                        if e.upper_beyond_data {
                            e.samples_range(samples)
                        } else {
                            interval(Some(*lo), Some(*hi), samples)
                        }
                    ),
                    Answer::NoTraining => "<span class=\"big\">0</span><span class=\"sub\">no \
                         training needed</span>"
                        .into(),
                    Answer::Bound { at_most: Some(n), .. } => format!(
                        "<span class=\"big\">≤ {}</span><span class=\"sub\">≤ smallest measured \
                         size: fewer may do</span>",
                        samples(*n)
                    ),
                    Answer::Bound { at_least, .. } => format!(
                        "<span class=\"big\">≥ {}</span><span class=\"sub\">lower bound only</span>",
                        at_least.map(samples).unwrap_or_else(|| "?".into())
                    ),
                    Answer::NotAnswerable => "—".into(),
                };
                let cost_cell = match (&e.budget, answer) {
                    (Some(b), Answer::Number { .. }) => format!(
                        "<span class=\"big\">{}</span><span class=\"sub\">{level} {}</span>",
                        sig3(b.core_hours),
                        // The samples' upper end reads "more than": so does the cost's.
                        estimate_interval(
                            e,
                            e.budget_low.map(|b| b.core_hours),
                            e.budget_high.map(|b| b.core_hours),
                            sig3
                        )
                    ),
                    (
                        _,
                        Answer::Bound {
                            at_most: Some(_), ..
                        },
                    ) if e.budget_high.is_some() => format!(
                        "<span class=\"big\">≤ {}</span><span class=\"sub\">at most: priced at \
                         the smallest measured size</span>",
                        sig3(e.budget_high.map_or(f64::NAN, |b| b.core_hours))
                    ),
                    (
                        Some(_),
                        Answer::Bound {
                            at_least: Some(_), ..
                        },
                    ) => format!(
                        "<span class=\"big\">≥ {}</span>",
                        sig3(e.budget_low.map_or(f64::NAN, |b| b.core_hours))
                    ),
                    _ => "—".into(),
                };
                let _ = writeln!(
                    out,
                    "<td><strong>{}</strong><span class=\"sub\">{} of {} models answer with a \
                     number{others}</span></td><td class=\"num\">{n_cell}</td>\
                     <td class=\"num\">{cost_cell}</td><td>{}<span class=\"sub\">{}</span></td></tr>",
                    escape(&m.name),
                    p.answered,
                    p.models,
                    status_badge(e.status),
                    answer.label(),
                );
            }
            None => {
                let _ = writeln!(
                    out,
                    "<td colspan=\"3\">no model reaches it</td><td><span class=\"badge \
                     unreachable\">not answerable</span></td></tr>"
                );
            }
        }
    }
    out.push_str("</tbody>\n</table></div>\n<ul class=\"verdicts\">\n");
    for p in &picks {
        let _ = writeln!(out, "<li>{}</li>", sentence(doc, p, &level, hours));
    }
    out.push_str("</ul>\n");
    let mut floors = Vec::new();
    if let Some(p) = &doc.persistence {
        floors.push(format!("persistence {} time units", sig3(p.mean)));
    }
    if let Some(c) = &doc.climatology {
        floors.push(format!("climatology {} time units", sig3(c.mean)));
    }
    if !floors.is_empty() {
        let _ = writeln!(
            out,
            "<p class=\"muted\">Floors a useful model must beat (mean valid time): {}.</p>",
            floors.join("; ")
        );
    }
    if q.measured_outside {
        let _ = writeln!(
            out,
            "<p class=\"muted\"><strong>Terms.</strong> n*: the training samples at which the \
             measured value first {}s to the target ({}). Intervals come from the bootstrap \
             over {} and curve families.</p>",
            q.moves(),
            q.direction.better(),
            q.resampled()
        );
    } else {
        out.push_str(
            "<p class=\"muted\"><strong>Terms.</strong> Valid prediction time: how long a \
             forecast stays within the error threshold, in model time units. n*: the training \
             samples (saved states) needed. <em>Simulated time</em>: the model time the \
             high-fidelity solver must integrate to produce them, spin-up included; core-hours \
             are simulated time × the cost rate. Intervals come from the bootstrap over \
             replicates, test initial conditions and curve families.</p>\n",
        );
    }
    if let Some(note) = lyapunov_note(doc) {
        let _ = writeln!(out, "<p class=\"muted\">{note}</p>");
    }
    if let (Some(c), Some((_, e, Answer::Number { .. }))) =
        (&doc.cost, picks.first().and_then(|p| p.choice.as_ref()))
    {
        if let Some(b) = &e.budget {
            let spin = c.runs as f64 * c.spin_up_per_run;
            if b.simulated_time > 0.0 && spin > 0.0 {
                let _ = writeln!(
                    out,
                    "<p class=\"muted\">Spin-up ({} runs × {} time units, discarded) is {} of the \
                     simulated time at the first target.</p>",
                    c.runs,
                    sig3(c.spin_up_per_run),
                    percent(spin / b.simulated_time)
                );
            }
        }
    }
    out.push_str("</section>\n<div class=\"page-break\"></div>\n");
}

fn capital(s: &str) -> String {
    let mut c = s.chars();
    c.next()
        .map(|f| f.to_uppercase().chain(c).collect())
        .unwrap_or_default()
}

/// One target in words: "To reach 0.2 time units, train esn on about 3,070 samples (90%
/// 1,840–6,200), costing 212,000 core-hours (175,000–306,000)."
fn sentence(doc: &PlanDocument, p: &Pick<'_>, level: &str, hours: &str) -> String {
    let t = format!("{}{}", sig3(p.target), Quantity::of(doc).unit());
    let Some((m, e, answer)) = &p.choice else {
        return format!(
            "<strong>{t}</strong>: no model reaches it (every curve levels off {} it or could \
             not be fitted); see the estimates per model.",
            doc.study.direction.short_side()
        );
    };
    let name = escape(&m.name);
    let cost = |lo: Option<f64>, hi: Option<f64>, v: f64| {
        if doc.cost.is_some() {
            format!(
                ", costing {} {hours} ({level} {})",
                sig3(v),
                estimate_interval(e, lo, hi, sig3)
            )
        } else {
            String::new()
        }
    };
    match answer {
        Answer::Number {
            samples: n,
            interval: [lo, hi],
        } => format!(
            "<strong>{t}</strong>: train <strong>{name}</strong> on about {} samples \
             ({level} {}){}.",
            samples(*n),
            if e.upper_beyond_data {
                e.samples_range(samples)
            } else {
                interval(Some(*lo), Some(*hi), samples)
            },
            e.budget.map_or(String::new(), |b| cost(
                e.budget_low.map(|x| x.core_hours),
                e.budget_high.map(|x| x.core_hours),
                b.core_hours
            )),
        ),
        Answer::Bound {
            at_most: Some(n), ..
        } => format!(
            "<strong>{t}</strong>: <strong>{name}</strong> already reaches it at the \
             smallest measured size, so n* ≤ {} samples{}; measure smaller subsets to pin it down.",
            samples(*n),
            match e.budget_high {
                Some(b) if doc.cost.is_some() => {
                    format!(", at most {} {hours}", sig3(b.core_hours))
                }
                _ => String::new(),
            }
        ),
        Answer::Bound { at_least, .. } => format!(
            "<strong>{t}</strong>: no model gives a number; the best bound is \
             <strong>{name}</strong> with n* ≥ {} samples ({}).",
            at_least.map(samples).unwrap_or_else(|| "?".into()),
            escape(e.status.label())
        ),
        Answer::NotAnswerable => format!("<strong>{t}</strong>: not answerable."),
        Answer::NoTraining => format!(
            "<strong>{t}</strong>: at or below the persistence floor: no training data needed."
        ),
    }
}
