//! A kind's parameters: their declaration ([`Param`]) and a site's values ([`Params`]), scalar or
//! one per channel. Every stage that needs a channel's values asks [`Params`]; nothing else
//! splits or merges channels.

use std::borrow::Cow;

use schemars::{JsonSchema, Schema, SchemaGenerator, json_schema};
use serde::ser::SerializeMap;
use serde::{Serialize, Serializer};

/// One parameter of a kind, in the order the kind's functions take it.
#[derive(Debug, Clone, Copy)]
pub struct Param {
    pub name: &'static str,
    /// The ONNX spec default as the spec writes it (a model stores it as float32).
    pub default: f64,
    /// True when a site may carry one value per channel (a tensor instead of a scalar).
    pub per_channel: bool,
    pub doc: &'static str,
}

/// One parameter value: one number, or one per channel.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
#[serde(untagged)]
pub enum ParamValue {
    Scalar(f64),
    PerChannel(Vec<f64>),
}

/// A site's parameter values in the kind's order, and the dims per-channel values have in the
/// model (`[1, C, 1, 1]`, `[C]`, ...).
#[derive(Debug, Clone, PartialEq)]
pub struct Params {
    values: Vec<ParamValue>,
    shape: Option<Vec<usize>>,
}

impl Params {
    /// Values as given; `shape` is kept only when some value is per channel.
    pub fn new(values: Vec<ParamValue>, shape: Option<Vec<usize>>) -> Params {
        let per_channel = values
            .iter()
            .any(|v| matches!(v, ParamValue::PerChannel(_)));
        Params {
            values,
            shape: shape.filter(|_| per_channel),
        }
    }

    /// Scalar values.
    pub fn scalars(values: &[f64]) -> Params {
        Params::new(
            values.iter().copied().map(ParamValue::Scalar).collect(),
            None,
        )
    }

    /// One vector per channel (each in the kind's order) merged into values: a parameter on
    /// which every channel agrees becomes a scalar.
    pub fn from_channels(channels: &[Vec<f64>], shape: Option<Vec<usize>>) -> Params {
        let n = channels.first().map_or(0, Vec::len);
        let values = (0..n)
            .map(|i| {
                let vals: Vec<f64> = channels.iter().map(|c| c[i]).collect();
                if vals.iter().all(|v| *v == vals[0]) {
                    ParamValue::Scalar(vals[0])
                } else {
                    ParamValue::PerChannel(vals)
                }
            })
            .collect();
        Params::new(values, shape)
    }

    pub fn values(&self) -> &[ParamValue] {
        &self.values
    }

    pub fn len(&self) -> usize {
        self.values.len()
    }

    pub fn is_empty(&self) -> bool {
        self.values.is_empty()
    }

    /// The dims of the per-channel values in the model; `None` when every value is a scalar.
    pub fn shape(&self) -> Option<&[usize]> {
        self.shape.as_deref()
    }

    /// True when some value is per channel.
    pub fn is_per_channel(&self) -> bool {
        self.shape.is_some()
            || self
                .values
                .iter()
                .any(|v| matches!(v, ParamValue::PerChannel(_)))
    }

    /// Channel count: the length of the per-channel values, 1 when every value is a scalar.
    pub fn channels(&self) -> usize {
        self.values
            .iter()
            .map(|v| match v {
                ParamValue::PerChannel(c) => c.len(),
                ParamValue::Scalar(_) => 1,
            })
            .max()
            .unwrap_or(1)
    }

    /// Channel `c`'s values in the kind's order (a scalar serves every channel).
    pub fn channel(&self, c: usize) -> Vec<f64> {
        self.values
            .iter()
            .map(|v| match v {
                ParamValue::Scalar(s) => *s,
                ParamValue::PerChannel(vs) => vs[c],
            })
            .collect()
    }

    /// Every channel's values, in channel order.
    pub fn per_channel(&self) -> Vec<Vec<f64>> {
        (0..self.channels()).map(|c| self.channel(c)).collect()
    }

    /// The values when all are scalars.
    pub fn scalar_values(&self) -> Option<Vec<f64>> {
        self.values
            .iter()
            .map(|v| match v {
                ParamValue::Scalar(s) => Some(*s),
                ParamValue::PerChannel(_) => None,
            })
            .collect()
    }

    /// True when both have the same channel count and every value agrees within `rtol`
    /// relative (absolute below 1).
    pub fn agrees_with(&self, other: &Params, rtol: f64) -> bool {
        self.len() == other.len()
            && self.channels() == other.channels()
            && (0..self.channels()).all(|c| {
                self.channel(c)
                    .iter()
                    .zip(other.channel(c))
                    .all(|(a, b)| a == &b || (a - b).abs() <= rtol * a.abs().max(b.abs()).max(1.0))
            })
    }

    /// The values as a map from the parameter names of `declared` (the kind's), for JSON.
    pub fn named<'a>(&'a self, declared: &'static [Param]) -> NamedParams<'a> {
        NamedParams {
            declared,
            params: Some(self),
        }
    }
}

/// Parameters serialized as `{name: value}` in name order (`{}` when unknown).
#[derive(Debug, Clone, Copy)]
pub struct NamedParams<'a> {
    declared: &'static [Param],
    params: Option<&'a Params>,
}

impl<'a> NamedParams<'a> {
    /// Parameters that may be unknown (computed at run time): `{}` then.
    pub fn of(declared: &'static [Param], params: Option<&'a Params>) -> NamedParams<'a> {
        NamedParams { declared, params }
    }
}

impl<'a> NamedParams<'a> {
    /// `(name, value)` in name order; empty when unknown or when the kind has no parameters.
    pub fn pairs(&self) -> Vec<(&'static str, &'a ParamValue)> {
        let mut pairs: Vec<(&'static str, &'a ParamValue)> = match self.params {
            Some(p) => self
                .declared
                .iter()
                .map(|d| d.name)
                .zip(p.values())
                .collect(),
            None => Vec::new(),
        };
        pairs.sort_by_key(|(name, _)| *name);
        pairs
    }
}

impl Serialize for NamedParams<'_> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        let pairs = self.pairs();
        let mut map = s.serialize_map(Some(pairs.len()))?;
        for (name, value) in pairs {
            map.serialize_entry(name, value)?;
        }
        map.end()
    }
}

impl JsonSchema for NamedParams<'_> {
    fn schema_name() -> Cow<'static, str> {
        "NamedParams".into()
    }

    fn json_schema(g: &mut SchemaGenerator) -> Schema {
        let value = g.subschema_for::<ParamValue>();
        json_schema!({
            "description": "Parameter values by name, in name order ({} when only known at run time).",
            "type": "object",
            "additionalProperties": value,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn channels_merge_and_split() {
        let p = Params::from_channels(&[vec![1.0, 2.0], vec![1.0, 3.0]], Some(vec![1, 2, 1, 1]));
        assert_eq!(
            p.values(),
            [
                ParamValue::Scalar(1.0),
                ParamValue::PerChannel(vec![2.0, 3.0])
            ]
        );
        assert_eq!(p.shape(), Some(&[1, 2, 1, 1][..]));
        assert_eq!(p.channels(), 2);
        assert_eq!(p.channel(1), [1.0, 3.0]);
        assert!(p.scalar_values().is_none());
        let s = Params::from_channels(&[vec![0.5], vec![0.5]], Some(vec![2]));
        assert_eq!(s.shape(), None, "no per-channel value, no shape");
        assert_eq!(s.scalar_values(), Some(vec![0.5]));
        assert_eq!(s.channels(), 1);
    }
}
