//! Fragments shared by the sections: table cells for targets, statuses, sample counts and budgets with
//! their intervals, the data's description, where the Lyapunov exponent came from, the
//! persistence floor, the end of a curve figure's caption.

use crate::cost::Budget;
use crate::curves::Family;
use crate::report::format::{escape, number, percent, samples, sig3};
use crate::report::quantity::Quantity;
use crate::skill::SkillSummary;
use crate::study::results::{
    ComputedLyapunov, DataInfo, EstimateStatus, LyapunovSource, ModelResult, PlanDocument,
    TargetEstimate,
};
use std::fmt::Write;

/// "simulated two-scale-lorenz96 (F = 20, h = 1)" or "file data/run.npy".
/// Characters of a content hash the report shows (like a short commit id); the full value is
/// in `budget.json`.
pub(super) const SHORT_HASH: usize = 12;

/// A content hash as the report shows it: its first [`SHORT_HASH`] characters. A full
/// 64-digit hexadecimal string reads as a number no study defends; budget.json keeps it whole.
pub(super) fn short_hash(hex: &str) -> String {
    let short: String = hex.chars().take(SHORT_HASH).collect();
    format!("<code class=\"hash\">{}…</code>", escape(&short))
}

pub(super) fn data_source(doc: &PlanDocument) -> String {
    let Some(d) = &doc.data else {
        return format!(
            "values of a metric measured outside the tool ({}), read from <code>{}</code>",
            doc.study.direction.better(),
            escape(&doc.study.file)
        );
    };
    data_description(d)
}

/// "simulated two-scale-lorenz96 (F = 20, h = 1)" or "file data/run.npy" for one data set.
pub(super) fn data_description(d: &DataInfo) -> String {
    match &d.system {
        Some(system) => {
            let params: Vec<String> = d
                .parameters
                .iter()
                .map(|(k, v)| format!("{} = {}", escape(k), number(*v)))
                .collect();
            let params = if params.is_empty() {
                String::new()
            } else {
                format!(" ({})", params.join(", "))
            };
            format!("simulated <strong>{}</strong>{params}", escape(system))
        }
        None => format!("file <code>{}</code>", escape(&d.source)),
    }
}

/// How many models have replicate spread (a positive standard error somewhere), so that their
/// curves are weighted least-squares fits; the others are ordinary least squares.
pub(super) fn models_with_spread(doc: &PlanDocument) -> usize {
    doc.models
        .iter()
        .filter(|m| m.points.iter().any(|p| p.standard_error > 0.0))
        .count()
}

pub(super) fn confidence(doc: &PlanDocument) -> String {
    percent(doc.study.confidence)
}

/// "18,100–35,000", "18,100–unbounded", "up to 35,000" or "unbounded".
pub(super) fn interval(lo: Option<f64>, hi: Option<f64>, f: impl Fn(f64) -> String) -> String {
    match (lo, hi) {
        (Some(l), Some(h)) => format!("{}–{}", f(l), f(h)),
        (Some(l), None) => format!("{}–unbounded", f(l)),
        (None, Some(h)) => format!("up to {}", f(h)),
        (None, None) => "unbounded".into(),
    }
}

/// [`interval`] of an estimate's figures, with an upper end that reads "more than" when the
/// estimate's does ([`TargetEstimate::upper_beyond_data`]): "8,000 to more than 16,000".
pub(super) fn estimate_interval(
    e: &TargetEstimate,
    lo: Option<f64>,
    hi: Option<f64>,
    f: impl Fn(f64) -> String,
) -> String {
    match (lo, hi) {
        (Some(l), Some(h)) if e.upper_beyond_data => format!("{} to more than {}", f(l), f(h)),
        (lo, hi) => interval(lo, hi, f),
    }
}

/// A budget figure with its interval, or "—" when there is no budget; a status whose only
/// statement is a bound gives the bound ("at most …" for a target met at the smallest size,
/// "more than …" beyond what the pilot supports).
pub(super) fn budget_cell(
    doc: &PlanDocument,
    e: &TargetEstimate,
    field: fn(&Budget) -> f64,
    f: fn(f64) -> String,
    unit: &str,
) -> String {
    let lo = e.budget_low.as_ref().map(field);
    let hi = e.budget_high.as_ref().map(field);
    let Some(b) = &e.budget else {
        return match (e.status, lo, hi) {
            (EstimateStatus::AtSmallestSize, _, Some(h)) => {
                format!("at most <span class=\"big\">{}</span>{unit}", f(h))
            }
            (EstimateStatus::BeyondSupport, Some(l), _) => {
                format!("more than <span class=\"big\">{}</span>{unit}", f(l))
            }
            _ => "—".into(),
        };
    };
    let range = estimate_interval(e, lo, hi, f);
    format!(
        "<span class=\"big\">{}</span>{unit}<span class=\"sub\">{} interval {}</span>",
        f(field(b)),
        confidence(doc),
        range
    )
}

