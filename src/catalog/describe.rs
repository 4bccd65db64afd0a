//! Text description of a kind, for the catalogue command, and the forms and approximations
//! both the text and the JSON ([`super::json`]) list.

use std::fmt::Write;

use super::emit::{Form, OpNeed, Unavailable, min_opset};
use super::fit;
use super::kind::Kind;
use super::substitute::{ErrorBound, rules};
use crate::onnx::proto::tensor_proto::DataType;

/// Text width the description wraps to.
const WIDTH: usize = 96;

/// One form `kind` emits, with every parameter a scalar or, with `per_channel`, each per-channel
/// parameter a tensor.
pub(super) struct EmittedForm {
    pub form: Form,
    pub per_channel: bool,
    /// The ops at the lowest opset that has the form, or why there is none.
    pub ops: Result<Vec<OpNeed>, Unavailable>,
}

/// Every form of `kind`; the per-channel variants only for a kind with a per-channel parameter.
pub(super) fn emitted_forms(kind: &Kind) -> Vec<EmittedForm> {
    let per_channel = kind.params.iter().any(|p| p.per_channel);
    let variants: &[bool] = if per_channel {
        &[false, true]
    } else {
        &[false]
    };
    Form::ALL
        .into_iter()
        .flat_map(|form| {
            variants.iter().map(move |&per_channel| EmittedForm {
                form,
                per_channel,
                ops: kind.least(form, per_channel).map(|e| e.ops),
            })
        })
        .collect()
}

/// One approximation of `kind` at its default parameters.
pub(super) struct Approximation {
    pub rule: &'static str,
    pub to: &'static str,
    pub to_params: Vec<f64>,
    pub bound: ErrorBound,
}

/// The rules that apply to `kind` and accept its default parameters, with their bounds.
pub(super) fn approximations(kind: &Kind) -> Vec<Approximation> {
    let defaults = kind.defaults();
    rules()
        .for_kind(kind)
        .filter_map(|r| {
            Some(Approximation {
                rule: r.name,
                to: r.to.id,
                to_params: r.target_params(&defaults)?,
                bound: r.error_over_reals(kind, &defaults)?,
            })
        })
        .collect()
}

/// The columns of [`summary_row`].
pub const SUMMARY_COLUMNS: [&str; 5] = ["kind", "parameters", "fused", "primitive", "title"];

/// One line of the catalogue's summary: the id, each parameter with its default, the op the
/// fused form writes and the least opset of each form (float32, scalar parameters), the title.
pub fn summary_row(kind: &Kind) -> Vec<String> {
    let params: Vec<String> = kind
        .params
        .iter()
        .map(|p| {
            // Shortest float32 digits; exponent form for bounds such as Clip's float32 max.
            let v = p.default as f32;
            if v.abs() >= 1e6 {
                format!("{}={v:e}", p.name)
            } else {
                format!("{}={v}", p.name)
            }
        })
        .collect();
    let form = |form: Form, with_op: bool| match kind.least(form, false) {
        Ok(e) => {
            let opset = min_opset(&e.ops).unwrap_or(1);
            match e.ops.first().filter(|_| with_op) {
                Some(op) => format!("{} (opset {opset})", op.op_type),
                None => format!("opset {opset}"),
            }
        }
        Err(_) => "none".to_string(),
    };
    vec![
        kind.id.to_string(),
        if params.is_empty() {
            "-".to_string()
        } else {
            params.join(" ")
        },
        form(Form::Fused, true),
        form(Form::Primitive, false),
        kind.title.to_string(),
    ]
}

