//! The planner: for every site, what to emit (kind, form, parameters) and the error it brings,
//! from `--to` requests, a target profile, or both (a request refines the target for the kinds it
//! names). The plan holds the form it emitted for each site rewritten; nothing is written to the
//! model here, and the plan is shown first.
//!
//! With a profile, a site the target already runs is kept; otherwise exact forms come first
//! (fused, primitive, in the order the profile prefers), then the approximation with the smallest
//! worst-case error within the profile's allowance. A form whose ops need a higher opset than the
//! model declares is never offered: the opset is not changed, and a model whose opset is above
//! the target's gets that one reason for every site.

pub mod json;
pub mod profile;
pub mod request;

use crate::catalog::emit::{EmitCtx, Emitted, Unavailable};
use crate::catalog::substitute::{self, ErrorBound};
use crate::catalog::{Form, Kind, Params};
use crate::scan::{Site, Spelling};
use profile::{Prefer, Profile};
use request::Request;

/// What happens to one site.
#[derive(Debug, Clone)]
pub enum Action {
    /// Left as it is.
    Keep { reason: String },
    /// Replaced by `kind` in `form`.
    Rewrite(Replacement),
    /// No accepted form can serve it.
    Unserved { reason: String },
}

/// The replacement of a site, with the form the planner wrote for it.
#[derive(Debug, Clone)]
pub struct Replacement {
    pub kind: &'static Kind,
    pub params: Params,
    pub form: Form,
    /// The substitution rule, for approximations.
    pub rule: Option<&'static str>,
    /// Worst-case |error| over the real line against the site's own kind (0 for exact forms).
    pub bound: ErrorBound,
    /// The form written for the site: it reads the site's input and writes its output; every
    /// new name starts with `<output>.<form>` (same kind) or `<output>.<kind>` (another kind).
    pub emitted: Emitted,
}

impl Replacement {
    /// Op types the form emits, in order.
    pub fn ops(&self) -> Vec<String> {
        self.emitted.op_types()
    }
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

/// Where the plan's choices come from: `--to` requests, a target profile, or both.
#[derive(Clone, Copy)]
pub struct Policy<'a> {
    pub requests: &'a [Request],
    pub target: Option<&'a Profile>,
}

