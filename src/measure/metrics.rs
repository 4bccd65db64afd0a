//! Drift between a reference array (the original model's values) and a candidate (the rewritten
//! model's), and top-1 agreement of class scores.
//!
//! Values arrive in the model's own precision and are widened to f64 exactly
//! ([`crate::run::NamedTensor::to_f64`]); every figure is computed in f64. Several samples add up
//! into one figure: an accumulator takes array pairs one at a time.
//!
//! # Definitions (a = reference, b = candidate)
//! - Elements where a and b are both finite are *compared*: max abs `max |b - a|`, mean abs,
//!   RMS `sqrt(mean (b - a)^2)`, max rel `max |b - a| / max(|a|, floor)` (floor 1e-6 unless set,
//!   reported with the figure), cosine `a.b / (|a| |b|)`.
//! - Cosine is 1 when a and b are both all zero (nothing to disagree on) and 0 when exactly one is
//!   (no direction to agree with); `cosine_note` says which case applied.
//! - Beyond tolerance: `|b - a| > atol + rtol * |a|` (numpy's `isclose(b, a)` negated; defaults
//!   atol 1e-5, rtol 1e-4), plus every non-finite mismatch. The share is over all elements.
//! - Non-finite values are never dropped silently: NaN facing a number is a NaN mismatch, an
//!   infinity facing anything but the same infinity (and not NaN) is an infinity mismatch, and
//!   equal infinities or NaN facing NaN agree (counted apart).

use anyhow::{Result, ensure};
use ndarray::{ArrayD, Axis};
use schemars::JsonSchema;
use serde::Serialize;

/// How two values are judged close, and the floor of the relative error's denominator.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, JsonSchema)]
pub struct Tolerance {
    pub atol: f64,
    pub rtol: f64,
    /// Denominator floor of max rel: `|b - a| / max(|a|, rel_floor)`.
    pub rel_floor: f64,
}

impl Default for Tolerance {
    /// atol 1e-5, rtol 1e-4, floor 1e-6.
    fn default() -> Self {
        Tolerance {
            atol: 1e-5,
            rtol: 1e-4,
            rel_floor: 1e-6,
        }
    }
}

/// The drift figures of one tensor (over all samples).
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Drift {
    /// All elements, finite or not.
    pub elements: u64,
    /// Elements where both values are finite: the ones the figures below are over.
    pub compared: u64,
    pub max_abs: f64,
    pub mean_abs: f64,
    pub rms: f64,
    pub max_rel: f64,
    pub rel_floor: f64,
    pub cosine: f64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub cosine_note: Option<&'static str>,
    pub atol: f64,
    pub rtol: f64,
    /// Elements beyond `atol + rtol * |reference|`, non-finite mismatches included.
    pub beyond_tol: u64,
    /// `beyond_tol / elements` (0 when there are no elements).
    pub beyond_tol_share: f64,
    /// NaN on one side only.
    pub nan_mismatches: u64,
    /// An infinity facing a different value that is not NaN.
    pub inf_mismatches: u64,
    /// Equal infinities, or NaN facing NaN.
    pub nonfinite_agreeing: u64,
}

impl Drift {
    /// NaN and infinity mismatches together.
    pub fn nonfinite_mismatches(&self) -> u64 {
        self.nan_mismatches + self.inf_mismatches
    }
}

/// Sums drift over array pairs of the same shape.
#[derive(Debug, Clone)]
pub struct DriftAccumulator {
    tol: Tolerance,
    elements: u64,
    compared: u64,
    max_abs: f64,
    sum_abs: f64,
    sum_sq: f64,
    max_rel: f64,
    dot: f64,
    norm_a: f64,
    norm_b: f64,
    beyond: u64,
    nan_mismatches: u64,
    inf_mismatches: u64,
    nonfinite_agreeing: u64,
}

impl DriftAccumulator {
    pub fn new(tol: Tolerance) -> Self {
        DriftAccumulator {
            tol,
            elements: 0,
            compared: 0,
            max_abs: 0.0,
            sum_abs: 0.0,
            sum_sq: 0.0,
            max_rel: 0.0,
            dot: 0.0,
            norm_a: 0.0,
            norm_b: 0.0,
            beyond: 0,
            nan_mismatches: 0,
            inf_mismatches: 0,
            nonfinite_agreeing: 0,
        }
    }

    /// Adds one pair; the shapes must be equal.
    pub fn add(&mut self, reference: &ArrayD<f64>, candidate: &ArrayD<f64>) -> Result<()> {
        ensure!(
            reference.shape() == candidate.shape(),
            "shapes differ: {:?} in the original, {:?} in the rewritten model",
            reference.shape(),
            candidate.shape()
        );
        for (&a, &b) in reference.iter().zip(candidate.iter()) {
            self.add_value(a, b);
        }
        Ok(())
    }

