//! Target profiles: the runtime or accelerator a model is converted for. Which ops it runs (at
//! which opsets and, optionally, element types), how much approximation error a conversion may
//! introduce, and the drift budget a converted model must meet. Written in TOML:
//!
//! ```toml
//! name = "my-npu"
//! description = "Our edge NPU: opset 13, piecewise-linear activations only"
//! max_opset = 13            # optional: highest default-domain opset the target runs
//! prefer = "keep"           # keep | fused | primitive: the form for sites the target rejects
//! max_approx_error = 0.15   # worst-case |error| over the real line allowed for an approximation
//! max_fit_segments = 16     # optional: most segments of a fitted form (default 32)
//!
//! [ops]                     # accepted ops, each with the opsets it runs at:
//! Add = "*"                 # "*" any, ">=N", "<=N", "N-M"
//! Clip = "11-13"
//! Relu = { opsets = "*", types = ["float", "int8"] }   # only these element types
//! "com.microsoft:FastGelu" = "*"                        # an op of another domain
//! "*" = "*"                 # optional: every other default-domain op
//!
//! [budget]                  # optional: drift budget (flags override each limit)
//! min_cosine = 0.999        # outputs: max_abs, max_rel, min_cosine, min_top1
//! site_max_abs = 0.2        # each site's local drift
//! ```

use std::borrow::Cow;
use std::collections::BTreeMap;
use std::path::Path;

use anyhow::{Context, Result, bail};
use schemars::{JsonSchema, Schema, SchemaGenerator, json_schema};
use serde::{Deserialize, Deserializer};
use sha2::{Digest, Sha256};

use crate::measure::Budgets;
use crate::onnx::proto::tensor_proto::DataType;

/// The form a site the target rejects is rewritten to first.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Default, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum Prefer {
    /// Exact forms in the order fused, primitive.
    #[default]
    Keep,
    /// The fused op first.
    Fused,
    /// The primitive decomposition first.
    Primitive,
}

/// An opset range an op is accepted at.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct OpsetRange {
    pub min: i64,
    pub max: i64,
}

impl OpsetRange {
    pub fn contains(&self, opset: i64) -> bool {
        (self.min..=self.max).contains(&opset)
    }
}

impl<'de> Deserialize<'de> for OpsetRange {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        parse_range(&text).map_err(serde::de::Error::custom)
    }
}

impl JsonSchema for OpsetRange {
    fn schema_name() -> Cow<'static, str> {
        "OpsetRange".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "Opsets an op runs at: \"*\" any, \">=N\", \"<=N\", \"N-M\" or \"N\".",
            "type": "string",
            "pattern": "^\\s*(\\*|>=\\s*\\d+|<=\\s*\\d+|\\d+\\s*-\\s*\\d+|\\d+)\\s*$",
        })
    }
}

fn parse_range(text: &str) -> Result<OpsetRange, String> {
    let t = text.trim();
    let num = |s: &str| {
        s.trim().parse::<i64>().map_err(|_| {
            format!("'{text}' is not an opset range (use \"*\", \">=N\", \"<=N\" or \"N-M\")")
        })
    };
    let r = if t == "*" {
        OpsetRange {
            min: 1,
            max: i64::MAX,
        }
    } else if let Some(n) = t.strip_prefix(">=") {
        OpsetRange {
            min: num(n)?,
            max: i64::MAX,
        }
    } else if let Some(n) = t.strip_prefix("<=") {
        OpsetRange {
            min: 1,
            max: num(n)?,
        }
    } else if let Some((a, b)) = t.split_once('-') {
        OpsetRange {
            min: num(a)?,
            max: num(b)?,
        }
    } else {
        let n = num(t)?;
        OpsetRange { min: n, max: n }
    };
    if r.min > r.max {
        return Err(format!("opset range '{text}' is empty"));
    }
    Ok(r)
}

/// How the target runs one op: the opsets, and the element types when the profile restricts
/// them.
#[derive(Debug, Clone, PartialEq)]
pub struct OpRule {
    pub opsets: OpsetRange,
    /// `None`: every element type the op's schema allows.
    pub types: Option<Vec<DataType>>,
}

