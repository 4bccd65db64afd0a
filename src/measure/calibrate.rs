//! Calibration: each top-level site's input range observed in the original model's values on
//! the samples, which fitted forms are fitted over. Sites of the top-level graph only; the
//! others keep a declared or default range. `audit` reads the values it measures drift against
//! ([`super::capture_original`]), so the original model runs once; `swap` runs the model for
//! the site inputs alone, as typed ([`Compilation::Typed`]): only values are wanted.

use anyhow::{Context, Result};

use super::capture::{self, Values, widen};
use super::range::{InputRange, RangeCollector};
use super::runnable;
use crate::onnx::ModelIndex;
use crate::run::{Compilation, Sample};
use crate::scan::Site;

/// Runs the original model on `samples` and observes the input range of every top-level site
/// of `sites` ([`ranges`]).
pub fn observe(
    index: &ModelIndex,
    sites: &[Site],
    samples: &[Sample],
    memory_ceiling: u64,
) -> Result<Vec<(String, InputRange)>> {
    let tract = runnable::prepare(index, samples, memory_ceiling)
        .context("original model (calibration)")?
        .tract
        .with_compilation(Compilation::Typed);
    let main = &index.graphs[0];
    let mut extra: Vec<String> = sites
        .iter()
        .filter(|s| s.graph_index == 0 && main.producer(&s.input).is_some())
        .filter(|s| !tract.inputs().iter().any(|i| i.name == s.input))
        .map(|s| s.input.clone())
        .collect();
    extra.sort();
    extra.dedup();
    let values = capture::run_samples(&tract, samples, &extra, "original model (calibration)")?;
    ranges(index, sites, &values)
}

/// The input range of every top-level site of `sites` whose input is computed or a graph input
/// and has a finite value in `values` (the main graph's values, one per sample), by site id.
pub fn ranges(
    index: &ModelIndex,
    sites: &[Site],
    values: &[Values],
) -> Result<Vec<(String, InputRange)>> {
    let main = &index.graphs[0];
    let top = sites.iter().filter(|s| {
        s.graph_index == 0 && (main.producer(&s.input).is_some() || main.is_input(&s.input))
    });
    let mut out = Vec::new();
    for site in top {
        let mut range = RangeCollector::default();
        for v in values {
            if let Some(t) = v.get(&site.input) {
                range.add(&widen(t)?);
            }
        }
        if let Some(r) = range.finish() {
            out.push((site.id.clone(), r));
        }
    }
    Ok(out)
}
