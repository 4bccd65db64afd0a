//! The bound of a fitted function against its reference, by dense evaluation.
//!
//! Inside the range, the knots and the kind's breakpoints split it into pieces where the error
//! is smooth; each piece is sampled at 33 points and every local maximum of |error| refined by
//! golden-section search between its neighbours, unless even four times the curvature sampled
//! around it could not lift it to the largest value found; the search stops once that
//! curvature leaves at most 1e-10 to find, and adds what it leaves. Between knots the fit is one
//! line, evaluated as such. Outside, each side is sampled geometrically
//! (8 points per octave, from 1e-3 to 1e8 beyond the range end, plus the breakpoints there) and
//! refined the same way. Beyond 1e8 every catalogue kind is on its asymptote to within 1e-8
//! (softsign, the slowest, approaches it like 1/|x|; the others exponentially), so 1e-8 is added
//! to the bound over the real line; a tail whose error still grows at 1e8 is reported as
//! unbounded.
//!
//! The reported values are the computed maxima plus a margin of 1e-9 relative and 1e-12
//! absolute, so that f64 rounding of the evaluation cannot put a bound below the error.

use super::super::substitute::{ErrorBound, golden_search};
use super::{FitRange, Pwl};

/// Samples per smooth piece inside the range (ends included).
const PIECE_SAMPLES: usize = 33;
/// The curvature allowed between samples, as a multiple of the largest sampled nearby.
const CURVATURE_SAFETY: f64 = 4.0;
/// What a refinement may leave to the curvature allowance it adds instead (far below the 1e-6
/// a bound may exceed the error by).
const REFINED_TO: f64 = 1e-10;
/// Geometric tail samples: first offset, last offset and points per octave.
const TAIL_FIRST: f64 = 1e-3;
const TAIL_LAST: f64 = 1e8;
/// How far beyond `TAIL_LAST` a catalogue kind may still be from its asymptote.
const TAIL_RESIDUAL: f64 = 1e-8;
const PER_OCTAVE: f64 = 8.0;
/// Margin added to every reported maximum.
const RELATIVE_MARGIN: f64 = 1e-9;
const ABSOLUTE_MARGIN: f64 = 1e-12;

/// A fitted function's worst-case |error|: inside its fitting range, and over the real line
/// (at least the former).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitBound {
    pub in_range: ErrorBound,
    pub over_reals: ErrorBound,
}

/// The fitted function on a stretch where it is linear: `y0 + slope (x - x0)`. Evaluating a
/// stretch's line instead of the whole sum keeps each sample to one reference evaluation.
#[derive(Debug, Clone, Copy)]
struct Line {
    x0: f64,
    y0: f64,
    slope: f64,
}

impl Line {
    /// `pwl` on the stretch from `x0` that holds `within` (no knot strictly between them).
    fn of(pwl: &Pwl, x0: f64, within: f64) -> Line {
        let j = pwl.knots.partition_point(|&t| t <= within);
        Line {
            x0,
            y0: pwl.eval(x0),
            slope: pwl.slopes[j],
        }
    }
}

/// |f - line| at `x`, with a NaN counted as unbounded.
fn error_on(f: &dyn Fn(f64) -> f64, line: Line) -> impl Fn(f64) -> f64 + '_ {
    move |x| {
        let e = (f(x) - (line.y0 + line.slope * (x - line.x0))).abs();
        if e.is_nan() { f64::INFINITY } else { e }
    }
}

/// The bound of `pwl` against `f` (whose breakpoints are `breaks`) for `range`.
pub fn of(f: &dyn Fn(f64) -> f64, pwl: &Pwl, range: FitRange, breaks: &[f64]) -> FitBound {
    let inside = largest_inside(f, pwl, range, breaks);
    FitBound {
        in_range: margin(inside),
        over_reals: margin(largest_over_reals(f, pwl, range, breaks, inside)),
    }
}

