//! The quick demo's `report.html` in a real browser (headless Chromium): printed to PDF it stays
//! within a page bound and its first page holds the answer (the summary heading and every
//! target); at a window 800 px wide nothing but a scrolling table container is wider than the
//! page. The demo's output, the PDF and screenshots at 1400 and 800 px are left in
//! `target/browser-test/` for a human look.
//!
//! Needs `chromium` and `pdftotext` (Debian packages `chromium` and `poppler-utils`). Skipped
//! with a printed reason when either is missing, unless the environment variable `CI` is set,
//! when it fails instead (`.ci/run` installs both).

mod common;

use common::{repo, run_in, stderr};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

/// Pages of the printed quick-demo report allowed: 12 measured on Chromium's default Letter
/// paper (Chromium 156, Debian 12), plus about 30 %.
const MAX_PAGES: usize = 16;

/// A browser run that takes longer than this is stopped and fails the test.
const BROWSER_TIMEOUT: Duration = Duration::from_secs(180);

/// The browser: the first of these names that runs.
const BROWSERS: [&str; 2] = ["chromium", "chromium-browser"];

/// Appended to a copy of the report: once the page has loaded, it writes the page's scroll
/// width, its visible width and every element whose right edge passes the visible width —
/// unless an ancestor clips or scrolls it horizontally, which keeps it inside the page — into
/// `<pre id="overflow-check">`, which `--dump-dom` then prints.
const OVERFLOW_SCRIPT: &str = r##"<script>
window.addEventListener("load", function () {
  var root = document.documentElement;
  var width = root.clientWidth;
  var contained = function (el) {
    for (var p = el.parentElement; p && p !== document.body; p = p.parentElement) {
      var o = getComputedStyle(p).overflowX;
      if (o === "auto" || o === "scroll" || o === "hidden" || o === "clip") return true;
    }
    return false;
  };
  var over = [];
  document.querySelectorAll("body *").forEach(function (el) {
    var r = el.getBoundingClientRect();
    if (r.right > width + 0.5 && !contained(el)) {
      var cls = typeof el.className === "string" && el.className ? "." + el.className : "";
      over.push(el.tagName.toLowerCase() + (el.id ? "#" + el.id : "") + cls +
        " (right edge " + Math.round(r.right) + " px)");
    }
  });
  var pre = document.createElement("pre");
  pre.id = "overflow-check";
  pre.textContent = "scroll-width=" + root.scrollWidth + "\nclient-width=" + width + "\n" +
    over.join("\n");
  document.body.appendChild(pre);
});
</script>
"##;

/// `target/browser-test/`: what the tests leave for a human look.
fn out_root() -> PathBuf {
    Path::new(env!("CARGO_TARGET_TMPDIR"))
        .parent()
        .expect("the target directory")
        .join("browser-test")
}

fn runs(program: &str, arg: &str) -> bool {
    Command::new(program)
        .arg(arg)
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success())
}

/// The browser's command name, or `None` (with the skip printed) when a tool is missing; with
/// `CI` set a missing tool fails the test.
fn tools() -> Option<&'static str> {
    static FOUND: OnceLock<Option<&'static str>> = OnceLock::new();
    *FOUND.get_or_init(|| {
        let browser = BROWSERS.into_iter().find(|b| runs(b, "--version"));
        let pdftotext = runs("pdftotext", "-v");
        let missing: Vec<&str> = [
            (browser.is_none(), "chromium (Debian package `chromium`)"),
            (!pdftotext, "pdftotext (Debian package `poppler-utils`)"),
        ]
        .into_iter()
        .filter_map(|(gone, what)| gone.then_some(what))
        .collect();
        if missing.is_empty() {
            return browser;
        }
        let what = missing.join(" and ");
        if std::env::var_os("CI").is_some() {
            panic!("{what} missing and CI is set: install them (apt-get install -y chromium poppler-utils)");
        }
        eprintln!("skipped: {what} not found; install them to render the report in a browser");
        None
    })
}

/// The quick demo's output folder (run once per test process).
fn demo() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let root = out_root();
        let out = root.join("demo");
        let _ = std::fs::remove_dir_all(&out);
        std::fs::create_dir_all(&root).unwrap();
        let o = run_in(
            &root,
            &[
                "run",
                repo("studies/demo-quick.toml").to_str().unwrap(),
                "--out",
                out.to_str().unwrap(),
                "--quiet",
            ],
        );
        assert!(o.status.success(), "{}", stderr(&o));
        out
    })
}

