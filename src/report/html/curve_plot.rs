//! The plot of one swap: the original activation and its replacement over the observed input
//! range (upper panel), their absolute difference beneath on the same x axis (lower panel), the
//! 1st-99th percentile band of the inputs shaded, and the worst-case point marked. A fitted
//! form adds its fitting range (shaded beneath the band), its knots (markers on its curve) and
//! its bound in the fitting range (a dashed level in the lower panel).

use super::markup::{full, short};
use super::scale::{Linear, minus};
use super::svg::{Anchor, Svg};
use super::swaps::{Curves, FitCurve};

const WIDTH: f64 = 560.0;
const LEFT: f64 = 56.0;
const RIGHT: f64 = 16.0;
const TOP: (f64, f64) = (12.0, 206.0);
const ERR: (f64, f64) = (228.0, 324.0);
const HEIGHT: f64 = 366.0;

/// The SVG of a swap's curves at `sites` (ids, comma-separated); `label` names it for screen
/// readers.
pub fn render(c: &Curves, label: &str, sites: &str) -> String {
    let mut svg = Svg::new(WIDTH, HEIGHT, "plot plot-curves", label);
    svg.data("sites", sites);
    svg.data("worst-error", &full(c.worst.value));
    svg.data("worst-at", &full(c.worst.at));
    svg.data("points", &c.x.len().to_string());
    let xs = Linear::new(c.plotted, (LEFT, WIDTH - RIGHT));
    let (lo, hi) = finite_extent(c.a.iter().chain(&c.b));
    let pad = 0.06 * (hi - lo).max(1e-12);
    let ys = Linear::new((lo - pad, hi + pad), (TOP.1, TOP.0));
    let fit_bound = c.fit.as_ref().map(|f| f.bound.in_range.value);
    let emax = finite_extent(c.err.iter().chain([&c.worst.value]).chain(&fit_bound)).1;
    let es = Linear::new(
        (0.0, if emax > 0.0 { emax * 1.12 } else { 1.0 }),
        (ERR.1, ERR.0),
    );

    if let Some(f) = &c.fit {
        svg.data("form", "fitted");
        svg.data("segments", &f.pwl.segments().to_string());
        svg.data("fit-lo", &full(f.range.lo));
        svg.data("fit-hi", &full(f.range.hi));
        svg.data("fit-bound", &full(f.bound.in_range.value));
    }
    for (top, bottom) in [TOP, ERR] {
        if let Some(f) = &c.fit {
            let (lo, hi) = (xs.map(f.range.lo), xs.map(f.range.hi));
            svg.rect(
                (lo, top),
                (hi - lo, bottom - top),
                "fit-range",
                Some(&format!(
                    "fitting range: {} to {}",
                    full(f.range.lo),
                    full(f.range.hi)
                )),
            );
        }
        let band = (
            xs.map(c.band.0.max(c.plotted.0)),
            xs.map(c.band.1.min(c.plotted.1)),
        );
        svg.rect(
            (band.0, top),
            (band.1 - band.0, bottom - top),
            "band",
            Some(&format!(
                "1st to 99th percentile of the inputs seen: {} to {}",
                full(c.band.0),
                full(c.band.1)
            )),
        );
        svg.rect(
            (LEFT, top),
            (WIDTH - RIGHT - LEFT, bottom - top),
            "frame",
            None,
        );
    }
    if c.plotted != c.observed {
        for x in [c.observed.0, c.observed.1] {
            svg.line((xs.map(x), TOP.0), (xs.map(x), ERR.1), "observed");
        }
    }
    for t in xs.ticks(6) {
        let x = xs.map(t);
        for (top, bottom) in [TOP, ERR] {
            svg.line((x, top), (x, bottom), "grid");
        }
        svg.text(
            (x, ERR.1 + 15.0),
            Anchor::Middle,
            "tick",
            &xs.tick_label(t, 6),
            None,
        );
    }
    for t in ys.ticks(5) {
        let y = ys.map(t);
        svg.line((LEFT, y), (WIDTH - RIGHT, y), "grid");
        svg.text(
            (LEFT - 6.0, y + 4.0),
            Anchor::End,
            "tick",
            &ys.tick_label(t, 5),
            None,
        );
    }
    let mut err_ticks = es.ticks(2);
    if err_ticks.len() < 2 {
        err_ticks = es.ticks(4);
    }
    for t in err_ticks {
        let y = es.map(t);
        svg.line((LEFT, y), (WIDTH - RIGHT, y), "grid");
        let label = if t == 0.0 {
            "0".to_string()
        } else {
            minus(&short(t))
        };
        svg.text((LEFT - 6.0, y + 4.0), Anchor::End, "tick", &label, None);
    }
    svg.text(
        ((LEFT + WIDTH - RIGHT) / 2.0, HEIGHT - 6.0),
        Anchor::Middle,
        "axis-title",
        "site input x",
        None,
    );

    let points = |ys_: &Linear, v: &[f64]| -> Vec<(f64, f64)> {
        c.x.iter()
            .zip(v)
            .map(|(&x, &y)| (xs.map(x), clamp(ys_.map(y), TOP.0 - 4.0, ERR.1 + 4.0)))
            .collect()
    };
    let err_pts = points(&es, &c.err);
    let mut area = err_pts.clone();
    area.push((xs.map(c.plotted.1), ERR.1));
    area.push((xs.map(c.plotted.0), ERR.1));
    svg.polygon(&area, "err-area");
    svg.polyline(&points(&ys, &c.a), "curve curve-a");
    svg.polyline(&points(&ys, &c.b), "curve curve-b");
    svg.polyline(&err_pts, "curve curve-err");
    if let Some(f) = &c.fit {
        mark_fit(&mut svg, f, &xs, &ys, &es);
    }
    mark_worst(&mut svg, c, &xs, &ys, &es);
    svg.finish()
}

