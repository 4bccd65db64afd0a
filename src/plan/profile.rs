//! Target profiles: which ops a runtime or accelerator accepts, at which opsets, and how much
//! approximation error a conversion may introduce. Written in TOML:
//!
//! ```toml
//! name = "my-npu"
//! description = "Our edge NPU: opset 13, piecewise-linear activations only"
//! max_opset = 13            # optional: highest default-domain opset the target runs
//! prefer = "keep"           # keep | fused | primitive: what to do with sites already accepted
//! max_approx_error = 0.15   # worst-case |error| over the real line allowed for an approximation
//!
//! [ops]                     # accepted default-domain ops, each with the opsets it runs at:
//! Add = "*"                 # "*" any, ">=N", "<=N", "N-M"
//! Clip = "11-13"
//! ```

use std::collections::BTreeMap;
use std::path::Path;

use anyhow::{Context, Result, bail};
use serde::{Deserialize, Deserializer};

/// What a site already accepted by the target becomes.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Prefer {
    /// Leave it as it is.
    #[default]
    Keep,
    /// Rewrite it to the fused op when the target accepts that.
    Fused,
    /// Rewrite it to the primitive decomposition when the target accepts that.
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

/// A target profile.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Profile {
    pub name: String,
    #[serde(default)]
    pub description: String,
    pub max_opset: Option<i64>,
    #[serde(default)]
    pub prefer: Prefer,
    #[serde(default)]
    pub max_approx_error: f64,
    pub ops: BTreeMap<String, OpsetRange>,
}

impl Profile {
    /// True when the target runs `op` (default domain) at `opset`.
    pub fn accepts(&self, op: &str, opset: i64) -> bool {
        self.max_opset.is_none_or(|m| opset <= m)
            && self.ops.get(op).is_some_and(|r| r.contains(opset))
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
        let text = std::fs::read_to_string(path)
            .with_context(|| format!("cannot read profile '{}'", path.display()))?;
        Profile::parse(&text, &format!("'{}'", path.display()))
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