/// Human-readable description with sections Formula / Parameters / Source / Fused op / Forms /
/// Emitted forms / Example / Numeric notes / Approximations.
pub fn describe(kind: &'static Kind) -> String {
    let mut out = format!("{}: {}\n", kind.id, kind.title);
    let mut section = |title: &str, lines: Vec<String>| {
        let _ = write!(out, "\n{title}\n");
        for line in lines {
            out.push_str(&wrap(&line, "  ", "      "));
        }
    };
    section("Formula", vec![kind.formula.to_string()]);
    let params = if kind.params.is_empty() {
        vec!["none".to_string()]
    } else {
        kind.params
            .iter()
            .map(|p| {
                let scope = if p.per_channel {
                    "scalar or per channel"
                } else {
                    "scalar"
                };
                format!(
                    "{}: default {} ({scope}); {}",
                    p.name,
                    num(p.default),
                    p.doc
                )
            })
            .collect()
    };
    section("Parameters", params);
    section("Source", vec![kind.source.to_string()]);
    let fused = kind
        .fused
        .iter()
        .map(|f| {
            let domain = if f.domain.is_empty() {
                "ai.onnx"
            } else {
                f.domain
            };
            format!(
                "{} ({domain}, opset {}): {}",
                f.op.op_type, f.introduced, f.note
            )
        })
        .collect();
    section("Fused op", fused);
    section("Forms", kind.forms.iter().map(|f| f.to_string()).collect());
    let emitted = emitted_forms(kind)
        .into_iter()
        .map(|e| {
            let name = if e.per_channel {
                format!("{}, per channel", e.form)
            } else {
                e.form.to_string()
            };
            match e.ops {
                Ok(ops) => {
                    let list: Vec<String> = ops
                        .iter()
                        .map(|o| format!("{} {}", o.op_type, o.since))
                        .collect();
                    let from = min_opset(&ops).unwrap_or(1);
                    format!("{name}: {}; from opset {from}", list.join(", "))
                }
                Err(why) => format!("{name}: not available ({why})"),
            }
        })
        .collect();
    section(
        "Emitted forms (each op with the opset it needs, for float32)",
        emitted,
    );
    section("Example", vec![kind.example.to_string()]);
    section("Numeric notes", vec![kind.numeric_notes.to_string()]);
    let approx: Vec<String> = approximations(kind)
        .iter()
        .map(|a| {
            let target = if a.to_params.is_empty() {
                a.to.to_string()
            } else {
                let p: Vec<String> = a.to_params.iter().map(|&v| num(v)).collect();
                format!("{}({})", a.to, p.join(", "))
            };
            let bound = if a.bound.value.is_infinite() {
                format!("unbounded (grows as x -> {})", signed_inf(a.bound.at))
            } else if a.bound.at.is_infinite() {
                format!(
                    "{}, approached as x -> {}",
                    num(a.bound.value),
                    signed_inf(a.bound.at)
                )
            } else {
                format!("{} at x = {}", num(a.bound.value), num(a.bound.at))
            };
            format!("{} -> {target}: max |error| {bound}", a.rule)
        })
        .collect();
    if !approx.is_empty() {
        section(
            "Approximations (over the real line, at the default parameters)",
            approx,
        );
    }
    let range = fit::DEFAULT_RANGE;
    section(
        &format!("Fitted forms (over {range}, default parameters, float32 constants)"),
        fitted_bounds(kind),
    );
    out
}

/// The fitted form's bound at each of [`fit::CATALOG_SEGMENTS`] over [`fit::DEFAULT_RANGE`].
fn fitted_bounds(kind: &'static Kind) -> Vec<String> {
    catalog_fits(kind)
        .into_iter()
        .map(|(k, bound)| match bound {
            Ok(b) => {
                let reals = if b.over_reals.value.is_finite() {
                    format!("{:.3e}", b.over_reals.value)
                } else {
                    "unbounded".to_string()
                };
                format!(
                    "{k} segments: max |error| {:.3e} in the range, {reals} over the real line",
                    b.in_range.value
                )
            }
            Err(e) => format!("{k} segments: {e}"),
        })
        .collect()
}

/// The bound of the kind's fitted form with each of [`fit::CATALOG_SEGMENTS`] segments over
/// [`fit::DEFAULT_RANGE`], at the default parameters with float32 constants (or why there is
/// no fitted form).
pub fn catalog_fits(kind: &'static Kind) -> Vec<(usize, Result<fit::FitBound, fit::FitError>)> {
    let defaults = kind.defaults();
    fit::CATALOG_SEGMENTS
        .iter()
        .map(|&k| {
            let fitted = fit::fit_channel(kind, &defaults, fit::DEFAULT_RANGE, k, DataType::Float);
            (k, fitted.map(|(_, b)| b))
        })
        .collect()
}

fn signed_inf(v: f64) -> &'static str {
    if v > 0.0 { "+inf" } else { "-inf" }
}

/// Shortest round-trip form, in exponent notation when very large or small.
fn num(v: f64) -> String {
    let a = v.abs();
    if a != 0.0 && !(1e-4..1e6).contains(&a) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// Wraps `text` at word boundaries to [`WIDTH`], indenting the first line by `first` and the
/// rest by `rest`.
fn wrap(text: &str, first: &str, rest: &str) -> String {
    let mut out = String::new();
    let mut line = first.to_string();
    let mut empty = true;
    for word in text.split_whitespace() {
        if !empty && line.len() + 1 + word.len() > WIDTH {
            out.push_str(&line);
            out.push('\n');
            line = rest.to_string();
            empty = true;
        }
        if !empty {
            line.push(' ');
        }
        line.push_str(word);
        empty = false;
    }
    out.push_str(&line);
    out.push('\n');
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::catalog::all;

    #[test]
    fn text_has_every_section() {
        for k in all() {
            let text = describe(k);
            for s in [
                "Formula",
                "Parameters",
                "Source",
                "Fused op",
                "Forms",
                "Emitted forms (each op with the opset it needs, for float32)",
                "Example",
                "Numeric notes",
                "Fitted forms (over [-8, 8], default parameters, float32 constants)",
            ] {
                assert!(text.contains(&format!("\n{s}\n")), "{} lacks {s}", k.id);
            }
            assert!(text.lines().all(|l| l.len() <= WIDTH), "{}", k.id);
        }
    }

    #[test]
    fn wrap_respects_width() {
        let text = "word ".repeat(60);
        let wrapped = wrap(&text, "  ", "    ");
        assert!(wrapped.lines().count() > 2);
        assert!(wrapped.lines().all(|l| l.len() <= WIDTH));
        assert!(wrapped.lines().skip(1).all(|l| l.starts_with("    word")));
    }
}
