//! The report's tables: sites (plan and drift side by side), outputs, and the overview of many
//! models. Every figure is short in the cell and full in its tooltip.

use std::fmt::Write;

use super::markup::{dash, esc, fig, opt_fig, percent, ratio};
use crate::audit::{ModelSummary, Readiness};
use crate::catalog::{Kind, NamedParams, Params};
use crate::measure::DriftReport;
use crate::measure::result::{LocalBasis, SiteDrift};
use crate::plan::{Action, Planned};
use crate::report::drift_table::kind;

/// A site as the plan and the drift report see it; either may be missing.
pub struct SiteRow<'a> {
    pub planned: Option<&'a Planned>,
    pub drift: Option<&'a SiteDrift>,
}

/// Plan sites in plan order with their drift (matched on graph and output tensor), then the
/// drift report's sites the plan does not list.
pub fn site_rows<'a>(
    plan: Option<&'a [Planned]>,
    drift: Option<&'a DriftReport>,
) -> Vec<SiteRow<'a>> {
    let drift_sites: &[SiteDrift] = drift.map_or(&[], |d| &d.sites);
    let same = |p: &Planned, d: &SiteDrift| p.site.graph == d.graph && p.site.output == d.output;
    let planned = plan.unwrap_or(&[]);
    let mut rows: Vec<SiteRow> = planned
        .iter()
        .map(|p| SiteRow {
            planned: Some(p),
            drift: drift_sites.iter().find(|d| same(p, d)),
        })
        .collect();
    rows.extend(
        drift_sites
            .iter()
            .filter(|d| !planned.iter().any(|p| same(p, d)))
            .map(|d| SiteRow {
                planned: None,
                drift: Some(d),
            }),
    );
    rows
}

/// The site table and the notes under it.
pub fn sites(rows: &[SiteRow]) -> String {
    let mut out = String::from(
        "<div class=\"table-wrap\"><table class=\"sites\">\n<thead><tr><th>site</th><th>kind</th>\
<th>action</th><th>ops</th><th class=\"n\">observed input</th><th class=\"n\">bound over range</th>\
<th class=\"n\">local max abs</th><th class=\"n\">propagated max abs</th>\
<th class=\"n\">latency new/orig</th></tr></thead>\n<tbody>\n",
    );
    let mut notes: Vec<String> = Vec::new();
    for r in rows {
        let id = r
            .drift
            .map(|d| d.id_a.as_str())
            .or(r.planned.map(|p| p.site.id.as_str()))
            .unwrap_or("?");
        let (action, reason) = match r.planned.map(|p| &p.action) {
            Some(Action::Rewrite(t)) => ("rewrite", t.rule.map(str::to_string)),
            Some(Action::Keep { reason }) => ("keep", Some(reason.clone())),
            Some(Action::Unserved { reason }) => {
                notes.push(format!("{id} unserved: {reason}"));
                ("unserved", Some(reason.clone()))
            }
            None => ("-", None),
        };
        if let Some(d) = r.drift {
            notes.extend(d.notes.iter().map(|n| format!("{id}: {n}")));
        }
        let action_cell = match &reason {
            Some(why) => format!(
                "<span class=\"action-{action}\" title=\"{}\">{action}</span><br><span class=\"muted\">{}</span>",
                esc(why),
                esc(&short_reason(why))
            ),
            None if r.planned.is_none() => dash(),
            None => format!("<span class=\"action-{action}\">{action}</span>"),
        };
        let d = r.drift;
        let _ = writeln!(
            out,
            "<tr><td class=\"mono\" title=\"{}\">{}</td><td>{}</td><td>{action_cell}</td><td class=\"mono\">{}</td>\
<td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
            esc(&where_(r)),
            esc(id),
            kind_cell(r),
            ops_cell(r),
            d.and_then(|d| d.input_range).map_or_else(dash, |x| format!(
                "[{}, {}]",
                fig(x.min),
                fig(x.max)
            )),
            bound_cell(r),
            local_cell(d),
            d.and_then(|d| d.propagated.as_ref())
                .map_or_else(dash, |m| fig(m.max_abs)),
            d.and_then(|d| d.latency)
                .map_or_else(dash, |l| ratio(l.ratio)),
        );
    }
    out.push_str("</tbody></table></div>\n");
    push_notes(&mut out, &notes);
    out
}

