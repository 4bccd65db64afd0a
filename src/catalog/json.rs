//! A kind as JSON (`actswap catalog --json`).

use std::borrow::Cow;

use schemars::{JsonSchema, Schema, SchemaGenerator, json_schema};
use serde::{Serialize, Serializer};

use super::describe::{approximations, catalog_fits, emitted_forms};
use super::emit::{OpNeed, min_opset};
use super::fit;
use super::kind::Kind;

/// Machine-readable description of a kind. Emitted forms are for float32, at the lowest opset
/// that has the form; approximations are over the real line at the default parameters.
#[derive(Serialize, JsonSchema)]
pub struct KindJson {
    pub id: &'static str,
    pub title: &'static str,
    pub formula: &'static str,
    pub params: Vec<ParamJson>,
    pub source: &'static str,
    pub fused: Vec<FusedJson>,
    pub forms: &'static [&'static str],
    pub emitted: Vec<EmittedJson>,
    pub piecewise_linear: bool,
    pub example: &'static str,
    pub numeric_notes: &'static str,
    pub approximations: Vec<ApproximationJson>,
    /// The range the fitted forms below are fitted over, `[lo, hi]`.
    pub fitted_range: [f64; 2],
    /// The fitted form's bounds at 4, 8, 16 and 32 segments over `fitted_range`, at the
    /// default parameters with float32 constants.
    pub fitted: Vec<FittedJson>,
}

/// A fitted form's bounds at one segment count, or why the kind has no fitted form.
#[derive(Serialize, JsonSchema)]
pub struct FittedJson {
    pub segments: usize,
    /// Worst-case |error| inside the fitting range; null when unavailable.
    pub in_range: Option<Unbounded>,
    /// Worst-case |error| over the real line (tails included); null when unavailable.
    pub over_reals: Option<Unbounded>,
    /// Null, or why there is no fitted form.
    pub unavailable: Option<String>,
}

/// A parameter and its ONNX default.
#[derive(Serialize, JsonSchema)]
pub struct ParamJson {
    pub name: &'static str,
    pub default: f64,
    pub per_channel: bool,
    pub doc: &'static str,
}

/// A fused op that computes the kind.
#[derive(Serialize, JsonSchema)]
pub struct FusedJson {
    /// "" is the default ONNX domain (ai.onnx).
    pub domain: &'static str,
    pub op_type: &'static str,
    /// First opset version of the domain that has the op.
    pub since: i64,
    pub note: &'static str,
}

/// A form actswap writes, with its ops, or why it cannot be written.
#[derive(Serialize, JsonSchema)]
pub struct EmittedJson {
    pub form: &'static str,
    pub per_channel: bool,
    /// Empty when the form is unavailable.
    pub ops: Vec<OpNeed>,
    /// The least opset that runs every op; null when unavailable.
    pub min_opset: Option<i64>,
    /// Null, or why the form cannot be written.
    pub unavailable: Option<String>,
}

/// A substitution rule that applies at the default parameters, and its worst case.
#[derive(Serialize, JsonSchema)]
pub struct ApproximationJson {
    pub rule: &'static str,
    pub to: &'static str,
    pub to_params: Vec<f64>,
    pub max_abs_error: Unbounded,
    pub at: Position,
}

/// A worst-case error: a number, or `"inf"` when the error grows without bound.
pub struct Unbounded(pub f64);

impl Serialize for Unbounded {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        if self.0.is_infinite() {
            s.serialize_str("inf")
        } else {
            s.serialize_f64(self.0)
        }
    }
}

impl JsonSchema for Unbounded {
    fn schema_name() -> Cow<'static, str> {
        "Unbounded".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "A number, or \"inf\" when the error grows without bound.",
            "anyOf": [{"type": "number"}, {"const": "inf"}],
        })
    }
}

/// Where a worst case is reached: a number, or `"+inf"` / `"-inf"` when it is only approached
/// (or, if unbounded, reached) at that end.
pub struct Position(pub f64);

