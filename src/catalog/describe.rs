//! Text and JSON descriptions of a kind, for the catalogue command.

use std::fmt::Write;

use serde_json::{Value, json};

use super::emit::{Form, OpNeed, Unavailable, min_opset};
use super::kind::Kind;
use super::substitute::{ErrorBound, rules};

/// Text width the description wraps to.
const WIDTH: usize = 96;

/// One form `kind` emits, with every parameter a scalar or, with `per_channel`, each per-channel
/// parameter a tensor.
struct EmittedForm {
    form: Form,
    per_channel: bool,
    /// The ops at the lowest opset that has the form, or why there is none.
    ops: Result<Vec<OpNeed>, Unavailable>,
}

/// Every form of `kind`; the per-channel variants only for a kind with a per-channel parameter.
fn emitted_forms(kind: &Kind) -> Vec<EmittedForm> {
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
struct Approximation {
    rule: &'static str,
    to: &'static str,
    to_params: Vec<f64>,
    bound: ErrorBound,
}

/// The rules that apply to `kind` and accept its default parameters, with their bounds.
fn approximations(kind: &Kind) -> Vec<Approximation> {
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
pub fn describe(kind: &Kind) -> String {
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
    out
}

/// Machine-readable description. Keys: id, title, formula, params [{name, default, per_channel,
/// doc}], source, fused [{domain, op_type, since, note}] (domain "" is ai.onnx), forms,
/// emitted [{form, per_channel, ops [{op_type, since}], min_opset, unavailable}] (for float32,
/// at the lowest opset that has the form; `unavailable` is null or the reason, and then `ops`
/// is empty and `min_opset` null), piecewise_linear, example, numeric_notes, approximations [{rule, to, to_params,
/// max_abs_error, at}] over the real line at the default parameters. `max_abs_error` is the
/// string "inf" when the error is unbounded; `at` is "+inf" or "-inf" when the worst case is
/// only approached (or, if unbounded, reached) at that end.
pub fn to_json(kind: &Kind) -> Value {
    let params: Vec<Value> = kind
        .params
        .iter()
        .map(|p| {
            json!({
                "name": p.name,
                "default": p.default,
                "per_channel": p.per_channel,
                "doc": p.doc,
            })
        })
        .collect();
    let fused: Vec<Value> = kind
        .fused
        .iter()
        .map(
            |f| json!({"domain": f.domain, "op_type": f.op.op_type, "since": f.introduced, "note": f.note}),
        )
        .collect();
    let emitted: Vec<Value> = emitted_forms(kind)
        .into_iter()
        .map(|e| {
            let (ops, unavailable) = match e.ops {
                Ok(ops) => (ops, Value::Null),
                Err(why) => (Vec::new(), json!(why.to_string())),
            };
            let list: Vec<Value> = ops
                .iter()
                .map(|o| json!({"op_type": o.op_type, "since": o.since}))
                .collect();
            json!({
                "form": e.form.name(),
                "per_channel": e.per_channel,
                "ops": list,
                "min_opset": min_opset(&ops),
                "unavailable": unavailable,
            })
        })
        .collect();
    let approx: Vec<Value> = approximations(kind)
        .into_iter()
        .map(|a| {
            let value = if a.bound.value.is_infinite() {
                json!("inf")
            } else {
                json!(a.bound.value)
            };
            let at = if a.bound.at.is_infinite() {
                json!(signed_inf(a.bound.at))
            } else {
                json!(a.bound.at)
            };
            json!({
                "rule": a.rule,
                "to": a.to,
                "to_params": a.to_params,
                "max_abs_error": value,
                "at": at,
            })
        })
        .collect();
    json!({
        "id": kind.id,
        "title": kind.title,
        "formula": kind.formula,
        "params": params,
        "source": kind.source,
        "fused": fused,
        "forms": kind.forms,
        "emitted": emitted,
        "piecewise_linear": kind.piecewise_linear,
        "example": kind.example,
        "numeric_notes": kind.numeric_notes,
        "approximations": approx,
    })
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
    use crate::catalog::{all, get};

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
            ] {
                assert!(text.contains(&format!("\n{s}\n")), "{} lacks {s}", k.id);
            }
            assert!(text.lines().all(|l| l.len() <= WIDTH), "{}", k.id);
        }
    }

    #[test]
    fn json_keys_are_stable() {
        let v = to_json(get("swish").unwrap());
        let keys: Vec<&str> = v.as_object().unwrap().keys().map(String::as_str).collect();
        assert_eq!(
            keys,
            [
                "id",
                "title",
                "formula",
                "params",
                "source",
                "fused",
                "forms",
                "emitted",
                "piecewise_linear",
                "example",
                "numeric_notes",
                "approximations"
            ]
        );
        assert_eq!(v["params"][0]["name"], "beta");
        assert_eq!(v["params"][0]["per_channel"], true);
        assert_eq!(v["fused"][0]["op_type"], "Swish");
        assert_eq!(v["fused"][0]["since"], 24);
        let rules: Vec<&str> = v["approximations"]
            .as_array()
            .unwrap()
            .iter()
            .map(|a| a["rule"].as_str().unwrap())
            .collect();
        assert_eq!(rules, ["swish-to-hard-swish", "any-to-relu"]);
        let emitted = v["emitted"].as_array().unwrap();
        assert_eq!(emitted.len(), 4, "two forms, scalar and per-channel beta");
        assert_eq!(emitted[0]["form"], "fused");
        assert_eq!(emitted[0]["ops"][0]["op_type"], "Swish");
        assert_eq!(emitted[0]["min_opset"], 24);
        assert_eq!(emitted[1]["per_channel"], true);
        assert!(emitted[1]["unavailable"].is_string());
        assert_eq!(emitted[1]["min_opset"], Value::Null);
        assert_eq!(emitted[3]["form"], "primitive");
        assert_eq!(emitted[3]["min_opset"], 7);
    }

    #[test]
    fn unbounded_errors_are_spelled_out() {
        let v = to_json(get("sigmoid").unwrap());
        let relu = v["approximations"]
            .as_array()
            .unwrap()
            .iter()
            .find(|a| a["rule"] == "any-to-relu")
            .unwrap();
        assert_eq!(relu["max_abs_error"], "inf");
        assert_eq!(relu["at"], "+inf");
        assert!(describe(get("sigmoid").unwrap()).contains("unbounded (grows as x -> +inf)"));
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