pub(super) fn target_cell(doc: &PlanDocument, target: f64) -> String {
    // Skill measured outside the tool is in the user's own units.
    let unit = Quantity::of(doc).unit();
    let mut s = format!("<span class=\"big\">{}</span>{unit}", sig3(target));
    if let Some(l) = doc.skill.as_ref().and_then(|k| k.lyapunov_exponent) {
        let _ = write!(
            s,
            "<span class=\"sub\">{} Lyapunov times</span>",
            sig3(target * l)
        );
    }
    s
}

/// A note for wherever valid times are read in Lyapunov times: the exponent and where it came
/// from, pointing to the provenance; `None` without an exponent. Short: it sits on the first
/// page.
pub(super) fn lyapunov_note(doc: &PlanDocument) -> Option<String> {
    let skill = doc.skill.as_ref()?;
    let l = skill.lyapunov_exponent?;
    let from = match &skill.lyapunov_source {
        Some(LyapunovSource::Given) => {
            " given in the study file (<code>skill.lyapunov-exponent</code>)".to_string()
        }
        Some(LyapunovSource::Computed(c)) => format!(
            " of the simulated <strong>{}</strong> system{}, computed by the method of Benettin \
             et al. (1980)",
            escape(&c.system),
            if is_two_scale(c) {
                " (the whole system, fast variables included)"
            } else {
                ""
            }
        ),
        None => String::new(),
    };
    Some(format!(
        "Lyapunov times: valid time × λ₁ = {} per model time unit, the largest Lyapunov \
         exponent{from}; see <a href=\"#provenance\">Provenance</a>.",
        sig3(l)
    ))
}

fn is_two_scale(c: &ComputedLyapunov) -> bool {
    c.system == "two-scale-lorenz-96"
}

/// The provenance of the exponent in full: value, Lyapunov time and how it was obtained.
pub(super) fn lyapunov_provenance(l: f64, source: Option<&LyapunovSource>) -> String {
    let head = format!(
        "{} per model time unit (Lyapunov time {} time units)",
        number(l),
        number(1.0 / l)
    );
    match source {
        Some(LyapunovSource::Given) => {
            format!("{head}: given in the study file (<code>skill.lyapunov-exponent</code>).")
        }
        Some(LyapunovSource::Computed(c)) => format!(
            "{head}: computed by the tangent-linear method of Benettin et al. (1980) from the \
             simulated <strong>{}</strong> system at the data's parameters, RK4 step {} and \
             seed {}: {} time units of spin-up, then {} time units averaged with the tangent \
             vector renormalised every {}; ± {} (standard error over {} segments).{}",
            escape(&c.system),
            number(c.dt),
            c.seed,
            number(c.spin_up),
            number(c.duration),
            number(c.renormalise_every),
            number(c.standard_error),
            c.segments,
            if is_two_scale(c) {
                " It is the exponent of the whole two-scale system: its fast variables set it, so \
                 it can be far larger than the rate at which errors of the slow variables grow; \
                 read the models' skill in time units first."
            } else {
                ""
            }
        ),
        None => format!("{head}."),
    }
}

/// The formula of one of a model's families as it was fitted (in the curve's direction; the
/// rising form when the model has no record of that family).
pub(super) fn fitted_formula(m: &ModelResult, family: Family) -> &str {
    m.fits
        .iter()
        .find(|f| f.family == family)
        .map_or(family.formula(), |f| f.formula.as_str())
}

/// The status as a coloured badge: "reached in the data", "unreachable", …
pub(super) fn status_badge(status: EstimateStatus) -> String {
    let class = match status {
        EstimateStatus::ReachedInData
        | EstimateStatus::AtSmallestSize
        | EstimateStatus::NoTrainingNeeded => "met",
        EstimateStatus::Extrapolated => "reached",
        EstimateStatus::BeyondSupport => "extrapolated",
        EstimateStatus::NearPlateau | EstimateStatus::Unreachable => "unreachable",
        EstimateStatus::NoFit => "nofit",
    };
    format!("<span class=\"badge {class}\">{}</span>", status.label())
}

