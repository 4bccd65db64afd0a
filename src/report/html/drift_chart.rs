//! Local and propagated drift (max abs) per site, as paired bars on a logarithmic axis: drift
//! spans many decades, from float rounding to a visible approximation error. A figure of zero
//! has no place on a log axis, so it is written out (`0 · identical` when the rewrite left the
//! site as it was), and so is a figure that was not measured; neither is drawn as a bar.

use super::bars::{Layout, WIDTH, site_label};
use super::markup::{full, short};
use super::scale::{Log10, decade_label, minus};
use super::svg::{Anchor, Svg};
use crate::measure::DriftReport;
use crate::measure::metrics::Drift;
use crate::measure::result::{LocalBasis, SiteDrift};

const ROW_H: f64 = 34.0;
const BAR_H: f64 = 11.0;
const TOP: f64 = 22.0;
/// The axis spans at most this many decades below the largest figure.
const MAX_DECADES: i32 = 14;

/// The chart, or `None` when there are no sites.
pub fn render(report: &DriftReport, sites: &[&SiteDrift]) -> Option<String> {
    if sites.is_empty() {
        return None;
    }
    let labels: Vec<String> = sites.iter().map(|s| site_label(s)).collect();
    let layout = Layout::new(&labels, TOP, ROW_H, 96.0);
    let height = layout.bottom() + 30.0;
    let budget = report.budgets.site_max_abs.filter(|b| *b > 0.0);
    let figures = sites
        .iter()
        .flat_map(|s| [&s.local, &s.propagated])
        .filter_map(|d| d.as_ref().map(|d| d.max_abs))
        .chain(budget);
    let mut svg = Svg::new(
        WIDTH,
        height,
        "plot plot-drift",
        "drift per site, max abs, log scale",
    );
    svg.data("sites", &sites.len().to_string());
    let axis = Log10::covering(figures, MAX_DECADES, layout.plot);
    for i in (1..sites.len()).step_by(2) {
        svg.rect((0.0, layout.row(i)), (WIDTH, ROW_H), "row-shade", None);
    }
    if let Some(axis) = axis {
        for e in axis.ticks(14) {
            let x = axis.map(10f64.powi(e));
            svg.line((x, TOP - 4.0), (x, layout.bottom()), "grid");
            svg.text(
                (x, layout.bottom() + 16.0),
                Anchor::Middle,
                "tick",
                &decade_label(e),
                None,
            );
        }
    }
    for (i, s) in sites.iter().enumerate() {
        layout.label(&mut svg, i, &labels[i]);
        for (j, (d, what)) in [(&s.local, "local"), (&s.propagated, "propagated")]
            .into_iter()
            .enumerate()
        {
            let y = bar_y(&layout, i, j);
            match (axis, d) {
                (Some(axis), Some(d)) if d.max_abs > 0.0 && d.max_abs.is_finite() => {
                    let x1 = axis.map(d.max_abs);
                    let tip = format!("{} {what} max abs {}", s.id_a, full(d.max_abs));
                    svg.rect(
                        (layout.plot.0, y),
                        (x1 - layout.plot.0, BAR_H),
                        &format!("bar bar-{what}"),
                        Some(&tip),
                    );
                    svg.text(
                        (x1 + 5.0, y + BAR_H - 1.5),
                        Anchor::Start,
                        "bar-value",
                        &minus(&short(d.max_abs)),
                        Some(&tip),
                    );
                }
                _ => {
                    svg.text(
                        (layout.plot.0 + 4.0, y + BAR_H - 1.5),
                        Anchor::Start,
                        "bar-note",
                        &empty_note(s, d, what),
                        None,
                    );
                }
            }
        }
    }
    svg.line(
        (layout.plot.0, TOP - 4.0),
        (layout.plot.0, layout.bottom()),
        "axis",
    );
    if let (Some(b), Some(axis)) = (budget, axis) {
        let x = axis.map(b);
        svg.line((x, TOP - 6.0), (x, layout.bottom()), "budget");
        svg.text(
            (x, TOP - 9.0),
            Anchor::Middle,
            "budget-label",
            &format!("site budget {}", short(b)),
            Some(&full(b)),
        );
    }
    Some(svg.finish())
}

/// The top of bar `j` (0 local, 1 propagated) in row `i`.
fn bar_y(layout: &Layout, i: usize, j: usize) -> f64 {
    layout.row(i) + 5.0 + j as f64 * (BAR_H + 2.0)
}

/// The text standing for a figure that is no bar: zero, not finite, or not measured.
fn empty_note(s: &SiteDrift, d: &Option<Drift>, what: &str) -> String {
    match d {
        None => format!("{what}: not measured"),
        Some(d) if d.max_abs == 0.0 => {
            if what == "local" && s.local_basis == Some(LocalBasis::Identical) {
                "local: 0 · identical (site unchanged)".into()
            } else {
                format!("{what}: 0 · identical values")
            }
        }
        Some(d) => format!("{what}: {}", d.max_abs),
    }
}
