//! Calibration: the original model run over the samples to observe each site's input range,
//! which fitted forms are fitted over. Sites of the top-level graph only; the others keep a
//! declared or default range. Only values are wanted, so the model runs as typed
//! ([`Compilation::Typed`]).

use anyhow::{Context, Result};

use super::capture::{self, widen};
use super::range::{InputRange, RangeCollector};
use super::runnable;
use crate::onnx::ModelIndex;
use crate::run::{Compilation, Sample};
use crate::scan::Site;

/// The observed input range of every top-level site of `sites` with a finite value, by site id.
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
    let top: Vec<&Site> = sites
        .iter()
        .filter(|s| {
            s.graph_index == 0 && (main.producer(&s.input).is_some() || main.is_input(&s.input))
        })
        .collect();
    let mut extra: Vec<String> = top
        .iter()
        .filter(|s| !tract.inputs().iter().any(|i| i.name == s.input))
        .map(|s| s.input.clone())
        .collect();
    extra.sort();
    extra.dedup();
    let values = capture::run_samples(&tract, samples, &extra, "original model (calibration)")?;
    let mut out = Vec::with_capacity(top.len());
    for site in top {
        let mut range = RangeCollector::default();
        for v in &values {
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
