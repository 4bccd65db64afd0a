//! What a comparison reports, and its JSON form (`actswap drift --json`, which adds
//! `schema_version` first and `budget_source`, `verdict`, `reasons` last; the JSON Schema:
//! `actswap schema drift`).
//!
//! # JSON schema
//! Keys appear in this order; figures are numbers, and a number that is not finite (say a ratio
//! over a zero time) is written as `null`.
//!
//! ```text
//! {
//!   "model_a": "original.onnx",           the original model's file ("(in memory)" if none)
//!   "model_b": "rewritten.onnx",
//!   "samples": 4,                          samples compared
//!   "input_source": "...",                 where the samples came from
//!   "tolerance": {"atol", "rtol", "rel_floor"},
//!   "sites": [{                            matched sites, offenders first, then in site order
//!     "id_a", "id_b",                      site ids in each model's scan
//!     "output", "graph",                   the site's output tensor (same in both) and graph path
//!     "kind_a", "params_a", "ops_a",       the original site: kind, parameters, op types
//!     "kind_b", "params_b", "ops_b",       the new site
//!     "local": METRICS | null,             new site isolated vs original site isolated, both
//!                                          fed the tensor the original site received
//!     "local_basis": "isolated" | "identical" | null,
//!                                          how: both isolated sites were run, or the rewrite
//!                                          left the site identical (same nodes, attributes,
//!                                          constants and opsets), so the original's captured
//!                                          output is compared with itself and nothing is run
//!     "propagated": METRICS | null,        the output tensor in the rewritten vs original model
//!     "isolation_max_abs": x | null,       isolated original site vs its value in the full model
//!     "input_range": {"min", "max", "p01", "p99", "nonfinite"} | null,
//!     "bound_over_range": x | null,        catalogue worst case |kind_a - kind_b| on [min, max]
//!     "bound_at": x | null,                where it is reached
//!     "latency": {"a_median_s", "b_median_s", "ratio"} | null,   identical sites: null
//!     "notes": ["..."]                     why a figure is missing, and other remarks
//!   }],
//!   "outputs": [{"name", "metrics": METRICS | null,
//!                "top1_agreement": {"rows", "agreeing", "share"} | null, "notes": [...]}],
//!   "unmatched": [{"model": "a" | "b", "id", "kind", "output", "graph"}],
//!   "latency": {"a": {"median_s", "p10_s", "p90_s"}, "b": {...}, "ratio", "runs", "warmup"}
//!              | null,
//!   "budgets": {"max_abs", "max_rel", "min_cosine", "site_max_abs"},   null: not set
//!   "offenders": [{"scope": "output" | "site", "name", "site" (sites only), "metric",
//!                  "value", "budget", "reason"}],
//!   "within_budget": true,
//!   "caution": "..."
//! }
//! METRICS = {"elements", "compared", "max_abs", "mean_abs", "rms", "max_rel", "rel_floor",
//!            "cosine", "cosine_note" (when a side is all zero), "atol", "rtol", "beyond_tol",
//!            "beyond_tol_share", "nan_mismatches", "inf_mismatches", "nonfinite_agreeing"}
//! ```
//! See [`super::metrics`] for the definitions and [`super::budget`] for what offends.

use std::borrow::Cow;

use schemars::{JsonSchema, Schema, SchemaGenerator};
use serde::{Serialize, Serializer};

use super::budget::{Budgets, Offender};
use super::latency::{EndToEnd, SiteLatency};
use super::metrics::{Drift, Tolerance, Top1};
use super::range::InputRange;
use crate::catalog::{Kind, NamedParams, Params};
use crate::scan::Site;

/// Printed with every report.
pub const CAUTION: &str = "Drift measured on sample inputs certifies nothing: for a model in a \
medical, automotive or other safety-relevant role, validate the converted model the way your \
domain requires (its standards, test sets and sign-off), not with this verdict.";

/// The result of comparing an original model with its rewrite.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct DriftReport {
    pub model_a: String,
    pub model_b: String,
    pub samples: usize,
    pub input_source: String,
    pub tolerance: Tolerance,
    pub sites: Vec<SiteDrift>,
    pub outputs: Vec<OutputDrift>,
    pub unmatched: Vec<UnmatchedSite>,
    pub latency: Option<EndToEnd>,
    pub budgets: Budgets,
    pub offenders: Vec<Offender>,
    pub within_budget: bool,
    pub caution: &'static str,
}

