//! The bound of a fitted function against its reference, by dense evaluation.
//!
//! Inside the range, the knots and the kind's breakpoints split it into pieces where the error
//! is smooth; each piece is sampled at 33 points and every local maximum of |error| refined by
//! golden-section search between its neighbours. Outside, each side is sampled geometrically
//! (8 points per octave, from 1e-3 to 1e8 beyond the range end, plus the breakpoints there) and
//! refined the same way. Beyond 1e8 every catalogue kind is on its asymptote to within 1e-8
//! (softsign, the slowest, approaches it like 1/|x|; the others exponentially), so 1e-8 is added
//! to the bound over the real line; a tail whose error still grows at 1e8 is reported as
//! unbounded.
//!
//! The reported values are the computed maxima plus a margin of 1e-9 relative and 1e-12
//! absolute, so that f64 rounding of the evaluation cannot put a bound below the error.

use super::super::substitute::{ErrorBound, golden_max};
use super::{FitRange, Pwl};

/// Samples per smooth piece inside the range (ends included).
const PIECE_SAMPLES: usize = 33;
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

/// The bound of `pwl` against `f` (whose breakpoints are `breaks`) for `range`.
pub fn of(f: &dyn Fn(f64) -> f64, pwl: &Pwl, range: FitRange, breaks: &[f64]) -> FitBound {
    let err = |x: f64| {
        let e = (f(x) - pwl.eval(x)).abs();
        if e.is_nan() { f64::INFINITY } else { e }
    };
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
    let mut inside = ErrorBound { value: 0.0, at: lo };
    for w in cuts.windows(2) {
        let xs: Vec<f64> = (0..PIECE_SAMPLES)
            .map(|j| w[0] + (w[1] - w[0]) * j as f64 / (PIECE_SAMPLES - 1) as f64)
            .collect();
        inside = larger(inside, sup(&err, &xs));
    }

    let mut whole = inside;
    for side in [-1.0, 1.0] {
        let end = if side < 0.0 { lo } else { hi };
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
            whole = ErrorBound {
                value: f64::INFINITY,
                at: side * f64::INFINITY,
            };
            break;
        }
        let mut tail = sup(&err, &xs);
        // The largest error at the farthest samples is a limit approached as x goes to infinity.
        if (tail.at - end).abs() >= TAIL_LAST / 2.0 {
            tail.at = side * f64::INFINITY;
        }
        whole = larger(whole, tail);
    }
    FitBound {
        in_range: margin(inside),
        over_reals: margin(ErrorBound {
            value: whole.value + TAIL_RESIDUAL,
            ..whole
        }),
    }
}

/// The largest of `err` at the sorted points `xs`, every local maximum refined.
fn sup(err: &dyn Fn(f64) -> f64, xs: &[f64]) -> ErrorBound {
    let ys: Vec<f64> = xs.iter().map(|&x| err(x)).collect();
    let mut best = ErrorBound {
        value: ys[0],
        at: xs[0],
    };
    let last = xs.len() - 1;
    for i in 0..xs.len() {
        let (left, right) = (ys[i.saturating_sub(1)], ys[(i + 1).min(last)]);
        let peak = ys[i] >= left && ys[i] >= right;
        // A plateau (both neighbours equal) is its own maximum.
        if !peak {
            continue;
        }
        best = larger(
            best,
            ErrorBound {
                value: ys[i],
                at: xs[i],
            },
        );
        let (a, b) = (xs[i.saturating_sub(1)], xs[(i + 1).min(last)]);
        if b > a && !(left == ys[i] && right == ys[i]) {
            let (value, at) = golden_max(err, a, b);
            best = larger(best, ErrorBound { value, at });
        }
    }
    best
}

fn larger(a: ErrorBound, b: ErrorBound) -> ErrorBound {
    if b.value > a.value { b } else { a }
}

fn margin(b: ErrorBound) -> ErrorBound {
    ErrorBound {
        value: b.value + b.value * RELATIVE_MARGIN + ABSOLUTE_MARGIN,
        at: b.at,
    }
}
