//! The batch summary for people: a text table for the terminal and Markdown for a CI job
//! summary, one row per model, then totals, failed models with their errors, and the caution.

use super::drift_table::num;
use super::table;
use crate::audit::{BatchReport, ModelRow, Verdict};

const HEADER: [&str; 10] = [
    "model",
    "sites",
    "rewritten",
    "unserved",
    "worst local",
    "worst output",
    "min cosine",
    "latency",
    "verdict",
    "first reason",
];

/// The summary as a terminal table.
pub fn text(r: &BatchReport) -> String {
    let rows: Vec<Vec<String>> = r.models.iter().map(row).collect();
    let mut out = context_lines(r).concat();
    out.push('\n');
    out.push_str(&table::render(&HEADER, &rows));
    out.push_str(&format!("\n{}\n", totals_line(r)));
    for m in failed(r) {
        out.push_str(&format!(
            "failed: {}: {}\n",
            m.summary.model,
            m.summary.error.as_deref().unwrap_or("")
        ));
    }
    out.push_str(&format!("caution: {}\n", r.caution));
    out
}

/// The summary as GitHub-flavoured Markdown.
pub fn markdown(r: &BatchReport) -> String {
    let cell = |s: &str| s.replace('|', "\\|");
    let mut out = String::from("## actswap batch\n\n");
    for line in context_lines(r) {
        out.push_str(&format!("- {}", cell(&line)));
    }
    out.push_str(&format!("\n**{}**\n\n", totals_line(r)));
    out.push_str(&format!("| {} |\n", HEADER.join(" | ")));
    out.push_str(&format!("|{}\n", "---|".repeat(HEADER.len())));
    for m in &r.models {
        let cells: Vec<String> = row(m)
            .iter()
            .enumerate()
            .map(|(i, c)| {
                if i == 0 {
                    format!("`{}`", cell(c))
                } else {
                    cell(c)
                }
            })
            .collect();
        out.push_str(&format!("| {} |\n", cells.join(" | ")));
    }
    let failed: Vec<&ModelRow> = failed(r).collect();
    if !failed.is_empty() {
        out.push_str("\nFailed models:\n\n");
        for m in failed {
            out.push_str(&format!(
                "- `{}`: {}\n",
                cell(&m.summary.model),
                m.summary.error.as_deref().unwrap_or("")
            ));
        }
    }
    out.push_str(&format!("\n> {}\n", r.caution));
    out
}

fn row(m: &ModelRow) -> Vec<String> {
    let s = &m.summary;
    let fig = |x: Option<f64>| x.map_or_else(|| "-".to_string(), num);
    let failed = s.verdict == Verdict::Error;
    let count = |n: usize| if failed { "-".into() } else { n.to_string() };
    vec![
        s.model.clone(),
        count(s.sites),
        count(s.rewritten),
        count(s.unserved),
        fig(s.worst_local_max_abs),
        fig(s.worst_output_max_abs),
        fig(s.lowest_output_cosine),
        s.latency_ratio
            .map_or_else(|| "-".to_string(), |x| format!("{x:.2}x")),
        s.verdict.as_str().to_string(),
        if failed {
            "see below".to_string()
        } else {
            s.reasons.first().cloned().unwrap_or_default()
        },
    ]
}

/// What the batch was judged against, one line each.
fn context_lines(r: &BatchReport) -> Vec<String> {
    let c = &r.context;
    vec![
        format!("actswap        {}\n", r.actswap),
        format!("converted for  {}\n", c.converted_for),
        format!(
            "budget         {} ({})\n",
            c.budget.describe(),
            c.budget_source
        ),
        format!("inputs         {}\n", c.inputs),
    ]
}

fn totals_line(r: &BatchReport) -> String {
    let t = &r.totals;
    format!(
        "{} models: {} pass, {} not ready for the target, {} with unserved sites, {} over \
         budget, {} with nothing compared, {} with a rewritten site unmeasured, {} failed; {} sites, {} rewritten, {} kept, {} \
         unserved",
        t.models,
        t.passed,
        t.not_ready,
        t.unserved,
        t.over_budget,
        t.nothing_compared,
        t.unmeasured,
        t.errors,
        t.sites,
        t.rewritten,
        t.kept,
        t.unserved_sites
    )
}

fn failed(r: &BatchReport) -> impl Iterator<Item = &ModelRow> {
    r.models
        .iter()
        .filter(|m| m.summary.verdict == Verdict::Error)
}