/// The bound of `pwl` against `f` inside `range` only.
pub fn inside(f: &dyn Fn(f64) -> f64, pwl: &Pwl, range: FitRange, breaks: &[f64]) -> ErrorBound {
    margin(largest_inside(f, pwl, range, breaks))
}

/// The largest |error| inside `range`, without margin.
fn largest_inside(
    f: &dyn Fn(f64) -> f64,
    pwl: &Pwl,
    range: FitRange,
    breaks: &[f64],
) -> ErrorBound {
    let (lo, hi) = (range.lo, range.hi);
    let mut cuts: Vec<f64> = vec![lo, hi];
    cuts.extend(
        pwl.knots
            .iter()
            .chain(breaks)
            .copied()
            .filter(|x| *x > lo && *x < hi),
    );
    cuts.sort_by(f64::total_cmp);
    cuts.dedup();
    let mut sampled = ErrorBound { value: 0.0, at: lo };
    let mut candidates = Vec::new();
    for w in cuts.windows(2) {
        let xs: Vec<f64> = (0..PIECE_SAMPLES)
            .map(|j| w[0] + (w[1] - w[0]) * j as f64 / (PIECE_SAMPLES - 1) as f64)
            .collect();
        let line = Line::of(pwl, w[0], (w[0] + w[1]) / 2.0);
        sampled = larger(sampled, peaks(f, line, &xs, &mut candidates));
    }
    refine(f, sampled, candidates)
}

/// The largest |error| over the real line (at least `inside`, the largest inside `range`),
/// without margin but with the residual beyond the farthest tail sample.
fn largest_over_reals(
    f: &dyn Fn(f64) -> f64,
    pwl: &Pwl,
    range: FitRange,
    breaks: &[f64],
    inside: ErrorBound,
) -> ErrorBound {
    let (lo, hi) = (range.lo, range.hi);
    let mut whole = inside;
    for side in [-1.0, 1.0] {
        let end = if side < 0.0 { lo } else { hi };
        // Every knot is inside the range: beyond it the fit is one line.
        let line = Line::of(pwl, end, end + side * TAIL_FIRST);
        let err = error_on(f, line);
        let mut xs: Vec<f64> = Vec::new();
        let mut d = TAIL_FIRST;
        while d <= TAIL_LAST {
            xs.push(end + side * d);
            d *= 2f64.powf(1.0 / PER_OCTAVE);
        }
        xs.extend(breaks.iter().copied().filter(|&x| (x - end) * side > 0.0));
        xs.push(end);
        xs.sort_by(f64::total_cmp);
        xs.dedup();
        let far = end + side * TAIL_LAST;
        let nearer = end + side * TAIL_LAST / 10.0;
        if err(far) > 5.0 * err(nearer).max(1e-6) {
            return ErrorBound {
                value: f64::INFINITY,
                at: side * f64::INFINITY,
            };
        }
        let mut tail = sup(f, line, &xs);
        // The largest error at the farthest samples is a limit approached as x goes to infinity.
        if (tail.at - end).abs() >= TAIL_LAST / 2.0 {
            tail.at = side * f64::INFINITY;
        }
        whole = larger(whole, tail);
    }
    ErrorBound {
        value: whole.value + TAIL_RESIDUAL,
        ..whole
    }
}

/// The largest of |f - line| at the sorted points `xs`, every local maximum that could hold
/// it refined.
fn sup(f: &dyn Fn(f64) -> f64, line: Line, xs: &[f64]) -> ErrorBound {
    let mut candidates = Vec::new();
    let best = peaks(f, line, xs, &mut candidates);
    refine(f, best, candidates)
}

/// A local maximum of sampled |error|: the sample, the samples around it, the most that
/// refining between them could add, and the curvature that figure assumes.
struct Peak {
    sample: ErrorBound,
    a: f64,
    b: f64,
    gain: f64,
    curvature: f64,
    line: Line,
}

