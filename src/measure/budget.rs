//! Drift budgets and what exceeds them.
//!
//! Output budgets bound max abs, max rel and (from below) cosine at every graph output; the site
//! budget bounds each site's local max abs. A non-finite mismatch (NaN or infinity where the
//! other model has something else) always exceeds the budget, set or not, and so does an output
//! the two models cannot be compared on (missing, or of another shape).

use serde::Serialize;

use super::metrics::Drift;

/// The budgets of a comparison; `None` sets no limit.
#[derive(Debug, Clone, Copy, Default, PartialEq, Serialize)]
pub struct Budgets {
    /// Largest max abs allowed at any output.
    pub max_abs: Option<f64>,
    /// Largest max rel allowed at any output.
    pub max_rel: Option<f64>,
    /// Smallest cosine similarity allowed at any output.
    pub min_cosine: Option<f64>,
    /// Largest local max abs allowed at any site.
    pub site_max_abs: Option<f64>,
}

/// Whether an offender is a graph output or a site.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Scope {
    Output,
    Site,
}

/// One figure over its budget.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Offender {
    pub scope: Scope,
    /// The output's name, or the site's output tensor.
    pub name: String,
    /// The site id in the original model (sites only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub site: Option<String>,
    /// `max_abs`, `max_rel`, `cosine`, `nonfinite_mismatches` or `comparable`.
    pub metric: &'static str,
    pub value: Option<f64>,
    pub budget: Option<f64>,
    /// One readable line.
    pub reason: String,
}

impl Budgets {
    /// The figures of output `name` over budget.
    pub fn check_output(&self, name: &str, drift: &Drift) -> Vec<Offender> {
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
