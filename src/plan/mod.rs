//! The planner: for every site, what to emit (kind, form, parameters) and the error it brings,
//! from `--to` requests or a target profile. Nothing is written here; the plan is shown first.
//!
//! With a profile, a site already accepted by the target is kept (unless the profile prefers a
//! form); otherwise exact forms come first (fused, primitive, in the profile's order), then the
//! approximation with the smallest worst-case error within the profile's allowance. A form whose
//! ops need a higher opset than the model declares is never offered: the opset is not changed.

pub mod profile;
pub mod request;

use serde_json::{Value, json};

use crate::catalog::emit::{self, EmitCtx, FormId, ParamArg};
use crate::catalog::substitute::{self, ErrorBound};
use crate::catalog::{self, Kind};
use crate::onnx::ModelIndex;
use crate::onnx::proto::tensor_proto::DataType;
use crate::scan::{Form, ParamValue, Site};
use profile::{Prefer, Profile};
use request::Request;

/// What happens to one site.
#[derive(Debug, Clone)]
pub enum Action {
    /// Left as it is.
    Keep { reason: String },
    /// Replaced by `kind` in `form`.
    Rewrite(Target),
    /// No accepted form can serve it.
    Unserved { reason: String },
}

/// The replacement of a site.
#[derive(Debug, Clone)]
pub struct Target {
    pub kind: &'static Kind,
    pub params: Vec<ParamValue>,
    pub form: FormId,
    /// The substitution rule, for approximations.
    pub rule: Option<&'static str>,
    /// Worst-case |error| over the real line against the site's own kind (0 for exact forms).
    pub bound: ErrorBound,
    /// Op types the form emits.
    pub ops: Vec<String>,
}

/// One site and its action.
#[derive(Debug, Clone)]
pub struct Planned {
    pub site: Site,
    pub action: Action,
}

/// The plan for a model.
#[derive(Debug, Clone)]
pub struct Plan {
    pub sites: Vec<Planned>,
    pub warnings: Vec<String>,
}

