//! The plan as JSON (the `plan` of `actswap audit --json`, the body of `actswap swap --json`).

use std::borrow::Cow;

use schemars::{JsonSchema, Schema, SchemaGenerator, json_schema};
use serde::{Serialize, Serializer};

use super::ranges::RangeSource;
use super::{Action, Plan};
use crate::catalog::NamedParams;
use crate::catalog::substitute::ErrorBound;
use crate::scan::Spelling;

/// The plan: every site with its action, and counts.
#[derive(Serialize, JsonSchema)]
pub struct PlanJson<'a> {
    pub sites: Vec<PlannedJson<'a>>,
    /// Sites rewritten.
    pub rewrites: usize,
    /// Sites no accepted form can serve.
    pub unserved: usize,
    pub warnings: &'a [String],
}

/// One site and what happens to it.
#[derive(Serialize, JsonSchema)]
pub struct PlannedJson<'a> {
    /// The site's id in the scan.
    pub site: &'a str,
    /// The site's kind id.
    pub kind: &'static str,
    pub params: NamedParams<'a>,
    pub graph: &'a str,
    pub output: &'a str,
    pub from: FromJson<'a>,
    #[serde(flatten)]
    pub action: ActionJson<'a>,
}

/// How the site is spelled in the model.
#[derive(Serialize, JsonSchema)]
pub struct FromJson<'a> {
    pub form: Spelling,
    pub ops: &'a [String],
}

/// What happens to a site: `keep` or `unserved` with a reason, or `rewrite` to a form.
#[derive(Serialize, JsonSchema)]
#[serde(tag = "action", rename_all = "lowercase")]
pub enum ActionJson<'a> {
    Keep {
        reason: &'a str,
    },
    Unserved {
        reason: &'a str,
    },
    Rewrite {
        to: TargetJson<'a>,
        /// The substitution rule, for approximations.
        rule: Option<&'static str>,
        /// Worst-case |error| over the real line against the site's own kind (0 when exact).
        error_bound: BoundJson,
        /// The fit, for the fitted form.
        #[serde(skip_serializing_if = "Option::is_none")]
        fit: Option<FitJson>,
        /// The forms weighed before this one and why each was passed over.
        alternatives: &'a [String],
    },
}

/// A fitted form: its segments, the range it was fitted over and its error there and over the
/// real line (the worst channel's).
#[derive(Serialize, JsonSchema)]
pub struct FitJson {
    /// Segments between the outer knots (the two tails come on top).
    pub segments: usize,
    /// The fitting range [lo, hi].
    pub range: [f64; 2],
    pub range_source: RangeSource,
    pub in_range: BoundJson,
    pub over_reals: BoundJson,
}

/// The kind, parameters and form a site is rewritten to, with the ops written.
#[derive(Serialize, JsonSchema)]
pub struct TargetJson<'a> {
    pub kind: &'static str,
    pub params: NamedParams<'a>,
    pub form: &'static str,
    pub ops: Vec<String>,
}

/// An error bound: its value and where it is reached.
#[derive(Serialize, JsonSchema)]
pub struct BoundJson {
    pub max_abs: Extended,
    pub at: Extended,
}

impl From<&ErrorBound> for BoundJson {
    fn from(b: &ErrorBound) -> BoundJson {
        BoundJson {
            max_abs: Extended(b.value),
            at: Extended(b.at),
        }
    }
}

/// A number, or `"inf"` / `"-inf"` when it is not finite, so a gate cannot read an infinity as
/// a number.
pub struct Extended(pub f64);

impl Serialize for Extended {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self.0 {
            x if x.is_finite() => s.serialize_f64(x),
            x if x > 0.0 => s.serialize_str("inf"),
            _ => s.serialize_str("-inf"),
        }
    }
}

impl JsonSchema for Extended {
    fn schema_name() -> Cow<'static, str> {
        "Extended".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "A number, or \"inf\" / \"-inf\" when it is not finite.",
            "anyOf": [{"type": "number"}, {"enum": ["inf", "-inf"]}],
        })
    }
}

impl Plan {
    /// The plan as its JSON document.
    pub fn json(&self) -> PlanJson<'_> {
        let sites = self
            .sites
            .iter()
            .map(|p| {
                let s = &p.site;
                let action = match &p.action {
                    Action::Keep { reason } => ActionJson::Keep { reason },
                    Action::Unserved { reason } => ActionJson::Unserved { reason },
                    Action::Rewrite(r) => ActionJson::Rewrite {
                        to: TargetJson {
                            kind: r.kind.id,
                            params: r.params.named(r.kind.params),
                            form: r.form.name(),
                            ops: r.ops(),
                        },
                        rule: r.rule,
                        error_bound: BoundJson::from(&r.bound),
                        fit: r.fit.as_deref().map(|(f, source)| FitJson {
                            segments: f.segments,
                            range: [f.range.lo, f.range.hi],
                            range_source: *source,
                            in_range: BoundJson::from(&f.bound.in_range),
                            over_reals: BoundJson::from(&f.bound.over_reals),
                        }),
                        alternatives: &r.alternatives,
                    },
                };
                PlannedJson {
                    site: &s.id,
                    kind: s.kind.id,
                    params: s.named_params(),
                    graph: &s.graph,
                    output: &s.output,
                    from: FromJson {
                        form: s.spelling,
                        ops: &s.ops,
                    },
                    action,
                }
            })
            .collect();
        PlanJson {
            sites,
            rewrites: self.rewrites().count(),
            unserved: self.unserved(),
            warnings: &self.warnings,
        }
    }
}
