//! `--to KIND=FORM` requests: `silu=fused`, `gelu=gelu_tanh`, `swish=hard_swish:primitive`,
//! `*=primitive`, `swish=fitted`, `swish=fitted:16`. The left side is a kind id or `*`; the right
//! side a form, a substitute kind, a substitute kind and a form, or the fitted form with an
//! optional number of segments.

use anyhow::{Result, bail};

use crate::catalog::{self, Form, Kind, fit};

/// One parsed `--to` request.
#[derive(Debug, Clone)]
pub struct Request {
    /// The kind it applies to; `None` for `*`.
    pub from: Option<&'static Kind>,
    /// The kind to emit; `None` keeps the site's own kind.
    pub to: Option<&'static Kind>,
    /// The form to emit; `None` picks fused where the model's opset has it, else primitive.
    pub form: Option<Form>,
    /// Segments of a fitted form (`fitted:N`); `None` picks the fewest within the allowance.
    pub segments: Option<usize>,
    /// The request as written.
    pub text: String,
}

impl Request {
    /// Parses `KIND=FORM`, refusing unknown kind and form names.
    pub fn parse(text: &str) -> Result<Request> {
        let Some((lhs, rhs)) = text.split_once('=') else {
            bail!("--to '{text}': expected KIND=FORM, e.g. silu=fused or gelu=gelu_tanh");
        };
        let from = match lhs.trim() {
            "*" => None,
            id => Some(kind(id, text)?),
        };
        if let Some(segments) = fitted(rhs.trim(), text)? {
            return Ok(Request {
                from,
                to: None,
                form: Some(Form::Fitted),
                segments,
                text: text.to_string(),
            });
        }
        let (to, form) = match rhs.trim().split_once(':') {
            Some((k, f)) => (Some(kind(k, text)?), Some(form(f, text)?)),
            None => match rhs.trim() {
                "fused" => (None, Some(Form::Fused)),
                "primitive" => (None, Some(Form::Primitive)),
                k => (Some(kind(k, text)?), None),
            },
        };
        let to = to.filter(|t| from.is_none_or(|f| f.id != t.id));
        Ok(Request {
            from,
            to,
            form,
            segments: None,
            text: text.to_string(),
        })
    }

    /// True when the request names this kind (a specific request beats `*`; see [`select`]).
    fn applies_to(&self, kind: &Kind) -> bool {
        self.from.is_none_or(|k| k.id == kind.id)
    }
}

/// The request for a site of `kind`: the first that names the kind, else the first `*`.
pub fn select<'r>(requests: &'r [Request], kind: &Kind) -> Option<&'r Request> {
    requests
        .iter()
        .find(|r| r.from.is_some() && r.applies_to(kind))
        .or_else(|| requests.iter().find(|r| r.from.is_none()))
}

fn kind(id: &str, text: &str) -> Result<&'static Kind> {
    let id = id.trim();
    catalog::get(id).ok_or_else(|| {
        let ids: Vec<&str> = catalog::all().iter().map(|k| k.id).collect();
        anyhow::anyhow!(
            "--to '{text}': unknown kind '{id}' (known: {})",
            ids.join(", ")
        )
    })
}

fn form(name: &str, text: &str) -> Result<Form> {
    match name.trim() {
        "fused" => Ok(Form::Fused),
        "primitive" => Ok(Form::Primitive),
        "fitted" => bail!(
            "--to '{text}': a fitted form approximates the site's own kind; write KIND=fitted"
        ),
        other => bail!("--to '{text}': unknown form '{other}' (expected fused or primitive)"),
    }
}

/// `fitted` -> `Some(None)`, `fitted:N` -> `Some(Some(N))`; anything else `None`.
fn fitted(rhs: &str, text: &str) -> Result<Option<Option<usize>>> {
    let Some(rest) = rhs.strip_prefix("fitted") else {
        return Ok(None);
    };
    if rest.is_empty() {
        return Ok(Some(None));
    }
    let max = fit::MAX_SEGMENTS;
    match rest.strip_prefix(':').map(|n| n.trim().parse::<usize>()) {
        Some(Ok(n)) if (1..=max).contains(&n) => Ok(Some(Some(n))),
        _ => bail!("--to '{text}': expected fitted or fitted:N with N from 1 to {max} segments"),
    }
}
