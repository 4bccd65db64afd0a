//! The terminal form of a plan: one row per site (site, kind, from, to, error bound, action).

use crate::catalog::ParamValue;
use crate::plan::{Action, Plan};

use super::table;

pub fn render(plan: &Plan) -> String {
    let rows: Vec<Vec<String>> = plan
        .sites
        .iter()
        .map(|p| {
            let s = &p.site;
            let from = format!(
                "{} ({})",
                format!("{:?}", s.spelling).to_lowercase(),
                s.ops.join(" ")
            );
            let (action, to, bound, why) = match &p.action {
                Action::Keep { reason } => {
                    ("keep", "-".to_string(), "-".to_string(), reason.clone())
                }
                Action::Unserved { reason } => {
                    ("UNSERVED", "-".to_string(), "-".to_string(), reason.clone())
                }
                Action::Rewrite(t) => {
                    let params: Vec<String> = t
                        .kind
                        .params
                        .iter()
                        .zip(t.params.values())
                        .map(|(p, v)| match v {
                            ParamValue::Scalar(x) => {
                                format!("{}={}", p.name, (x * 1e6).round() / 1e6)
                            }
                            ParamValue::PerChannel(xs) => {
                                format!("{}=[{} per channel]", p.name, xs.len())
                            }
                        })
                        .collect();
                    let kind = if params.is_empty() {
                        t.kind.id.to_string()
                    } else {
                        format!("{}({})", t.kind.id, params.join(" "))
                    };
                    let over_reals = if t.bound.value.is_finite() && t.bound.at.is_infinite() {
                        format!("{:.3e} as x -> {}", t.bound.value, t.bound.at)
                    } else if t.bound.value.is_finite() {
                        format!("{:.3e} at x={:.4}", t.bound.value, t.bound.at)
                    } else {
                        "unbounded".into()
                    };
                    let mut why = t.rule.unwrap_or("").to_string();
                    let (to, bound) = match t.fit.as_deref() {
                        Some((fit, source)) => {
                            let mut ops = t.ops();
                            ops.sort();
                            ops.dedup();
                            why = format!(
                                "fitted over the {} range {}",
                                format!("{source:?}").to_lowercase(),
                                fit.range
                            );
                            (
                                format!(
                                    "{kind}:fitted ({} segment{}; {})",
                                    fit.segments,
                                    if fit.segments == 1 { "" } else { "s" },
                                    ops.join(" ")
                                ),
                                format!(
                                    "{:.3e} in range, {over_reals} over the reals",
                                    fit.bound.in_range.value
                                ),
                            )
                        }
                        None => (
                            format!("{kind}:{} ({})", t.form, t.ops().join(" ")),
                            if t.rule.is_none() {
                                "exact".into()
                            } else {
                                over_reals
                            },
                        ),
                    };
                    if !t.alternatives.is_empty() {
                        let passed = format!("passed over: {}", t.alternatives.join("; "));
                        why = if why.is_empty() {
                            passed
                        } else {
                            format!("{why}; {passed}")
                        };
                    }
                    ("rewrite", to, bound, why)
                }
            };
            vec![
                s.id.clone(),
                s.kind.id.to_string(),
                from,
                action.into(),
                to,
                bound,
                why,
            ]
        })
        .collect();
    let mut out = String::new();
    for w in &plan.warnings {
        out.push_str(&format!("warning: {w}\n"));
    }
    out.push_str(&table::render(
        &[
            "site",
            "kind",
            "from",
            "action",
            "to",
            "worst-case error",
            "rule / reason",
        ],
        &rows,
    ));
    out.push_str(&format!(
        "\n{} site{}: {} to rewrite, {} kept, {} unserved\n",
        plan.sites.len(),
        if plan.sites.len() == 1 { "" } else { "s" },
        plan.rewrites().count(),
        plan.sites
            .iter()
            .filter(|p| matches!(p.action, Action::Keep { .. }))
            .count(),
        plan.unserved()
    ));
    out
}