impl<'a> Policy<'a> {
    /// `--to` requests alone.
    pub fn requests(requests: &'a [Request]) -> Policy<'a> {
        Policy {
            requests,
            target: None,
        }
    }

    /// A target profile alone.
    pub fn target(profile: &'a Profile) -> Policy<'a> {
        Policy {
            requests: &[],
            target: Some(profile),
        }
    }
}

impl Plan {
    /// Plans every site of `sites` (already restricted to the ones asked for); `model_opset` is
    /// the main graph's default-domain opset.
    pub fn build(sites: Vec<Site>, policy: &Policy, model_opset: Option<i64>) -> Plan {
        let mut warnings = Vec::new();
        if let Some(p) = policy.target
            && let (Some(max), Some(opset)) = (p.max_opset, model_opset)
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
                let action = plan_site(&site, policy);
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
    pub fn rewrites(&self) -> impl Iterator<Item = (&Site, &Replacement)> {
        self.sites.iter().filter_map(|p| match &p.action {
            Action::Rewrite(r) => Some((&p.site, r)),
            _ => None,
        })
    }
}

const EXACT: ErrorBound = ErrorBound {
    value: 0.0,
    at: 0.0,
};

/// A kind and parameters a site may become, with its worst case against the site.
struct Candidate {
    kind: &'static Kind,
    params: Params,
    rule: Option<&'static str>,
    bound: ErrorBound,
}

fn plan_site(site: &Site, policy: &Policy) -> Action {
    let kind = site.kind;
    let target = policy.target;
    let runs = |p: &Profile, domain: &str, op: &str| {
        p.accepts(domain, op, site.opset, Some(site.elem_type))
    };
    let accepted_now = |p: &Profile| {
        let domain = site.domain.as_deref().unwrap_or("");
        site.ops.iter().all(|op| runs(p, domain, op))
    };
    if let Some(p) = target
        && let Some(max) = p.max_opset
        && site.opset > max
    {
        return Action::Unserved {
            reason: format!(
                "the model's opset {} is above the {max} target '{}' runs; actswap never changes \
                 a model's opset",
                site.opset, p.name
            ),
        };
    }
    let Some(params) = &site.params else {
        return match target {
            Some(p) if accepted_now(p) => Action::Keep {
                reason: "accepted by the target".into(),
            },
            _ => Action::Unserved {
                reason: format!("parameters unknown: {}", site.notes.join("; ")),
            },
        };
    };
    let replace = |c: Candidate, form: Form, emitted: Emitted| {
        Action::Rewrite(Replacement {
            kind: c.kind,
            params: c.params,
            form,
            rule: c.rule,
            bound: c.bound,
            emitted,
        })
    };
    // A form the target does not run is no answer; the first op it refuses, when one is.
    let refused = |emitted: &Emitted| {
        target.and_then(|p| {
            emitted
                .ops
                .iter()
                .find(|o| !runs(p, "", o.op_type))
                .map(|o| o.op_type)
        })
    };

    if let Some(r) = request::select(policy.requests, kind) {
        if !site.rewritable {
            return Action::Unserved {
                reason: format!("not rewritable: {}", site.notes.join("; ")),
            };
        }
        let Some(c) = candidates(kind, params, r.to).into_iter().next() else {
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
            None => vec![Form::Fused, Form::Primitive],
        };
        let mut reasons = Vec::new();
        for form in forms {
            if c.kind.id == kind.id && already_in(site, form) {
                return Action::Keep {
                    reason: format!("already in the {form} form"),
                };
            }
            match emit(site, c.kind, &c.params, form) {
                Ok(emitted) => match refused(&emitted) {
                    None => return replace(c, form, emitted),
                    Some(op) => reasons.push(format!("{}:{form}: {op} not accepted", c.kind.id)),
                },
                Err(e) => reasons.push(format!("{}:{form}: {e}", c.kind.id)),
            }
        }
        return Action::Unserved {
            reason: reasons.join("; "),
        };
    }

    let Some(p) = target else {
        return Action::Keep {
            reason: "no --to rule for this kind".into(),
        };
    };
    if accepted_now(p) {
        return Action::Keep {
            reason: "accepted by the target".into(),
        };
    }
    if !site.rewritable {
        return Action::Unserved {
            reason: format!("not accepted and not rewritable: {}", site.notes.join("; ")),
        };
    }
    let exact_forms: Vec<Form> = match p.prefer {
        Prefer::Primitive => vec![Form::Primitive, Form::Fused],
        _ => vec![Form::Fused, Form::Primitive],
    };
    let mut reasons = Vec::new();
    for c in candidates(kind, params, None) {
        if c.bound.value > p.max_approx_error {
            if c.rule.is_some() {
                reasons.push(format!(
                    "{}: error {:.4} over the allowance",
                    c.kind.id, c.bound.value
                ));
            }
            continue;
        }
        for &form in &exact_forms {
            match emit(site, c.kind, &c.params, form) {
                Ok(emitted) => match refused(&emitted) {
                    None => return replace(c, form, emitted),
                    Some(op) => reasons.push(format!("{}:{form}: {op} not accepted", c.kind.id)),
                },
                Err(e) => reasons.push(format!("{}:{form}: {e}", c.kind.id)),
            }
        }
    }
    Action::Unserved {
        reason: reasons.join("; "),
    }
}

/// Replacement kinds for a site of `kind` with `params`: its own kind first (exact), then the
/// catalogue's substitutions by increasing worst-case error over the real line (the worst
/// channel's, for per-channel parameters). With `only`, just that kind.
fn candidates(kind: &'static Kind, params: &Params, only: Option<&'static Kind>) -> Vec<Candidate> {
    let mut out: Vec<Candidate> = Vec::new();
    if only.is_none_or(|k| k.id == kind.id) {
        out.push(Candidate {
            kind,
            params: params.clone(),
            rule: None,
            bound: EXACT,
        });
    }
    let mut subs: Vec<Candidate> = substitute::rules()
        .for_kind(kind)
        .filter(|r| only.is_none_or(|k| k.id == r.to.id))
        .filter_map(|r| {
            let targets: Vec<Vec<f64>> = params
                .per_channel()
                .iter()
                .map(|from| r.target_params(from))
                .collect::<Option<_>>()?;
            let to = Params::from_channels(&targets, params.shape().map(<[_]>::to_vec));
            let (bound, _) = substitute::max_abs_error_per_channel(
                (kind, params),
                (r.to, &to),
                f64::NEG_INFINITY,
                f64::INFINITY,
            )
            .ok()?;
            Some(Candidate {
                kind: r.to,
                params: to,
                rule: Some(r.name),
                bound,
            })
        })
        .collect();
    subs.sort_by(|a, b| a.bound.value.total_cmp(&b.bound.value));
    out.extend(subs);
    out
}

/// Writes `kind`'s `form` with `params` for the site: it reads the site's input and writes its
/// output, in the site's element type and opset.
fn emit(
    site: &Site,
    kind: &'static Kind,
    params: &Params,
    form: Form,
) -> Result<Emitted, Unavailable> {
    let prefix = if kind.id == site.kind.id {
        format!("{}.{form}", site.output)
    } else {
        format!("{}.{}", site.output, kind.id)
    };
    let ctx = EmitCtx {
        input: &site.input,
        output: &site.output,
        prefix: &prefix,
        elem_type: site.elem_type,
        opset: site.opset,
        params,
    };
    kind.emit(form, &ctx)
}

/// True when the site already is its kind's `form`: a fused site asked to stay fused, or a
/// site whose ops are exactly those the form would emit.
fn already_in(site: &Site, form: Form) -> bool {
    if form == Form::Fused && site.spelling == Spelling::Fused {
        return true;
    }
    let Some(params) = &site.params else {
        return false;
    };
    let Ok(emitted) = emit(site, site.kind, params, form) else {
        return false;
    };
    let mut want = emitted.op_types();
    let mut have = site.ops.clone();
    want.sort();
    have.sort();
    want == have
}
