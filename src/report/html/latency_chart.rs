//! Latency ratios (rewritten / original, medians) end to end and per isolated site, as bars
//! from 1× on a logarithmic axis, so that twice as fast and twice as slow are equally long.

use super::bars::{Layout, WIDTH, site_label};
use super::markup::{full, short};
use super::svg::{Anchor, Svg};
use crate::measure::DriftReport;
use crate::measure::result::SiteDrift;

const ROW_H: f64 = 24.0;
const BAR_H: f64 = 13.0;
const TOP: f64 = 8.0;
/// Axis limits tried in turn: the first that holds every ratio and its inverse.
const LIMITS: [f64; 9] = [1.25, 1.5, 2.0, 4.0, 8.0, 16.0, 64.0, 256.0, 1024.0];
/// Tick ratios, kept when inside the axis.
const TICKS: [f64; 17] = [
    1.0 / 1024.0,
    1.0 / 256.0,
    1.0 / 64.0,
    1.0 / 16.0,
    0.125,
    0.25,
    0.5,
    0.8,
    1.0,
    1.25,
    2.0,
    4.0,
    8.0,
    16.0,
    64.0,
    256.0,
    1024.0,
];

/// The chart, or `None` when nothing was timed.
pub fn render(report: &DriftReport, sites: &[&SiteDrift]) -> Option<String> {
    let mut rows: Vec<(String, f64, String)> = Vec::new();
    if let Some(l) = &report.latency {
        let tip = format!(
            "end to end: rewritten {} s / original {} s (medians of {} runs) = {}",
            full(l.b.median_s),
            full(l.a.median_s),
            l.runs,
            full(l.ratio)
        );
        rows.push(("whole model".into(), l.ratio, tip));
    }
    for s in sites {
        if let Some(l) = &s.latency {
            let tip = format!(
                "{} isolated: new {} s / original {} s = {}",
                s.id_a,
                full(l.b_median_s),
                full(l.a_median_s),
                full(l.ratio)
            );
            rows.push((site_label(s), l.ratio, tip));
        }
    }
    rows.retain(|r| r.1 > 0.0 && r.1.is_finite());
    if rows.is_empty() {
        return None;
    }
    let labels: Vec<String> = rows.iter().map(|r| r.0.clone()).collect();
    let layout = Layout::new(&labels, TOP, ROW_H, 70.0);
    let widest = rows.iter().map(|r| r.1.max(1.0 / r.1)).fold(1.0, f64::max);
    let limit = LIMITS.into_iter().find(|l| *l >= widest).unwrap_or(widest);
    let centre = (layout.plot.0 + layout.plot.1) / 2.0;
    let half = (layout.plot.1 - layout.plot.0) / 2.0;
    let x_of = |r: f64| centre + r.log2() / limit.log2() * half;

    let mut svg = Svg::new(
        WIDTH,
        layout.bottom() + 34.0,
        "plot plot-latency",
        "latency ratio, rewritten / original",
    );
    svg.data("rows", &rows.len().to_string());
    for t in TICKS
        .into_iter()
        .filter(|t| (1.0 / limit..=limit).contains(t))
    {
        let x = x_of(t);
        svg.line(
            (x, TOP),
            (x, layout.bottom()),
            if t == 1.0 { "axis" } else { "grid" },
        );
        svg.text(
            (x, layout.bottom() + 15.0),
            Anchor::Middle,
            "tick",
            &tick_label(t),
            None,
        );
    }
    svg.text(
        (layout.plot.0, layout.bottom() + 29.0),
        Anchor::Start,
        "axis-note",
        "← rewritten faster",
        None,
    );
    svg.text(
        (layout.plot.1, layout.bottom() + 29.0),
        Anchor::End,
        "axis-note",
        "rewritten slower →",
        None,
    );
    for (i, (label, ratio, tip)) in rows.iter().enumerate() {
        layout.label(&mut svg, i, label);
        let y = layout.row(i) + (ROW_H - BAR_H) / 2.0;
        let (x0, x1) = (centre, x_of(*ratio));
        let class = if *ratio <= 1.0 {
            "bar bar-faster"
        } else {
            "bar bar-slower"
        };
        svg.rect(
            (x0.min(x1), y),
            ((x1 - x0).abs().max(1.5), BAR_H),
            class,
            Some(tip),
        );
        let (tx, anchor) = if *ratio < 1.0 {
            (x1 - 5.0, Anchor::End)
        } else {
            (x1 + 5.0, Anchor::Start)
        };
        svg.text(
            (tx, y + BAR_H - 2.0),
            anchor,
            "bar-value",
            &format!("{}×", short(*ratio)),
            Some(tip),
        );
    }
    Some(svg.finish())
}

/// `2×`, `0.5×`, and `1/16×` for small fractions.
fn tick_label(t: f64) -> String {
    if t < 0.1 {
        format!("1/{}×", (1.0 / t).round())
    } else {
        format!("{}×", short(t))
    }
}
