//! A model's outcome in a few figures and its verdict ([`ModelSummary`]), and the summary over
//! many models ([`BatchReport`]). Every report renders these; nothing else decides a verdict.
//!
//! # JSON schema (`actswap batch --json`)
//! Keys appear in this order; a figure that is missing or not finite is `null`.
//!
//! ```text
//! {
//!   "schema_version": 1,               the schema: `actswap schema batch`
//!   "actswap": "0.1.0",                the version that wrote it
//!   "converted_for": "target ...",     the target (name, or file and SHA-256) or the requests
//!   "budget": {"max_abs", "max_rel", "min_cosine", "min_top1", "site_max_abs"}, null: not set
//!   "budget_source": "profile piecewise-linear" | "default" | "flags, then ...",
//!   "inputs": "...",                   the input options
//!   "models": [{                       one per model, in discovery order
//!     "output": "converted/a.onnx" | null,   where the converted model was written
//!     "model", "sites", "rewritten", "kept", "unserved",
//!     "worst_local_max_abs", "worst_local_site", "worst_propagated_max_abs",
//!     "worst_output_max_abs", "lowest_output_cosine", "latency_ratio", "refused_ops",
//!     "within_budget",
//!     "verdict": "pass" | "error" | "not_ready" | "unserved" | "over_budget"
//!                | "nothing_compared" | "unmeasured",
//!     "reasons": ["..."],                  every failing reason, the verdict's first
//!     "error" (verdict "error" only)
//!   }],
//!   "totals": {"models", "passed", "errors", "not_ready", "unserved", "over_budget",
//!              "nothing_compared", "unmeasured",
//!              "sites", "rewritten", "kept", "unserved_sites",
//!              "worst_local_max_abs", "worst_output_max_abs", "lowest_output_cosine"},
//!   "caution": "..."
//! }
//! ```
//! The per-model fields are [`ModelSummary`]'s.

use schemars::JsonSchema;
use serde::Serialize;

use super::readiness::Readiness;
use crate::measure::{CAUTION, DriftReport, SiteDrift};
use crate::plan::{Action, Plan};
use crate::schema_version::SchemaVersion;

/// What a model's audit comes to: pass, or the first failing reason in this order.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema, PartialOrd, Ord)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// Every node runs on the target, every site is served, every figure within budget, and
    /// something was compared.
    Pass,
    /// The model could not be audited.
    Error,
    /// The converted model holds ops the target does not run.
    NotReady,
    /// Some site has no form the target accepts.
    Unserved,
    /// Some figure exceeded its budget.
    OverBudget,
    /// No output element was compared, so no figure means anything.
    NothingCompared,
    /// A rewritten site has no drift figure (its branch was not taken on these samples, or its
    /// values could not be captured), so its swap went unchecked.
    Unmeasured,
}

impl Verdict {
    /// The verdict as written in JSON and in the report (`pass`, `not_ready`, ...).
    pub fn as_str(self) -> &'static str {
        match self {
            Verdict::Pass => "pass",
            Verdict::Error => "error",
            Verdict::NotReady => "not_ready",
            Verdict::Unserved => "unserved",
            Verdict::OverBudget => "over_budget",
            Verdict::NothingCompared => "nothing_compared",
            Verdict::Unmeasured => "unmeasured",
        }
    }
}

/// A verdict and every failing reason behind it, the verdict's own first.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Judgement {
    pub verdict: Verdict,
    pub reasons: Vec<String>,
}

