//! The planner: for every site, what to emit (kind, form, parameters) and the error it brings,
//! from `--to` requests, a target profile, or both (a request refines the target for the kinds it
//! names). The plan holds the form it emitted for each site rewritten; nothing is written to the
//! model here, and the plan is shown first.
//!
//! With a profile, a site the target already runs is kept; otherwise exact forms come first
//! (fused, primitive, in the order the profile prefers), then the substitution with the smallest
//! worst-case error within the profile's allowance, then a fitted form with the fewest segments
//! (up to the profile's `max_fit_segments`) whose error over the site's fitting range
//! ([`ranges`]) is within the allowance. Each rewrite records the alternatives weighed before it.
//! A form whose ops need a higher opset than the model declares is never offered: the opset is
//! not changed, and a model whose opset is above the target's gets that one reason for every
//! site.

pub mod json;
pub mod profile;
pub mod ranges;
pub mod request;

use rayon::prelude::*;

use crate::catalog::emit::{EmitCtx, Emitted, Unavailable};
use crate::catalog::fit::{self, Fitted};
use crate::catalog::substitute::{self, ErrorBound};
use crate::catalog::{Form, Kind, Params};
use crate::scan::{Site, Spelling};
use profile::{Prefer, Profile};
use ranges::{FitRanges, NO_RANGES, RangeSource};
use request::Request;

/// The allowance a fitted form with no segment count meets when there is no target profile.
pub const FIT_ALLOWANCE: f64 = 0.01;

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
    /// The fit, for the fitted form, and where its range came from.
    pub fit: Option<Box<(Fitted, RangeSource)>>,
    /// The forms weighed before this one and why each was passed over.
    pub alternatives: Vec<String>,
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

/// Where the plan's choices come from: `--to` requests, a target profile, or both; and the
/// ranges fitted forms are fitted over.
#[derive(Clone, Copy)]
pub struct Policy<'a> {
    pub requests: &'a [Request],
    pub target: Option<&'a Profile>,
    pub ranges: &'a FitRanges,
}

