//! The report's one style sheet: system font stacks only, colours of our own, and the classes
//! the plots use (no element carries an inline colour).

pub const CSS: &str = r#"
:root {
  --ink: #1e2430; --muted: #5f6b7a; --line: #d8dde4; --paper: #f4f3ef; --card: #ffffff;
  --original: #1f6fb2; --replacement: #e07b12; --error: #c2362b;
  --local: #2f5d8c; --propagated: #c9962a; --faster: #2e8f62; --slower: #c8553d;
  --band: #eef1f6; --budget: #b03a2e; --fit-range: #fbf3e6;
}
* { box-sizing: border-box; }
body {
  margin: 0; background: var(--paper); color: var(--ink);
  font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", "DejaVu Sans",
    "Liberation Sans", Arial, sans-serif;
}
main { max-width: 1180px; margin: 0 auto; padding: 24px 28px 40px; }
h1 { font-size: 24px; margin: 0 0 4px; letter-spacing: -0.01em; }
h2 { font-size: 19px; margin: 0 0 10px; display: flex; gap: 12px; align-items: center; flex-wrap: wrap; }
h3 { font-size: 15px; margin: 22px 0 8px; color: #2b3442; }
.subtitle { color: var(--muted); margin: 0 0 16px; }
code, .mono { font-family: ui-monospace, "SFMono-Regular", "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 12.5px; }
.caution {
  background: #fff6e3; border: 1px solid #efc77a; border-left: 6px solid #d98a00;
  border-radius: 6px; padding: 12px 16px; margin: 0 0 22px; font-size: 14.5px;
}
.caution strong { color: #8a4b00; }
section.model {
  background: var(--card); border: 1px solid var(--line); border-radius: 10px;
  padding: 20px 24px 22px; margin: 0 0 24px; box-shadow: 0 1px 2px rgba(30, 36, 48, 0.05);
}
.table-wrap + section.model { margin-top: 24px; }
.facts { display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; margin: 0 0 8px; }
.facts dt { color: var(--muted); }
.facts dd { margin: 0; overflow-wrap: anywhere; }
.verdict {
  font-size: 12px; font-weight: 700; text-transform: uppercase; letter-spacing: 0.05em;
  padding: 2px 9px; border-radius: 999px; border: 1px solid transparent; white-space: nowrap;
}
.verdict.pass { background: #e2f3e8; color: #1c6b3c; border-color: #a9d9bb; }
.verdict.over_budget { background: #fde3df; color: #9e2417; border-color: #f0aca2; }
.verdict.unserved { background: #fff0d2; color: #7d5200; border-color: #eccb85; }
.verdict.error { background: #ebedf1; color: #39404d; border-color: #c3c9d2; }
.verdict.not_ready { background: #fde3df; color: #9e2417; border-color: #f0aca2; }
.verdict.nothing_compared { background: #fff0d2; color: #7d5200; border-color: #eccb85; }
.verdict.unmeasured { background: #fff0d2; color: #7d5200; border-color: #eccb85; }
.verdict.unknown { background: #f2f2f2; color: #666; }
p.error { background: #f6f7f9; border-left: 4px solid #8c94a1; padding: 8px 12px; margin: 6px 0 0; overflow-wrap: anywhere; }
.offenders { margin: 8px 0; padding: 8px 12px 8px 30px; background: #fdf0ee; border-radius: 6px; color: #7d1f14; }
.warnings { margin: 8px 0; padding: 8px 12px 8px 30px; background: #fff8e8; border-radius: 6px; }
table { border-collapse: collapse; width: 100%; font-size: 13px; }
.table-wrap { overflow-x: auto; }
th, td { padding: 5px 7px; border-bottom: 1px solid var(--line); text-align: left; vertical-align: top; }
th { background: #f0f2f5; font-weight: 600; color: #333b48; vertical-align: bottom; }
table.sites td:nth-child(2), table.sites td:nth-child(4) { min-width: 130px; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; }
td.n { white-space: nowrap; }
tr:hover td { background: #f8f9fb; }
.num { font-variant-numeric: tabular-nums; }
.none { color: #9aa3ae; }
.muted { color: var(--muted); }
.action-rewrite { color: #1f5f99; font-weight: 600; }
.action-keep { color: var(--muted); }
.action-unserved { color: #9e2417; font-weight: 700; }
ul.notes { margin: 6px 0 0; padding-left: 20px; color: var(--muted); font-size: 12.5px; }
figure { margin: 0; }
figcaption { font-size: 12.5px; color: var(--muted); margin-top: 4px; }
.legend { display: flex; gap: 16px; flex-wrap: wrap; font-size: 12.5px; color: #39404d; margin: 2px 0 4px; }
.key { display: inline-block; width: 22px; height: 10px; margin-right: 6px; vertical-align: middle; border-radius: 2px; }
.key.local { background: var(--local); }
.key.propagated { background: var(--propagated); }
.key.faster { background: var(--faster); }
.key.slower { background: var(--slower); }
.key.original { height: 0; border-top: 3px solid var(--original); border-radius: 0; }
.key.replacement { height: 0; border-top: 3px dashed var(--replacement); border-radius: 0; }
.key.error { background: rgba(194, 54, 43, 0.18); border-top: 2px solid var(--error); border-radius: 0; }
.key.band { background: var(--band); border: 1px solid #d5dbe5; }
.key.fit-range { background: var(--fit-range); border: 1px solid #ecd9b8; }
.key.knot { width: 10px; height: 10px; border-radius: 50%; background: #fff; border: 2px solid var(--replacement); }
.swaps { display: grid; grid-template-columns: repeat(auto-fill, minmax(500px, 1fr)); gap: 18px 22px; }
.swap { border: 1px solid var(--line); border-radius: 8px; padding: 10px 12px; }
.swap h4 { margin: 0 0 4px; font-size: 14px; }
svg.plot { display: block; width: 100%; height: auto; font-family: inherit; }
svg .frame { fill: none; stroke: #b9c1cc; stroke-width: 1; }
svg .grid { stroke: #e6e9ee; stroke-width: 1; }
svg .axis { stroke: #8a94a3; stroke-width: 1.2; }
svg .band { fill: var(--band); }
svg .fit-range { fill: var(--fit-range); }
svg .observed { stroke: #8a94a3; stroke-width: 1; stroke-dasharray: 2 3; }
svg .tick { font-size: 11.5px; fill: #566170; }
svg .axis-title, svg .axis-note { font-size: 11.5px; fill: #6b7583; }
svg .row-label { font-size: 12px; fill: #2b3442; }
svg .row-shade { fill: #f6f7f9; }
svg .bar-local { fill: var(--local); }
svg .bar-propagated { fill: var(--propagated); }
svg .bar-faster { fill: var(--faster); }
svg .bar-slower { fill: var(--slower); }
svg .bar-value { font-size: 11px; fill: #3a4250; }
svg .bar-note { font-size: 11px; fill: #7a8491; font-style: italic; }
svg .budget { stroke: var(--budget); stroke-width: 1.5; stroke-dasharray: 5 3; }
svg .budget-label { font-size: 11px; fill: var(--budget); }
svg .curve { fill: none; stroke-width: 2; stroke-linejoin: round; }
svg .curve-a { stroke: var(--original); stroke-width: 2.4; }
svg .curve-b { stroke: var(--replacement); stroke-dasharray: 7 4; }
svg .curve-err { stroke: var(--error); stroke-width: 1.6; }
svg .err-area { fill: rgba(194, 54, 43, 0.14); stroke: none; }
svg .worst { fill: #fff; stroke: var(--error); stroke-width: 2.2; }
svg .worst-line { stroke: var(--error); stroke-width: 1; stroke-dasharray: 3 3; }
svg .dot-a { fill: var(--original); }
svg .dot-b { fill: var(--replacement); }
svg .worst-label { font-size: 11.5px; fill: var(--error); font-weight: 600; }
svg .knot { fill: #fff; stroke: var(--replacement); stroke-width: 1.8; }
svg .fit-bound { stroke: var(--error); stroke-width: 1; stroke-dasharray: 6 3; opacity: 0.7; }
svg .fit-bound-label { font-size: 11px; fill: var(--error); }
footer { color: var(--muted); font-size: 12px; text-align: center; margin-top: 8px; }
"#;