/// Where the plan's choices come from.
pub enum Policy<'a> {
    Requests(&'a [Request]),
    Target(&'a Profile),
}

impl Plan {
    /// Plans every site of `sites` (already restricted to the ones asked for).
    pub fn build(index: &ModelIndex, sites: Vec<Site>, policy: &Policy) -> Plan {
        let mut warnings = Vec::new();
        if let Policy::Target(p) = policy
            && let (Some(max), Some(opset)) = (p.max_opset, index.main().opset(""))
            && opset > max
        {
            warnings.push(format!(
                "the model declares opset {opset} but target '{}' runs up to {max}; actswap never changes a model's opset",
                p.name
            ));
        }
        let sites = sites
            .into_iter()
            .map(|site| {
                let action = plan_site(index, &site, policy);
                Planned { site, action }
            })
            .collect();
        Plan { sites, warnings }
    }

    /// Sites no accepted form can serve.
    pub fn unserved(&self) -> usize {
        self.sites
            .iter()
            .filter(|p| matches!(p.action, Action::Unserved { .. }))
            .count()
    }

    /// Sites to rewrite.
    pub fn rewrites(&self) -> impl Iterator<Item = (&Site, &Target)> {
        self.sites.iter().filter_map(|p| match &p.action {
            Action::Rewrite(t) => Some((&p.site, t)),
            _ => None,
        })
    }

    /// The stable JSON form of the plan.
    pub fn to_json(&self) -> Value {
        let sites: Vec<Value> = self
            .sites
            .iter()
            .map(|p| {
                let s = &p.site;
                let mut v = json!({
                    "site": s.id, "kind": s.kind, "params": s.params, "graph": s.graph,
                    "output": s.output,
                    "from": {"form": s.form, "ops": s.ops},
                });
                match &p.action {
                    Action::Keep { reason } => {
                        v["action"] = "keep".into();
                        v["reason"] = reason.clone().into();
                    }
                    Action::Unserved { reason } => {
                        v["action"] = "unserved".into();
                        v["reason"] = reason.clone().into();
                    }
                    Action::Rewrite(t) => {
                        let params: serde_json::Map<String, Value> = t
                            .kind
                            .params
                            .iter()
                            .zip(&t.params)
                            .map(|(p, v)| (p.name.to_string(), serde_json::to_value(v).unwrap_or(Value::Null)))
                            .collect();
                        v["action"] = "rewrite".into();
                        v["to"] = json!({"kind": t.kind.id, "params": params, "form": t.form.name(), "ops": t.ops});
                        v["rule"] = t.rule.map_or(Value::Null, Value::from);
                        v["error_bound"] = bound_json(&t.bound);
                    }
                }
                v
            })
            .collect();
        json!({
            "sites": sites,
            "rewrites": self.rewrites().count(),
            "unserved": self.unserved(),
            "warnings": self.warnings,
        })
    }
}

/// An error bound as JSON; infinities as strings so a gate cannot read them as numbers.
pub fn bound_json(b: &ErrorBound) -> Value {
    let num = |x: f64| {
        if x.is_finite() {
            Value::from(x)
        } else if x > 0.0 {
            Value::from("inf")
        } else {
            Value::from("-inf")
        }
    };
    json!({"max_abs": num(b.value), "at": num(b.at)})
}

const EXACT: ErrorBound = ErrorBound {
    value: 0.0,
    at: 0.0,
};

fn plan_site(index: &ModelIndex, site: &Site, policy: &Policy) -> Action {
    let kind = catalog::get(&site.kind).expect("scanner kinds are catalogue kinds");
    let graph = &index.graphs[site.graph_index];
    let opset = graph.opset("").unwrap_or(1);
    let accepted_now = |p: &Profile| {
        site.ops.iter().zip(&site.node_indices).all(|(op, &n)| {
            matches!(graph.nodes[n].domain(), "" | "ai.onnx") && p.accepts(op, opset)
        })
    };
    if site.params.len() != kind.params.len() {
        return match policy {
            Policy::Target(p) if accepted_now(p) => Action::Keep {
                reason: "accepted by the target".into(),
            },
            _ => Action::Unserved {
                reason: format!("parameters unknown: {}", site.notes.join("; ")),
            },
        };
    }
    let ctx = SiteCtx::new(index, site, opset);
    match policy {
        Policy::Requests(requests) => {
            let Some(r) = request::select(requests, kind) else {
                return Action::Keep {
                    reason: "no --to rule for this kind".into(),
                };
            };
            if !site.rewritable {
                return Action::Unserved {
                    reason: format!("not rewritable: {}", site.notes.join("; ")),
                };
            }
            let candidates = candidates_for(kind, site, r.to);
            let Some((to, params, rule, bound)) = candidates.into_iter().next() else {
                return Action::Unserved {
                    reason: format!(
                        "the catalogue has no substitution from {} to {}",
                        kind.id,
                        r.to.map_or("?", |k| k.id)
                    ),
                };
            };
            let forms = match r.form {
                Some(f) => vec![f],
                None => vec![FormId::Fused, FormId::Primitive],
            };
            let mut reasons = Vec::new();
            for form in forms {
                if to.id == kind.id && ctx.already_in(kind, form) {
                    return Action::Keep {
                        reason: format!("already in the {form} form"),
                    };
                }
                match ctx.emit_ops(to, &params, form) {
                    Ok(ops) => {
                        return Action::Rewrite(Target {
                            kind: to,
                            params,
                            form,
                            rule,
                            bound,
                            ops,
                        });
                    }
                    Err(e) => reasons.push(format!("{}:{form}: {e}", to.id)),
                }
            }
            Action::Unserved {
                reason: reasons.join("; "),
            }
        }
        Policy::Target(p) => {
            let exact_forms: Vec<FormId> = match p.prefer {
                Prefer::Primitive => vec![FormId::Primitive, FormId::Fused],
                _ => vec![FormId::Fused, FormId::Primitive],
            };
            if accepted_now(p) {
                let preferred = match p.prefer {
                    Prefer::Keep => None,
                    Prefer::Fused => Some(FormId::Fused),
                    Prefer::Primitive => Some(FormId::Primitive),
                };
                let keep = Action::Keep {
                    reason: "accepted by the target".into(),
                };
                let Some(form) = preferred else { return keep };
                if !site.rewritable || ctx.already_in(kind, form) {
                    return keep;
                }
                return match ctx.emit_ops(kind, &ctx.params, form) {
                    Ok(ops) if ops.iter().all(|o| p.accepts(o, opset)) => Action::Rewrite(Target {
                        kind,
                        params: site_params(site, kind),
                        form,
                        rule: None,
                        bound: EXACT,
                        ops,
                    }),
                    _ => keep,
                };
            }
            if !site.rewritable {
                return Action::Unserved {
                    reason: format!("not accepted and not rewritable: {}", site.notes.join("; ")),
                };
            }
            let mut reasons = Vec::new();
            for (to, params, rule, bound) in candidates_for(kind, site, None) {
                if bound.value > p.max_approx_error {
                    if rule.is_some() {
                        reasons.push(format!(
                            "{}: error {:.4} over the allowance",
                            to.id, bound.value
                        ));
                    }
                    continue;
                }
                for &form in &exact_forms {
                    match ctx.emit_ops(to, &params, form) {
                        Ok(ops) => match ops.iter().find(|o| !p.accepts(o, opset)) {
                            None => {
                                return Action::Rewrite(Target {
                                    kind: to,
                                    params,
                                    form,
                                    rule,
                                    bound,
                                    ops,
                                });
                            }
                            Some(o) => reasons.push(format!("{}:{form}: {o} not accepted", to.id)),
                        },
                        Err(e) => reasons.push(format!("{}:{form}: {e}", to.id)),
                    }
                }
            }
            Action::Unserved {
                reason: reasons.join("; "),
            }
        }
    }
}

type Candidate = (
    &'static Kind,
    Vec<ParamValue>,
    Option<&'static str>,
    ErrorBound,
);

/// Replacement kinds for a site: its own kind first (exact), then the catalogue's substitutions
/// by increasing worst-case error. With `only`, just that kind.
fn candidates_for(kind: &'static Kind, site: &Site, only: Option<&'static Kind>) -> Vec<Candidate> {
    let own = site_params(site, kind);
    let mut out: Vec<Candidate> = Vec::new();
    if only.is_none_or(|k| k.id == kind.id) {
        out.push((kind, own.clone(), None, EXACT));
    }
    let mut subs: Vec<Candidate> = substitute::rules()
        .for_kind(kind)
        .filter(|r| only.is_none_or(|k| k.id == r.to.id))
        .filter_map(|r| {
            let channels = per_channel_values(&own);
            let mut targets: Vec<Vec<f64>> = Vec::new();
            let mut worst = ErrorBound {
                value: 0.0,
                at: 0.0,
            };
            for from in &channels {
                let to = r.target_params(from)?;
                let b = r.error_over_reals(kind, from)?;
                if b.value > worst.value || b.value.is_nan() {
                    worst = b;
                }
                targets.push(to);
            }
            let params = merge(&targets)?;
            Some((r.to, params, Some(r.name), worst))
        })
        .collect();
    subs.sort_by(|a, b| a.3.value.total_cmp(&b.3.value));
    out.extend(subs);
    out
}

/// The site's parameters in the kind's order.
fn site_params(site: &Site, kind: &Kind) -> Vec<ParamValue> {
    kind.params
        .iter()
        .map(|p| {
            site.params
                .get(p.name)
                .cloned()
                .unwrap_or(ParamValue::Scalar(p.default))
        })
        .collect()
}

/// One scalar parameter vector per channel (one vector when nothing is per channel).
fn per_channel_values(params: &[ParamValue]) -> Vec<Vec<f64>> {
    let channels = params
        .iter()
        .map(|p| match p {
            ParamValue::PerChannel(v) => v.len(),
            ParamValue::Scalar(_) => 1,
        })
        .max()
        .unwrap_or(1);
    (0..channels)
        .map(|c| {
            params
                .iter()
                .map(|p| match p {
                    ParamValue::Scalar(v) => *v,
                    ParamValue::PerChannel(v) => v[c],
                })
                .collect()
        })
        .collect()
}

/// Per-channel parameter vectors back into values (scalar where all channels agree).
fn merge(channels: &[Vec<f64>]) -> Option<Vec<ParamValue>> {
    let n = channels.first()?.len();
    Some(
        (0..n)
            .map(|i| {
                let vals: Vec<f64> = channels.iter().map(|c| c[i]).collect();
                if vals.iter().all(|v| *v == vals[0]) {
                    ParamValue::Scalar(vals[0])
                } else {
                    ParamValue::PerChannel(vals)
                }
            })
            .collect(),
    )
}

/// What the emitters need to know about a site.
pub struct SiteCtx {
    pub elem_type: DataType,
    pub opset: i64,
    pub params: Vec<ParamValue>,
    param_shape: Option<Vec<usize>>,
    ops: Vec<String>,
    form: Form,
}

impl SiteCtx {
    pub fn new(index: &ModelIndex, site: &Site, opset: i64) -> SiteCtx {
        let kind = catalog::get(&site.kind).expect("catalogue kind");
        SiteCtx {
            elem_type: element_type(index, site),
            opset,
            params: site_params(site, kind),
            param_shape: site.param_shape.clone(),
            ops: site.ops.clone(),
            form: site.form,
        }
    }

    /// Parameters as emitter arguments (per-channel values keep the site's constant shape).
    pub fn args(&self, params: &[ParamValue]) -> Vec<ParamArg> {
        params
            .iter()
            .map(|p| match p {
                ParamValue::Scalar(v) => ParamArg::Scalar(*v),
                ParamValue::PerChannel(v) => ParamArg::Tensor {
                    values: v.clone(),
                    dims: self.param_shape.clone().unwrap_or_else(|| vec![v.len()]),
                },
            })
            .collect()
    }

    /// The op types `kind`'s `form` would emit here, or why it cannot.
    fn emit_ops(
        &self,
        kind: &Kind,
        params: &[ParamValue],
        form: FormId,
    ) -> Result<Vec<String>, emit::Unavailable> {
        let args = self.args(params);
        let ctx = EmitCtx {
            input: "x",
            output: "y",
            prefix: "plan",
            elem_type: self.elem_type,
            opset: self.opset,
            params: &args,
        };
        let e = emit::emit(kind, form, &ctx)?;
        Ok(e.nodes.iter().map(|n| n.op_type().to_string()).collect())
    }

    /// True when the site already is `kind`'s `form`: a fused site asked to stay fused, or a
    /// site whose ops are exactly those the form would emit.
    fn already_in(&self, kind: &Kind, form: FormId) -> bool {
        if form == FormId::Fused && self.form == Form::Fused {
            return true;
        }
        let Ok(mut want) = self.emit_ops(kind, &self.params, form) else {
            return false;
        };
        let mut have = self.ops.clone();
        want.sort();
        have.sort();
        want == have
    }
}

/// The element type of the site's input: declared, else that of its constants, else float32.
fn element_type(index: &ModelIndex, site: &Site) -> DataType {
    let graph = &index.graphs[site.graph_index];
    let declared = graph
        .value_info(&site.input)
        .and_then(|v| v.r#type.as_ref())
        .and_then(|t| t.tensor_type.as_ref())
        .and_then(|t| t.elem_type)
        .and_then(|c| DataType::try_from(c).ok());
    declared
        .or_else(|| {
            site.constants
                .iter()
                .find_map(|c| index.constant(site.graph_index, c))
                .map(|v| v.data_type)
                .filter(|t| {
                    matches!(
                        t,
                        DataType::Float | DataType::Float16 | DataType::Double | DataType::Bfloat16
                    )
                })
        })
        .unwrap_or(DataType::Float)
}