/// One site and its counterpart (same output tensor, same graph).
#[derive(Debug, Clone)]
pub struct SiteDrift {
    pub id_a: String,
    pub id_b: String,
    pub output: String,
    pub graph: String,
    pub kind_a: &'static Kind,
    pub params_a: Option<Params>,
    pub ops_a: Vec<String>,
    pub kind_b: &'static Kind,
    pub params_b: Option<Params>,
    pub ops_b: Vec<String>,
    pub local: Option<Drift>,
    pub local_basis: Option<LocalBasis>,
    pub propagated: Option<Drift>,
    pub isolation_max_abs: Option<f64>,
    pub input_range: Option<InputRange>,
    pub bound_over_range: Option<f64>,
    pub bound_at: Option<f64>,
    pub latency: Option<SiteLatency>,
    pub notes: Vec<String>,
}

/// The JSON of a [`SiteDrift`]: kinds by id, parameters by name.
#[derive(Serialize, JsonSchema)]
struct SiteDriftJson<'a> {
    id_a: &'a str,
    id_b: &'a str,
    output: &'a str,
    graph: &'a str,
    kind_a: &'static str,
    params_a: NamedParams<'a>,
    ops_a: &'a [String],
    kind_b: &'static str,
    params_b: NamedParams<'a>,
    ops_b: &'a [String],
    local: &'a Option<Drift>,
    local_basis: Option<LocalBasis>,
    propagated: &'a Option<Drift>,
    isolation_max_abs: Option<f64>,
    input_range: Option<InputRange>,
    bound_over_range: Option<f64>,
    bound_at: Option<f64>,
    latency: &'a Option<SiteLatency>,
    notes: &'a [String],
}

impl Serialize for SiteDrift {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        SiteDriftJson {
            id_a: &self.id_a,
            id_b: &self.id_b,
            output: &self.output,
            graph: &self.graph,
            kind_a: self.kind_a.id,
            params_a: NamedParams::of(self.kind_a.params, self.params_a.as_ref()),
            ops_a: &self.ops_a,
            kind_b: self.kind_b.id,
            params_b: NamedParams::of(self.kind_b.params, self.params_b.as_ref()),
            ops_b: &self.ops_b,
            local: &self.local,
            local_basis: self.local_basis,
            propagated: &self.propagated,
            isolation_max_abs: self.isolation_max_abs,
            input_range: self.input_range,
            bound_over_range: self.bound_over_range,
            bound_at: self.bound_at,
            latency: &self.latency,
            notes: &self.notes,
        }
        .serialize(s)
    }
}

impl JsonSchema for SiteDrift {
    fn schema_name() -> Cow<'static, str> {
        "SiteDrift".into()
    }

    fn json_schema(g: &mut SchemaGenerator) -> Schema {
        SiteDriftJson::json_schema(g)
    }
}

/// How a site's local drift was obtained.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum LocalBasis {
    /// Both forms were isolated and run on the original site's input.
    Isolated,
    /// The rewrite left the site identical; nothing was run.
    Identical,
}

/// One graph output.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct OutputDrift {
    pub name: String,
    pub metrics: Option<Drift>,
    pub top1_agreement: Option<Top1>,
    pub notes: Vec<String>,
}

/// A site found in only one of the models.
#[derive(Debug, Clone, Serialize, JsonSchema)]
pub struct UnmatchedSite {
    /// `a` (original) or `b` (rewritten).
    pub model: &'static str,
    pub id: String,
    #[serde(serialize_with = "kind_id")]
    #[schemars(with = "String")]
    pub kind: &'static Kind,
    pub output: String,
    pub graph: String,
}

impl UnmatchedSite {
    /// `site`, found only in model `model` (`a` or `b`).
    pub fn of(model: &'static str, site: &Site) -> UnmatchedSite {
        UnmatchedSite {
            model,
            id: site.id.clone(),
            kind: site.kind,
            output: site.output.clone(),
            graph: site.graph.clone(),
        }
    }
}

fn kind_id<S: Serializer>(kind: &&'static Kind, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(kind.id)
}