impl Serialize for Position {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        match self.0 {
            x if !x.is_infinite() => s.serialize_f64(x),
            x if x > 0.0 => s.serialize_str("+inf"),
            _ => s.serialize_str("-inf"),
        }
    }
}

impl JsonSchema for Position {
    fn schema_name() -> Cow<'static, str> {
        "Position".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "A number, or \"+inf\" / \"-inf\" when the worst case lies at that end.",
            "anyOf": [{"type": "number"}, {"enum": ["+inf", "-inf"]}],
        })
    }
}

/// The description of `kind` as JSON.
pub fn json(kind: &'static Kind) -> KindJson {
    KindJson {
        id: kind.id,
        title: kind.title,
        formula: kind.formula,
        params: kind
            .params
            .iter()
            .map(|p| ParamJson {
                name: p.name,
                default: p.default,
                per_channel: p.per_channel,
                doc: p.doc,
            })
            .collect(),
        source: kind.source,
        fused: kind
            .fused
            .iter()
            .map(|f| FusedJson {
                domain: f.domain,
                op_type: f.op.op_type,
                since: f.introduced,
                note: f.note,
            })
            .collect(),
        forms: kind.forms,
        emitted: emitted_forms(kind)
            .into_iter()
            .map(|e| {
                let (ops, unavailable) = match e.ops {
                    Ok(ops) => (ops, None),
                    Err(why) => (Vec::new(), Some(why.to_string())),
                };
                EmittedJson {
                    form: e.form.name(),
                    per_channel: e.per_channel,
                    min_opset: min_opset(&ops),
                    ops,
                    unavailable,
                }
            })
            .collect(),
        piecewise_linear: kind.piecewise_linear,
        example: kind.example,
        numeric_notes: kind.numeric_notes,
        approximations: approximations(kind)
            .into_iter()
            .map(|a| ApproximationJson {
                rule: a.rule,
                to: a.to,
                to_params: a.to_params,
                max_abs_error: Unbounded(a.bound.value),
                at: Position(a.bound.at),
            })
            .collect(),
        fitted_range: [fit::DEFAULT_RANGE.lo, fit::DEFAULT_RANGE.hi],
        fitted: catalog_fits(kind)
            .into_iter()
            .map(|(segments, bound)| match bound {
                Ok(b) => FittedJson {
                    segments,
                    in_range: Some(Unbounded(b.in_range.value)),
                    over_reals: Some(Unbounded(b.over_reals.value)),
                    unavailable: None,
                },
                Err(e) => FittedJson {
                    segments,
                    in_range: None,
                    over_reals: None,
                    unavailable: Some(e.to_string()),
                },
            })
            .collect(),
    }
}

#[cfg(test)]
mod tests {
    use serde_json::Value;

    use super::*;
    use crate::catalog::{describe, get};

    fn to_json(kind: &'static Kind) -> Value {
        serde_json::to_value(json(kind)).unwrap()
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
                "approximations",
                "fitted_range",
                "fitted"
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
    fn fitted_bounds_match_the_text() {
        let v = to_json(get("silu").unwrap());
        assert_eq!(v["fitted_range"], serde_json::json!([-8.0, 8.0]));
        let fitted = v["fitted"].as_array().unwrap();
        let segments: Vec<u64> = fitted
            .iter()
            .map(|f| f["segments"].as_u64().unwrap())
            .collect();
        assert_eq!(segments, [4, 8, 16, 32]);
        let text = describe(get("silu").unwrap());
        for f in fitted {
            let inside = f["in_range"].as_f64().unwrap();
            let line = format!(
                "{} segments: max |error| {inside:.3e} in the range",
                f["segments"]
            );
            assert!(text.contains(&line), "{line}");
            assert!(f["over_reals"].as_f64().unwrap() >= inside);
            assert_eq!(f["unavailable"], Value::Null);
        }
        // Squared ReLU grows faster than any line: no asymptote, no fitted form.
        let squared = to_json(get("squared_relu").unwrap());
        for f in squared["fitted"].as_array().unwrap() {
            assert_eq!(f["in_range"], Value::Null);
            assert!(f["unavailable"].as_str().unwrap().contains("asymptote"));
        }
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
}
