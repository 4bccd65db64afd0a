//! The terminal form of a scan: one row per site, then a summary by kind.

use std::io::{self, Write};

use crate::catalog::ParamValue;
use crate::scan::{ScanReport, Site};

use super::table;
use crate::text::escape;

/// The table's columns.
const HEADER: [&str; 8] = [
    "site",
    "kind",
    "params",
    "form",
    "ops",
    "input -> output",
    "graph",
    "notes",
];

/// Renders the site table and the summary, fitted to the terminal (see [`table::render`]).
pub fn render(report: &ScanReport) -> String {
    let mut out = heading(report);
    if report.sites.is_empty() {
        out.push_str("no activation sites found\n");
        return out;
    }
    let rows: Vec<Vec<String>> = report.sites.iter().map(row).collect();
    out.push_str(&table::render(&HEADER, &rows));
    out.push_str(&summary(report));
    out
}

/// Writes what [`render`] gives off a terminal, row by row, without holding the table.
pub fn write(out: &mut impl Write, report: &ScanReport) -> io::Result<()> {
    out.write_all(heading(report).as_bytes())?;
    if report.sites.is_empty() {
        return out.write_all(b"no activation sites found\n");
    }
    table::write_unwrapped(out, &HEADER, report.sites.len(), |i| row(&report.sites[i]))?;
    out.write_all(summary(report).as_bytes())
}

/// The model and its opsets.
fn heading(report: &ScanReport) -> String {
    let opsets: Vec<String> = report
        .opsets
        .iter()
        .map(|(d, v)| format!("{} {v}", escape(if d.is_empty() { "ai.onnx" } else { d })))
        .collect();
    format!(
        "model {}  (opsets: {})\n\n",
        escape(&report.model),
        opsets.join(", ")
    )
}

/// The number of sites, by kind.
fn summary(report: &ScanReport) -> String {
    let counts: Vec<String> = report
        .counts
        .iter()
        .map(|(k, n)| format!("{k} {n}"))
        .collect();
    format!(
        "\n{} site{}: {}\n",
        report.sites.len(),
        if report.sites.len() == 1 { "" } else { "s" },
        counts.join(", ")
    )
}

fn row(s: &Site) -> Vec<String> {
    let pairs = s.named_params().pairs();
    let params = if pairs.is_empty() {
        "-".to_string()
    } else {
        pairs
            .iter()
            .map(|(k, v)| format!("{k}={}", short(v)))
            .collect::<Vec<_>>()
            .join(" ")
    };
    let form = match (&s.domain, s.spelling) {
        (Some(d), _) => format!("fused ({})", escape(d)),
        (None, f) => format!("{f:?}").to_lowercase(),
    };
    let mut notes = s.notes.join("; ");
    if !s.rewritable {
        notes = if notes.is_empty() {
            "not rewritable".into()
        } else {
            format!("not rewritable: {notes}")
        };
    }
    vec![
        s.id.clone(),
        s.kind.id.to_string(),
        params,
        form,
        escape(&s.ops.join(" ")).into_owned(),
        format!("{} -> {}", escape(&s.input), escape(&s.output)),
        escape(&s.graph).into_owned(),
        escape(&notes).into_owned(),
    ]
}

/// A parameter for the table: 6 significant digits, per-channel values summarised.
fn short(v: &ParamValue) -> String {
    let num = |x: f64| format!("{}", (x * 1e6).round() / 1e6);
    let g = |x: f64| {
        if x.is_infinite() {
            if x > 0.0 { "inf".into() } else { "-inf".into() }
        } else if x != 0.0 && (x.abs() < 1e-3 || x.abs() >= 1e6) {
            format!("{x:.4e}")
        } else {
            num(x)
        }
    };
    match v {
        ParamValue::Scalar(x) => g(*x),
        ParamValue::PerChannel(xs) => {
            let (lo, hi) = xs
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
                    (a.min(x), b.max(x))
                });
            format!("[{} per channel, {}..{}]", xs.len(), g(lo), g(hi))
        }
    }
}
