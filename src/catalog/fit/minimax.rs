//! The near-minimax fit of one scalar function by a continuous piecewise-linear function with
//! given tail slopes.
//!
//! The `K + 1` knots split the range into `K + 2` pieces (the left tail's part of the range, the
//! `K` segments, the right tail's part). Each round:
//! - every piece's chord deviation `d` (the signed extreme of f minus the chord through f at the
//!   piece's knots; for a tail piece, minus the tail line through f at its knot) is sampled;
//! - each knot's value is f at the knot plus a quarter of the deviations of its two pieces: in a
//!   convex or concave stretch, where neighbouring deviations agree, that shifts every chord by
//!   half its deviation and the error equioscillates between +-d/2 (common practice for
//!   best-approximation by broken lines);
//! - every piece's maximum error is sampled, and each piece's length is scaled by
//!   `(mean / its error)^(1/4)` (clamped to a factor of 2^(1/2) per round), since a chord's
//!   error grows like the square of its length.
//!
//! The best round is kept; the rounds stop after [`ROUNDS`], or after [`PATIENCE`] rounds that
//! did not lower the best error by a thousandth.

use super::{FitRange, Pwl};

/// Rounds of knot moving.
const ROUNDS: usize = 60;
/// Rounds without a gain of 1e-3 (relative) before the fit stops.
const PATIENCE: usize = 8;
/// Samples per piece, ends included.
const SAMPLES: usize = 48;

/// Fits `f` over `range` with `segments` segments and tails of slopes `tails` (left, right).
pub fn fit(f: &dyn Fn(f64) -> f64, range: FitRange, segments: usize, tails: (f64, f64)) -> Pwl {
    let (lo, hi) = (range.lo, range.hi);
    let knots = segments + 1;
    let pieces = knots + 1;
    let mut t: Vec<f64> = (1..=knots)
        .map(|j| lo + (hi - lo) * j as f64 / pieces as f64)
        .collect();
    let mut best: Option<(f64, Vec<f64>, Vec<f64>)> = None;
    let mut stale = 0;
    let mut xs = vec![0.0; SAMPLES];
    let mut fs: Vec<Vec<f64>> = vec![vec![0.0; SAMPLES]; pieces];
    let mut sample_x: Vec<Vec<f64>> = vec![vec![0.0; SAMPLES]; pieces];
    for _ in 0..ROUNDS {
        let edges: Vec<f64> = std::iter::once(lo)
            .chain(t.iter().copied())
            .chain(std::iter::once(hi))
            .collect();
        for i in 0..pieces {
            let (a, b) = (edges[i], edges[i + 1]);
            for (j, x) in xs.iter_mut().enumerate() {
                *x = a + (b - a) * j as f64 / (SAMPLES - 1) as f64;
            }
            sample_x[i].copy_from_slice(&xs);
            for (y, &x) in fs[i].iter_mut().zip(&xs) {
                *y = f(x);
            }
        }
        let ft: Vec<f64> = t.iter().map(|&x| f(x)).collect();

        // Chord deviations with the knot values at f.
        let line = |i: usize, y: &[f64], x: f64| -> f64 {
            if i == 0 {
                y[0] + tails.0 * (x - t[0])
            } else if i == pieces - 1 {
                y[knots - 1] + tails.1 * (x - t[knots - 1])
            } else {
                let (a, b) = (t[i - 1], t[i]);
                if b > a {
                    y[i - 1] + (y[i] - y[i - 1]) * (x - a) / (b - a)
                } else {
                    y[i - 1]
                }
            }
        };
        let extreme = |i: usize, y: &[f64]| -> f64 {
            sample_x[i]
                .iter()
                .zip(&fs[i])
                .map(|(&x, &fx)| fx - line(i, y, x))
                .fold(0.0f64, |m, d| if d.abs() > m.abs() { d } else { m })
        };
        let d: Vec<f64> = (0..pieces).map(|i| extreme(i, &ft)).collect();
        let y: Vec<f64> = (0..knots)
            .map(|j| ft[j] + (d[j] + d[j + 1]) / 4.0)
            .collect();
        let errors: Vec<f64> = (0..pieces).map(|i| extreme(i, &y).abs()).collect();
        let worst = errors.iter().copied().fold(0.0, f64::max);
        if !worst.is_finite() {
            break;
        }
        match &best {
            Some(b) if worst >= b.0 * (1.0 - 1e-3) => stale += 1,
            _ => stale = 0,
        }
        if best.as_ref().is_none_or(|b| worst < b.0) {
            best = Some((worst, t.clone(), y.clone()));
        }
        if stale >= PATIENCE {
            break;
        }
        let mean = errors.iter().sum::<f64>() / pieces as f64;
        if mean <= 0.0 {
            break;
        }
        let mut h: Vec<f64> = edges
            .windows(2)
            .zip(&errors)
            .map(|(w, &e)| {
                let ratio = (mean / e.max(f64::MIN_POSITIVE)).powf(0.25);
                (w[1] - w[0]) * ratio.clamp(0.5f64.sqrt(), 2.0f64.sqrt())
            })
            .collect();
        let total: f64 = h.iter().sum();
        h.iter_mut().for_each(|v| *v *= (hi - lo) / total);
        let mut at = lo;
        for (k, len) in t.iter_mut().zip(&h) {
            at += len;
            *k = at.min(hi);
        }
    }
    let (_, t, y) = best.unwrap_or_else(|| {
        let y = t.iter().map(|&x| f(x)).collect();
        (0.0, t, y)
    });
    let mut slopes = Vec::with_capacity(knots + 1);
    slopes.push(tails.0);
    for j in 0..segments {
        let h = t[j + 1] - t[j];
        slopes.push(if h > 0.0 { (y[j + 1] - y[j]) / h } else { 0.0 });
    }
    slopes.push(tails.1);
    Pwl {
        knots: t,
        value: y[0],
        slopes,
    }
}
