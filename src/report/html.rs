//! `report.html`: one self-contained page (inline CSS and SVG, no scripts, no network) that puts
//! the answer first (samples and cost per model and target), then the evidence (learning curves,
//! fits, measured points), the transfer to a new regime when the study has one, the assumptions,
//! warnings, provenance and cautions.

use std::fmt::Write;

use crate::cost::Budget;
use crate::skill::SkillSummary;
use crate::study::history::{HistoryEntry, HistoryEstimate};
use crate::study::results::{
    DataInfo, EstimateStatus, PlanDocument, PointResult, TargetEstimate, TransferModel,
    TransferResult, TransferSaving,
};
use crate::study::runner::StudyOutcome;

use super::format::{bytes, escape, number, opt, percent, samples, short, sig3, thousands};
use super::svg;

const CSS: &str = r#"
:root { --ink:#222a35; --muted:#5d6673; --line:#d9dde3; --soft:#f4f6f8; --accent:#1d7a6c;
  --accent-soft:#e3f1ee; --warn:#8a4b08; --warn-soft:#fdf1de; --bad:#a3352a; --bad-soft:#f9e6e3; }
* { box-sizing:border-box; }
html { font-size:15px; }
body { margin:0; color:var(--ink); background:#fff; line-height:1.5;
  font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,"Noto Sans",sans-serif; }
main { max-width:1160px; margin:0 auto; padding:28px 28px 60px; }
header { border-bottom:3px solid var(--accent); padding-bottom:14px; margin-bottom:8px; }
.kicker { text-transform:uppercase; letter-spacing:.08em; font-size:.78rem; color:var(--accent);
  font-weight:600; margin:0; }
h1 { font-size:1.9rem; line-height:1.2; margin:.2em 0 .3em; }
h2 { font-size:1.35rem; margin:2.2em 0 .5em; padding-bottom:.2em; border-bottom:1px solid var(--line); }
h3 { font-size:1.08rem; margin:1.6em 0 .4em; }
p { margin:.5em 0; max-width:78ch; }
.lede { font-size:1.05rem; }
.muted, .sub { color:var(--muted); }
.sub { display:block; font-size:.85rem; }
nav.toc { font-size:.9rem; margin:10px 0 0; color:var(--muted); }
nav.toc a { color:var(--accent); text-decoration:none; margin-right:1em; white-space:nowrap; }
code, .mono { font-family:ui-monospace,"SFMono-Regular",Menlo,Consolas,"Liberation Mono",monospace;
  font-size:.88em; }
.hash { word-break:break-all; }
table { border-collapse:collapse; width:100%; margin:.6em 0 1.2em; font-size:.92rem; }
th, td { text-align:left; vertical-align:top; padding:7px 10px; border-bottom:1px solid var(--line); }
thead th { background:var(--soft); font-weight:600; border-bottom:2px solid var(--line); }
td.num, th.num { text-align:right; font-variant-numeric:tabular-nums; }
tbody tr:nth-child(even) td { background:#fafbfc; }
table.kv th { width:15em; font-weight:600; background:none; }
.answer td { padding-top:10px; padding-bottom:10px; }
.answer td:first-child { white-space:nowrap; }
.answer td:nth-child(2) { min-width:8em; }
.answer td:nth-child(3) { min-width:14em; }
.answer td:last-child { min-width:9em; }
.big { font-size:1.2rem; font-weight:700; font-variant-numeric:tabular-nums; }
.badge { display:inline-block; padding:1px 8px; border-radius:10px; font-size:.8rem; font-weight:600;
  white-space:nowrap; }
.reached { background:var(--accent-soft); color:var(--accent); }
.met { background:#e6eef8; color:#2f558a; }
tr.total td { font-weight:700; border-top:2px solid var(--line); }
.extrapolated { background:#fbf0dc; color:#8a5a00; }
.unreachable { background:var(--bad-soft); color:var(--bad); }
.nofit { background:var(--soft); color:var(--muted); }
.selected { background:var(--accent-soft); color:var(--accent); }
tr.failed td { color:var(--muted); }
.floor { background:var(--soft); border-left:4px solid #8a8f96; padding:8px 12px; max-width:none; }
figure { margin:.6em 0 1.4em; }
svg.chart { display:block; max-width:100%; height:auto; border:1px solid var(--line); border-radius:4px; }
figcaption { font-size:.88rem; color:var(--muted); margin-top:6px; max-width:78ch; }
.formula { background:var(--soft); border-radius:4px; padding:10px 14px; margin:.6em 0;
  font-family:ui-monospace,"SFMono-Regular",Menlo,Consolas,monospace; font-size:.9rem; }
.formula div { margin:2px 0; }
.warnings { background:var(--warn-soft); border:1px solid #e9c58f; border-left:5px solid var(--warn);
  border-radius:4px; padding:10px 16px; }
.warnings h2 { border:none; margin-top:.3em; color:var(--warn); }
.warnings li { margin:.3em 0; }
.cautions { border-top:3px solid var(--line); margin-top:2.4em; }
.cautions li { margin:.4em 0; max-width:80ch; }
@media print {
  html { font-size:10.5pt; }
  main { max-width:none; padding:0; }
  nav.toc { display:none; }
  h2 { break-after:avoid; }
  h3 { break-after:avoid; }
  figure, tr, .warnings { break-inside:avoid; }
  svg.chart { border:none; }
  tbody tr:nth-child(even) td { background:none; }
}
"#;

/// The whole report page. Pure: the same outcome gives the same bytes.
pub fn html(outcome: &StudyOutcome) -> String {
    let doc = &outcome.document;
    let mut out = String::with_capacity(64 * 1024);
    let title = if doc.study.title.trim().is_empty() {
        doc.study.name.as_str()
    } else {
        doc.study.title.as_str()
    };
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <title>{} — simulation budget</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n",
        escape(title)
    );
    header(&mut out, doc, title);
    answer(&mut out, doc);
    learning_curves(&mut out, doc);
    fits(&mut out, doc);
    backtest(&mut out, doc);
    measured_points(&mut out, doc);
    closures(&mut out, doc);
    transfer(&mut out, doc);
    history(&mut out, outcome);
    assumptions(&mut out, doc);
    runs(&mut out, outcome);
    decorrelation(&mut out, doc);
    warnings(&mut out, doc);
    provenance(&mut out, doc);
    cautions(&mut out, doc);
    out.push_str("</main>\n</body>\n</html>\n");
    out
}

/// "simulated two-scale-lorenz96 (F = 20, h = 1)" or "file data/run.npy".
fn data_source(doc: &PlanDocument) -> String {
    let Some(d) = &doc.data else {
        return format!(
            "skill measured outside the tool, read from <code>{}</code>",
            escape(&doc.study.file)
        );
    };
    data_description(d)
}

/// "simulated two-scale-lorenz96 (F = 20, h = 1)" or "file data/run.npy" for one data set.
fn data_description(d: &DataInfo) -> String {
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

fn confidence(doc: &PlanDocument) -> String {
    percent(doc.study.confidence)
}

fn header(out: &mut String, doc: &PlanDocument, title: &str) {
    let _ = write!(
        out,
        "<header>\n<p class=\"kicker\">closure-budget · simulation budget report</p>\n\
         <h1>{}</h1>\n",
        escape(title)
    );
    if !doc.study.description.trim().is_empty() {
        let _ = writeln!(
            out,
            "<p class=\"lede\">{}</p>",
            escape(&doc.study.description)
        );
    }
    out.push_str(
        "<p>This report estimates how much high-fidelity training data a machine-learned model \
         needs to reach a target forecast skill, from learning curves measured on pilot data, \
         and what producing that data would cost.</p>\n",
    );
    match &doc.data {
        Some(d) => {
            let _ = writeln!(
                out,
                "<p class=\"muted\">Pilot data: {} — {} samples of {} variable{}, one every {} \
                 model time units.</p>",
                data_source(doc),
                thousands(d.samples as f64),
                d.variables.len(),
                if d.variables.len() == 1 { "" } else { "s" },
                number(d.sample_interval),
            );
        }
        None => {
            let _ = writeln!(out, "<p class=\"muted\">Data: {}.</p>", data_source(doc));
        }
    }
    out.push_str(
        "<nav class=\"toc\"><a href=\"#answer\">Answer</a><a href=\"#curves\">Learning curves</a>\
         <a href=\"#fits\">Fits</a><a href=\"#backtest\">Backtest</a><a href=\"#points\">Measured points</a>",
    );
    if doc.models.iter().any(|m| m.role == "closure") {
        out.push_str("<a href=\"#closures\">Closures</a>");
    }
    if doc.transfer.is_some() {
        out.push_str("<a href=\"#transfer\">Transfer</a>");
    }
    out.push_str("<a href=\"#assumptions\">Budget assumptions</a>");
    if !doc.warnings.is_empty() {
        out.push_str("<a href=\"#warnings\">Warnings</a>");
    }
    out.push_str(
        "<a href=\"#provenance\">Provenance</a><a href=\"#cautions\">Cautions</a></nav>\n\
         </header>\n",
    );
}

/// "18,100–35,000", "18,100–unbounded", "up to 35,000" or "unbounded".
fn interval(lo: Option<f64>, hi: Option<f64>, f: impl Fn(f64) -> String) -> String {
    match (lo, hi) {
        (Some(l), Some(h)) => format!("{}–{}", f(l), f(h)),
        (Some(l), None) => format!("{}–unbounded", f(l)),
        (None, Some(h)) => format!("up to {}", f(h)),
        (None, None) => "unbounded".into(),
    }
}

/// A budget figure with its interval, or "—" when there is no budget.
fn budget_cell(
    doc: &PlanDocument,
    e: &TargetEstimate,
    field: fn(&Budget) -> f64,
    f: fn(f64) -> String,
    unit: &str,
) -> String {
    let Some(b) = &e.budget else {
        return "—".into();
    };
    let lo = e.budget_low.as_ref().map(field);
    let hi = e.budget_high.as_ref().map(field);
    let bounded_hi = hi.filter(|_| e.samples_interval[1].is_some());
    format!(
        "<span class=\"big\">{}</span>{unit}<span class=\"sub\">{} interval {}</span>",
        f(field(b)),
        confidence(doc),
        interval(lo, bounded_hi, f)
    )
}

fn target_cell(doc: &PlanDocument, target: f64) -> String {
    let mut s = format!("<span class=\"big\">{}</span> time units", sig3(target));
    if let Some(l) = doc.skill.as_ref().and_then(|k| k.lyapunov_exponent) {
        let _ = write!(
            s,
            "<span class=\"sub\">{} Lyapunov times</span>",
            sig3(target * l)
        );
    }
    s
}

/// The status as a coloured badge: "reachable", "unreachable", …
fn status_badge(status: EstimateStatus) -> String {
    let class = match status {
        EstimateStatus::ReachedInData => "met",
        EstimateStatus::Reachable => "reached",
        EstimateStatus::Extrapolated => "extrapolated",
        EstimateStatus::Unreachable => "unreachable",
        EstimateStatus::NoFit => "nofit",
    };
    format!("<span class=\"badge {class}\">{}</span>", status.label())
}

fn status_cell(e: &TargetEstimate) -> String {
    let badge = status_badge(e.status);
    match e.status {
        EstimateStatus::ReachedInData => {
            format!("{badge}<span class=\"sub\">a measured size already reaches it</span>")
        }
        EstimateStatus::Reachable => badge,
        EstimateStatus::Extrapolated => format!(
            "{badge}<span class=\"sub\">{}× the largest measured size</span>",
            e.extrapolation.map(sig3).unwrap_or_else(|| "?".into())
        ),
        EstimateStatus::Unreachable => format!(
            "{badge}<span class=\"sub\">{}; P(unreachable) {}</span>",
            match e.asymptote {
                Some(a) => format!("fitted asymptote {} time units", sig3(a)),
                None => "the fitted curve does not rise to it".into(),
            },
            percent(e.p_unreachable)
        ),
        EstimateStatus::NoFit => badge,
    }
}

/// A sample count with its interval; `symbol` names it in a one-sided bound ("n* ≥ 30,000").
fn samples_cell(doc: &PlanDocument, e: &TargetEstimate, symbol: &str) -> String {
    let Some(n) = e.samples.filter(|v| v.is_finite()) else {
        return "—".into();
    };
    let [lo, hi] = e.samples_interval;
    let range = match (lo, hi) {
        (Some(l), None) => format!("{symbol} ≥ {}", samples(l)),
        _ => interval(lo, hi, samples),
    };
    let mut s = format!(
        "<span class=\"big\">{}</span> samples<span class=\"sub\">{} interval {}</span>",
        samples(n),
        confidence(doc),
        range
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
    if e.p_unreachable > 0.0 {
        let _ = write!(
            s,
            "<span class=\"sub\">P(unreachable) {}</span>",
            percent(e.p_unreachable)
        );
    }
    s
}

/// The persistence floor as a paragraph that starts with `lead` ("Floor").
fn persistence_floor(out: &mut String, lead: &str, p: &SkillSummary) {
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

fn answer(out: &mut String, doc: &PlanDocument) {
    let over = match &doc.data {
        Some(d) => format!(
            "mean valid prediction time over {} test initial conditions",
            thousands(d.test_initial_conditions as f64)
        ),
        None => "as measured by the user's own code".into(),
    };
    let _ = write!(
        out,
        "<section id=\"answer\">\n<h2>The answer</h2>\n\
         <p>Training samples needed for each target skill ({over}), read from each model's \
         selected learning-curve family, with {} bootstrap intervals over replicates, test \
         initial conditions and curve families{}.</p>\n",
        confidence(doc),
        if doc.cost.is_some() {
            ", and what simulating and storing those samples costs"
        } else {
            ""
        },
    );
    if let Some(p) = &doc.persistence {
        persistence_floor(out, "Floor", p);
    }
    if let Some(c) = &doc.climatology {
        let _ = writeln!(
            out,
            "<p class=\"floor\">Floor: climatology (forecasting the training mean) stays valid \
             for <strong>{} time units</strong> on average.</p>",
            sig3(c.mean),
        );
    }
    for m in &doc.models {
        let _ = write!(
            out,
            "<h3>{} <span class=\"muted\">({}{})</span></h3>\n<p class=\"muted\">Selected family: {}</p>\n",
            escape(&m.name),
            escape(&m.kind),
            if m.role == "closure" {
                " as a closure in the coarse solver"
            } else {
                ""
            },
            m.selected
                .map(|f| format!("{} ({})", f.label(), escape(f.formula())))
                .unwrap_or_else(|| "none (no family could be fitted)".into())
        );
        if m.estimates.is_empty() {
            out.push_str("<p>No targets were estimated for this model.</p>\n");
            continue;
        }
        out.push_str(
            "<table class=\"answer\">\n<thead><tr><th>Target valid time</th><th>Status</th>\
             <th class=\"num\">Samples n*</th><th class=\"num\">Simulated time</th>\
             <th class=\"num\">Core-hours</th><th class=\"num\">Storage</th><th>Note</th>\
             </tr></thead>\n<tbody>\n",
        );
        for e in &m.estimates {
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td><td>{}</td></tr>",
                target_cell(doc, e.target),
                status_cell(e),
                samples_cell(doc, e, "n*"),
                budget_cell(doc, e, |b| b.simulated_time, sig3, " time units"),
                budget_cell(doc, e, |b| b.core_hours, sig3, ""),
                budget_cell(doc, e, |b| b.storage_bytes, bytes, ""),
                escape(&e.note),
            );
        }
        out.push_str("</tbody>\n</table>\n");
    }
    if let Some(chart) = svg::cost_chart(doc) {
        let _ = write!(
            out,
            "<h3>Cost against target skill</h3>\n<figure>\n{chart}\n<figcaption>What each target \
             costs: core-hours against the target skill for every model (read along a curve for \
             the cost of each extra unit of skill, or vertically to compare models at equal \
             skill); dots are the estimates at the targets, bars their intervals.</figcaption>\n\
             </figure>\n"
        );
    }
    out.push_str("</section>\n");
}

fn learning_curves(out: &mut String, doc: &PlanDocument) {
    out.push_str(
        "<section id=\"curves\">\n<h2>Learning curves</h2>\n\
         <p>Mean valid prediction time against the number of training samples (log scale). \
         Each fitted family is drawn beyond the measured sizes up to 1.5 times the largest \
         size or estimate; the bold line is the selected family.</p>\n",
    );
    for m in &doc.models {
        let _ = write!(
            out,
            "<h3>{}</h3>\n<figure>\n{}\n<figcaption>",
            escape(&m.name),
            svg::learning_curve(doc, m)
        );
        let _ = write!(
            out,
            "Large markers: mean over {} replicates with ± one standard error; small markers: \
             each replicate's mean over the test initial conditions; light bars: 10–90% of \
             single forecasts.",
            doc.study.replicates
        );
        let censored = m.points.iter().any(|p| p.censored_share > 0.0);
        close_curve_caption(out, censored, svg::x_range(m));
    }
    out.push_str("</section>\n");
}

fn fits(out: &mut String, doc: &PlanDocument) {
    out.push_str(
        "<section id=\"fits\">\n<h2>Fits</h2>\n<p>Weighted least-squares fits of each family to \
         the measured means (weights from the standard errors). The family with the lowest AICc \
         is selected; ΔAICc above about 2 is a meaningful preference.</p>\n",
    );
    for m in &doc.models {
        let _ = writeln!(out, "<h3>{}</h3>", escape(&m.name));
        if m.fits.is_empty() {
            out.push_str("<p>No families were fitted.</p>\n");
            continue;
        }
        let best = m
            .fits
            .iter()
            .filter_map(|f| f.aicc)
            .filter(|a| a.is_finite())
            .fold(f64::INFINITY, f64::min);
        out.push_str(
            "<table>\n<thead><tr><th>Family</th><th>Formula</th><th>Parameters ± std. error</th>\
             <th class=\"num\">Weighted RSS</th><th class=\"num\">AICc</th>\
             <th class=\"num\">ΔAICc</th><th class=\"num\">Asymptote</th><th></th></tr></thead>\n\
             <tbody>\n",
        );
        for f in &m.fits {
            if let Some(err) = &f.error {
                let _ = writeln!(
                    out,
                    "<tr class=\"failed\"><td>{}</td><td><code>{}</code></td>\
                     <td colspan=\"6\">not fitted: {}</td></tr>",
                    f.family.label(),
                    escape(&f.formula),
                    escape(err)
                );
                continue;
            }
            let params: Vec<String> = f
                .family
                .param_names()
                .iter()
                .map(|k| {
                    let v = f.params.get(*k).copied();
                    let se = f.std_errors.as_ref().and_then(|s| s.get(*k)).copied();
                    match se {
                        Some(se) => format!("{k} = {} ± {}", opt(v, number), number(se)),
                        None => format!("{k} = {}", opt(v, number)),
                    }
                })
                .collect();
            let selected = m.selected == Some(f.family);
            let _ = writeln!(
                out,
                "<tr><td>{}</td><td><code>{}</code></td><td class=\"mono\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td>{}</td></tr>",
                f.family.label(),
                escape(&f.formula),
                params.join("<br>"),
                opt(f.weighted_rss, number),
                opt(f.aicc, number),
                match f.aicc {
                    Some(a) if a.is_finite() && best.is_finite() => number(a - best),
                    _ => "—".into(),
                },
                match f.asymptote {
                    Some(a) => sig3(a),
                    None => "none (unbounded)".into(),
                },
                if selected {
                    "<span class=\"badge selected\">selected</span>"
                } else {
                    ""
                }
            );
        }
        out.push_str("</tbody>\n</table>\n");
    }
    out.push_str("</section>\n");
}

/// Ends a learning-curve figure's caption: what hollow markers mean (when some means are
/// censored) and where the drawn range stops (when estimates lie beyond it).
fn close_curve_caption(out: &mut String, censored: bool, range: Option<(f64, f64, bool)>) {
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

fn point_row(p: &PointResult) -> String {
    let reps: Vec<String> = p.replicate_means.iter().map(|v| sig3(*v)).collect();
    format!(
        "<tr><td class=\"num\">{}</td><td class=\"num\">{} ± {}</td><td class=\"mono\">{}</td>\
         <td class=\"num\">{}–{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
         <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
         <td class=\"num\">{}</td></tr>\n",
        thousands(p.n as f64),
        sig3(p.mean),
        sig3(p.standard_error),
        reps.join(", "),
        sig3(p.q10),
        sig3(p.q90),
        percent(p.censored_share),
        percent(p.blow_up_share),
        opt(p.ridge_penalty, number),
        opt(p.training_rmse, number),
        sig3(p.train_seconds),
        sig3(p.forecast_seconds_per_step * 1e6),
    )
}

fn backtest(out: &mut String, doc: &PlanDocument) {
    out.push_str(
        "<section id=\"backtest\">\n<h2>Backtest</h2>\n\
         <p>How well each family extrapolates: fitted on the first k sizes only, it predicts the \
         larger ones. The family that fits the measured points best is not always the one that \
         extrapolates best, and the last observed value is a hard baseline to beat. Families are \
         weighted by the inverse mean squared error of their prediction at the largest size (or \
         by AICc when there are too few sizes); the bootstrap draws families by these weights, so \
         the intervals above include the uncertainty of the curve's shape.</p>\n",
    );
    for m in &doc.models {
        let _ = writeln!(out, "<h3>{}</h3>", escape(&m.name));
        let Some(bt) = &m.backtest else {
            out.push_str("<p class=\"muted\">No family could be fitted.</p>\n");
            continue;
        };
        let rule = match bt.rule {
            crate::curves::WeightRule::Backtest => "inverse mean squared backtest error",
            crate::curves::WeightRule::Aicc => "Akaike weights (too few sizes to backtest)",
            crate::curves::WeightRule::Equal => "equal (too few sizes for AICc)",
        };
        let _ = write!(
            out,
            "<figure>\n{}\n<figcaption>Prediction at the largest measured size from fits on \
             the first k sizes; dashed: the observed mean there.</figcaption>\n</figure>\n\
             <table class=\"data\"><thead><tr><th>Family</th><th class=\"num\">Cases</th>\
             <th class=\"num\">RMS error at largest size</th>\
             <th class=\"num\">Mean abs. error, held-out sizes</th>\
             <th class=\"num\">Weight</th></tr></thead>\n<tbody>\n",
            svg::backtest_chart(m)
        );
        for s in &bt.scores {
            let weight = s
                .family
                .and_then(|f| bt.weights.iter().find(|(g, _)| *g == f).map(|(_, w)| *w));
            let name = match s.family {
                Some(f) => format!("{} <code>{}</code>", f.label(), escape(f.formula())),
                None => "last observed value (baseline)".into(),
            };
            let _ = writeln!(
                out,
                "<tr{}><td>{}{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td><td class=\"num\">{}</td></tr>",
                if s.cases == 0 {
                    " class=\"failed\""
                } else {
                    ""
                },
                name,
                if s.family.is_some() && s.family == m.selected {
                    " <span class=\"badge selected\">selected</span>"
                } else {
                    ""
                },
                s.cases,
                s.rms_error_at_largest
                    .map(sig3)
                    .unwrap_or_else(|| "—".into()),
                s.mean_abs_error.map(sig3).unwrap_or_else(|| "—".into()),
                weight.map(percent).unwrap_or_else(|| "—".into()),
            );
        }
        let _ = writeln!(
            out,
            "</tbody>\n</table>\n<p class=\"muted\">Weights: {rule}.</p>"
        );
    }
    out.push_str("</section>\n");
}

fn measured_points(out: &mut String, doc: &PlanDocument) {
    out.push_str(
        "<section id=\"points\">\n<h2>Measured points</h2>\n<p>Online skill (valid prediction \
         time, model time units) beside offline fit quality (one-step training RMSE in \
         standardised units). The two can disagree: a small training error does not guarantee \
         a stable free-running forecast.</p>\n",
    );
    for m in &doc.models {
        let _ = write!(
            out,
            "<h3>{}</h3>\n<table>\n<thead><tr><th class=\"num\">n</th>\
             <th class=\"num\">Mean ± s.e.</th><th>Replicate means</th>\
             <th class=\"num\">10–90%</th><th class=\"num\">Censored</th>\
             <th class=\"num\">Blow-ups</th><th class=\"num\">Ridge penalty</th>\
             <th class=\"num\">Training RMSE</th><th class=\"num\">Training (s)</th>\
             <th class=\"num\">µs per model step</th></tr></thead>\n<tbody>\n",
            escape(&m.name)
        );
        for p in &m.points {
            out.push_str(&point_row(p));
        }
        out.push_str("</tbody>\n</table>\n");
    }
    out.push_str("</section>\n");
}

/// Closures: offline fit beside online skill and long free runs, and the coupled model's cost
/// against the high-fidelity solver's.
fn closures(out: &mut String, doc: &PlanDocument) {
    let closures: Vec<_> = doc.models.iter().filter(|m| m.role == "closure").collect();
    if closures.is_empty() {
        return;
    }
    out.push_str(
        "<section id=\"closures\">\n<h2>Closures: offline against online</h2>\n<p>Each closure \
         predicts the subgrid coupling term and runs inside the coarse solver of the resolved \
         equations. <em>Offline</em>: R² of the predicted coupling term on held-out data after \
         the training pool. <em>Online</em>: valid prediction time of the coupled coarse model, \
         and long free runs from the first test initial conditions: the share that stayed \
         bounded and the Wasserstein-1 distance of the resolved variables' distribution to the \
         truth's (in standard deviations; 0 is a perfect climate). A closure can fit well \
         offline and still drift or blow up online; this table is where that shows. Closures \
         with memory (echo state network, LSTM) see the saved samples before the current one \
         as well as the state at each solver stage; their memory advances once per saved \
         sample.</p>\n",
    );
    let hf = doc.data.as_ref().and_then(|d| d.high_fidelity);
    for m in closures {
        let _ = write!(
            out,
            "<h3>{} <span class=\"muted\">({}, {})</span></h3>\n<table>\n<thead><tr>\
             <th class=\"num\">n</th><th class=\"num\">Online valid time</th>\
             <th class=\"num\">Offline R²</th><th class=\"num\">Stable free runs</th>\
             <th class=\"num\">Climate distance (σ)</th>\
             <th class=\"num\">Coupled run (s per time unit)</th></tr></thead>\n<tbody>\n",
            escape(&m.name),
            escape(&m.kind),
            escape(m.closure_inputs.as_deref().unwrap_or("")),
        );
        for p in &m.points {
            let Some(c) = &p.closure else { continue };
            let _ = writeln!(
                out,
                "<tr><td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{} of {} × {}</td><td class=\"num\">{}</td>\
                 <td class=\"num\">{}</td></tr>",
                thousands(p.n as f64),
                sig3(p.mean),
                r2(c.offline_r2),
                percent(c.stable_share),
                c.runs,
                sig3(c.horizon),
                opt(c.climate_distance, sig3),
                number(c.coupled_seconds_per_time_unit),
            );
        }
        out.push_str("</tbody>\n</table>\n");
        if let (Some(hf), Some(c)) = (hf, m.points.last().and_then(|p| p.closure.as_ref())) {
            let vars = doc.data.as_ref().map(|d| d.variables.len()).unwrap_or(0);
            let _ = writeln!(
                out,
                "<p>Cost at the largest n: the coupled coarse model integrates {} equations at \
                 {} s per model time unit; the high-fidelity system integrates {} equations at \
                 {} s per time unit (measured on this machine, one core): {}× cheaper.</p>",
                vars,
                number(c.coupled_seconds_per_time_unit),
                hf.equations,
                number(hf.seconds_per_time_unit),
                sig3(hf.seconds_per_time_unit / c.coupled_seconds_per_time_unit),
            );
        }
    }
    out.push_str("</section>\n");
}

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
    let Some((m, s)) = super::best_transfer(t, i) else {
        let mut reasons = Vec::new();
        let mut goal = None;
        for m in &t.models {
            let Some(s) = m.savings.get(i) else { continue };
            goal.get_or_insert_with(|| transfer_goal(t, i, s.target));
            let (ft, _) = super::saving_estimates(m, s);
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
    let (ft, scratch) = super::saving_estimates(m, s);
    let n = s.fine_tuned_samples.or_else(|| ft.and_then(|e| e.samples));
    let [lo, hi] = ft.map_or([None, None], |e| e.samples_interval);
    let mut lead = format!(
        "With <strong>{}</strong>, fine-tuning needs about <strong>{} samples</strong> ({} {}) \
         of the new regime to reach {}",
        escape(&m.name),
        opt(n, samples),
        confidence(doc),
        interval(lo, hi, samples),
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
        Some(e) => status_cell(e),
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
    let (ft, scratch) = super::saving_estimates(m, s);
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
fn transfer(out: &mut String, doc: &PlanDocument) {
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

/// R² with three decimals; very negative values (a closure worse than the mean) in e-notation.
fn r2(v: f64) -> String {
    if v.is_finite() && v > -100.0 {
        format!("{v:.3}")
    } else {
        sig3(v)
    }
}

fn assumptions(out: &mut String, doc: &PlanDocument) {
    let Some(c) = &doc.cost else {
        out.push_str(
            "<section id=\"assumptions\">\n<h2>Budget assumptions</h2>\n<p class=\"muted\">No \
             cost inputs were given: the estimates are in training samples only.</p>\n</section>\n",
        );
        return;
    };
    let _ = write!(
        out,
        "<section id=\"assumptions\">\n<h2>Budget assumptions</h2>\n\
         <table class=\"kv\">\n<tbody>\n\
         <tr><th>Solver cost</th><td>{} core-hours per model time unit of the high-fidelity \
         solver (your measurement)</td></tr>\n\
         <tr><th>Overhead factor</th><td>{} — every multiplier combined (I/O, checkpoints, \
         contingency, parallel efficiency; itemised below)</td></tr>\n\
         <tr><th>Runs</th><td>{} independent run{} share the samples</td></tr>\n\
         <tr><th>Spin-up per run</th><td>{} model time units, simulated and discarded by every \
         run</td></tr>\n\
         <tr><th>Sample interval</th><td>{} model time units between saved samples</td></tr>\n\
         <tr><th>Values per sample</th><td>{} values stored per saved snapshot</td></tr>\n\
         <tr><th>Bytes per value</th><td>{} ({} precision)</td></tr>\n\
         </tbody>\n</table>\n\
         <div class=\"formula\"><div>simulated time = samples × sample interval + runs × \
         spin-up per run</div><div>core-hours = simulated time × core-hours per time unit × \
         overhead factor</div><div>storage = samples × values per sample × bytes per value\
         </div></div>\n<p class=\"muted\">Storage uses decimal units (1 GB = 10⁹ bytes, 1 TB = \
         10¹² bytes). Cost intervals are the bootstrap interval of n* carried through these \
         formulas, which increase with n.</p>\n",
        number(c.core_hours_per_time_unit),
        number(c.overhead_factor),
        c.runs,
        if c.runs == 1 { "" } else { "s" },
        number(c.spin_up_per_run),
        number(c.sample_interval),
        thousands(c.values_per_sample as f64),
        c.bytes_per_value,
        if c.bytes_per_value == 4 {
            "single"
        } else {
            "double"
        },
    );
    campaign_sources(out, doc);
    out.push_str("</section>\n");
}

fn capitalised(s: &str) -> String {
    let mut c = s.chars();
    c.next()
        .map(|f| f.to_uppercase().chain(c).collect())
        .unwrap_or_default()
}

/// Every campaign number with where it comes from: the user's input, the pilot data, or a
/// cited law.
fn campaign_sources(out: &mut String, doc: &PlanDocument) {
    use crate::cost::campaign::{RateSource, RunCount};
    let Some(c) = &doc.campaign else {
        return;
    };
    let mut rows: Vec<(String, String, String)> = Vec::new();
    let input = "your input".to_string();
    let hours = c.device.hours_label();
    rows.push(match &c.rate_source {
        RateSource::Measured { core_hours_per_time_unit } => (
            "Solver rate".into(),
            format!("{} core-hours per model time unit", number(*core_hours_per_time_unit)),
            "your measurement of the solver".into(),
        ),
        RateSource::CpuPointSteps { grid_points, core_seconds_per_point_step, solver_time_step } => (
            "Solver rate".into(),
            format!(
                "{} grid points × {} core-seconds per point-step ÷ time step {} = {} core-hours per model time unit",
                sig3(*grid_points),
                number(*core_seconds_per_point_step),
                number(*solver_time_step),
                sig3(c.pilot_rate)
            ),
            input.clone(),
        ),
        RateSource::GpuPointSteps { grid_points, gpu_seconds_per_point_step, solver_time_step, gpus_per_run } => (
            "Solver rate".into(),
            format!(
                "{} grid points × {} GPU-seconds per point-step ÷ time step {} on {} GPUs per run = {} GPU-hours per model time unit",
                sig3(*grid_points),
                number(*gpu_seconds_per_point_step),
                number(*solver_time_step),
                gpus_per_run,
                sig3(c.pilot_rate)
            ),
            input.clone(),
        ),
    });
    if let Some(s) = &c.scaling {
        rows.push((
            "Reynolds-number scaling".into(),
            format!(
                "Re {} → {}: grid points ×{}, cost per time unit ×{}, so {} {hours} per model time unit",
                number(s.pilot_reynolds),
                number(s.target_reynolds),
                sig3(s.grid_factor),
                sig3(s.rate_factor),
                sig3(c.rate)
            ),
            s.law.describe(),
        ));
    }
    rows.push((
        "Runs".into(),
        match c.runs {
            RunCount::Fixed { runs } => format!("{runs}"),
            RunCount::WallLimit {
                max_wall_hours_per_run,
            } => format!(
                "the fewest runs of at most {} wall-hours each",
                number(max_wall_hours_per_run)
            ),
        },
        input.clone(),
    ));
    rows.push((
        "Spin-up per run".into(),
        format!("{} model time units", number(c.spin_up_per_run)),
        input.clone(),
    ));
    rows.push((
        "I/O overhead factor".into(),
        number(c.overhead_factor),
        input.clone(),
    ));
    if let Some(k) = &c.checkpointing {
        rows.push((
            "Checkpointing".into(),
            format!(
                "every {} wall-hours (δ = {} h, M = {} h): {} extra time",
                sig3(k.interval_hours),
                number(k.cost_hours),
                number(k.mtbf_hours),
                percent(k.overhead_fraction)
            ),
            "Young (1974), Commun. ACM 17(9): τ = √(2δM); δ and M your input".into(),
        ));
    }
    rows.push((
        "Contingency factor".into(),
        number(c.contingency_factor),
        input.clone(),
    ));
    rows.push((
        "Parallel efficiency".into(),
        number(c.parallel_efficiency),
        input.clone(),
    ));
    if let Some(d) = c.devices_per_run {
        rows.push((
            format!("{} per run", c.device.plural()),
            d.to_string(),
            input.clone(),
        ));
    }
    if let Some(d) = c.devices_per_node {
        rows.push((
            format!("{} per node", capitalised(c.device.plural())),
            format!("{d} (runs are charged for whole nodes)"),
            input.clone(),
        ));
    }
    if let Some(su) = c.service_units_per_node_hour {
        rows.push((
            "Service units".into(),
            format!("{} per node-hour", number(su)),
            input.clone(),
        ));
    }
    if let Some(g) = c.gpu_charge_factor {
        rows.push(("GPU charge factor".into(), number(g), input.clone()));
    }
    if let Some(e) = doc
        .data
        .as_ref()
        .and_then(|d| d.effective_sample_size.as_ref())
    {
        rows.push((
            "Decorrelation time".into(),
            format!(
                "up to {} samples ({} model time units)",
                sig3(e.tau_max),
                sig3(e.tau_max * e.sample_interval)
            ),
            "measured on the pilot data (Sokal's automatic window)".into(),
        ));
    }
    out.push_str(
        "<h3>Every number and its source</h3>\n<table class=\"data\"><thead><tr><th>Quantity</th>\
         <th>Value</th><th>Source</th></tr></thead>\n<tbody>\n",
    );
    for (k, v, src) in rows {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&k),
            escape(&v),
            escape(&src)
        );
    }
    out.push_str("</tbody>\n</table>\n");
}

/// The target the history follows: the largest one some model of the latest run has a budget
/// for (the most demanding answer the study gives), else the first.
fn history_target(latest: &HistoryEntry, targets: &[f64]) -> Option<f64> {
    targets
        .iter()
        .rev()
        .copied()
        .find(|&t| {
            latest
                .estimates
                .iter()
                .any(|e| e.target == t && e.status.has_budget() && e.samples.is_some())
        })
        .or_else(|| targets.first().copied())
}

/// n* with its interval, "12,000 (90% 8,000–20,000)".
fn history_estimate(doc: &PlanDocument, e: &HistoryEstimate) -> String {
    match e.samples {
        Some(n) => format!(
            "{} samples ({} {})",
            thousands(n),
            confidence(doc),
            interval(e.samples_interval[0], e.samples_interval[1], thousands)
        ),
        None => e.status.label().to_string(),
    }
}

/// How the headline estimates moved over the runs of this study in its output directory.
fn history(out: &mut String, outcome: &StudyOutcome) {
    let doc = &outcome.document;
    let h = &outcome.history;
    let (Some(latest), true) = (h.last(), h.len() >= 2) else {
        return;
    };
    let Some(target) = history_target(latest, &doc.study.targets) else {
        return;
    };
    // Compare with the last run on other data (the question is what new data did), or with
    // the run before when the data never changed.
    let previous = h[..h.len() - 1]
        .iter()
        .rev()
        .find(|r| r.data_sha256 != latest.data_sha256)
        .unwrap_or(&h[h.len() - 2]);
    let previous_run = h
        .iter()
        .position(|r| std::ptr::eq(r, previous))
        .map_or(h.len() - 1, |i| i + 1);
    out.push_str("<section id=\"history\">\n<h2>How the estimate moved</h2>\n");
    // The lead sentence follows the estimate that moved most between the two runs (ties: the
    // fewest samples now).
    let moved_by = |e: &HistoryEstimate| {
        let before = previous.estimate(&e.model, target).and_then(|b| b.samples);
        match (before, e.samples) {
            (Some(a), Some(b)) if a > 0.0 && b > 0.0 => (b / a).ln().abs(),
            _ => -1.0,
        }
    };
    let lead = latest
        .estimates
        .iter()
        .filter(|e| e.target == target && e.samples.is_some())
        .max_by(|a, b| {
            moved_by(a).total_cmp(&moved_by(b)).then(
                b.samples
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&a.samples.unwrap_or(f64::INFINITY)),
            )
        });
    let data_change = if latest.data_sha256 == previous.data_sha256 {
        "With the same pilot data".to_string()
    } else if latest.training_pool > previous.training_pool {
        format!(
            "After adding {} samples to the training pool ({} → {})",
            thousands((latest.training_pool - previous.training_pool) as f64),
            thousands(previous.training_pool as f64),
            thousands(latest.training_pool as f64)
        )
    } else {
        format!(
            "With changed pilot data (training pool {} → {} samples)",
            thousands(previous.training_pool as f64),
            thousands(latest.training_pool as f64)
        )
    };
    if let Some(e) = lead {
        let before = previous.estimate(&e.model, target);
        let moved = match (before.and_then(|b| b.samples), e.samples) {
            (Some(a), Some(b)) if b < a => "fell",
            (Some(a), Some(b)) if b > a => "rose",
            (Some(_), Some(_)) => "stayed",
            _ => "moved",
        };
        let hours = |x: &HistoryEstimate| {
            x.core_hours
                .map(|c| format!(" and {} core-hours", sig3(c)))
                .unwrap_or_default()
        };
        let _ = writeln!(
            out,
            "<p class=\"lead\">{data_change}, the estimate for <strong>{}</strong> to reach a mean \
             valid time of {} {moved} from {}{} to <strong>{}</strong>{} (run {} against run {}).</p>",
            escape(&e.model),
            short(target),
            before
                .map(|b| history_estimate(doc, b))
                .unwrap_or_else(|| "no estimate".into()),
            before.map(hours).unwrap_or_default(),
            history_estimate(doc, e),
            hours(e),
            h.len(),
            previous_run
        );
    }
    if let Some(chart) = svg::history_chart(h, target) {
        let _ = write!(
            out,
            "<figure>\n{chart}\n<figcaption>Each run of this study in its output directory \
             (<code>history.jsonl</code>), oldest first: n* for a mean valid time of {} per \
             model, with its {} interval. Estimates that narrow and settle as data arrive can be \
             trusted more than one run's interval suggests; estimates that keep moving say the \
             pilot is not yet large enough.</figcaption>\n</figure>\n",
            short(target),
            confidence(doc)
        );
    }
    out.push_str(
        "<table>\n<thead><tr><th class=\"num\">Run</th><th>Finished (UTC)</th>\
         <th class=\"num\">Training pool</th><th class=\"num\">Largest subset</th>\
         <th class=\"num\">Points reused</th><th class=\"num\">Computed</th>\
         <th>Fewest samples n* (model)</th></tr></thead>\n<tbody>\n",
    );
    for (i, run) in h.iter().enumerate() {
        let best = run
            .estimates
            .iter()
            .filter(|e| e.target == target && e.samples.is_some())
            .min_by(|a, b| {
                a.samples
                    .unwrap_or(f64::INFINITY)
                    .total_cmp(&b.samples.unwrap_or(f64::INFINITY))
            });
        let _ = writeln!(
            out,
            "<tr><td class=\"num\">{}</td><td>{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td>{}</td></tr>",
            i + 1,
            escape(&run.finished),
            thousands(run.training_pool as f64),
            thousands(run.largest_size as f64),
            thousands(run.points.reused as f64),
            thousands(run.points.computed as f64),
            best.map(|e| format!("{}: {}", escape(&e.model), history_estimate(doc, e)))
                .unwrap_or_else(|| "none".into())
        );
    }
    out.push_str("</tbody>\n</table>\n</section>\n");
}

fn runs(out: &mut String, outcome: &StudyOutcome) {
    if outcome.run_tables.is_empty() {
        return;
    }
    out.push_str(
        "<section id=\"runs\">\n<h2>Tables of runs</h2>\n<p>The campaign behind each estimate, \
         ready for an allocation request (also written as <code>tables/runs.md</code>, \
         <code>.tex</code> and <code>.csv</code>). Ranges are the bootstrap interval of n* \
         carried through the cost model.</p>\n",
    );
    out.push_str(&super::tables::runs_html(&outcome.run_tables));
    out.push_str("</section>\n");
}

fn decorrelation(out: &mut String, doc: &PlanDocument) {
    let Some(e) = doc
        .data
        .as_ref()
        .and_then(|d| d.effective_sample_size.as_ref())
    else {
        return;
    };
    let _ = write!(
        out,
        "<section id=\"decorrelation\">\n<h2>Decorrelation of the pilot data</h2>\n\
         <p>Integrated autocorrelation time τ = 1 + 2Σρ(k) per variable over the training pool \
         (Sokal's automatic window, c = {}), and the effective sample size N/τ. Samples much \
         closer than τ add storage, not information: saving every {} samples ({} model time \
         units) would cut snapshot storage by {}. This is about statistical information only: \
         a model that steps at the saved interval, like the emulators here, still needs its \
         training pairs at that interval.</p>\n\
         <table class=\"data\"><thead><tr><th>Variable</th><th class=\"num\">τ (samples)</th>\
         <th class=\"num\">τ (time units)</th><th class=\"num\">Effective samples</th>\
         <th>Reliable</th></tr></thead>\n<tbody>\n",
        number(e.window_constant),
        e.recommended_stride,
        number(e.recommended_interval),
        percent(e.storage_share_saved),
    );
    for v in &e.variables {
        let _ = writeln!(
            out,
            "<tr><td>{}</td><td class=\"num\">{}</td><td class=\"num\">{}</td>\
             <td class=\"num\">{}</td><td>{}</td></tr>",
            escape(&v.variable),
            sig3(v.tau_time / e.sample_interval),
            sig3(v.tau_time),
            thousands(v.ess),
            if v.unreliable {
                "no: series shorter than 50τ"
            } else {
                "yes"
            }
        );
    }
    out.push_str("</tbody>\n</table>\n</section>\n");
}

fn warnings(out: &mut String, doc: &PlanDocument) {
    if doc.warnings.is_empty() {
        return;
    }
    out.push_str("<section id=\"warnings\" class=\"warnings\">\n<h2>⚠ Warnings</h2>\n<ul>\n");
    for w in &doc.warnings {
        let _ = writeln!(out, "<li>{}</li>", escape(w));
    }
    out.push_str("</ul>\n</section>\n");
}

fn kv(out: &mut String, key: &str, value: &str) {
    let _ = writeln!(out, "<tr><th>{key}</th><td>{value}</td></tr>");
}

fn list(values: &[f64]) -> String {
    values
        .iter()
        .map(|v| number(*v))
        .collect::<Vec<_>>()
        .join(", ")
}

fn provenance(out: &mut String, doc: &PlanDocument) {
    let (s, t) = (&doc.study, &doc.timings);
    out.push_str(
        "<section id=\"provenance\">\n<h2>Provenance</h2>\n<table class=\"kv\">\n<tbody>\n",
    );
    kv(
        out,
        "Tool",
        &format!("closure-budget {}", escape(&doc.tool_version)),
    );
    kv(
        out,
        "Results schema",
        &format!("<code>{}</code>", escape(&doc.schema)),
    );
    kv(
        out,
        "Study",
        &format!("{} — <code>{}</code>", escape(&s.name), escape(&s.file)),
    );
    kv(
        out,
        "Study file SHA-256",
        &format!("<code class=\"hash\">{}</code>", escape(&s.file_sha256)),
    );
    kv(out, "Data source", &data_source(doc));
    if let Some(d) = &doc.data {
        if let Some(dt) = d.dt {
            kv(
                out,
                "Integration step",
                &format!("{} model time units", number(dt)),
            );
        }
        kv(
            out,
            "Samples",
            &format!(
                "{} samples every {} model time units; variables: {}",
                thousands(d.samples as f64),
                number(d.sample_interval),
                escape(&d.variables.join(", "))
            ),
        );
        kv(
            out,
            "Data content SHA-256",
            &format!("<code class=\"hash\">{}</code>", escape(&d.content_sha256)),
        );
        kv(
            out,
            "Training pool",
            &format!("{} samples", thousands(d.training_pool as f64)),
        );
        kv(
            out,
            "Test initial conditions",
            &format!(
                "{} initial conditions at samples {}–{}",
                thousands(d.test_initial_conditions as f64),
                thousands(d.test_range[0] as f64),
                thousands(d.test_range[1] as f64)
            ),
        );
    }
    let mut seed = format!("study {}", s.seed);
    if let Some(ds) = doc.data.as_ref().and_then(|d| d.seed) {
        let _ = write!(seed, "; data {ds}");
    }
    if let Some(ds) = doc.transfer.as_ref().and_then(|t| t.data.seed) {
        let _ = write!(seed, "; new-regime data {ds}");
    }
    kv(out, "Seeds", &seed);
    if let Some(t) = &doc.transfer {
        kv(
            out,
            "New-regime data",
            &format!(
                "{}; {} samples every {} model time units; content SHA-256 \
                 <code class=\"hash\">{}</code>",
                escape(&t.data.source),
                thousands(t.data.samples as f64),
                number(t.data.sample_interval),
                escape(&t.data.content_sha256)
            ),
        );
    }
    if let Some(k) = &doc.skill {
        kv(out, "Skill", &escape(&k.definition));
        let mut skill = format!(
            "threshold {}; warm-up {} and maximum lead {} model time units",
            number(k.threshold),
            number(k.warm_up),
            number(k.max_lead)
        );
        if let Some(l) = k.lyapunov_exponent {
            let _ = write!(skill, "; largest Lyapunov exponent {}", number(l));
        }
        kv(out, "Skill settings", &skill);
    }
    kv(
        out,
        "Sizes",
        &s.sizes
            .iter()
            .map(|n| thousands(*n as f64))
            .collect::<Vec<_>>()
            .join(", "),
    );
    kv(
        out,
        "Targets",
        &format!("{} model time units", list(&s.targets)),
    );
    kv(out, "Replicates", &s.replicates.to_string());
    kv(
        out,
        "Curve fits",
        match s.fit_scale {
            crate::curves::FitScale::Linear => "weighted least squares on the linear scale",
            crate::curves::FitScale::Log => {
                "weighted least squares on the log scale (relative errors)"
            }
        },
    );
    kv(
        out,
        "Bootstrap",
        &format!(
            "{} draws, {} confidence",
            thousands(s.bootstrap_draws as f64),
            confidence(doc)
        ),
    );
    for m in &doc.models {
        kv(
            out,
            &format!("Model {}", escape(&m.name)),
            &format!(
                "{} <code class=\"hash\">{}</code>",
                escape(&m.kind),
                escape(&m.settings.to_string())
            ),
        );
    }
    if let Some(p) = &doc.points {
        kv(
            out,
            "Points",
            &format!(
                "{} planned (models × sizes × replicates): {} reused from the records store, {} \
                 computed in this run{}{}",
                thousands(p.planned as f64),
                thousands(p.reused as f64),
                thousands(p.computed as f64),
                if p.stale > 0 {
                    format!(
                        " ({} of them stale: stored under changed data or settings)",
                        thousands(p.stale as f64)
                    )
                } else {
                    String::new()
                },
                if p.discarded_bytes > 0 {
                    "; an incomplete last line left by an interrupted run was discarded"
                } else {
                    ""
                }
            ),
        );
    }
    kv(
        out,
        "Stage timings",
        &format!(
            "data {} s, points {} s (training {} and forecasting {} thread-seconds), fitting {} s; \
             total {} s before writing this report (plan.json adds the report stage), on {} \
             thread{}",
            sig3(t.data),
            sig3(t.points),
            sig3(t.training),
            sig3(t.forecasting),
            sig3(t.fitting),
            sig3(t.total),
            t.threads,
            if t.threads == 1 { "" } else { "s" }
        ),
    );
    out.push_str("</tbody>\n</table>\n</section>\n");
}

fn cautions(out: &mut String, doc: &PlanDocument) {
    let _ = write!(
        out,
        "<section id=\"cautions\" class=\"cautions\">\n<h2>Cautions</h2>\n<ul>\n\
         <li>Every figure above is a statistical estimate from a small pilot study. Its \
         uncertainty is the {} interval shown beside it, and the true requirement can fall \
         outside it.</li>\n\
         <li>The estimates assume that the pilot data represent the regime of the planned \
         campaign (same physics, parameters, resolution and sampling), and that the learning \
         curve keeps its fitted shape beyond the largest measured size. The further an \
         estimate extrapolates, the less it can be trusted.</li>\n\
         <li>Before committing an allocation, check the estimate with a pilot run at or near the \
         predicted size.</li>\n\
         <li>These numbers support an allocation request; they do not replace the allocation \
         program's own rules or review.</li>\n\
         <li>A model used in engineering design must follow licensed engineering practice and be \
         validated independently; forecast skill on this benchmark is not such a \
         validation.</li>\n</ul>\n</section>\n",
        confidence(doc)
    );
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