/// The per-output table and its notes.
pub fn outputs(report: &DriftReport) -> String {
    let mut out = String::from(
        "<div class=\"table-wrap\"><table class=\"outputs\">\n<thead><tr><th>output</th>\
<th class=\"n\">max abs</th><th class=\"n\">mean abs</th><th class=\"n\">RMS</th>\
<th class=\"n\">max rel</th><th class=\"n\">cosine</th><th class=\"n\">beyond tolerance</th>\
<th class=\"n\">NaN / inf mismatches</th><th class=\"n\">top-1 agreement</th></tr></thead>\n<tbody>\n",
    );
    let mut notes: Vec<String> = Vec::new();
    for o in &report.outputs {
        notes.extend(o.notes.iter().map(|n| format!("{}: {n}", o.name)));
        let cells = match &o.metrics {
            None => {
                std::iter::repeat_n("<td class=\"n\">".to_string() + &dash() + "</td>", 7).collect()
            }
            Some(m) => {
                if let Some(note) = m.cosine_note {
                    notes.push(format!("{}: cosine {note}", o.name));
                }
                let cosine = format!(
                    "<span class=\"num\" title=\"{}\">{:.9}</span>",
                    m.cosine, m.cosine
                );
                [
                    fig(m.max_abs),
                    fig(m.mean_abs),
                    fig(m.rms),
                    fig(m.max_rel),
                    cosine,
                    format!(
                        "{} <span class=\"muted\">({} of {})</span>",
                        percent(m.beyond_tol_share),
                        m.beyond_tol,
                        m.elements
                    ),
                    format!("{} / {}", m.nan_mismatches, m.inf_mismatches),
                ]
                .map(|c| format!("<td class=\"n\">{c}</td>"))
                .concat()
            }
        };
        let top1 = o.top1_agreement.map_or_else(dash, |t| {
            format!(
                "{} <span class=\"muted\">({} of {} rows)</span>",
                percent(t.share),
                t.agreeing,
                t.rows
            )
        });
        let _ = writeln!(
            out,
            "<tr><td class=\"mono\">{}</td>{cells}<td class=\"n\">{top1}</td></tr>",
            esc(&o.name)
        );
    }
    out.push_str("</tbody></table></div>\n");
    push_notes(&mut out, &notes);
    out
}

/// The overview of many models: one row per model, linked to its section.
pub fn overview(rows: &[(String, String, Option<ModelSummary>)]) -> String {
    let mut out = String::from(
        "<div class=\"table-wrap\"><table class=\"overview\">\n<thead><tr><th>model</th><th>verdict</th>\
<th class=\"n\">sites</th><th class=\"n\">rewritten</th><th class=\"n\">kept</th><th class=\"n\">unserved</th>\
<th class=\"n\">worst local</th><th class=\"n\">worst propagated</th><th class=\"n\">worst output</th>\
<th class=\"n\">lowest cosine</th><th class=\"n\">latency</th></tr></thead>\n<tbody>\n",
    );
    for (anchor, name, s) in rows {
        let link = format!("<a href=\"#{anchor}\">{}</a>", esc(name));
        let Some(s) = s else {
            let _ = writeln!(
                out,
                "<tr><td class=\"mono\">{link}</td><td><span class=\"verdict unknown\">not measured</span></td>{}</tr>",
                format!("<td class=\"n\">{}</td>", dash()).repeat(9)
            );
            continue;
        };
        let verdict = s.verdict.as_str();
        let counts = if s.error.is_some() {
            format!("<td class=\"n\">{}</td>", dash()).repeat(4)
        } else {
            [s.sites, s.rewritten, s.kept, s.unserved]
                .map(|n| format!("<td class=\"n\">{n}</td>"))
                .concat()
        };
        let cosine = s.lowest_output_cosine.map_or_else(dash, |c| {
            format!("<span class=\"num\" title=\"{c}\">{c:.6}</span>")
        });
        let _ = writeln!(
            out,
            "<tr><td class=\"mono\">{link}</td><td><span class=\"verdict {verdict}\">{}</span></td>{counts}\
<td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{cosine}</td><td class=\"n\">{}</td></tr>",
            verdict.replace('_', " "),
            opt_fig(s.worst_local_max_abs),
            opt_fig(s.worst_propagated_max_abs),
            opt_fig(s.worst_output_max_abs),
            s.latency_ratio.map_or_else(dash, ratio),
        );
    }
    out.push_str("</tbody></table></div>\n");
    out
}

