//! Fits shared between parameter values through a kind's exact change of scale ([`Scale`]).
//!
//! With `f(x; p) = f(s x; base) / s`, a fit `g` of `f(.; base)` over `[s lo, s hi]` is a fit of
//! `f(.; p)` over `[lo, hi]`: `g(s x) / s`, with `g`'s knots and value divided by `s`, the same
//! slopes, and every error divided by `s`. The rescaled range's ends are widened outward to the
//! geometric grid `±(1 + GRID)^n` ([`cell`]), so parameter values whose rescaled ranges fall in
//! the same cell share one fit of `f(.; base)` over that cell. Each channel then gets:
//! - its constants: `g`'s rescaled, then rounded to the element type;
//! - its bound inside its own range: those rounded constants evaluated densely ([`bound::inside`]);
//! - its bound over the real line: `g`'s divided by `s`, plus the most the rounding of its
//!   constants can move the function anywhere ([`rounding_shift`]), and at least the former.
//!
//! The cost: `g` minimizes the error over a cell up to `GRID` wider at each end than the
//! channel's rescaled range, so a channel's bound may be a little above that of its own fit.

use super::super::kind::{Kind, Scale};
use super::super::substitute::ErrorBound;
use super::memo::{Memo, key};
use super::{FitBound, FitRange, Pwl, bound, minimax};

/// The ratio between neighbouring points of the grid rescaled range ends are widened to.
pub const GRID: f64 = 1.0 / 32.0;

/// Shared fits of a kind's base function, by (base, cell, segments, tails).
static SHARED: Memo = Memo::new();

/// The fit of channel parameters `p` over `range` rescaled from the kind's shared fit, with
/// constants rounded by `round`; `None` when the kind has no change of scale for `p`.
pub fn rescaled(
    kind: &'static Kind,
    p: &[f64],
    range: FitRange,
    segments: usize,
    tails: (f64, f64),
    round: fn(f64) -> f64,
) -> Option<(Pwl, FitBound)> {
    let Some(Scale::Factor { factor, base }) = kind.scale else {
        return None;
    };
    let s = factor(p);
    if !(s.is_finite() && s > 0.0) {
        return None;
    }
    let cell = cell(FitRange::new(s * range.lo, s * range.hi).ok()?)?;
    let (g, g_bound) = shared(kind, base, cell, segments, tails);
    let exact = Pwl {
        knots: g.knots.iter().map(|t| t / s).collect(),
        value: g.value / s,
        slopes: g.slopes.clone(),
    };
    let pwl = exact.rounded(round);
    let f = |x: f64| kind.eval(x, p);
    let in_range = bound::inside(&f, &pwl, range, &(kind.breakpoints)(p));
    let reals = bound::margin(ErrorBound {
        value: g_bound.over_reals.value / s + rounding_shift(&exact, &pwl),
        at: g_bound.over_reals.at / s,
    });
    let over_reals = if reals.value >= in_range.value {
        reals
    } else {
        in_range
    };
    Some((
        pwl,
        FitBound {
            in_range,
            over_reals,
        },
    ))
}

/// The fit of `kind` with parameters `base` over `cell`, unrounded, and its bound.
fn shared(
    kind: &'static Kind,
    base: &[f64],
    cell: FitRange,
    segments: usize,
    tails: (f64, f64),
) -> (Pwl, FitBound) {
    let numbers = base
        .iter()
        .copied()
        .chain([cell.lo, cell.hi, segments as f64, tails.0, tails.1]);
    let key = key(kind.id, numbers);
    if let Some(hit) = SHARED.get(&key) {
        return hit;
    }
    let f = |x: f64| kind.eval(x, base);
    let g = minimax::fit(&f, cell, segments, tails);
    let fit = (
        g.clone(),
        bound::of(&f, &g, cell, &(kind.breakpoints)(base)),
    );
    SHARED.insert(key, fit.clone());
    fit
}

/// `range` with each end moved outward to the grid `±(1 + GRID)^n` (0 stays 0).
pub fn cell(range: FitRange) -> Option<FitRange> {
    FitRange::new(on_grid(range.lo, -1.0), on_grid(range.hi, 1.0)).ok()
}

/// The grid point nearest to `v` in the direction `out` (-1: down, 1: up).
fn on_grid(v: f64, out: f64) -> f64 {
    if v == 0.0 || !v.is_finite() {
        return v;
    }
    let ln_r = GRID.ln_1p();
    let point = |n: f64| v.signum() * (n * ln_r).exp();
    // Outward is away from 0 when `v` and `out` have the same sign.
    let away = v.signum() == out;
    let n = v.abs().ln() / ln_r;
    let mut n = if away { n.ceil() } else { n.floor() };
    // `exp` may round the point to the wrong side of `v`: one more step out.
    while (point(n) - v) * out < 0.0 {
        n += if away { 1.0 } else { -1.0 };
    }
    point(n)
}

/// The most `rounded` can differ from `exact` anywhere (both with the same knots count and
/// non-decreasing knots): term by term, with `c = min(max(x - a, 0), b - a)` moving by at most
/// `|Δa| + |Δb|` when its knots `a <= b` move, and `|c| <= b - a`; a tail term moves by at most
/// `|slope| |Δknot|`. Infinite when a tail slope differs (the difference would grow with |x|).
fn rounding_shift(exact: &Pwl, rounded: &Pwl) -> f64 {
    let (t, s) = (&exact.knots, &exact.slopes);
    let (tr, sr) = (&rounded.knots, &rounded.slopes);
    let k = exact.segments();
    if s[0] != sr[0] || s[k + 1] != sr[k + 1] {
        return f64::INFINITY;
    }
    let dt: Vec<f64> = t.iter().zip(tr).map(|(a, b)| (a - b).abs()).collect();
    let mut shift = (exact.value - rounded.value).abs();
    shift += s[0].abs() * dt[0] + s[k + 1].abs() * dt[k];
    for i in 0..k {
        shift += sr[i + 1].abs() * (dt[i] + dt[i + 1])
            + (s[i + 1] - sr[i + 1]).abs() * (t[i + 1] - t[i]);
    }
    shift
}