/// A `file://` address of an absolute path.
fn file_url(path: &Path) -> String {
    let abs = std::fs::canonicalize(path).unwrap();
    format!("file://{}", abs.display().to_string().replace(' ', "%20"))
}

/// Runs headless Chromium on `page` with `args`, with its own profile in `profile`, and returns
/// what it printed on standard output; fails the test on an error exit or after
/// [`BROWSER_TIMEOUT`]. Output goes through files in `profile`: a pipe left unread while
/// waiting would stall a browser printing a large page.
fn chromium(browser: &str, profile: &Path, args: &[&str], page: &Path) -> String {
    std::fs::create_dir_all(profile).unwrap();
    let (out_path, err_path) = (profile.join("stdout.txt"), profile.join("stderr.txt"));
    let mut child = Command::new(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-first-run",
        ])
        .arg(format!(
            "--user-data-dir={}",
            profile.join("profile").display()
        ))
        .args(args)
        .arg(file_url(page))
        .stdin(Stdio::null())
        .stdout(std::fs::File::create(&out_path).unwrap())
        .stderr(std::fs::File::create(&err_path).unwrap())
        .spawn()
        .expect("the browser starts");
    let started = Instant::now();
    let status = loop {
        if let Some(status) = child.try_wait().unwrap() {
            break status;
        }
        if started.elapsed() > BROWSER_TIMEOUT {
            let _ = child.kill();
            let _ = child.wait();
            panic!("{browser} {args:?} took more than {BROWSER_TIMEOUT:?}");
        }
        std::thread::sleep(Duration::from_millis(50));
    };
    let err = std::fs::read_to_string(&err_path).unwrap_or_default();
    assert!(status.success(), "{browser} {args:?}: {status}: {err}");
    std::fs::read_to_string(&out_path).unwrap()
}

/// Pages of a PDF: its page objects, `/Type /Page` not followed by `s` (that is `/Pages`, a node
/// of the page tree).
fn count_pages(pdf: &[u8]) -> usize {
    let mut pages = 0;
    let mut i = 0;
    while let Some(at) = find(&pdf[i..], b"/Type") {
        let mut j = i + at + b"/Type".len();
        while j < pdf.len() && pdf[j].is_ascii_whitespace() {
            j += 1;
        }
        if pdf[j..].starts_with(b"/Page") && pdf.get(j + 5) != Some(&b's') {
            pages += 1;
        }
        i = j;
    }
    pages
}

fn find(haystack: &[u8], needle: &[u8]) -> Option<usize> {
    haystack.windows(needle.len()).position(|w| w == needle)
}