/// `swish(beta=[12 per channel]) → hard_swish`, full parameter values in the tooltip.
fn kind_cell(r: &SiteRow) -> String {
    type Side<'a> = (&'static Kind, Option<&'a Params>);
    let (a, b): (Side, Option<Side>) = match (r.drift, r.planned) {
        (Some(d), _) => (
            (d.kind_a, d.params_a.as_ref()),
            Some((d.kind_b, d.params_b.as_ref())),
        ),
        (None, Some(p)) => {
            let to = match &p.action {
                Action::Rewrite(t) => Some((t.kind, Some(&t.params))),
                _ => None,
            };
            ((p.site.kind, p.site.params.as_ref()), to)
        }
        (None, None) => return dash(),
    };
    let label = |(k, p): Side| {
        let named = NamedParams::of(k.params, p);
        if named.pairs().is_empty() {
            esc(&kind(k, p))
        } else {
            let tip = serde_json::to_string(&named).unwrap_or_default();
            format!("<span title=\"{}\">{}</span>", esc(&tip), esc(&kind(k, p)))
        }
    };
    let same = |x: Side, y: Side| x.0.id == y.0.id && x.1 == y.1;
    match b {
        Some(b) if !same(a, b) => format!("{} → {}", label(a), label(b)),
        _ => label(a),
    }
}

/// Local max abs, marked when the site was left identical (nothing was run).
fn local_cell(d: Option<&SiteDrift>) -> String {
    match d.and_then(|d| d.local.as_ref().map(|m| (m, d.local_basis))) {
        None => dash(),
        Some((m, Some(LocalBasis::Identical))) => {
            format!("{} <span class=\"muted\">identical</span>", fig(m.max_abs))
        }
        Some((m, _)) => fig(m.max_abs),
    }
}

/// The ops before and after (`Sigmoid Mul → HardSwish`).
fn ops_cell(r: &SiteRow) -> String {
    let (a, b) = match (r.drift, r.planned) {
        (Some(d), _) => (d.ops_a.join(" "), Some(d.ops_b.join(" "))),
        (None, Some(p)) => (
            p.site.ops.join(" "),
            match &p.action {
                Action::Rewrite(t) => Some(t.ops().join(" ")),
                _ => None,
            },
        ),
        (None, None) => return dash(),
    };
    match b {
        Some(b) if b != a => format!("{} → {}", esc(&a), esc(&b)),
        _ => esc(&a),
    }
}

/// The worst-case error: over the observed range when measured, else the plan's over the reals.
fn bound_cell(r: &SiteRow) -> String {
    if let Some(d) = r.drift
        && let Some((v, at)) = d.bound_over_range.zip(d.bound_at)
    {
        return if d.kind_a.id == d.kind_b.id && d.params_a == d.params_b {
            "<span class=\"muted\">exact</span>".into()
        } else {
            format!("{} <span class=\"muted\">at</span> {}", fig(v), fig(at))
        };
    }
    match r.planned.map(|p| &p.action) {
        Some(Action::Rewrite(t)) if t.rule.is_none() => "<span class=\"muted\">exact</span>".into(),
        Some(Action::Rewrite(t)) if t.bound.value.is_finite() => {
            format!("{} <span class=\"muted\">over ℝ</span>", fig(t.bound.value))
        }
        Some(Action::Rewrite(_)) => "<span class=\"muted\">unbounded</span>".into(),
        _ => dash(),
    }
}

/// `output tensor in graph`, for the site id's tooltip.
fn where_(r: &SiteRow) -> String {
    match (r.drift, r.planned) {
        (Some(d), _) => format!("{} in {}", d.output, d.graph),
        (None, Some(p)) => format!("{} in {}", p.site.output, p.site.graph),
        _ => String::new(),
    }
}

/// A reason cut to a short line for the cell (the whole of it is in the tooltip).
fn short_reason(why: &str) -> String {
    const MAX: usize = 48;
    if why.chars().count() <= MAX {
        why.to_string()
    } else {
        let mut s: String = why.chars().take(MAX - 1).collect();
        s.push('…');
        s
    }
}

/// The notes under a table, as a list; nothing when there are none.
fn push_notes(out: &mut String, notes: &[String]) {
    if notes.is_empty() {
        return;
    }
    out.push_str("<ul class=\"notes\">\n");
    for n in notes {
        let _ = writeln!(out, "<li>{}</li>", esc(n));
    }
    out.push_str("</ul>\n");
}

/// The ops of the converted model the target does not run.
pub fn refused(r: &Readiness) -> String {
    let mut out = String::from(
        "<h3>Not run by the target</h3>\n<div class=\"table-wrap\"><table class=\"refused\">\n<thead><tr><th>op</th><th class=\"n\">nodes</th><th>activation site</th><th>first nodes</th><th>why</th></tr></thead>\n<tbody>\n",
    );
    for o in &r.refused {
        let _ = writeln!(
            out,
            "<tr><td class=\"mono\">{}</td><td class=\"n\">{}</td><td>{}</td><td class=\"mono\">{}</td><td>{}</td></tr>",
            esc(&o.op),
            o.count,
            if o.activation_site { "yes" } else { "no" },
            esc(&o.first_nodes.join(", ")),
            esc(&o.reason)
        );
    }
    out.push_str("</tbody></table></div>\n");
    out
}
