//! The JSON documents the commands print that are assembled from several stages (a plan, a
//! readiness check, a drift report, a verdict). Each starts with `schema_version`; the
//! documents of one stage (scan, info, batch) are that stage's own types.

use schemars::JsonSchema;
use serde::Serialize;

use crate::audit::{Audit, Judgement, Verdict, readiness::Readiness};
use crate::catalog::{self, Kind, KindJson};
use crate::measure::{Budgets, DriftReport};
use crate::plan::json::PlanJson;
use crate::rewrite::Applied;
use crate::schema_version::SchemaVersion;

/// `actswap swap --json`: the plan, what was written, the target check and the verdict.
#[derive(Serialize, JsonSchema)]
pub struct SwapJson<'a> {
    pub schema_version: SchemaVersion,
    #[serde(flatten)]
    pub plan: PlanJson<'a>,
    /// The converted model's file, when it was written.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub written: Option<String>,
    /// The sites rewritten, when the model was written.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub applied: Option<Vec<AppliedJson<'a>>>,
    /// The target or the requests, in words.
    pub converted_for: String,
    /// The converted model against the target; null without a target.
    pub readiness: Option<&'a Readiness>,
    pub verdict: Verdict,
    /// Every failing reason, the verdict's first.
    pub reasons: &'a [String],
}

/// One site rewritten: the nodes and constants inserted.
#[derive(Serialize, JsonSchema)]
pub struct AppliedJson<'a> {
    pub site: &'a str,
    pub output: &'a str,
    pub nodes: &'a [String],
    pub constants: &'a [String],
}

impl<'a> From<&'a Applied> for AppliedJson<'a> {
    fn from(a: &'a Applied) -> AppliedJson<'a> {
        AppliedJson {
            site: &a.site,
            output: &a.output,
            nodes: &a.nodes,
            constants: &a.constants,
        }
    }
}

/// `actswap audit --json`: the conversion, the target check, the drift report and the verdict.
#[derive(Serialize, JsonSchema)]
pub struct AuditJson<'a> {
    pub schema_version: SchemaVersion,
    /// The actswap version that wrote it.
    pub actswap: &'static str,
    pub model: String,
    /// The target or the requests, in words.
    pub converted_for: &'a str,
    pub budget: Budgets,
    /// Where the budget came from.
    pub budget_source: &'a str,
    /// Where the samples came from.
    pub inputs: &'a str,
    pub plan: PlanJson<'a>,
    /// The converted model against the target; null without a target.
    pub readiness: Option<&'a Readiness>,
    pub drift: &'a DriftReport,
    pub verdict: Verdict,
    /// Every failing reason, the verdict's first.
    pub reasons: &'a [String],
    /// The converted model's file, when it was written.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub written: Option<String>,
    /// The HTML report's file, when one was written.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub report: Option<String>,
}

impl<'a> AuditJson<'a> {
    /// The document of `audit` of the model at `model`, judged by `judgement`.
    pub fn new(model: String, audit: &'a Audit, judgement: &'a Judgement) -> AuditJson<'a> {
        AuditJson {
            schema_version: SchemaVersion,
            actswap: env!("CARGO_PKG_VERSION"),
            model,
            converted_for: &audit.conversion,
            budget: audit.drift.budgets,
            budget_source: &audit.budget_source,
            inputs: &audit.drift.input_source,
            plan: audit.plan.json(),
            readiness: audit.readiness.as_ref(),
            drift: &audit.drift,
            verdict: judgement.verdict,
            reasons: &judgement.reasons,
            written: None,
            report: None,
        }
    }
}

/// `actswap drift --json`: the drift report, where its budget came from, and the verdict.
#[derive(Serialize, JsonSchema)]
pub struct DriftJson<'a> {
    pub schema_version: SchemaVersion,
    #[serde(flatten)]
    pub report: &'a DriftReport,
    /// Where the budget came from.
    pub budget_source: &'a str,
    pub verdict: Verdict,
    /// Every failing reason, the verdict's first.
    pub reasons: &'a [String],
}

/// `actswap catalog --json`: one kind in full, or every kind.
#[derive(Serialize, JsonSchema)]
#[serde(untagged)]
pub enum CatalogJson {
    /// `actswap catalog KIND --json`.
    One {
        schema_version: SchemaVersion,
        #[serde(flatten)]
        kind: Box<KindJson>,
    },
    /// `actswap catalog --json`.
    All {
        schema_version: SchemaVersion,
        kinds: Vec<KindJson>,
    },
}

impl CatalogJson {
    /// `kind` in full, or every kind when `None`.
    pub fn of(kind: Option<&'static Kind>) -> CatalogJson {
        match kind {
            Some(k) => CatalogJson::One {
                schema_version: SchemaVersion,
                kind: Box::new(catalog::json(k)),
            },
            None => CatalogJson::All {
                schema_version: SchemaVersion,
                kinds: catalog::all().iter().map(|k| catalog::json(k)).collect(),
            },
        }
    }
}
