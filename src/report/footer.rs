//! The end of a text report: what the model was converted for, the budget that applied, the ops
//! the target does not run, and last, the one verdict line.

use crate::audit::{Judgement, Readiness};
use crate::measure::Budgets;

use super::table;

/// What the conversion was judged against.
pub struct Judged<'a> {
    /// The target or the requests, in words (none for two models compared as files).
    pub conversion: Option<&'a str>,
    /// The budget applied and where it came from (none when nothing was measured).
    pub budget: Option<(&'a Budgets, &'a str)>,
    pub readiness: Option<&'a Readiness>,
}

/// The lines; the verdict line is the last one.
pub fn render(context: &Judged, judgement: &Judgement) -> String {
    let mut out = String::new();
    if let Some(c) = context.conversion {
        out.push_str(&format!("converted for  {c}\n"));
    }
    if let Some((b, source)) = context.budget {
        out.push_str(&format!("budget         {} ({source})\n", b.describe()));
    }
    if let Some(r) = context.readiness {
        if r.ready() {
            out.push_str("target         runs every node of the converted model\n");
        } else {
            out.push_str("\nnot run by the target:\n");
            let rows: Vec<Vec<String>> = r
                .refused
                .iter()
                .map(|o| {
                    vec![
                        o.op.clone(),
                        o.count.to_string(),
                        if o.activation_site { "yes" } else { "no" }.to_string(),
                        o.first_nodes.join(", "),
                        o.reason.clone(),
                    ]
                })
                .collect();
            out.push_str(&table::render(
                &["op", "nodes", "site", "first nodes", "why"],
                &rows,
            ));
        }
    }
    out.push_str(&format!("\nverdict: {}\n", judgement.line()));
    out
}
