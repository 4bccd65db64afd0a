//! prelu: leaky_relu whose slope is an input, usually one value per channel.

use super::emit::{Builder, OpVersion, Unavailable};
use super::kind::{FusedNode, FusedOp, Kind, Reading, Scale};
use super::leaky_relu;
use super::params::{Param, ParamValue, Params};

/// Unidirectional broadcast of the slope exists from version 7; 9 is the version the catalogue
/// lists (and the one the type list of today's PRelu starts from).
const PRELU: OpVersion = OpVersion::new("PRelu", 9, 16);

pub const KIND: Kind = Kind {
    id: "prelu",
    title: "PReLU (parametric ReLU)",
    params: &[Param {
        name: "slope",
        default: 0.25,
        per_channel: true,
        doc: "slope for x < 0, an input broadcast unidirectionally to x (usually one value \
              per channel); ONNX has no default: 0.25 is PyTorch's initial value (from memory), \
              used only for catalogue examples",
    }],
    reference: leaky_relu::KIND.reference,
    recover: leaky_relu::recover_slope,
    breakpoints: |_| vec![0.0],
    fused: &[FusedOp::standard(
        9,
        PRELU,
        "versions 9, 16 with unidirectional broadcast of the slope input \
         (ONNX PRelu schema); earlier versions existed (from memory)",
    )
    .read(slope_input)
    .write(fused)],
    formula: "f(x) = x for x >= 0, slope * x for x < 0",
    source: "ONNX operator schema PRelu (onnx/defs/math/defs.cc); He et al. 2015, 'Delving Deep \
             into Rectifiers', arXiv:1502.01852 (from memory)",
    forms: &[
        "fused: PRelu(x, slope) (opset 9), slope a scalar or the per-channel tensor",
        "primitive: Add(Relu(x), Mul(Min(x, 0), slope)) (opset 8)",
        "also seen: Where(Less(x, 0), Mul(x, slope), x) (the ONNX function body)",
    ],
    example: "A hop-yield regression network (invented) learns one PRelu slope per channel, \
              stored as a [C, 1, 1] initializer: prelu(-1; 0.25) = -0.25.",
    numeric_notes: "As a scalar function PRelu is LeakyRelu: identification reports leaky_relu, \
                    and the scanner tells the two apart from the graph (a slope tensor). \
                    Identification of a per-channel site runs per channel.",
    piecewise_linear: true,
    // the same slopes on both sides of 0 at every scale.
    scale: Some(Scale::Any),
    primitive,
};

/// The slope is input 1: a scalar, or one value per channel with its dims.
fn slope_input(node: &FusedNode, r: Reading) -> Option<Reading> {
    Some(match (node.constant)(1) {
        Some(c) if c.values.len() == 1 => Reading {
            params: Some(Params::scalars(&c.values)),
            ..r
        },
        Some(c) => Reading {
            params: Some(Params::new(
                vec![ParamValue::PerChannel(c.values)],
                Some(c.dims),
            )),
            ..r
        },
        None => {
            let mut r = r;
            r.params = None;
            r.notes.push("the slope is computed at run time".into());
            r.rewritable = false;
            r
        }
    })
}

fn fused(b: &mut Builder) -> Result<String, Unavailable> {
    let slope = b.param(0, "slope");
    let x = b.input();
    b.node(PRELU, "prelu", &[x, &slope], vec![])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let slope = b.param(0, "slope");
    let x = b.input();
    leaky_relu::relu_plus_sloped_negative(b, x, &slope)
}
