//! Fitted forms: a continuous piecewise-linear function fitted to a kind's f64 reference over a
//! fitting range, for targets whose activation units run only piecewise-linear functions.
//!
//! Shape: `K` segments between `K + 1` knots inside the fitting range, and two tails beyond the
//! outer knots whose slopes are the kind's asymptotic slopes (silu, gelu, mish, softplus: 0 and
//! 1; sigmoid, tanh: 0 and 0; elu: 0 and 1; ...), so that the error outside the range stays
//! bounded. The asymptotes are read off the reference far from the origin ([`asymptotes`]); a
//! kind that grows faster than linearly (squared ReLU) has none and no fitted form.
//!
//! Fitting ([`minimax`]): knots moved until every piece has the same maximum error, knot values
//! shifted off the reference by half the chords' deviations; the result is near minimax.
//! Constants are then rounded to the model's element type, and the bound ([`bound`]) is computed
//! for the rounded function by dense evaluation: the error inside the range and over the whole
//! real line, both with a safety margin so that a reported bound is never below the error.
//! Parameters per channel give one fit per channel (all with the same `K`); the worst channel's
//! bound is the site's. A kind with an exact change of scale (swish's beta) fits one function
//! over rescaled ranges, and channels whose rescaled ranges are close share that fit ([`share`]).

mod bound;
mod memo;
mod minimax;
mod share;
mod write;

use std::fmt;

use super::kind::Kind;
use super::params::Params;
use super::substitute::ErrorBound;
use crate::onnx::proto::tensor_proto::DataType;

pub use bound::FitBound;

use memo::Memo;

/// The fitting range when nothing else gives one (`swap` without `--fit-range`).
pub const DEFAULT_RANGE: FitRange = FitRange { lo: -8.0, hi: 8.0 };
/// The segment cap when a profile sets no `max_fit_segments`.
pub const DEFAULT_MAX_SEGMENTS: usize = 32;
/// The segment counts the catalogue reports bounds for.
pub const CATALOG_SEGMENTS: [usize; 4] = [4, 8, 16, 32];
/// An observed input range is widened by this fraction of its width on each side.
pub const OBSERVED_MARGIN: f64 = 0.25;

/// The interval a fit minimizes the maximum error over.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FitRange {
    pub lo: f64,
    pub hi: f64,
}

impl FitRange {
    /// `[lo, hi]`, refused unless both are finite and `lo < hi`.
    pub fn new(lo: f64, hi: f64) -> Result<FitRange, FitError> {
        if lo.is_finite() && hi.is_finite() && lo < hi {
            Ok(FitRange { lo, hi })
        } else {
            Err(FitError::Range { lo, hi })
        }
    }

    /// An observed `[min, max]` widened by [`OBSERVED_MARGIN`] of its width on each side (by
    /// 1 on each side when the width is below 1e-3: a constant input).
    pub fn observed(min: f64, max: f64) -> Result<FitRange, FitError> {
        let width = max - min;
        let pad = if width < 1e-3 {
            1.0
        } else {
            OBSERVED_MARGIN * width
        };
        FitRange::new(min - pad, max + pad)
    }
}

impl fmt::Display for FitRange {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let short = |v: f64| (v * 1e4).round() / 1e4;
        write!(f, "[{}, {}]", short(self.lo), short(self.hi))
    }
}

/// Why a fitted form cannot be made.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum FitError {
    #[error("fitting range [{lo}, {hi}] is not two finite numbers with LO < HI")]
    Range { lo: f64, hi: f64 },
    #[error("{kind} with these parameters has no linear asymptote at {side}: no fitted form")]
    NoAsymptote {
        kind: &'static str,
        side: &'static str,
    },
    #[error("segments must be between 1 and {max}, not {segments}")]
    Segments { segments: usize, max: usize },
    #[error("{segments} segment(s) reach {bound:.6} over {range}, above the allowance {allowance}")]
    NotWithin {
        kind: &'static str,
        segments: usize,
        bound: f64,
        range: FitRange,
        allowance: f64,
    },
    #[error("{kind}: element type {} has no fitted form", elem_type.as_str_name())]
    ElemType {
        kind: &'static str,
        elem_type: DataType,
    },
}

/// Most segments a fit may have, whatever a profile says.
pub const MAX_SEGMENTS: usize = 256;

/// A continuous piecewise-linear function: `K` segments between `K + 1` knots and a tail on
/// each side. With `t` the knots and `s` the slopes (left tail, the `K` segments, right tail):
///
/// `p(x) = value + s[0] (min(x, t[0]) - t[0]) + sum_i s[i+1] (clamp(x, t[i], t[i+1]) - t[i])
///        + s[K+1] (max(x, t[K]) - t[K])`
///
/// which is continuous for any constants; the emitted graph computes exactly this sum.
#[derive(Debug, Clone, PartialEq)]
pub struct Pwl {
    /// Non-decreasing.
    pub knots: Vec<f64>,
    /// `p(knots[0])`.
    pub value: f64,
    pub slopes: Vec<f64>,
}

