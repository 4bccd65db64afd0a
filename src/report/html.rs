//! The HTML report: one self-contained file for one model or many.
//!
//! The file needs nothing but a browser: the style sheet is inline, fonts are the system's
//! (font stacks, no font files), the plots are inline SVG, and there is no script. A content
//! security policy in the head forbids every fetch, so even a hostile tensor name (escaped in
//! any case) cannot make the page load anything.
//!
//! Layout: title, the caution, an overview table when there is more than one model, then one
//! section per model: facts and verdict, what is over budget, the site table, drift per site
//! ([`drift_chart`]), latency ratios ([`latency_chart`]), one plot per swapped kind or fitted
//! form ([`swaps`], [`curve_plot`]) and the output table. A model that failed shows its error
//! line instead.

mod bars;
mod curve_plot;
mod drift_chart;
mod latency_chart;
mod markup;
mod scale;
mod style;
mod svg;
mod swaps;
mod tables;

use std::fmt::Write;

use crate::audit::{Audit, ModelSummary};
use crate::catalog::fit::Fitted;
use crate::measure::Budgets;
use crate::measure::result::{CAUTION, SiteDrift};
use crate::plan::{Action, Planned};
use crate::report::drift_table::kind;
use markup::{esc, fig, full, ratio};
use swaps::Swap;

pub use swaps::CURVE_POINTS;

/// One model of a report: its audit, or the error that stopped it.
pub struct ModelSection<'a> {
    /// How the model is named in the report (usually its path).
    pub name: String,
    pub audit: Option<&'a Audit>,
    /// Why the model could not be audited; when set, the section shows only this.
    pub error: Option<String>,
}

impl ModelSection<'_> {
    /// The model's summary: a failure for an error, nothing when there is neither.
    pub fn summary(&self) -> Option<ModelSummary> {
        match (&self.error, self.audit) {
            (Some(e), _) => Some(ModelSummary::failed(&self.name, e)),
            (None, Some(a)) => Some(a.summary()),
            _ => None,
        }
    }
}

/// The whole report as one HTML document.
pub fn render(title: &str, sections: &[ModelSection<'_>]) -> String {
    let mut out = String::with_capacity(64 * 1024);
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline'\">\n\
<meta name=\"generator\" content=\"actswap {}\">\n<title>{}</title>\n<style>{}</style>\n</head>\n<body>\n<main>\n",
        env!("CARGO_PKG_VERSION"),
        esc(title),
        style::CSS
    );
    let models = if sections.len() == 1 {
        "model"
    } else {
        "models"
    };
    let _ = writeln!(
        out,
        "<header><h1>{}</h1><p class=\"subtitle\">actswap {} · {} {models} · activation swaps: drift and latency measured on CPU with tract</p></header>",
        esc(title),
        env!("CARGO_PKG_VERSION"),
        sections.len()
    );
    let _ = writeln!(
        out,
        "<aside class=\"caution\" role=\"note\"><strong>Caution.</strong> {}</aside>",
        esc(CAUTION)
    );
    if sections.len() > 1 {
        let rows: Vec<_> = sections
            .iter()
            .enumerate()
            .map(|(i, s)| (anchor(i), s.name.clone(), s.summary()))
            .collect();
        out.push_str("<h2>Overview</h2>\n");
        out.push_str(&tables::overview(&rows));
    }
    for (i, s) in sections.iter().enumerate() {
        out.push_str(&section(i, s));
    }
    let _ = writeln!(
        out,
        "<footer>Made by actswap {}. Figures are short in the text; hover a figure for its full value.</footer>\n</main>\n</body>\n</html>",
        env!("CARGO_PKG_VERSION")
    );
    out
}

/// The id of section `i`.
fn anchor(i: usize) -> String {
    format!("model-{}", i + 1)
}