/// A fitted form's knots on its curve, and its bound in the fitting range as a level across
/// that range in the lower panel.
fn mark_fit(svg: &mut Svg, f: &FitCurve, xs: &Linear, ys: &Linear, es: &Linear) {
    let b = f.bound.in_range.value;
    if b.is_finite() {
        let y = es.map(b);
        let tip = format!(
            "bound of the fit in its range: {} (x = {})",
            full(b),
            full(f.bound.in_range.at)
        );
        svg.line(
            (xs.map(f.range.lo), y),
            (xs.map(f.range.hi), y),
            "fit-bound",
        );
        svg.text(
            (xs.map(f.range.hi) - 4.0, y - 4.0),
            Anchor::End,
            "fit-bound-label",
            &minus(&format!("bound {}", short(b))),
            Some(&tip),
        );
    }
    for (i, (x, y)) in f.knots().enumerate() {
        let tip = format!("knot {}: x = {}, fitted = {}", i + 1, full(x), full(y));
        svg.circle((xs.map(x), ys.map(y)), 3.2, "knot", Some(&tip));
    }
}

/// The worst-case point: on the error curve, on both activations, and a line joining them.
fn mark_worst(svg: &mut Svg, c: &Curves, xs: &Linear, ys: &Linear, es: &Linear) {
    let w = c.worst;
    if !(w.value.is_finite() && w.at.is_finite()) {
        return;
    }
    let tip = format!(
        "worst |original − replacement| = {} at x = {}",
        full(w.value),
        full(w.at)
    );
    let x = xs.map(w.at);
    let (ya, yb) = (c.kind_a.eval(w.at, &c.params_a), c.replacement(w.at));
    svg.line(
        (x, ys.map(ya).min(ys.map(yb))),
        (x, es.map(w.value)),
        "worst-line",
    );
    svg.circle((x, ys.map(ya)), 3.0, "dot dot-a", None);
    svg.circle((x, ys.map(yb)), 3.0, "dot dot-b", None);
    svg.circle((x, es.map(w.value)), 4.5, "worst", Some(&tip));
    let text = format!("max {} at x = {}", short(w.value), short(w.at));
    let right_half = x > (LEFT + WIDTH - RIGHT) / 2.0;
    let (tx, anchor) = if right_half {
        (x - 9.0, Anchor::End)
    } else {
        (x + 9.0, Anchor::Start)
    };
    // In the gap between the panels, which no curve enters.
    svg.text(
        (tx, ERR.0 - 5.0),
        anchor,
        "worst-label",
        &minus(&text),
        Some(&tip),
    );
}

/// The smallest and largest finite values (0 and 1 when there are none).
fn finite_extent<'a>(values: impl Iterator<Item = &'a f64>) -> (f64, f64) {
    values
        .filter(|v| v.is_finite())
        .fold(None, |acc: Option<(f64, f64)>, &v| {
            Some(acc.map_or((v, v), |(a, b)| (a.min(v), b.max(v))))
        })
        .unwrap_or((0.0, 1.0))
}

/// Keeps a coordinate (NaN included) inside the picture.
fn clamp(v: f64, lo: f64, hi: f64) -> f64 {
    if v.is_nan() { hi } else { v.clamp(lo, hi) }
}
