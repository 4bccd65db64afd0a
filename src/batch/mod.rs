//! Many models at once: which models a batch covers ([`discover`]), running them a few at a
//! time in a stable order ([`run_ordered`]), and the summary over all of them ([`BatchReport`]).
//!
//! # JSON schema (`actswap batch --json`)
//! Keys appear in this order; a figure that is missing or not finite is `null`.
//!
//! ```text
//! {
//!   "models": [{                       one per model, in discovery order
//!     "output": "converted/a.onnx" | null,   where the converted model was written
//!     "model", "sites", "rewritten", "kept", "unserved",
//!     "worst_local_max_abs", "worst_local_site", "worst_propagated_max_abs",
//!     "worst_output_max_abs", "lowest_output_cosine", "latency_ratio",
//!     "within_budget", "verdict": "pass" | "over_budget" | "unserved" | "error",
//!     "error" (verdict "error" only)
//!   }],
//!   "totals": {"models", "passed", "over_budget", "unserved", "errors",
//!              "sites", "rewritten", "kept", "unserved_sites",
//!              "worst_local_max_abs", "worst_output_max_abs", "lowest_output_cosine"},
//!   "caution": "..."
//! }
//! ```
//! The per-model fields are [`ModelSummary`]'s.

mod discover;
mod pool;

use serde::Serialize;

pub use discover::{Discovery, Job, Skipped, discover};
pub use pool::run_ordered;

use crate::measure::CAUTION;
use crate::report::summary::{ModelSummary, Verdict, worst};

/// One model's line in the summary.
#[derive(Debug, Clone, Serialize)]
pub struct ModelRow {
    /// Where the converted model was written; `None` when nothing was.
    pub output: Option<String>,
    #[serde(flatten)]
    pub summary: ModelSummary,
}

/// Counts and worst figures over every model.
#[derive(Debug, Clone, Default, PartialEq, Serialize)]
pub struct Totals {
    pub models: usize,
    pub passed: usize,
    pub over_budget: usize,
    /// Models with at least one unserved site.
    pub unserved: usize,
    pub errors: usize,
    pub sites: usize,
    pub rewritten: usize,
    pub kept: usize,
    pub unserved_sites: usize,
    pub worst_local_max_abs: Option<f64>,
    pub worst_output_max_abs: Option<f64>,
    pub lowest_output_cosine: Option<f64>,
}

/// The summary of a batch.
#[derive(Debug, Clone, Serialize)]
pub struct BatchReport {
    pub models: Vec<ModelRow>,
    pub totals: Totals,
    pub caution: &'static str,
}

impl BatchReport {
    pub fn new(models: Vec<ModelRow>) -> BatchReport {
        let mut t = Totals {
            models: models.len(),
            ..Totals::default()
        };
        for m in &models {
            let s = &m.summary;
            match s.verdict {
                Verdict::Pass => t.passed += 1,
                Verdict::OverBudget => t.over_budget += 1,
                Verdict::Unserved => t.unserved += 1,
                Verdict::Error => t.errors += 1,
            }
            t.sites += s.sites;
            t.rewritten += s.rewritten;
            t.kept += s.kept;
            t.unserved_sites += s.unserved;
        }
        let figure = |f: fn(&ModelSummary) -> Option<f64>, worse: fn(f64, f64) -> bool| {
            worst(
                models.iter().filter_map(|m| f(&m.summary)).map(|v| (v, ())),
                worse,
            )
            .map(|w| w.0)
        };
        t.worst_local_max_abs = figure(|s| s.worst_local_max_abs, |v, w| v > w);
        t.worst_output_max_abs = figure(|s| s.worst_output_max_abs, |v, w| v > w);
        t.lowest_output_cosine = figure(|s| s.lowest_output_cosine, |v, w| v < w);
        BatchReport {
            models,
            totals: t,
            caution: CAUTION,
        }
    }

    /// The report as JSON (see the module doc).
    pub fn to_json(&self) -> serde_json::Value {
        serde_json::to_value(self).expect("a batch report serializes")
    }
}