/// The largest of |f - line| at the sorted points `xs`; its local maxima are added to `out`.
///
/// With |error''| <= C between the neighbours `a < b` of a sampled maximum, the largest value
/// there is at most the sampled one plus `C h^2 / 8`, `h` the larger of the two spacings
/// (Taylor at the largest value, whose nearest sample is at most `h / 2` away). `C` is taken as
/// [`CURVATURE_SAFETY`] times the largest second divided difference of the samples around it.
fn peaks(f: &dyn Fn(f64) -> f64, line: Line, xs: &[f64], out: &mut Vec<Peak>) -> ErrorBound {
    let err = error_on(f, line);
    let ys: Vec<f64> = xs.iter().map(|&x| err(x)).collect();
    let last = xs.len() - 1;
    let second = |j: usize| -> f64 {
        if j == 0 || j >= last {
            return 0.0;
        }
        let left = (ys[j] - ys[j - 1]) / (xs[j] - xs[j - 1]);
        let right = (ys[j + 1] - ys[j]) / (xs[j + 1] - xs[j]);
        (2.0 * (right - left) / (xs[j + 1] - xs[j - 1])).abs()
    };
    let mut best = ErrorBound {
        value: ys[0],
        at: xs[0],
    };
    for i in 0..xs.len() {
        let (left, right) = (ys[i.saturating_sub(1)], ys[(i + 1).min(last)]);
        if !(ys[i] >= left && ys[i] >= right) {
            continue;
        }
        let sample = ErrorBound {
            value: ys[i],
            at: xs[i],
        };
        best = larger(best, sample);
        let (a, b) = (xs[i.saturating_sub(1)], xs[(i + 1).min(last)]);
        // A plateau (both neighbours equal) is its own maximum.
        if b > a && !(left == ys[i] && right == ys[i]) {
            let around = i.saturating_sub(1)..=(i + 1).min(last);
            let curvature = if last >= 2 {
                CURVATURE_SAFETY * around.map(second).fold(0.0, f64::max)
            } else {
                f64::INFINITY
            };
            let h = (xs[i] - a).max(b - xs[i]);
            out.push(Peak {
                sample,
                a,
                b,
                gain: curvature * h * h / 8.0,
                curvature,
                line,
            });
        }
    }
    best
}

/// `best`, raised by golden-section search around every peak that could beat it.
fn refine(f: &dyn Fn(f64) -> f64, mut best: ErrorBound, mut peaks: Vec<Peak>) -> ErrorBound {
    let reach = |p: &Peak| p.sample.value + p.gain;
    peaks.sort_by(|p, q| reach(q).total_cmp(&reach(p)));
    for p in peaks {
        // A NaN reach (an unbounded error) is refined too.
        if reach(&p) < best.value {
            break;
        }
        best = larger(best, golden(&error_on(f, p.line), p.a, p.b, p.curvature));
    }
    best
}

/// Golden-section search for the largest of `g` in `[a, b]`, stopped once a curvature of
/// `curvature` leaves at most [`REFINED_TO`] between the best probe and the largest value (the
/// nearest probe is within 0.382 of the bracket's width of it), which is then added; without a
/// finite curvature, it runs to f64 resolution.
fn golden(g: &dyn Fn(f64) -> f64, a: f64, b: f64, curvature: f64) -> ErrorBound {
    let left = |a: f64, b: f64| curvature * (b - a) * (b - a) / 8.0;
    let (value, at, (a, b)) = golden_search(g, a, b, &|a, b| left(a, b) <= REFINED_TO);
    let rest = if curvature.is_finite() {
        left(a, b)
    } else {
        0.0
    };
    ErrorBound {
        value: value + rest,
        at,
    }
}

fn larger(a: ErrorBound, b: ErrorBound) -> ErrorBound {
    if b.value > a.value { b } else { a }
}

/// `b` plus the margin that covers f64 rounding of the evaluation.
pub fn margin(b: ErrorBound) -> ErrorBound {
    ErrorBound {
        value: b.value + b.value * RELATIVE_MARGIN + ABSOLUTE_MARGIN,
        at: b.at,
    }
}
