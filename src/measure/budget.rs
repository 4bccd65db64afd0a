//! Drift budgets and what exceeds them.
//!
//! Output budgets bound max abs, max rel and (from below) cosine and top-1 agreement at every
//! graph output; the site budget bounds each site's local max abs. A non-finite mismatch (NaN or infinity where the
//! other model has something else) always exceeds the budget, set or not, and so does an output
//! the two models cannot be compared on (missing, or of another shape).

use schemars::JsonSchema;
use serde::Serialize;

use super::metrics::{Drift, Top1};

/// The budget of a conversion that names no target budget (`--to` alone, a profile without one,
/// `drift` of two files): output cosine similarity at least 0.999. An exact conversion stays
/// within 1e-10 of cosine 1 and a requested approximation such as silu -> hard_swish near 0.9999
/// on typical models; 0.999 fails one that changes what the model computes (a GELU replaced by
/// ReLU falls near 0.95). Flags override it.
pub const DEFAULT_BUDGET: Budgets = Budgets {
    max_abs: None,
    max_rel: None,
    min_cosine: Some(0.999),
    min_top1: None,
    site_max_abs: None,
};

/// The budgets of a comparison; `None` sets no limit.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize, JsonSchema, serde::Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Budgets {
    /// Largest max abs allowed at any output.
    pub max_abs: Option<f64>,
    /// Largest max rel allowed at any output.
    pub max_rel: Option<f64>,
    /// Smallest cosine similarity allowed at any output.
    pub min_cosine: Option<f64>,
    /// Smallest share of rows whose top-1 class agrees, at any output where top-1 applies.
    pub min_top1: Option<f64>,
    /// Largest local max abs allowed at any site.
    pub site_max_abs: Option<f64>,
}

impl Budgets {
    /// Each limit from `self` where set, else from `fallback`.
    pub fn or(self, fallback: Budgets) -> Budgets {
        Budgets {
            max_abs: self.max_abs.or(fallback.max_abs),
            max_rel: self.max_rel.or(fallback.max_rel),
            min_cosine: self.min_cosine.or(fallback.min_cosine),
            min_top1: self.min_top1.or(fallback.min_top1),
            site_max_abs: self.site_max_abs.or(fallback.site_max_abs),
        }
    }

    /// True when no limit is set.
    pub fn is_empty(&self) -> bool {
        *self == Budgets::default()
    }

    /// The limits in words, e.g. `min cosine 0.999, site max abs 0.35`.
    pub fn describe(&self) -> String {
        let limits: Vec<String> = [
            ("max abs", self.max_abs),
            ("max rel", self.max_rel),
            ("min cosine", self.min_cosine),
            ("min top-1", self.min_top1),
            ("site max abs", self.site_max_abs),
        ]
        .into_iter()
        .filter_map(|(name, v)| v.map(|v| format!("{name} {v}")))
        .collect();
        if limits.is_empty() {
            "none".into()
        } else {
            limits.join(", ")
        }
    }
}

/// Whether an offender is a graph output or a site.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum Scope {
    Output,
    Site,
}

/// One figure over its budget.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct Offender {
    pub scope: Scope,
    /// The output's name, or the site's output tensor.
    pub name: String,
    /// The site id in the original model (sites only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub site: Option<String>,
    /// `max_abs`, `max_rel`, `cosine`, `top1`, `nonfinite_mismatches` or `comparable`.
    pub metric: &'static str,
    pub value: Option<f64>,
    pub budget: Option<f64>,
    /// One readable line.
    pub reason: String,
}

impl Budgets {
    /// The figures of output `name` over budget.
    pub fn check_output(&self, name: &str, drift: &Drift, top1: Option<&Top1>) -> Vec<Offender> {
        let offender = |metric, value, budget: Option<f64>, reason: String| Offender {
            scope: Scope::Output,
            name: name.to_string(),
            site: None,
            metric,
            value,
            budget,
            reason,
        };
        let mut out = Vec::new();
        if let Some(o) = nonfinite(drift, |value, reason| {
            offender("nonfinite_mismatches", value, None, reason)
        }) {
            out.push(o);
        }
        if let Some(b) = self.max_abs.filter(|&b| drift.max_abs > b) {
            out.push(offender(
                "max_abs",
                Some(drift.max_abs),
                Some(b),
                format!("max abs {:.3e} > {b:e}", drift.max_abs),
            ));
        }
        if let Some(b) = self.max_rel.filter(|&b| drift.max_rel > b) {
            out.push(offender(
                "max_rel",
                Some(drift.max_rel),
                Some(b),
                format!("max rel {:.3e} > {b:e}", drift.max_rel),
            ));
        }
        if let Some(b) = self.min_cosine.filter(|&b| drift.cosine < b) {
            out.push(offender(
                "cosine",
                Some(drift.cosine),
                Some(b),
                format!("cosine {:.9} < {b}", drift.cosine),
            ));
        }
        if let (Some(b), Some(t)) = (self.min_top1, top1)
            && t.share < b
        {
            out.push(offender(
                "top1",
                Some(t.share),
                Some(b),
                format!(
                    "top-1 agreement {:.2}% of {} rows < {:.2}%",
                    t.share * 100.0,
                    t.rows,
                    b * 100.0
                ),
            ));
        }
        out
    }

    /// The local-drift figures of site `id` (output tensor `output`) over budget.
    pub fn check_site(&self, id: &str, output: &str, local: &Drift) -> Vec<Offender> {
        let offender = |metric, value, budget: Option<f64>, reason: String| Offender {
            scope: Scope::Site,
            name: output.to_string(),
            site: Some(id.to_string()),
            metric,
            value,
            budget,
            reason,
        };
        let mut out = Vec::new();
        if let Some(o) = nonfinite(local, |value, reason| {
            offender("nonfinite_mismatches", value, None, reason)
        }) {
            out.push(o);
        }
        if let Some(b) = self.site_max_abs.filter(|&b| local.max_abs > b) {
            out.push(offender(
                "max_abs",
                Some(local.max_abs),
                Some(b),
                format!("local max abs {:.3e} > {b:e}", local.max_abs),
            ));
        }
        out
    }
}

/// An offender for non-finite mismatches, when there are any.
fn nonfinite(drift: &Drift, make: impl Fn(Option<f64>, String) -> Offender) -> Option<Offender> {
    let n = drift.nonfinite_mismatches();
    (n > 0).then(|| {
        make(
            Some(n as f64),
            format!(
                "{} NaN and {} infinity mismatches",
                drift.nan_mismatches, drift.inf_mismatches
            ),
        )
    })
}

/// An output the models cannot be compared on.
pub fn incomparable(name: &str, reason: String) -> Offender {
    Offender {
        scope: Scope::Output,
        name: name.to_string(),
        site: None,
        metric: "comparable",
        value: None,
        budget: None,
        reason,
    }
}
