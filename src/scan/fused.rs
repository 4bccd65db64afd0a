//! Fused sites: one node of an op that computes a catalogue kind, with its parameters read from
//! the node's attributes (spec defaults when absent) or constant inputs, per the model's opset.

use crate::catalog::{self, Kind};
use crate::onnx::attrs;
use crate::onnx::proto::NodeProto;

use super::site::ParamValue;

/// com.microsoft QuickGelu's default alpha (onnxruntime contrib op schema, from memory).
const QUICK_GELU_ALPHA: f64 = 1.702;

/// What a fused node computes.
#[derive(Debug, Clone)]
pub struct Fused {
    pub kind: &'static Kind,
    /// Parameter values in the kind's order; a per-channel value comes from a constant input.
    pub params: Vec<ParamValue>,
    pub param_shape: Option<Vec<usize>>,
    pub notes: Vec<String>,
    /// False when a parameter is only known at run time.
    pub rewritable: bool,
}

/// A constant input's value, as the scanner sees it.
pub struct ConstInput {
    pub values: Vec<f64>,
    pub dims: Vec<usize>,
}

/// Classifies `node` as a fused activation. `opset` is the node's domain opset; `constant(i)`
/// gives input `i` when it is a constant.
pub fn classify(
    node: &NodeProto,
    opset: i64,
    constant: &dyn Fn(usize) -> Option<ConstInput>,
) -> Option<Fused> {
    let kind = |id: &str| catalog::get(id).expect("catalogue kind");
    let scalar = |k: &'static Kind, values: Vec<f64>| Fused {
        kind: k,
        params: values.into_iter().map(ParamValue::Scalar).collect(),
        param_shape: None,
        notes: Vec::new(),
        rewritable: true,
    };
    let mut site = match (node.domain(), node.op_type()) {
        ("" | "ai.onnx", "Swish") => swish(attrs::float(node, "alpha").unwrap_or(1.0)),
        ("" | "ai.onnx", "PRelu") => return prelu(constant),
        ("" | "ai.onnx", "Clip") => return clip(node, opset, constant),
        ("" | "ai.onnx", _) => {
            let k = attribute_kind(node)?;
            scalar(k, attribute_params(node, k))
        }
        ("com.microsoft", op) => {
            let mut s = match op {
                "Gelu" | "BiasGelu" => scalar(kind("gelu"), vec![]),
                "FastGelu" => scalar(kind("gelu_tanh"), vec![]),
                "QuickGelu" => swish(attrs::float(node, "alpha").unwrap_or(QUICK_GELU_ALPHA)),
                _ => return None,
            };
            if node.input.iter().skip(1).any(|i| !i.is_empty()) {
                s.notes
                    .push("adds its bias input before the activation".into());
                s.rewritable = false;
            }
            s
        }
        _ => return None,
    };
    if node.attribute.iter().any(|a| a.ref_attr_name.is_some()) {
        site.notes
            .push("an attribute refers to the enclosing function's attributes".into());
        site.rewritable = false;
    }
    Some(site)
}

/// Swish with alpha = 1 (to float32 precision) is SiLU.
fn swish(alpha: f64) -> Fused {
    let (id, params) = if alpha as f32 == 1.0 {
        ("silu", vec![])
    } else {
        ("swish", vec![ParamValue::Scalar(alpha)])
    };
    Fused {
        kind: catalog::get(id).expect("catalogue kind"),
        params,
        param_shape: None,
        notes: Vec::new(),
        rewritable: true,
    }
}

fn prelu(constant: &dyn Fn(usize) -> Option<ConstInput>) -> Option<Fused> {
    let kind = catalog::get("prelu").expect("catalogue kind");
    Some(match constant(1) {
        Some(c) if c.values.len() == 1 => Fused {
            kind,
            params: vec![ParamValue::Scalar(c.values[0])],
            param_shape: None,
            notes: Vec::new(),
            rewritable: true,
        },
        Some(c) => Fused {
            kind,
            params: vec![ParamValue::PerChannel(c.values)],
            param_shape: Some(c.dims),
            notes: Vec::new(),
            rewritable: true,
        },
        None => Fused {
            kind,
            params: Vec::new(),
            param_shape: None,
            notes: vec!["the slope is computed at run time".into()],
            rewritable: false,
        },
    })
}