/// The status badge with what it means for this estimate; `q` names the quantity.
pub(super) fn status_cell(q: Quantity, e: &TargetEstimate) -> String {
    let badge = status_badge(e.status);
    let sub = match e.status {
        EstimateStatus::ReachedInData => {
            "the measured means cross it between two measured sizes".into()
        }
        EstimateStatus::AtSmallestSize => "already met at the smallest measured size".into(),
        EstimateStatus::Extrapolated => format!(
            "{}× the largest measured size, calibrated by the study's hindsight",
            e.extrapolation.map(sig3).unwrap_or_else(|| "?".into())
        ),
        EstimateStatus::BeyondSupport => match e.support_factor {
            Some(f) => format!(
                "beyond the {}× the largest measured size that the study's hindsight supports",
                sig3(f)
            ),
            None => "the study's hindsight cannot check an extrapolation this far".into(),
        },
        EstimateStatus::NearPlateau => "within noise of where the curve levels off".into(),
        EstimateStatus::Unreachable => format!(
            "{}; P(unreachable) {}",
            match e.asymptote {
                Some(a) => format!("fitted asymptote {}{}", sig3(a), q.unit()),
                None => format!("the fitted curve does not {} to it", q.moves()),
            },
            percent(e.p_unreachable)
        ),
        EstimateStatus::NoTrainingNeeded => "at or below the persistence floor".into(),
        EstimateStatus::NoFit => return badge,
    };
    format!("{badge}<span class=\"sub\">{sub}</span>")
}

/// A sample count with its interval, or the bound a status gives instead ("n* ≤ 1,000",
/// "n* > 64,000"); `symbol` names it.
pub(super) fn samples_cell(doc: &PlanDocument, e: &TargetEstimate, symbol: &str) -> String {
    let Some(n) = e.samples.filter(|v| v.is_finite()) else {
        return match (e.status, e.samples_interval) {
            (EstimateStatus::AtSmallestSize, [_, Some(h)]) => {
                format!(
                    "{symbol} ≤ <span class=\"big\">{}</span> samples",
                    samples(h)
                )
            }
            (EstimateStatus::BeyondSupport, [Some(l), _]) => {
                format!(
                    "{symbol} > <span class=\"big\">{}</span> samples",
                    samples(l)
                )
            }
            _ => "—".into(),
        };
    };
    let mut s = format!(
        "<span class=\"big\">{}</span> samples<span class=\"sub\">{} interval {}</span>",
        samples(n),
        confidence(doc),
        e.samples_range(samples)
    );
    if let Some(m) = e.median_samples {
        let _ = write!(
            s,
            "<span class=\"sub\">bootstrap median {}</span>",
            samples(m)
        );
    }
    if let Some(x) = e.extrapolation.filter(|x| *x > 1.0) {
        let _ = write!(
            s,
            "<span class=\"sub\">{}× the largest size measured</span>",
            sig3(x)
        );
    }
    if e.p_unreachable > 0.0 && e.status == EstimateStatus::Extrapolated {
        let _ = write!(
            s,
            "<span class=\"sub\">P(unreachable) {}</span>",
            percent(e.p_unreachable)
        );
    }
    s
}

/// The persistence floor as a paragraph that starts with `lead` ("Floor").
pub(super) fn persistence_floor(out: &mut String, lead: &str, p: &SkillSummary) {
    let _ = writeln!(
        out,
        "<p class=\"floor\">{lead}: persistence (repeating the initial state) stays valid for \
         <strong>{} time units</strong> on average (10–90% of initial conditions: {}–{}); a \
         useful model must beat it.</p>",
        sig3(p.mean),
        sig3(p.q10),
        sig3(p.q90),
    );
}

/// Ends a learning-curve figure's caption: what hollow markers mean (when some means are
/// censored) and where the drawn range stops (when estimates lie beyond it).
pub(super) fn close_curve_caption(
    out: &mut String,
    censored: bool,
    range: Option<(f64, f64, bool)>,
) {
    if censored {
        out.push_str(
            " Hollow markers: some forecasts were still valid at the maximum lead, so those \
             means are lower bounds.",
        );
    }
    if let Some((_, hi, true)) = range {
        let _ = write!(
            out,
            " Some estimates lie beyond the drawn range, which stops at {} samples (1,000 \
             times the largest measured size).",
            samples(hi)
        );
    }
    out.push_str("</figcaption>\n</figure>\n");
}

pub(super) fn capitalised(s: &str) -> String {
    let mut c = s.chars();
    c.next()
        .map(|f| f.to_uppercase().chain(c).collect())
        .unwrap_or_default()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn intervals_name_unbounded_sides() {
        assert_eq!(interval(Some(1.0), Some(2.0), sig3), "1.00–2.00");
        assert_eq!(interval(Some(18100.0), None, samples), "18,100–unbounded");
        assert_eq!(interval(None, Some(5.0), sig3), "up to 5.00");
        assert_eq!(interval(None, None, sig3), "unbounded");
    }
}
