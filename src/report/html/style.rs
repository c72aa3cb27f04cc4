//! The page's inline style sheet (screen and print).

pub(super) const CSS: &str = r#"
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
nav.toc { font-size:.9rem; margin:10px 0 0; color:var(--muted); display:flex; flex-wrap:wrap;
  gap:.2em 1em; }
a { color:var(--accent); }
nav.toc a { color:var(--accent); text-decoration:none; white-space:nowrap; }
.scroll { max-width:100%; overflow-x:auto; }
section.summary h2 { margin-top:1.2em; }
table.summary td { padding-top:10px; padding-bottom:10px; }
ul.verdicts { padding-left:1.2em; max-width:90ch; }
ul.verdicts li { margin:.35em 0; }
td code, td.mono { overflow-wrap:anywhere; }
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
@media (max-width:960px) {
  main { padding:16px 12px 40px; }
  table { font-size:.84rem; }
  th, td { padding:5px 6px; }
  .answer td:first-child { white-space:normal; }
  .answer td:nth-child(2), .answer td:nth-child(3), .answer td:last-child { min-width:0; }
  .big { font-size:1.05rem; }
}
@page { size:auto; margin:14mm 12mm; }
@media print {
  html { font-size:10pt; }
  main { max-width:none; padding:0; }
  nav.toc { display:none; }
  .page-break { break-after:page; page-break-after:always; }
  h2, h3, h4 { break-after:avoid; page-break-after:avoid; }
  h2 + p, h3 + p { break-before:avoid; }
  figure, tr, .warnings, .floor, .formula { break-inside:avoid; page-break-inside:avoid; }
  thead { display:table-header-group; }
  .scroll { overflow:visible; }
  th, td { padding:4px 6px; }
  .answer td { padding-top:5px; padding-bottom:5px; }
  .answer td:nth-child(2), .answer td:nth-child(3), .answer td:last-child { min-width:0; }
  h2 { margin-top:1.4em; }
  svg.chart { border:none; max-width:82%; }
  figure { margin:.3em 0 .8em; }
  h3 { margin-top:1em; }
  tbody tr:nth-child(even) td { background:none; }
}
"#;