/// Clip: bounds are attributes before opset 11 and optional inputs from 11 on. (0, 6) is relu6,
/// (0, none) is relu, anything else is clip.
fn clip(
    node: &NodeProto,
    opset: i64,
    constant: &dyn Fn(usize) -> Option<ConstInput>,
) -> Option<Fused> {
    let (lo, hi) = if opset < 11 {
        (attrs::float(node, "min"), attrs::float(node, "max"))
    } else {
        let bound = |i: usize| -> Result<Option<f64>, ()> {
            match node.input.get(i).map(String::as_str) {
                None | Some("") => Ok(None),
                Some(_) => match constant(i) {
                    Some(c) if c.values.len() == 1 => Ok(Some(c.values[0])),
                    _ => Err(()),
                },
            }
        };
        match (bound(1), bound(2)) {
            (Ok(lo), Ok(hi)) => (lo, hi),
            _ => {
                return Some(Fused {
                    kind: catalog::get("clip").expect("catalogue kind"),
                    params: Vec::new(),
                    param_shape: None,
                    notes: vec!["a bound is computed at run time".into()],
                    rewritable: false,
                });
            }
        }
    };
    let lo = lo.filter(|v| *v > f32::MIN as f64);
    let hi = hi.filter(|v| *v < f32::MAX as f64);
    let (id, params) = match (lo, hi) {
        (Some(0.0), Some(6.0)) => ("relu6", vec![]),
        (Some(0.0), None) => ("relu", vec![]),
        (lo, hi) => (
            "clip",
            vec![lo.unwrap_or(f64::NEG_INFINITY), hi.unwrap_or(f64::INFINITY)],
        ),
    };
    Some(Fused {
        kind: catalog::get(id).expect("catalogue kind"),
        params: params.into_iter().map(ParamValue::Scalar).collect(),
        param_shape: None,
        notes: Vec::new(),
        rewritable: true,
    })
}

/// The kind of a default-domain op whose parameters are all attributes (Swish, PRelu and Clip
/// are handled apart).
pub fn attribute_kind(node: &NodeProto) -> Option<&'static Kind> {
    let id = match node.op_type() {
        "Relu" => "relu",
        "LeakyRelu" => "leaky_relu",
        "ThresholdedRelu" => "thresholded_relu",
        "Elu" => "elu",
        "Selu" => "selu",
        "Celu" => "celu",
        "Sigmoid" => "sigmoid",
        "HardSigmoid" => "hard_sigmoid",
        "Tanh" => "tanh",
        "Softplus" => "softplus",
        "Softsign" => "softsign",
        "HardSwish" => "hard_swish",
        "Mish" => "mish",
        "Gelu" if attrs::string(node, "approximate").as_deref() == Some("tanh") => "gelu_tanh",
        "Gelu" => "gelu",
        _ => return None,
    };
    catalog::get(id)
}

/// A fused node's parameters: its attributes, else the spec defaults the catalogue holds.
pub fn attribute_params(node: &NodeProto, kind: &Kind) -> Vec<f64> {
    kind.params
        .iter()
        .map(|p| attrs::float(node, p.name).unwrap_or(p.default))
        .collect()
}

/// Ops this module classifies, so the chain finder can tell a single fused node from a chain.
pub fn is_fused_op(node: &NodeProto) -> bool {
    matches!(
        (node.domain(), node.op_type()),
        (
            "" | "ai.onnx",
            "Relu"
                | "LeakyRelu"
                | "ThresholdedRelu"
                | "Elu"
                | "Selu"
                | "Celu"
                | "Sigmoid"
                | "HardSigmoid"
                | "Tanh"
                | "Softplus"
                | "Softsign"
                | "HardSwish"
                | "Mish"
                | "Gelu"
                | "Swish"
                | "PRelu"
                | "Clip"
        ) | (
            "com.microsoft",
            "Gelu" | "FastGelu" | "BiasGelu" | "QuickGelu"
        )
    )
}