fn section(i: usize, s: &ModelSection) -> String {
    let mut out = format!("<section class=\"model\" id=\"{}\">\n", anchor(i));
    let verdict = s.summary().map(|x| x.verdict.as_str());
    let badge = match verdict {
        Some(v) => format!("<span class=\"verdict {v}\">{}</span>", v.replace('_', " ")),
        None => "<span class=\"verdict unknown\">not measured</span>".into(),
    };
    let _ = writeln!(
        out,
        "<h2><span class=\"mono\">{}</span> {badge}</h2>",
        esc(&s.name)
    );
    if let Some(e) = &s.error {
        let _ = writeln!(out, "<p class=\"error\">error: {}</p>", esc(e));
        out.push_str("</section>\n");
        return out;
    }
    let plan = s.audit.map(|a| &a.plan);
    let drift = s.audit.map(|a| &a.drift);
    if let Some(a) = s.audit {
        out.push_str(&facts(a));
        out.push_str(&reasons(a));
    }
    if let Some(d) = drift.filter(|d| !d.offenders.is_empty()) {
        let _ = writeln!(
            out,
            "<h3>Over budget ({})</h3>\n<ul class=\"offenders\">",
            d.offenders.len()
        );
        for o in &d.offenders {
            let what = match &o.site {
                Some(id) => format!("site {id} ({})", o.name),
                None => format!("output {}", o.name),
            };
            let _ = writeln!(out, "<li>{}: {}</li>", esc(&what), esc(&o.reason));
        }
        out.push_str("</ul>\n");
    }
    if let Some(p) = plan.filter(|p| !p.warnings.is_empty()) {
        out.push_str("<ul class=\"warnings\">\n");
        for w in &p.warnings {
            let _ = writeln!(out, "<li>warning: {}</li>", esc(w));
        }
        out.push_str("</ul>\n");
    }
    let rows = tables::site_rows(plan.map(|p| p.sites.as_slice()), drift);
    out.push_str("<h3>Sites</h3>\n");
    if rows.is_empty() {
        out.push_str("<p class=\"muted\">No activation site was found.</p>\n");
    } else {
        out.push_str(&tables::sites(&rows));
    }
    let Some(d) = drift else {
        out.push_str("<p class=\"muted\">Drift and latency were not measured.</p>\n</section>\n");
        return out;
    };
    let measured: Vec<&SiteDrift> = rows.iter().filter_map(|r| r.drift).collect();
    if let Some(svg) = drift_chart::render(d, &measured) {
        out.push_str("<h3>Drift per site</h3>\n<figure>\n<div class=\"legend\"><span><span class=\"key local\"></span>local: the new site against the original, both fed the original's input</span><span><span class=\"key propagated\"></span>propagated: the site's tensor in the rewritten model against the original model</span></div>\n");
        out.push_str(&svg);
        out.push_str("<figcaption>Max abs drift over all samples, log scale. A zero cannot sit on a log scale: it is written out instead of drawn.</figcaption>\n</figure>\n");
    }
    if let Some(svg) = latency_chart::render(d, &measured) {
        out.push_str("<h3>Latency</h3>\n<figure>\n<div class=\"legend\"><span><span class=\"key faster\"></span>rewritten faster</span><span><span class=\"key slower\"></span>rewritten slower</span></div>\n");
        out.push_str(&svg);
        out.push_str("<figcaption>Median run time of the rewritten model (or isolated site) over the original's, measured in the same run; log scale. Latency varies between machines and runs. Sites left identical are not timed.</figcaption>\n</figure>\n");
    }
    let with_fits: Vec<_> = rows
        .iter()
        .filter_map(|r| Some((r.drift?, r.planned.and_then(fit_of))))
        .collect();
    let swaps = swaps::swaps(&with_fits);
    if !swaps.is_empty() {
        out.push_str("<h3>Swapped kinds</h3>\n<div class=\"legend\"><span><span class=\"key original\"></span>original</span><span><span class=\"key replacement\"></span>replacement</span><span><span class=\"key error\"></span>|original − replacement| (lower panel)</span><span><span class=\"key band\"></span>1st–99th percentile of the inputs seen</span>");
        if swaps.iter().any(|s| s.fit.is_some()) {
            out.push_str("<span><span class=\"key fit-range\"></span>fitting range of a fitted form</span><span><span class=\"key knot\"></span>its knots</span>");
        }
        out.push_str("</div>\n<div class=\"swaps\">\n");
        for sw in &swaps {
            out.push_str(&swap(sw));
        }
        out.push_str("</div>\n");
    }
    out.push_str("<h3>Outputs</h3>\n");
    out.push_str(&tables::outputs(d));
    if !d.unmatched.is_empty() {
        out.push_str("<h3>Sites found in one model only</h3>\n<ul class=\"notes\">\n");
        for u in &d.unmatched {
            let model = if u.model == "a" {
                "original"
            } else {
                "rewritten"
            };
            let _ = writeln!(
                out,
                "<li>{model} {} {} → {} ({})</li>",
                esc(&u.id),
                esc(u.kind.id),
                esc(&u.output),
                esc(&u.graph)
            );
        }
        out.push_str("</ul>\n");
    }
    out.push_str("</section>\n");
    out
}

