//! `report.html`: one self-contained page (inline CSS and SVG, no scripts, no network) that puts
//! the answer first (a one-page summary: per target the recommended model, its samples and cost;
//! then samples and cost per model and target), then the evidence (learning curves,
//! fits, measured points), the transfer to a new regime when the study has one, the assumptions,
//! warnings, provenance and cautions. One file per section, in page order; [`cells`] holds the
//! fragments several sections share.

mod answer;
mod assumptions;
mod backtest;
mod cautions;
mod cells;
mod closures;
mod curves;
mod data_reduction;
mod decorrelation;
mod fits;
mod header;
mod hindsight;
mod history;
mod points;
mod provenance;
mod runs;
mod style;
mod summary;
mod transfer;
mod warnings;

use std::fmt::Write;

use crate::report::format::escape;
use crate::study::results::StudyResults;

use self::answer::answer;
use self::assumptions::assumptions;
use self::backtest::backtest;
use self::cautions::cautions;
use self::closures::closures;
use self::curves::learning_curves;
use self::data_reduction::data_reduction;
use self::decorrelation::decorrelation;
use self::fits::fits;
use self::header::header;
use self::hindsight::hindsight;
use self::history::history;
use self::points::measured_points;
use self::provenance::provenance;
use self::runs::runs;
use self::style::CSS;
use self::summary::summary;
use self::transfer::transfer;
use self::warnings::warnings;

