//! Latency of the original and the rewritten model, measured the same way on the same data.
//!
//! Both plans are optimized by tract for the sample's shapes. Each runs `warmup` times, then the
//! two run `runs` times interleaved (A B A B ...), so drift in machine load reaches both alike.
//! Each run is timed with a monotonic clock around [`Compiled::run`] (which copies the inputs in and
//! the outputs out, the same for both). Figures: median and the 10th-90th percentile spread
//! (numpy's linear method) of each, and the ratio of medians rewritten / original. Latency is
//! measured data: it varies between machines and runs.

use std::time::Instant;

use anyhow::{Context, Result, ensure};
use schemars::JsonSchema;
use serde::Serialize;

use super::stats::quantile;
use crate::onnx::Model;
use crate::run::{self, Compiled, Sample, TractModel};

/// How many times to run.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
pub struct LatencyOptions {
    /// Timed runs of each model.
    pub runs: usize,
    /// Untimed runs of each model first.
    pub warmup: usize,
}

impl Default for LatencyOptions {
    /// 20 timed runs after 3 warm-up runs.
    fn default() -> Self {
        LatencyOptions {
            runs: 20,
            warmup: 3,
        }
    }
}

/// The spread of one model's run times, in seconds.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, JsonSchema)]
pub struct Timing {
    pub median_s: f64,
    pub p10_s: f64,
    pub p90_s: f64,
}

/// End-to-end latency of both models.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, JsonSchema)]
pub struct EndToEnd {
    pub a: Timing,
    pub b: Timing,
    /// `b.median_s / a.median_s`.
    pub ratio: f64,
    pub runs: usize,
    pub warmup: usize,
}

/// Latency of one site's original and new form, isolated.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, JsonSchema)]
pub struct SiteLatency {
    pub a_median_s: f64,
    pub b_median_s: f64,
    /// `b_median_s / a_median_s`.
    pub ratio: f64,
}

/// Times two compiled plans, interleaved; returns the run times of each, in seconds.
pub fn interleaved(
    a: (&Compiled, &Sample),
    b: (&Compiled, &Sample),
    opts: LatencyOptions,
) -> Result<(Vec<f64>, Vec<f64>)> {
    ensure!(opts.runs > 0, "latency needs at least one run");
    for _ in 0..opts.warmup {
        a.0.run(a.1)?;
        b.0.run(b.1)?;
    }
    let time = |plan: &Compiled, sample: &Sample| -> Result<f64> {
        let start = Instant::now();
        let out = plan.run(sample)?;
        let elapsed = start.elapsed().as_secs_f64();
        drop(out);
        Ok(elapsed)
    };
    let mut ta = Vec::with_capacity(opts.runs);
    let mut tb = Vec::with_capacity(opts.runs);
    for _ in 0..opts.runs {
        ta.push(time(a.0, a.1)?);
        tb.push(time(b.0, b.1)?);
    }
    Ok((ta, tb))
}

/// The median and 10th-90th percentiles of run times.
pub fn timing(mut times: Vec<f64>) -> Timing {
    Timing {
        median_s: quantile(&mut times, 0.5),
        p10_s: quantile(&mut times, 0.1),
        p90_s: quantile(&mut times, 0.9),
    }
}

/// End-to-end latency of two models on one sample (graph outputs only, no captures).
pub fn end_to_end(
    a: &TractModel,
    b: &TractModel,
    sample: &Sample,
    opts: LatencyOptions,
) -> Result<EndToEnd> {
    let plan_a = a.compile(sample, &[]).context("original model")?;
    let plan_b = b.compile(sample, &[]).context("rewritten model")?;
    let (ta, tb) = interleaved((&plan_a, sample), (&plan_b, sample), opts)?;
    let (a, b) = (timing(ta), timing(tb));
    Ok(EndToEnd {
        a,
        b,
        ratio: b.median_s / a.median_s,
        runs: opts.runs,
        warmup: opts.warmup,
    })
}

/// Latency of two isolated single-site models, each fed its sample (the same data under each
/// model's input name), under the memory ceiling `ceiling`.
pub fn site(
    a: (&Model, &Sample),
    b: (&Model, &Sample),
    opts: LatencyOptions,
    ceiling: u64,
) -> Result<SiteLatency> {
    let compile = |(model, sample): (&Model, &Sample)| -> Result<Compiled> {
        let tract = run::prepare(&model.encode(), Some(model.dir()))?.with_memory_ceiling(ceiling);
        Ok(tract.compile(sample, &[])?)
    };
    let plan_a = compile(a).context("isolated original site")?;
    let plan_b = compile(b).context("isolated new site")?;
    let (ta, tb) = interleaved((&plan_a, a.1), (&plan_b, b.1), opts)?;
    let (ma, mb) = (timing(ta).median_s, timing(tb).median_s);
    Ok(SiteLatency {
        a_median_s: ma,
        b_median_s: mb,
        ratio: mb / ma,
    })
}