    fn add_value(&mut self, a: f64, b: f64) {
        self.elements += 1;
        if !(a.is_finite() && b.is_finite()) {
            if (a.is_nan() && b.is_nan()) || a == b {
                self.nonfinite_agreeing += 1;
            } else {
                if a.is_nan() || b.is_nan() {
                    self.nan_mismatches += 1;
                } else {
                    self.inf_mismatches += 1;
                }
                self.beyond += 1;
            }
            return;
        }
        let d = (b - a).abs();
        self.compared += 1;
        self.max_abs = self.max_abs.max(d);
        self.sum_abs += d;
        self.sum_sq += d * d;
        self.max_rel = self.max_rel.max(d / a.abs().max(self.tol.rel_floor));
        self.dot += a * b;
        self.norm_a += a * a;
        self.norm_b += b * b;
        if d > self.tol.atol + self.tol.rtol * a.abs() {
            self.beyond += 1;
        }
    }

    /// The figures so far.
    pub fn finish(&self) -> Drift {
        let n = self.compared.max(1) as f64;
        let (cosine, cosine_note) = match (self.norm_a == 0.0, self.norm_b == 0.0) {
            (true, true) => (1.0, Some("both all zero")),
            (true, false) | (false, true) => (0.0, Some("one side all zero")),
            (false, false) => {
                // sqrt(x * x) == x in IEEE arithmetic, so equal arrays give exactly 1.
                let product = self.norm_a * self.norm_b;
                let norms = if product.is_finite() && product > 0.0 {
                    product.sqrt()
                } else {
                    self.norm_a.sqrt() * self.norm_b.sqrt()
                };
                ((self.dot / norms).clamp(-1.0, 1.0), None)
            }
        };
        Drift {
            elements: self.elements,
            compared: self.compared,
            max_abs: self.max_abs,
            mean_abs: self.sum_abs / n,
            rms: (self.sum_sq / n).sqrt(),
            max_rel: self.max_rel,
            rel_floor: self.tol.rel_floor,
            cosine,
            cosine_note,
            atol: self.tol.atol,
            rtol: self.tol.rtol,
            beyond_tol: self.beyond,
            beyond_tol_share: if self.elements == 0 {
                0.0
            } else {
                self.beyond as f64 / self.elements as f64
            },
            nan_mismatches: self.nan_mismatches,
            inf_mismatches: self.inf_mismatches,
            nonfinite_agreeing: self.nonfinite_agreeing,
        }
    }
}

/// The drift of one pair; see the module doc.
pub fn drift(reference: &ArrayD<f64>, candidate: &ArrayD<f64>, tol: Tolerance) -> Result<Drift> {
    let mut acc = DriftAccumulator::new(tol);
    acc.add(reference, candidate)?;
    Ok(acc.finish())
}

/// How often the candidate's top class is the reference's, over every row of every sample.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, JsonSchema)]
pub struct Top1 {
    /// Rows compared: every index of the leading axes, in every sample.
    pub rows: u64,
    pub agreeing: u64,
    /// `agreeing / rows`.
    pub share: f64,
}

/// Whether top-1 agreement applies to a tensor of this shape: its last axis holds more than one
/// score.
pub fn top1_applies(shape: &[usize]) -> bool {
    shape.last().is_some_and(|&n| n > 1)
}

/// Counts top-1 agreement over array pairs.
#[derive(Debug, Clone, Default)]
pub struct Top1Accumulator {
    rows: u64,
    agreeing: u64,
}

impl Top1Accumulator {
    /// Adds one pair; the shapes must be equal and [`top1_applies`].
    pub fn add(&mut self, reference: &ArrayD<f64>, candidate: &ArrayD<f64>) -> Result<()> {
        ensure!(
            reference.shape() == candidate.shape() && top1_applies(reference.shape()),
            "top-1 needs equal shapes with a last axis longer than 1 (got {:?} and {:?})",
            reference.shape(),
            candidate.shape()
        );
        let last = Axis(reference.ndim() - 1);
        for (a, b) in reference.lanes(last).into_iter().zip(candidate.lanes(last)) {
            self.rows += 1;
            if argmax(a.iter().copied()) == argmax(b.iter().copied()) {
                self.agreeing += 1;
            }
        }
        Ok(())
    }

    pub fn finish(&self) -> Top1 {
        Top1 {
            rows: self.rows,
            agreeing: self.agreeing,
            share: if self.rows == 0 {
                1.0
            } else {
                self.agreeing as f64 / self.rows as f64
            },
        }
    }
}

/// Index of the largest value as numpy's `argmax` picks it: the first maximum, and the first NaN
/// if there is one.
fn argmax(values: impl Iterator<Item = f64>) -> usize {
    let mut best: Option<(usize, f64)> = None;
    for (i, v) in values.enumerate() {
        match best {
            None => best = Some((i, v)),
            Some((_, b)) if b.is_nan() => break,
            Some((_, b)) if v.is_nan() || v > b => best = Some((i, v)),
            _ => {}
        }
    }
    best.map_or(0, |(i, _)| i)
}