/// The whole report page. Pure: the same results give the same bytes.
pub fn html(results: &StudyResults) -> String {
    let doc = &results.document;
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
    summary(&mut out, doc);
    answer(&mut out, doc);
    learning_curves(&mut out, doc);
    fits(&mut out, doc);
    backtest(&mut out, doc);
    hindsight(&mut out, doc);
    measured_points(&mut out, doc);
    closures(&mut out, doc);
    transfer(&mut out, doc);
    history(&mut out, results);
    assumptions(&mut out, doc);
    data_reduction(&mut out, doc);
    runs(&mut out, results);
    decorrelation(&mut out, doc);
    warnings(&mut out, doc);
    provenance(&mut out, doc);
    cautions(&mut out, doc);
    out.push_str("</main>\n</body>\n</html>\n");
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::report::fixtures::{fixture, transfer_fixture};
    use crate::study::results::HistoryEntry;

    /// Two runs, the second after more data: the report says how the lead estimate moved and
    /// plots it; one run alone shows no history section.
    #[test]
    fn history_says_how_the_estimate_moved() {
        use crate::study::results::PointCounts;
        let mut o = fixture();
        o.document.points = Some(PointCounts {
            planned: 8,
            reused: 6,
            computed: 2,
            stale: 0,
            discarded_bytes: 0,
            kept: 0,
            from_shards: 0,
        });
        let now = HistoryEntry::of(&o.document, "2026-12-02T10:00:00Z".into()).unwrap();
        o.history = vec![now.clone()];
        assert!(
            !html(&o).contains("id=\"history\""),
            "one run: nothing moved yet"
        );
        let mut before = now.clone();
        before.finished = "2026-11-20T10:00:00Z".into();
        before.training_pool -= 20_000;
        before.data_sha256 = "older".into();
        for e in &mut before.estimates {
            e.samples = e.samples.map(|n| 2.0 * n);
        }
        o.history = vec![before, now.clone()];
        let page = html(&o);
        let section = &page[page.find("id=\"history\"").expect("history section")..];
        assert!(section.contains("After adding 20,000 samples"), "{section}");
        assert!(section.contains(" fell from "), "{section}");
        assert!(section.contains("<svg"), "a chart");
        assert!(section.contains("2026-11-20T10:00:00Z"), "a row per run");
    }

    #[test]
    fn answer_comes_before_the_learning_curves() {
        let page = html(&fixture());
        let answer = page.find("id=\"answer\"").expect("answer section");
        let curves = page.find("id=\"curves\"").expect("curves section");
        assert!(answer < curves);
        let order = [
            "id=\"answer\"",
            "id=\"curves\"",
            "id=\"fits\"",
            "id=\"backtest\"",
            "id=\"points\"",
            "id=\"assumptions\"",
            "id=\"warnings\"",
            "id=\"provenance\"",
            "id=\"cautions\"",
        ];
        let at: Vec<usize> = order.iter().map(|s| page.find(s).unwrap()).collect();
        assert!(at.windows(2).all(|w| w[0] < w[1]), "sections in order");
        assert!(page.contains("40,000</span> samples"));
        assert!(
            page.contains("interval 30,000–60,000"),
            "the extrapolated estimate's bounded interval"
        );
        assert!(page.contains("P(unreachable) 7"));
        assert!(page.contains("unreachable"));
        assert!(page.contains("fitted asymptote 3.00"));
    }

    /// Wherever valid times are read in Lyapunov times (the first page and the estimates), the
    /// page says where the exponent came from and points to the provenance, which gives it in
    /// full; without an exponent no Lyapunov time is shown.
    #[test]
    fn lyapunov_times_say_where_the_exponent_came_from() {
        use crate::study::results::{ComputedLyapunov, LyapunovSource};
        let mut o = fixture();
        let page = html(&o);
        let note = "Lyapunov times: valid time × λ₁ = 0.500 per model time unit, the largest \
                    Lyapunov exponent given in the study file \
                    (<code>skill.lyapunov-exponent</code>); see <a href=\"#provenance\">\
                    Provenance</a>.";
        assert_eq!(page.matches(note).count(), 2, "summary and estimates");
        let summary = &page[..page.find("id=\"answer\"").unwrap()];
        assert!(summary.contains(note) && summary.contains("Lyapunov times</span>"));
        assert!(page.contains(
            "<tr><th>Largest Lyapunov exponent</th><td>0.5 per model time unit (Lyapunov time 2 \
             time units): given in the study file (<code>skill.lyapunov-exponent</code>).</td></tr>"
        ));

        let skill = o.document.skill.as_mut().unwrap();
        skill.lyapunov_exponent = Some(19.4);
        skill.lyapunov_source = Some(LyapunovSource::Computed(ComputedLyapunov {
            method: "tangent-linear".into(),
            system: "two-scale-lorenz-96".into(),
            dt: 0.005,
            seed: 7,
            spin_up: 10.0,
            duration: 200.0,
            renormalise_every: 0.05,
            segments: 20,
            standard_error: 0.53,
        }));
        let page = html(&o);
        let note = "λ₁ = 19.4 per model time unit, the largest Lyapunov exponent of the \
                    simulated <strong>two-scale-lorenz-96</strong> system (the whole system, fast \
                    variables included), computed by the method of Benettin et al. (1980); see";
        assert_eq!(page.matches(note).count(), 2, "{page}");
        assert!(page.contains(
            "computed by the tangent-linear method of Benettin et al. (1980) from the simulated \
             <strong>two-scale-lorenz-96</strong> system at the data's parameters, RK4 step \
             0.005 and seed 7: 10 time units of spin-up, then 200 time units averaged with the \
             tangent vector renormalised every 0.05; ± 0.53 (standard error over 20 segments)."
        ));
        // The two-scale system's exponent comes from its fast variables: the provenance says
        // what that means for reading the slow variables' skill.
        assert_eq!(page.matches("fast variables set it").count(), 1);

        let skill = o.document.skill.as_mut().unwrap();
        skill.lyapunov_exponent = None;
        skill.lyapunov_source = None;
        assert!(!html(&o).contains("Lyapunov"));
    }

    #[test]
    fn user_text_is_escaped() {
        let page = html(&fixture());
        assert!(!page.contains("<script"));
        assert!(!page.contains("<b>tiny"));
        assert!(!page.contains("<test>"));
        assert!(!page.contains("<raise"));
        assert!(page.contains("Pilot &lt;script&gt;alert(1)&lt;/script&gt; &amp; co"));
        assert!(page.contains("esn &lt;b&gt;tiny&lt;/b&gt;"));
    }

    #[test]
    fn one_svg_per_model_and_no_network_references() {
        let results = fixture();
        let page = html(&results);
        assert_eq!(page.matches("<svg").count(), results.document.models.len());
        assert!(!page.contains("<?xml"));
        let rest = page.replace("xmlns=\"http://www.w3.org/2000/svg\"", "");
        assert!(!rest.contains("http://") && !rest.contains("https://"));
        assert!(!page.contains("<script"));
    }

    /// The transfer section of a page, from its opening tag to its closing one.
    fn transfer_section(page: &str) -> &str {
        let start = page
            .find("<section id=\"transfer\">")
            .expect("transfer section");
        let len = page[start..].find("</section>\n").unwrap() + "</section>\n".len();
        &page[start..start + len]
    }

    #[test]
    fn transfer_section_answers_first_and_sits_before_the_budget() {
        let results = transfer_fixture();
        let page = html(&results);
        let order = ["id=\"points\"", "id=\"transfer\"", "id=\"assumptions\""];
        let at: Vec<usize> = order.iter().map(|s| page.find(s).unwrap()).collect();
        assert!(at.windows(2).all(|w| w[0] < w[1]), "sections in order");
        assert!(page.contains(
            "<a href=\"#points\">Measured points</a><a href=\"#transfer\">Transfer</a>\
             <a href=\"#assumptions\">"
        ));
        let section = transfer_section(&page);
        let lead = "With <strong>esn-500</strong>, fine-tuning needs about <strong>1,200 \
                    samples</strong> (90% 800–2,000) of the new regime to reach 2.50 time units \
                    (a measured fine-tuning size already reaches it), saving <strong>340 core-hours</strong> (120–unbounded) against training from \
                    scratch.";
        assert!(section.contains(lead), "{section}");
        assert!(
            section.contains(
                "No model reaches 3.50 time units in the new regime by fine-tuning: with \
                 <strong>esn-500</strong>, even the fine-tuned curve saturates below the target \
                 (fitted asymptote 3.10 time units); with <strong>esn &lt;b&gt;tiny&lt;/b&gt;\
                 </strong>, no curve could be fitted to the fine-tuned skill."
            ),
            "{section}"
        );
        let zero_shot = section.find("Zero-shot").unwrap();
        assert!(
            section.find(lead).unwrap() < zero_shot,
            "the answer comes first"
        );
        assert!(section.contains("simulated <strong>two-scale-lorenz96</strong> (F = 24, h = 1)"));
        assert!(section.contains("Floor in the new regime: persistence"));
        // Zero-shot rows: base skill, zero-shot skill, gap.
        assert!(section.contains("2.85 time units</td><td class=\"num\">1.30 time units"));
        assert!(section.contains("1.55</span> time units"));
        // One k* row per model and target.
        let table = &section[section
            .find("Samples and cost per model and target")
            .unwrap()..];
        let table = &table[..table.find("</table>").unwrap()];
        assert_eq!(table.matches("<tr><td>").count(), 4, "{table}");
        assert!(table.contains("<span class=\"big\">3,800</span> samples<span class=\"sub\">conservative interval 1,000–unbounded</span>"));
        assert!(table.contains("<span class=\"big\">340</span><span class=\"sub\">conservative interval 120–unbounded</span>"));
        assert!(table.contains("<span class=\"badge reached\">extrapolated</span>"));
        assert!(table.contains("90% interval more than 3,000"), "{table}");
        assert_eq!(
            table.matches("<span class=\"badge unreachable\">").count(),
            3
        );
        assert!(section.contains("this pair of regimes") && section.contains("small pilot"));
        // One chart per model and one per transfer model; user text escaped.
        assert_eq!(page.matches("<svg").count(), 4);
        assert!(section.contains("<title>Transfer curves of model esn-500</title>"));
        assert!(!page.contains("<b>tiny") && !page.contains("<below>"));
    }

    #[test]
    fn without_transfer_the_page_and_files_are_unchanged() {
        let without = html(&fixture());
        assert!(!without.contains("transfer") && !without.contains("new regime"));
        let fixture_with = transfer_fixture();
        let with = html(&fixture_with);
        let seed = fixture_with.document.transfer.unwrap().data.seed.unwrap();
        // Its provenance row: from the key to the end of its line.
        let start = with.find("<tr><th>New-regime data</th>").unwrap();
        let row = &with[start..=start + with[start..].find('\n').unwrap()];
        let rest = with
            .replace(transfer_section(&with), "")
            .replace("<a href=\"#transfer\">Transfer</a>", "")
            .replace(row, "")
            .replace(&format!("; new-regime data {seed}"), "");
        assert_eq!(
            rest, without,
            "the transfer adds its section, link and provenance, nothing else"
        );
    }
}