/// The facts of a comparison: models, inputs, tolerance, budgets, end-to-end latency.
/// The verdict's reasons, and the ops the target does not run.
fn reasons(a: &Audit) -> String {
    let judgement = a.judgement();
    let mut out = String::new();
    if !judgement.reasons.is_empty() {
        out.push_str("<h3>Verdict</h3>\n<ul class=\"reasons\">\n");
        for r in &judgement.reasons {
            let _ = writeln!(out, "<li>{}</li>", esc(r));
        }
        out.push_str("</ul>\n");
    }
    if let Some(r) = a.readiness.as_ref().filter(|r| !r.ready()) {
        out.push_str(&tables::refused(r));
    }
    out
}

fn facts(a: &Audit) -> String {
    let d = &a.drift;
    let samples = if d.samples == 1 { "sample" } else { "samples" };
    let mut out = String::from("<dl class=\"facts\">\n");
    let mut fact = |k: &str, v: String| {
        let _ = writeln!(out, "<dt>{k}</dt><dd>{v}</dd>");
    };
    fact("converted for", esc(&a.conversion));
    fact(
        "target",
        match &a.readiness {
            None => "none given: the conversion is not checked against a runtime".into(),
            Some(r) if r.ready() => "runs every node of the converted model".into(),
            Some(r) => format!("does not run {} op type(s)", r.refused.len()),
        },
    );
    fact(
        "original",
        format!("<span class=\"mono\">{}</span>", esc(&d.model_a)),
    );
    fact(
        "rewritten",
        format!("<span class=\"mono\">{}</span>", esc(&d.model_b)),
    );
    fact(
        "inputs",
        format!("{} ({} {samples})", esc(&d.input_source), d.samples),
    );
    fact(
        "tolerance",
        format!(
            "atol {}, rtol {}; max rel divides by max(|original|, {})",
            fig(d.tolerance.atol),
            fig(d.tolerance.rtol),
            fig(d.tolerance.rel_floor)
        ),
    );
    fact(
        "budget",
        format!("{} ({})", budgets(&d.budgets), esc(&a.budget_source)),
    );
    fact("actswap", env!("CARGO_PKG_VERSION").to_string());
    if let Some(l) = &d.latency {
        fact(
            "latency",
            format!(
                "{} end to end (rewritten {} / original {}, medians of {} interleaved runs after {} warm-up)",
                ratio(l.ratio),
                secs(l.b.median_s),
                secs(l.a.median_s),
                l.runs,
                l.warmup
            ),
        );
    }
    out.push_str("</dl>\n");
    out
}

fn budgets(b: &Budgets) -> String {
    let set: Vec<String> = [
        ("max abs", b.max_abs),
        ("max rel", b.max_rel),
        ("min cosine", b.min_cosine),
        ("min top-1", b.min_top1),
        ("site max abs", b.site_max_abs),
    ]
    .into_iter()
    .filter_map(|(k, v)| v.map(|v| format!("{k} {}", fig(v))))
    .collect();
    if set.is_empty() {
        "none set (non-finite mismatches still fail)".into()
    } else {
        set.join(", ")
    }
}