impl Judgement {
    /// The verdict of what was found: ops the target does not run (`readiness`, when there is a
    /// target), sites the plan could not serve, the drift figures against their budget (when
    /// measured), and rewritten sites left without a figure. Decided here and nowhere else.
    pub fn of(
        plan: Option<&Plan>,
        readiness: Option<&Readiness>,
        drift: Option<&DriftReport>,
    ) -> Judgement {
        let mut failed: Vec<(Verdict, String)> = Vec::new();
        if let Some(r) = readiness.filter(|r| !r.ready()) {
            failed.push((
                Verdict::NotReady,
                format!(
                    "the target does not run {} op type(s): {}",
                    r.refused.len(),
                    r.summary()
                ),
            ));
        }
        if let Some(plan) = plan {
            let unserved: Vec<String> = plan
                .sites
                .iter()
                .filter_map(|p| match &p.action {
                    Action::Unserved { reason } => {
                        Some(format!("{} ({}): {reason}", p.site.id, p.site.kind.id))
                    }
                    _ => None,
                })
                .collect();
            if !unserved.is_empty() {
                failed.push((
                    Verdict::Unserved,
                    format!(
                        "{} site(s) have no form the target accepts: {}",
                        unserved.len(),
                        unserved.join("; ")
                    ),
                ));
            }
        }
        if let Some(d) = drift {
            if !d.offenders.is_empty() {
                let what: Vec<String> = d
                    .offenders
                    .iter()
                    .map(|o| match &o.site {
                        Some(site) => format!("site {site}: {}", o.reason),
                        None => format!("output '{}': {}", o.name, o.reason),
                    })
                    .collect();
                failed.push((
                    Verdict::OverBudget,
                    format!("over budget: {}", what.join("; ")),
                ));
            }
            let compared: u64 = d
                .outputs
                .iter()
                .filter_map(|o| o.metrics.as_ref().map(|m| m.compared))
                .sum();
            if compared == 0 {
                failed.push((
                    Verdict::NothingCompared,
                    "nothing compared: no output element was compared (no output, or outputs \
                     with no element)"
                        .into(),
                ));
            }
            let unmeasured = unmeasured(plan, d);
            if !unmeasured.is_empty() {
                failed.push((
                    Verdict::Unmeasured,
                    format!(
                        "{} rewritten site(s) have no drift figure: {}",
                        unmeasured.len(),
                        unmeasured.join("; ")
                    ),
                ));
            }
        }
        match failed.first() {
            None => Judgement {
                verdict: Verdict::Pass,
                reasons: Vec::new(),
            },
            Some((verdict, _)) => Judgement {
                verdict: *verdict,
                reasons: failed.into_iter().map(|(_, r)| r).collect(),
            },
        }
    }

    /// The verdict of a model that could not be audited.
    pub fn error(reason: &str) -> Judgement {
        Judgement {
            verdict: Verdict::Error,
            reasons: vec![reason.to_string()],
        }
    }

    /// The verdict and its first reason in one line: `pass`, `unserved: 1 site(s) ...`.
    pub fn line(&self) -> String {
        match self.reasons.first() {
            None => self.verdict.as_str().to_string(),
            Some(r) => format!("{}: {r}", self.verdict.as_str()),
        }
    }
}

/// Every rewritten site without both a local and a propagated drift figure, each with why
/// (`site (kind) in graph: reason`). Rewritten: the plan's rewrites (one the comparison left out
/// counts too); without a plan (two files compared), the pairs whose kind, parameters or ops
/// differ. A site left as it was never counts.
fn unmeasured(plan: Option<&Plan>, drift: &DriftReport) -> Vec<String> {
    let why = |s: &SiteDrift| -> Option<String> {
        if s.local.is_some() && s.propagated.is_some() {
            return None;
        }
        let note = s
            .notes
            .iter()
            .find(|n| n.contains("not measured"))
            .or_else(|| s.notes.first())
            .map_or("no figure was computed", String::as_str);
        Some(format!(
            "{} ({}) in {}: {note}",
            s.id_a, s.kind_a.id, s.graph
        ))
    };
    match plan {
        Some(plan) => plan
            .sites
            .iter()
            .filter(|p| matches!(p.action, Action::Rewrite(_)))
            .filter_map(|p| match drift.sites.iter().find(|s| s.id_a == p.site.id) {
                Some(s) => why(s),
                None => Some(format!(
                    "{} ({}) in {}: not compared",
                    p.site.id, p.site.kind.id, p.site.graph
                )),
            })
            .collect(),
        None => drift
            .sites
            .iter()
            .filter(|s| {
                !std::ptr::eq(s.kind_a, s.kind_b) || s.params_a != s.params_b || s.ops_a != s.ops_b
            })
            .filter_map(why)
            .collect(),
    }
}