impl<'de> Deserialize<'de> for OpRule {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        #[derive(Deserialize)]
        #[serde(untagged)]
        enum Spelled {
            Range(OpsetRange),
            Table {
                opsets: OpsetRange,
                #[serde(default)]
                types: Option<Vec<String>>,
            },
        }
        let types = |names: Vec<String>| {
            names
                .iter()
                .map(|n| elem_type(n))
                .collect::<Result<Vec<_>, String>>()
        };
        match Spelled::deserialize(d)? {
            Spelled::Range(opsets) => Ok(OpRule {
                opsets,
                types: None,
            }),
            Spelled::Table { opsets, types: t } => Ok(OpRule {
                opsets,
                types: t.map(types).transpose().map_err(serde::de::Error::custom)?,
            }),
        }
    }
}

impl JsonSchema for OpRule {
    fn schema_name() -> Cow<'static, str> {
        "OpRule".into()
    }

    fn json_schema(g: &mut SchemaGenerator) -> Schema {
        let range = g.subschema_for::<OpsetRange>();
        json_schema!({
            "description": "The opsets an op runs at, alone or with the element types it takes (ONNX names in any case: float, float16, int8, ...).",
            "anyOf": [
                range,
                {
                    "type": "object",
                    "properties": {
                        "opsets": range,
                        "types": {"type": "array", "items": {"type": "string"}},
                    },
                    "required": ["opsets"],
                },
            ],
        })
    }
}

/// An element type by its ONNX name, in any case (`float`, `FLOAT16`, `int8`).
fn elem_type(name: &str) -> Result<DataType, String> {
    DataType::from_str_name(&name.to_ascii_uppercase())
        .filter(|dt| *dt != DataType::Undefined)
        .ok_or_else(|| format!("'{name}' is not an ONNX element type (float, float16, int8, ...)"))
}

/// Where a profile came from, as reports record it.
#[derive(Debug, Clone, PartialEq)]
pub enum Origin {
    BuiltIn,
    /// A file, with the SHA-256 of its bytes.
    File {
        path: String,
        sha256: String,
    },
}

/// A target profile.
#[derive(Debug, Clone, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Profile {
    pub name: String,
    /// One line on the runtime, shown by `actswap targets`.
    #[serde(default)]
    pub description: String,
    /// Highest default-domain opset the target runs (none: any).
    pub max_opset: Option<i64>,
    /// The form for sites the target rejects: keep (fused, then primitive), fused or primitive.
    #[serde(default)]
    pub prefer: Prefer,
    /// Worst-case |error| over the real line allowed for an approximation (0: exact forms only).
    #[serde(default)]
    pub max_approx_error: f64,
    /// Most segments a fitted form may have (its error is judged over the site's fitting range).
    #[serde(default = "default_max_fit_segments")]
    pub max_fit_segments: usize,
    /// Accepted ops by type (`domain:Op` outside the default domain); `*` for every other
    /// default-domain op.
    pub ops: BTreeMap<String, OpRule>,
    /// The drift budget a conversion for this target must meet.
    #[serde(default)]
    pub budget: Budgets,
    #[serde(skip, default = "built_in")]
    pub origin: Origin,
}

fn default_max_fit_segments() -> usize {
    crate::catalog::fit::DEFAULT_MAX_SEGMENTS
}

fn built_in() -> Origin {
    Origin::BuiltIn
}

/// Why a target does not run a node.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Refusal {
    /// The model's opset is above the highest the target runs.
    Opset { model: i64, max: i64 },
    /// The op is not in the profile.
    Op,
    /// The op is, but not at this opset.
    OpOpset,
    /// The op is, but not for this element type.
    ElemType(DataType),
}

impl Profile {
    /// True when the target runs `op` of `domain` at `opset` (for element type `elem`, when
    /// known).
    pub fn accepts(&self, domain: &str, op: &str, opset: i64, elem: Option<DataType>) -> bool {
        self.refusal(domain, op, opset, elem).is_none()
    }

    /// Why the target does not run `op` of `domain` at `opset` for `elem`; `None` when it does.
    pub fn refusal(
        &self,
        domain: &str,
        op: &str,
        opset: i64,
        elem: Option<DataType>,
    ) -> Option<Refusal> {
        let default_domain = matches!(domain, "" | "ai.onnx");
        if let Some(max) = self.max_opset
            && default_domain
            && opset > max
        {
            return Some(Refusal::Opset { model: opset, max });
        }
        let rule = if default_domain {
            self.ops.get(op).or_else(|| self.ops.get("*"))
        } else {
            self.ops.get(&format!("{domain}:{op}"))
        };
        let Some(rule) = rule else {
            return Some(Refusal::Op);
        };
        if !rule.opsets.contains(opset) {
            return Some(Refusal::OpOpset);
        }
        match (&rule.types, elem) {
            (Some(types), Some(dt)) if !types.contains(&dt) => Some(Refusal::ElemType(dt)),
            _ => None,
        }
    }

