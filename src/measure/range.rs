//! The range of values a site's input took over all samples.

use ndarray::ArrayD;
use schemars::JsonSchema;
use serde::Serialize;

use super::stats::quantile;

/// Observed input range: extremes and the 1st and 99th percentiles (numpy's linear method) of
/// the finite values.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, JsonSchema)]
pub struct InputRange {
    pub min: f64,
    pub max: f64,
    pub p01: f64,
    pub p99: f64,
    /// Values that were NaN or infinite (left out of the figures above).
    pub nonfinite: u64,
}

/// Collects input values sample after sample.
#[derive(Debug, Clone, Default)]
pub struct RangeCollector {
    values: Vec<f64>,
    nonfinite: u64,
}

impl RangeCollector {
    pub fn add(&mut self, values: &ArrayD<f64>) {
        self.values.reserve(values.len());
        for &v in values {
            if v.is_finite() {
                self.values.push(v);
            } else {
                self.nonfinite += 1;
            }
        }
    }

    /// The range, or `None` when no finite value was seen.
    pub fn finish(mut self) -> Option<InputRange> {
        if self.values.is_empty() {
            return None;
        }
        let (min, max) = self
            .values
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
                (lo.min(v), hi.max(v))
            });
        Some(InputRange {
            min,
            max,
            p01: quantile(&mut self.values, 0.01),
            p99: quantile(&mut self.values, 0.99),
            nonfinite: self.nonfinite,
        })
    }
}