/// Per-model figures. Drift figures are `None` when nothing was measured (no site, or every
/// figure missing); a figure that is not finite serializes as `null` too.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
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
    /// Op types of the converted model the target does not run (0 without a target).
    pub refused_ops: usize,
    pub within_budget: bool,
    pub verdict: Verdict,
    /// Every failing reason, the verdict's first.
    pub reasons: Vec<String>,
    /// Why the model could not be audited (verdict `error` only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
}

/// The figures of one audited model.
pub fn summarize(plan: &Plan, readiness: Option<&Readiness>, drift: &DriftReport) -> ModelSummary {
    let count = |f: fn(&Action) -> bool| plan.sites.iter().filter(|p| f(&p.action)).count();
    let unserved = plan.unserved();
    let worst_local = worst(
        drift
            .sites
            .iter()
            .filter_map(|s| s.local.as_ref().map(|d| (d.max_abs, &s.id_a))),
        |v, w| v > w,
    );
    let judgement = Judgement::of(Some(plan), readiness, Some(drift));
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
        refused_ops: readiness.map_or(0, |r| r.refused.len()),
        within_budget: drift.within_budget,
        verdict: judgement.verdict,
        reasons: judgement.reasons,
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
            refused_ops: 0,
            within_budget: false,
            verdict: Verdict::Error,
            reasons: vec![error.to_string()],
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
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct ModelRow {
    /// Where the converted model was written; `None` when nothing was.
    pub output: Option<String>,
    #[serde(flatten)]
    pub summary: ModelSummary,
}

/// Counts and worst figures over every model.
#[derive(Debug, Clone, Default, PartialEq, Serialize, JsonSchema)]
pub struct Totals {
    pub models: usize,
    pub passed: usize,
    pub errors: usize,
    /// Models whose conversion holds ops the target does not run.
    pub not_ready: usize,
    /// Models with at least one unserved site (and every op run by the target).
    pub unserved: usize,
    pub over_budget: usize,
    pub nothing_compared: usize,
    /// Models with a rewritten site that has no drift figure.
    pub unmeasured: usize,
    pub sites: usize,
    pub rewritten: usize,
    pub kept: usize,
    pub unserved_sites: usize,
    pub worst_local_max_abs: Option<f64>,
    pub worst_output_max_abs: Option<f64>,
    pub lowest_output_cosine: Option<f64>,
}

/// What every model of a batch was judged against.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct BatchContext {
    /// The target or the requests, in words.
    pub converted_for: String,
    pub budget: crate::measure::Budgets,
    pub budget_source: String,
    /// The input options, in words (each model's own source is in its drift report).
    pub inputs: String,
}

/// The summary of many models.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct BatchReport {
    pub schema_version: SchemaVersion,
    pub actswap: &'static str,
    #[serde(flatten)]
    pub context: BatchContext,
    pub models: Vec<ModelRow>,
    pub totals: Totals,
    pub caution: &'static str,
}

impl BatchReport {
    pub fn new(context: BatchContext, models: Vec<ModelRow>) -> BatchReport {
        let mut t = Totals {
            models: models.len(),
            ..Totals::default()
        };
        for m in &models {
            let s = &m.summary;
            match s.verdict {
                Verdict::Pass => t.passed += 1,
                Verdict::Error => t.errors += 1,
                Verdict::NotReady => t.not_ready += 1,
                Verdict::Unserved => t.unserved += 1,
                Verdict::OverBudget => t.over_budget += 1,
                Verdict::NothingCompared => t.nothing_compared += 1,
                Verdict::Unmeasured => t.unmeasured += 1,
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
            schema_version: SchemaVersion,
            actswap: env!("CARGO_PKG_VERSION"),
            context,
            models,
            totals: t,
            caution: CAUTION,
        }
    }

    /// The worst verdict of the batch, for its exit code: the first failing one in the order
    /// of [`Verdict`] (an error first), else pass.
    pub fn worst_verdict(&self) -> Verdict {
        self.models
            .iter()
            .map(|m| m.summary.verdict)
            .filter(|v| *v != Verdict::Pass)
            .min()
            .unwrap_or(Verdict::Pass)
    }
}