impl Pwl {
    /// Number of segments between the outer knots.
    pub fn segments(&self) -> usize {
        self.knots.len() - 1
    }

    pub fn eval(&self, x: f64) -> f64 {
        let (t, s) = (&self.knots, &self.slopes);
        let k = self.segments();
        let mut y = self.value + s[0] * (x.min(t[0]) - t[0]);
        for i in 0..k {
            y += s[i + 1] * (x.max(t[i]).min(t[i + 1]) - t[i]);
        }
        y + s[k + 1] * (x.max(t[k]) - t[k])
    }

    /// Every constant rounded by `round` (to an element type).
    fn rounded(&self, round: fn(f64) -> f64) -> Pwl {
        Pwl {
            knots: self.knots.iter().map(|&t| round(t)).collect(),
            value: round(self.value),
            slopes: self.slopes.iter().map(|&s| round(s)).collect(),
        }
    }
}

/// A site's fitted form: one function per channel, all with the same number of segments.
#[derive(Debug, Clone)]
pub struct Fitted {
    pub kind: &'static Kind,
    pub segments: usize,
    pub range: FitRange,
    /// One per channel of the site's parameters (one for scalar parameters).
    pub channels: Vec<Pwl>,
    /// Each channel's parameters, in the kind's order.
    pub params: Vec<Vec<f64>>,
    /// The worst channel's bounds.
    pub bound: FitBound,
}

impl Fitted {
    /// The fitted function of channel `c` at `x`.
    pub fn eval(&self, c: usize, x: f64) -> f64 {
        self.channels[c.min(self.channels.len() - 1)].eval(x)
    }

    /// The worst channel's |error| over `[lo, hi]` (an observed range), computed like the
    /// fit's own bound.
    pub fn error_over(&self, lo: f64, hi: f64) -> ErrorBound {
        self.worst_channel_over(lo, hi).1
    }

    /// The channel with the largest |error| over `[lo, hi]` (the first of equals), and that
    /// error.
    pub fn worst_channel_over(&self, lo: f64, hi: f64) -> (usize, ErrorBound) {
        let mut worst = (0, ErrorBound { value: 0.0, at: lo });
        for c in 0..self.channels.len() {
            let e = self.channel_error_over(c, lo, hi);
            if is_worse(worst.1, e) {
                worst = (c, e);
            }
        }
        worst
    }

    /// Channel `c`'s |error| over `[lo, hi]`, computed like the fit's own bound.
    pub fn channel_error_over(&self, c: usize, lo: f64, hi: f64) -> ErrorBound {
        let (pwl, p) = (&self.channels[c], &self.params[c]);
        let f = |x: f64| self.kind.eval(x, p);
        match FitRange::new(lo, hi) {
            Ok(range) => bound::inside(&f, pwl, range, &(self.kind.breakpoints)(p)),
            // One value seen: the error there.
            Err(_) => ErrorBound {
                value: (f(lo) - pwl.eval(lo)).abs(),
                at: lo,
            },
        }
    }
}

/// The asymptotic slopes of `kind` with parameters `p` as x goes to -inf and +inf, read from
/// the reference at |x| = 1e6, 2e6 and 4e6 (both differences must agree to 1e-9); slopes within
/// 1e-9 of an integer are that integer.
pub fn asymptotes(kind: &'static Kind, p: &[f64]) -> Result<(f64, f64), FitError> {
    let slope = |side: f64, name: &'static str| {
        let f = |x: f64| kind.eval(x * side, p);
        let r = 1e6;
        let (a, b, c) = (f(r), f(2.0 * r), f(4.0 * r));
        let (s1, s2) = ((b - a) / r, (c - b) / (2.0 * r));
        let none = FitError::NoAsymptote {
            kind: kind.id,
            side: name,
        };
        if !(s1.is_finite() && s2.is_finite()) || (s1 - s2).abs() > 1e-9 * (1.0 + s2.abs()) {
            return Err(none);
        }
        // d f / d x = side * d kind / d x: the kind's slope in x.
        let s = s2 * side;
        Ok(if (s - s.round()).abs() <= 1e-9 {
            s.round()
        } else {
            s
        })
    };
    Ok((slope(-1.0, "-inf")?, slope(1.0, "+inf")?))
}

/// Rounds to the element type's precision.
fn rounding(elem_type: DataType, kind: &'static str) -> Result<fn(f64) -> f64, FitError> {
    Ok(match elem_type {
        DataType::Float => |v| v as f32 as f64,
        DataType::Double => |v| v,
        DataType::Float16 => |v| half::f16::from_f64(v).to_f64(),
        DataType::Bfloat16 => |v| half::bf16::from_f64(v).to_f64(),
        _ => return Err(FitError::ElemType { kind, elem_type }),
    })
}

/// Fits of one channel.
static CHANNELS: Memo = Memo::new();