    /// How the profile is named in reports: its name, and its file and hash when it came from
    /// one.
    pub fn label(&self) -> String {
        match &self.origin {
            Origin::BuiltIn => format!("{} (built in)", self.name),
            Origin::File { path, sha256 } => {
                format!("{} (file {path}, sha256 {sha256})", self.name)
            }
        }
    }

    /// Parses profile text; errors name the line and the reason.
    pub fn parse(text: &str, origin: &str) -> Result<Profile> {
        let p: Profile = toml::from_str(text).map_err(|e| {
            let line = e
                .span()
                .map(|s| text[..s.start.min(text.len())].lines().count().max(1))
                .unwrap_or(0);
            anyhow::anyhow!("profile {origin}, line {line}: {}", e.message())
        })?;
        if p.max_approx_error.is_nan() || p.max_approx_error < 0.0 {
            bail!("profile {origin}: max_approx_error must be a number >= 0");
        }
        let most = crate::catalog::fit::MAX_SEGMENTS;
        if !(1..=most).contains(&p.max_fit_segments) {
            bail!("profile {origin}: max_fit_segments must be between 1 and {most}");
        }
        Ok(p)
    }

    /// A built-in profile by name, or a profile file.
    pub fn load(name_or_path: &str) -> Result<Profile> {
        if let Some((_, text)) = BUILT_IN.iter().find(|(n, _)| *n == name_or_path) {
            return Profile::parse(text, &format!("'{name_or_path}'"));
        }
        let path = Path::new(name_or_path);
        if !path.exists() {
            let names: Vec<&str> = BUILT_IN.iter().map(|(n, _)| *n).collect();
            bail!(
                "no target profile '{name_or_path}': not a file and not a built-in ({})",
                names.join(", ")
            );
        }
        let bytes = std::fs::read(path)
            .with_context(|| format!("cannot read profile '{}'", path.display()))?;
        let text = std::str::from_utf8(&bytes)
            .with_context(|| format!("profile '{}' is not UTF-8 text", path.display()))?;
        let mut p = Profile::parse(text, &format!("'{}'", path.display()))?;
        p.origin = Origin::File {
            path: path.display().to_string(),
            sha256: Sha256::digest(&bytes)
                .iter()
                .map(|b| format!("{b:02x}"))
                .collect(),
        };
        Ok(p)
    }
}

/// The built-in profiles, by name (the files are in profiles/).
pub const BUILT_IN: &[(&str, &str)] = &[
    (
        "core-opset13",
        include_str!("../../profiles/core-opset13.toml"),
    ),
    (
        "piecewise-linear",
        include_str!("../../profiles/piecewise-linear.toml"),
    ),
    (
        "fused-latest",
        include_str!("../../profiles/fused-latest.toml"),
    ),
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rules_take_ranges_tables_domains_and_a_wildcard() {
        let p = Profile::parse(
            r#"
            name = "t"
            [ops]
            Relu = { opsets = ">=6", types = ["float", "INT8"] }
            Clip = "11-13"
            "com.microsoft:FastGelu" = "*"
            [budget]
            min_cosine = 0.99
            "#,
            "test",
        )
        .unwrap();
        assert!(p.accepts("", "Relu", 13, Some(DataType::Int8)));
        assert_eq!(
            p.refusal("", "Relu", 13, Some(DataType::Int32)),
            Some(Refusal::ElemType(DataType::Int32))
        );
        assert_eq!(p.refusal("", "Clip", 14, None), Some(Refusal::OpOpset));
        assert_eq!(p.refusal("", "Conv", 13, None), Some(Refusal::Op));
        assert!(p.accepts("com.microsoft", "FastGelu", 1, None));
        assert_eq!(p.budget.min_cosine, Some(0.99));
        let any = Profile::parse(
            "name = \"any\"\nmax_opset = 13\n[ops]\n\"*\" = \"*\"\n",
            "t",
        )
        .unwrap();
        assert!(any.accepts("ai.onnx", "LayerNormalization", 13, None));
        assert!(!any.accepts("com.microsoft", "FastGelu", 1, None));
        assert_eq!(
            any.refusal("", "Relu", 17, None),
            Some(Refusal::Opset { model: 17, max: 13 })
        );
        assert!(
            Profile::parse(
                "name = \"x\"\n[ops]\nRelu = { opsets = \"*\", types = [\"floaty\"] }\n",
                "t"
            )
            .is_err()
        );
    }
}