/// The fitted form a planned site is replaced by, if any.
fn fit_of(p: &Planned) -> Option<&Fitted> {
    match &p.action {
        Action::Rewrite(r) => r.fit.as_deref().map(|(f, _)| f),
        _ => None,
    }
}

/// One swapped kind: heading, plot and caption.
fn swap(sw: &Swap) -> String {
    let s = sw.sites[0];
    let heading = match sw.fit {
        Some(f) => format!(
            "{} → fitted ({} segment{})",
            kind(s.kind_a, s.params_a.as_ref()),
            f.segments,
            if f.segments == 1 { "" } else { "s" }
        ),
        None => format!(
            "{} → {}",
            kind(s.kind_a, s.params_a.as_ref()),
            kind(s.kind_b, s.params_b.as_ref())
        ),
    };
    let ids: Vec<&str> = sw.sites.iter().map(|s| s.id_a.as_str()).collect();
    let mut out = format!(
        "<figure class=\"swap\">\n<h4>{}</h4>\n<div class=\"muted\">site{} {}</div>\n",
        esc(&heading),
        if ids.len() == 1 { "" } else { "s" },
        esc(&ids.join(", "))
    );
    match &sw.curves {
        Err(why) => {
            let _ = writeln!(out, "<p class=\"muted\">Not plotted: {}.</p>", esc(why));
        }
        Ok(c) => {
            out.push_str(&curve_plot::render(c, &heading, &ids.join(",")));
            let mut caption = format!(
                "Observed inputs {} to {}. Worst case over that range (catalogue): {} at x = {}.",
                fig(c.observed.0),
                fig(c.observed.1),
                fig(c.worst.value),
                fig(c.worst.at)
            );
            if let Some(f) = &c.fit {
                let _ = write!(
                    caption,
                    " Fitted over {} to {} (shaded): max |error| {} there, {} over the real line. The plot reaches a tenth of that range beyond each end; dotted lines: the smallest and largest input seen; circles: the knots.",
                    fig(f.range.lo),
                    fig(f.range.hi),
                    fig(f.bound.in_range.value),
                    fig(f.bound.over_reals.value)
                );
            } else if c.plotted != c.observed {
                let _ = write!(
                    caption,
                    " The inputs span (almost) a single value, so the plot widens to {} .. {} (dotted lines: the inputs seen).",
                    fig(c.plotted.0),
                    fig(c.plotted.1)
                );
            }
            if let Some((ch, n)) = c.channel {
                let _ = write!(
                    caption,
                    " Parameters are per channel ({n} channels); plotted: channel {ch} ({}), the one with the largest worst-case error over the range.",
                    esc(&channel_params(c))
                );
            }
            let _ = writeln!(out, "<figcaption>{caption}</figcaption>");
        }
    }
    out.push_str("</figure>\n");
    out
}

/// `beta = 1.23 → none` for the plotted channel: the parameters of both kinds (of the one kind,
/// for a fitted form).
fn channel_params(c: &swaps::Curves) -> String {
    let side = |k: &crate::catalog::Kind, p: &[f64]| {
        if p.is_empty() {
            format!("{} without parameters", k.id)
        } else {
            let ps: Vec<String> = k
                .params
                .iter()
                .zip(p)
                .map(|(q, v)| format!("{} = {}", q.name, full(*v)))
                .collect();
            format!("{} {}", k.id, ps.join(", "))
        }
    };
    if c.fit.is_some() {
        return side(c.kind_a, &c.params_a);
    }
    format!(
        "{}; {}",
        side(c.kind_a, &c.params_a),
        side(c.kind_b, &c.params_b)
    )
}

/// Seconds as µs or ms.
fn secs(s: f64) -> String {
    if s < 1e-3 {
        format!(
            "<span class=\"num\" title=\"{} s\">{:.1} µs</span>",
            full(s),
            s * 1e6
        )
    } else {
        format!(
            "<span class=\"num\" title=\"{} s\">{:.3} ms</span>",
            full(s),
            s * 1e3
        )
    }
}