/// Fits one channel of `kind` with parameters `p`: `segments` segments over `range`, constants
/// in `elem_type`; rescaled from a fit shared with other parameter values when the kind has a
/// change of scale ([`share`]).
pub fn fit_channel(
    kind: &'static Kind,
    p: &[f64],
    range: FitRange,
    segments: usize,
    elem_type: DataType,
) -> Result<(Pwl, FitBound), FitError> {
    fit_one(kind, p, range, segments, elem_type, true)
}

/// [`fit_channel`] without sharing: the channel's own fit, which sharing is measured against.
pub fn fit_channel_alone(
    kind: &'static Kind,
    p: &[f64],
    range: FitRange,
    segments: usize,
    elem_type: DataType,
) -> Result<(Pwl, FitBound), FitError> {
    fit_one(kind, p, range, segments, elem_type, false)
}

fn fit_one(
    kind: &'static Kind,
    p: &[f64],
    range: FitRange,
    segments: usize,
    elem_type: DataType,
    may_share: bool,
) -> Result<(Pwl, FitBound), FitError> {
    if !(1..=MAX_SEGMENTS).contains(&segments) {
        return Err(FitError::Segments {
            segments,
            max: MAX_SEGMENTS,
        });
    }
    FitRange::new(range.lo, range.hi)?;
    let round = rounding(elem_type, kind.id)?;
    let numbers = p.iter().copied().chain([
        range.lo,
        range.hi,
        segments as f64,
        elem_type as i32 as f64,
        f64::from(u8::from(may_share)),
    ]);
    let key = memo::key(kind.id, numbers);
    if let Some(hit) = CHANNELS.get(&key) {
        return Ok(hit);
    }
    let (left, right) = asymptotes(kind, p)?;
    let tails = (round(left), round(right));
    let shared = may_share
        .then(|| share::rescaled(kind, p, range, segments, tails, round))
        .flatten();
    let fit = shared.unwrap_or_else(|| {
        let f = |x: f64| kind.eval(x, p);
        let pwl = minimax::fit(&f, range, segments, tails).rounded(round);
        let bound = bound::of(&f, &pwl, range, &(kind.breakpoints)(p));
        (pwl, bound)
    });
    CHANNELS.insert(key, fit.clone());
    Ok(fit)
}

/// Fits every channel of `params` with `segments` segments.
pub fn fit(
    kind: &'static Kind,
    params: &Params,
    range: FitRange,
    segments: usize,
    elem_type: DataType,
) -> Result<Fitted, FitError> {
    let mut channels = Vec::with_capacity(params.channels());
    let mut bound: Option<FitBound> = None;
    let per_channel = params.per_channel();
    for p in &per_channel {
        let (pwl, b) = fit_channel(kind, p, range, segments, elem_type)?;
        bound = Some(match bound {
            None => b,
            Some(w) => FitBound {
                in_range: worse(w.in_range, b.in_range),
                over_reals: worse(w.over_reals, b.over_reals),
            },
        });
        channels.push(pwl);
    }
    Ok(Fitted {
        kind,
        segments,
        range,
        channels,
        params: per_channel,
        bound: bound.expect("at least one channel"),
    })
}

fn worse(a: ErrorBound, b: ErrorBound) -> ErrorBound {
    if is_worse(a, b) { b } else { a }
}

/// True when `b` is a worse error than `a` (a NaN is the worst).
fn is_worse(a: ErrorBound, b: ErrorBound) -> bool {
    b.value > a.value || b.value.is_nan()
}

/// The fit with the fewest segments (at most `max_segments`) whose error over `range` is within
/// `allowance` for every channel.
pub fn smallest(
    kind: &'static Kind,
    params: &Params,
    range: FitRange,
    allowance: f64,
    max_segments: usize,
    elem_type: DataType,
) -> Result<Fitted, FitError> {
    let max = max_segments.clamp(1, MAX_SEGMENTS);
    let within = |k: usize, p: &[f64]| -> Result<bool, FitError> {
        Ok(fit_channel(kind, p, range, k, elem_type)?.1.in_range.value <= allowance)
    };
    // Upward, one segment at a time: the counts tried stay at or below the answer, so the fits
    // shared between channels ([`share`]) are only ever made for small counts.
    let mut need = 1;
    for p in params.per_channel() {
        while !within(need, &p)? {
            if need >= max {
                let (_, b) = fit_channel(kind, &p, range, max, elem_type)?;
                return Err(FitError::NotWithin {
                    kind: kind.id,
                    segments: max,
                    bound: b.in_range.value,
                    range,
                    allowance,
                });
            }
            need += 1;
        }
    }
    let mut k = need;
    loop {
        let fitted = fit(kind, params, range, k, elem_type)?;
        if fitted.bound.in_range.value <= allowance || k >= max {
            return if fitted.bound.in_range.value <= allowance {
                Ok(fitted)
            } else {
                Err(FitError::NotWithin {
                    kind: kind.id,
                    segments: k,
                    bound: fitted.bound.in_range.value,
                    range,
                    allowance,
                })
            };
        }
        k += 1;
    }
}
