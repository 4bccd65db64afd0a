//! Text and JSON descriptions of a kind, for the catalogue command.

use std::fmt::Write;

use serde_json::{Value, json};

use super::Kind;
use super::substitute::{ErrorBound, rules};

/// Text width the description wraps to.
const WIDTH: usize = 96;

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

/// Human-readable description with sections Formula / Parameters / Source / Fused op / Forms /
/// Example / Numeric notes / Approximations.
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
            format!("{} ({domain}, opset {}): {}", f.op_type, f.since, f.note)
        })
        .collect();
    section("Fused op", fused);
    section("Forms", kind.forms.iter().map(|f| f.to_string()).collect());
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
/// piecewise_linear, example, numeric_notes, approximations [{rule, to, to_params,
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
            |f| json!({"domain": f.domain, "op_type": f.op_type, "since": f.since, "note": f.note}),
        )
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