impl<'a> Policy<'a> {
    /// `--to` requests alone.
    pub fn requests(requests: &'a [Request]) -> Policy<'a> {
        Policy {
            requests,
            target: None,
            ranges: &NO_RANGES,
        }
    }

    /// A target profile alone.
    pub fn target(profile: &'a Profile) -> Policy<'a> {
        Policy {
            requests: &[],
            target: Some(profile),
            ranges: &NO_RANGES,
        }
    }

    /// True when a site may get a fitted form (a target, or a `fitted` request): its input
    /// range is worth observing.
    pub fn may_fit(&self) -> bool {
        self.target.is_some() || self.requests.iter().any(|r| r.form == Some(Form::Fitted))
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
        // Sites are planned on every core: each is planned on its own, and the fits remembered
        // between them depend only on their keys, so the plan is the same in any order.
        let sites = sites
            .into_par_iter()
            .map(|site| {
                let action = plan_site(&site, policy);
                Planned { site, action }
            })
            .collect();
        Plan { sites, warnings }
    }

    /// Computes the worst-case bounds over the real line that [`Plan::build`] weighs for
    /// `sites` under `policy`, one site after the other. They need only the sites, not the
    /// fitting ranges, so a caller runs this beside the run that observes those ranges; the
    /// plan then finds them in the catalogue's memo ([`substitute::max_abs_error`]) and is the
    /// same either way.
    pub fn bounds_ahead(sites: &[Site], policy: &Policy) {
        for site in sites {
            if let (Some(params), Some(only)) = (&site.params, weighed(site, policy)) {
                candidates(site.kind, params, only);
            }
        }
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
    let replace = |c: Candidate, form: Form, emitted: Emitted, alternatives: Vec<String>| {
        Action::Rewrite(Replacement {
            kind: c.kind,
            params: c.params,
            form,
            rule: c.rule,
            bound: c.bound,
            fit: None,
            alternatives,
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
        if r.form == Some(Form::Fitted) {
            let allowance = target.map_or(FIT_ALLOWANCE, |p| p.max_approx_error);
            let cap = target.map_or(fit::DEFAULT_MAX_SEGMENTS, |p| p.max_fit_segments);
            return match fitted(site, params, policy.ranges, r.segments, allowance, cap) {
                Ok((fitted, source, emitted)) => match refused(&emitted) {
                    None => rewrite_fitted(site, params, fitted, source, emitted, Vec::new()),
                    Some(op) => Action::Unserved {
                        reason: format!("{}:fitted: {op} not accepted", kind.id),
                    },
                },
                Err(reason) => Action::Unserved { reason },
            };
        }
        // Only the kind asked for (the site's own when none): no other bound is needed.
        let Some(c) = candidates(kind, params, Some(r.to.unwrap_or(kind)))
            .into_iter()
            .next()
        else {
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
                    None => return replace(c, form, emitted, reasons),
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
                    None => return replace(c, form, emitted, reasons),
                    Some(op) => reasons.push(format!("{}:{form}: {op} not accepted", c.kind.id)),
                },
                Err(e) => reasons.push(format!("{}:{form}: {e}", c.kind.id)),
            }
        }
    }
    let cap = p.max_fit_segments;
    match fitted(site, params, policy.ranges, None, p.max_approx_error, cap) {
        Ok((fitted, source, emitted)) => match refused(&emitted) {
            None => return rewrite_fitted(site, params, fitted, source, emitted, reasons),
            Some(op) => reasons.push(format!("{}:fitted: {op} not accepted", kind.id)),
        },
        Err(e) => reasons.push(e),
    }
    Action::Unserved {
        reason: reasons.join("; "),
    }
}

/// The fitted form of the site: `segments` segments, or the fewest (up to `cap`) within
/// `allowance` over the site's fitting range; the fit, where its range came from, and the
/// nodes.
fn fitted(
    site: &Site,
    params: &Params,
    ranges: &FitRanges,
    segments: Option<usize>,
    allowance: f64,
    cap: usize,
) -> Result<(Fitted, RangeSource, Emitted), String> {
    let kind = site.kind;
    let (range, source) = ranges.for_site(site);
    let fitted = match segments {
        Some(k) => fit::fit(kind, params, range, k, site.elem_type),
        None => fit::smallest(kind, params, range, allowance, cap, site.elem_type),
    }
    .map_err(|e| format!("{}:fitted: {e}", kind.id))?;
    let prefix = format!("{}.fitted", site.output);
    let emitted = fitted
        .emit(&emit_ctx(site, &prefix, params))
        .map_err(|e| format!("{}:fitted: {e}", kind.id))?;
    Ok((fitted, source, emitted))
}

/// The rewrite of a site to its fitted form; its bound is the fit's over the real line.
fn rewrite_fitted(
    site: &Site,
    params: &Params,
    fitted: Fitted,
    source: RangeSource,
    emitted: Emitted,
    alternatives: Vec<String>,
) -> Action {
    Action::Rewrite(Replacement {
        kind: site.kind,
        params: params.clone(),
        form: Form::Fitted,
        rule: None,
        bound: fitted.bound.over_reals,
        fit: Some(Box::new((fitted, source))),
        alternatives,
        emitted,
    })
}

/// The kind [`candidates`] is limited to when [`plan_site`] may weigh the substitutions of
/// `site` (`None`: all of them); `None` when it will not: parameters unknown, not rewritable,
/// a fitted form asked for, or neither a request nor a target for its kind.
fn weighed(site: &Site, policy: &Policy) -> Option<Option<&'static Kind>> {
    if site.params.is_none() || !site.rewritable {
        return None;
    }
    match request::select(policy.requests, site.kind) {
        Some(r) if r.form == Some(Form::Fitted) => None,
        Some(r) => Some(Some(r.to.unwrap_or(site.kind))),
        None => policy.target.map(|_| None),
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
    kind.emit(form, &emit_ctx(site, &prefix, params))
}

/// Where a form of `site` is written: its tensors, element type and opset, new names under
/// `prefix`.
fn emit_ctx<'a>(site: &'a Site, prefix: &'a str, params: &'a Params) -> EmitCtx<'a> {
    EmitCtx {
        input: &site.input,
        output: &site.output,
        prefix,
        elem_type: site.elem_type,
        opset: site.opset,
        params,
    }
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