/// White space collapsed to single spaces (text extracted from a PDF breaks lines anywhere).
fn words(text: &str) -> String {
    text.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// A target as the report prints it: three significant digits ("0.200", "1.20", "12.0").
fn target_text(t: f64) -> String {
    assert!(
        (0.001..1000.0).contains(&t),
        "target {t} outside the formats handled here"
    );
    let decimals = (2 - t.log10().floor() as i32).max(0) as usize;
    format!("{t:.decimals$}")
}

/// The overflow check's result for `page` at a window `width` px wide: (scroll width, visible
/// width, elements passing the visible width).
fn overflow(browser: &str, page: &Path, width: u32, profile: &Path) -> (f64, f64, Vec<String>) {
    let html = std::fs::read_to_string(page).unwrap();
    assert!(html.contains("</body>"));
    let checked = page.with_file_name(format!(
        "{}-overflow-check.html",
        page.file_stem().unwrap().to_string_lossy()
    ));
    std::fs::write(
        &checked,
        html.replace("</body>", &format!("{OVERFLOW_SCRIPT}</body>")),
    )
    .unwrap();
    let dom = chromium(
        browser,
        profile,
        &[
            &format!("--window-size={width},1000"),
            "--virtual-time-budget=2000",
            "--run-all-compositor-stages-before-draw",
            "--dump-dom",
        ],
        &checked,
    );
    let start = dom
        .find("<pre id=\"overflow-check\">")
        .unwrap_or_else(|| panic!("the check's script did not run: {dom}"));
    let body = &dom[start + "<pre id=\"overflow-check\">".len()..];
    let body = &body[..body.find("</pre>").unwrap()];
    let mut lines = body.lines();
    let mut value = |key: &str| -> f64 {
        let line = lines.next().unwrap();
        line.strip_prefix(key)
            .and_then(|v| v.parse().ok())
            .unwrap_or_else(|| panic!("expected {key}… in {body}"))
    };
    let (scroll, client) = (value("scroll-width="), value("client-width="));
    let over = lines.filter(|l| !l.is_empty()).map(String::from).collect();
    (scroll, client, over)
}

#[test]
fn printed_report_fits_its_pages_and_answers_on_the_first() {
    let Some(browser) = tools() else { return };
    let out = demo();
    let profile = tempfile::tempdir().unwrap();
    let pdf = out_root().join("report.pdf");
    chromium(
        browser,
        profile.path(),
        &[
            &format!("--print-to-pdf={}", pdf.display()),
            "--no-pdf-header-footer",
        ],
        &out.join("report.html"),
    );
    let pages = count_pages(&std::fs::read(&pdf).unwrap());
    eprintln!("the quick demo's report prints on {pages} pages");
    // The count agrees with poppler's (installed beside pdftotext).
    let info = Command::new("pdfinfo").arg(&pdf).output().unwrap();
    let info = String::from_utf8_lossy(&info.stdout).into_owned();
    let poppler = info
        .lines()
        .find_map(|l| l.strip_prefix("Pages:"))
        .and_then(|v| v.trim().parse::<usize>().ok());
    assert_eq!(Some(pages), poppler, "{info}");
    assert!(
        (2..=MAX_PAGES).contains(&pages),
        "{pages} pages; the answer has a page of its own and the whole report at most {MAX_PAGES}"
    );

    let o = Command::new("pdftotext")
        .args(["-f", "1", "-l", "1"])
        .arg(&pdf)
        .arg("-")
        .output()
        .unwrap();
    assert!(o.status.success(), "pdftotext: {}", stderr(&o));
    let first = words(&String::from_utf8_lossy(&o.stdout));
    let doc: closure_budget::study::results::PlanDocument =
        serde_json::from_slice(&std::fs::read(out.join("budget.json")).unwrap()).unwrap();
    assert!(first.contains("The answer in brief"), "{first}");
    assert!(!doc.study.targets.is_empty());
    for &t in &doc.study.targets {
        let target = format!("{} time units", target_text(t));
        assert!(first.contains(&target), "page 1 lacks {target}: {first}");
    }
    // The Lyapunov times beside the targets say where their exponent came from.
    assert!(
        first.contains("Lyapunov times: valid time × λ₁")
            && first.contains("Benettin et al. (1980); see Provenance."),
        "{first}"
    );
    assert!(
        !first.contains("Estimates per model"),
        "the evidence starts on the next page: {first}"
    );
}

#[test]
fn report_does_not_overflow_a_window_800_px_wide() {
    let Some(browser) = tools() else { return };
    let profile = tempfile::tempdir().unwrap();
    let (scroll, client, over) =
        overflow(browser, &demo().join("report.html"), 800, profile.path());
    assert!(
        (700.0..=800.0).contains(&client),
        "visible width {client} px in a window 800 px wide"
    );
    assert!(
        scroll <= client && over.is_empty(),
        "the page is {scroll} px wide in a {client} px window; wider than the window: {over:#?}"
    );
}

/// The overflow check sees an element wider than the window, and leaves alone one inside a
/// horizontally scrolling container.
#[test]
fn overflow_check_finds_a_wide_element() {
    let Some(browser) = tools() else { return };
    let dir = tempfile::tempdir().unwrap();
    let page = dir.path().join("wide.html");
    std::fs::write(
        &page,
        "<!DOCTYPE html>\n<html><body><p>text</p>\
         <div id=\"wide\" style=\"width:1200px\">wide</div>\
         <div style=\"overflow-x:auto\"><div id=\"scrolled\" style=\"width:1500px\">scrolled</div></div>\
         </body></html>\n",
    )
    .unwrap();
    let (scroll, client, over) = overflow(browser, &page, 800, &dir.path().join("profile"));
    assert!(scroll > client, "{scroll} vs {client}");
    assert!(over.iter().any(|e| e.starts_with("div#wide ")), "{over:#?}");
    assert!(!over.iter().any(|e| e.contains("scrolled")), "{over:#?}");
}

/// Screenshots of the report's first screen at 1400 and 800 px for a human look.
#[test]
fn screenshots_for_a_human_look() {
    let Some(browser) = tools() else { return };
    let report = demo().join("report.html");
    for width in [1400, 800] {
        let profile = tempfile::tempdir().unwrap();
        let png = out_root().join(format!("report-{width}px.png"));
        let _ = std::fs::remove_file(&png);
        chromium(
            browser,
            profile.path(),
            &[
                &format!("--window-size={width},2000"),
                &format!("--screenshot={}", png.display()),
            ],
            &report,
        );
        let bytes = std::fs::read(&png).unwrap();
        assert!(bytes.starts_with(b"\x89PNG\r\n\x1a\n"), "{}", png.display());
    }
}
