//! A model's outcome in a few figures and its verdict ([`ModelSummary`]), and the summary over
//! many models ([`BatchReport`]). Every report renders these; nothing else decides a verdict.
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

use serde::Serialize;

use crate::measure::{CAUTION, DriftReport};
use crate::plan::{Action, Plan};

/// What a model's audit comes to.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// Every site served and every figure within budget.
    Pass,
    /// Some figure exceeded its budget (all sites were served).
    OverBudget,
    /// Some site has no form the target accepts; this outranks drift, since the model cannot
    /// be deployed to the target as planned whatever its drift.
    Unserved,
    /// The model could not be audited.
    Error,
}

impl Verdict {
    /// The verdict as written in JSON and in the report (`pass`, `over_budget`, ...).
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Pass => "pass",
            Verdict::OverBudget => "over_budget",
            Verdict::Unserved => "unserved",
            Verdict::Error => "error",
        }
    }
}

/// Per-model figures. Drift figures are `None` when nothing was measured (no site, or every
/// figure missing); a figure that is not finite serializes as `null` too.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ModelSummary {
    /// The original model's file, as the drift report names it.
    pub model: String,
    /// Sites in the plan (every site scanned, or those asked for with `--site`).
    pub sites: usize,
    pub rewritten: usize,
    pub kept: usize,
    pub unserved: usize,
    /// Largest local max abs over the sites, and the site (original id) it belongs to.
    pub worst_local_max_abs: Option<f64>,
    pub worst_local_site: Option<String>,
    /// Largest propagated max abs over the sites (the site's tensor in the whole model).
    pub worst_propagated_max_abs: Option<f64>,
    /// Largest max abs over the graph outputs.
    pub worst_output_max_abs: Option<f64>,
    /// Smallest cosine similarity over the graph outputs.
    pub lowest_output_cosine: Option<f64>,
    /// End-to-end latency, median rewritten / median original.
    pub latency_ratio: Option<f64>,
    pub within_budget: bool,
    pub verdict: Verdict,
    /// Why the model could not be audited (verdict `error` only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
}

/// The figures of one audited model.
pub fn summarize(plan: &Plan, drift: &DriftReport) -> ModelSummary {
    let count = |f: fn(&Action) -> bool| plan.sites.iter().filter(|p| f(&p.action)).count();
    let unserved = plan.unserved();
    let worst_local = worst(
        drift
            .sites
            .iter()
            .filter_map(|s| s.local.as_ref().map(|d| (d.max_abs, &s.id_a))),
        |v, w| v > w,
    );
    let verdict = if unserved > 0 {
        Verdict::Unserved
    } else if !drift.within_budget {
        Verdict::OverBudget
    } else {
        Verdict::Pass
    };
    ModelSummary {
        model: drift.model_a.clone(),
        sites: plan.sites.len(),
        rewritten: count(|a| matches!(a, Action::Rewrite(_))),
        kept: count(|a| matches!(a, Action::Keep { .. })),
        unserved,
        worst_local_max_abs: worst_local.map(|w| w.0),
        worst_local_site: worst_local.map(|w| w.1.clone()),
        worst_propagated_max_abs: worst(
            drift
                .sites
                .iter()
                .filter_map(|s| s.propagated.as_ref().map(|d| (d.max_abs, ()))),
            |v, w| v > w,
        )
        .map(|w| w.0),
        worst_output_max_abs: worst(
            drift
                .outputs
                .iter()
                .filter_map(|o| o.metrics.as_ref().map(|m| (m.max_abs, ()))),
            |v, w| v > w,
        )
        .map(|w| w.0),
        lowest_output_cosine: worst(
            drift
                .outputs
                .iter()
                .filter_map(|o| o.metrics.as_ref().map(|m| (m.cosine, ()))),
            |v, w| v < w,
        )
        .map(|w| w.0),
        latency_ratio: drift.latency.map(|l| l.ratio),
        within_budget: drift.within_budget && unserved == 0,
        verdict,
        error: None,
    }
}

impl ModelSummary {
    /// The summary of a model that could not be audited: counts 0, no figures, verdict `error`.
    pub fn failed(model: &str, error: &str) -> ModelSummary {
        ModelSummary {
            model: model.to_string(),
            sites: 0,
            rewritten: 0,
            kept: 0,
            unserved: 0,
            worst_local_max_abs: None,
            worst_local_site: None,
            worst_propagated_max_abs: None,
            worst_output_max_abs: None,
            lowest_output_cosine: None,
            latency_ratio: None,
            within_budget: false,
            verdict: Verdict::Error,
            error: Some(error.to_string()),
        }
    }
}

/// The worst of `(figure, tag)` pairs by `worse(candidate, current)`; a NaN figure is the worst
/// of all, so it is never hidden behind a number.
fn worst<T>(
    values: impl Iterator<Item = (f64, T)>,
    worse: fn(f64, f64) -> bool,
) -> Option<(f64, T)> {
    values.reduce(|w, v| {
        if !w.0.is_nan() && (v.0.is_nan() || worse(v.0, w.0)) {
            v
        } else {
            w
        }
    })
}

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

/// The summary of many models.
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

    /// The worst verdict of the batch, for its exit code: an error, else a model that did not
    /// pass, else none.
    pub fn worst_verdict(&self) -> Verdict {
        if self.totals.errors > 0 {
            Verdict::Error
        } else if self.totals.passed < self.totals.models {
            self.models
                .iter()
                .map(|m| m.summary.verdict)
                .find(|v| *v != Verdict::Pass)
                .unwrap_or(Verdict::Pass)
        } else {
            Verdict::Pass
        }
    }
}
