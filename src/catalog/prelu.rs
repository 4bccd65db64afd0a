//! prelu: leaky_relu whose slope is an input, usually one value per channel.

use super::emit::{Builder, EmitCtx, Emitted, FormId, Unavailable, ops};
use super::{FusedOp, Kind, Param, leaky_relu};

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
    fused: &[FusedOp {
        domain: "",
        op_type: "PRelu",
        since: 9,
        note: "versions 9, 16 with unidirectional broadcast of the slope input \
               (ONNX PRelu schema); earlier versions existed (from memory)",
    }],
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
    fused_form: Some(fused),
    primitive_form: primitive,
};

fn fused(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Fused)?;
    let slope = b.param(0, "slope");
    let y = b.node(ops::PRELU, "prelu", &[ctx.input, &slope], vec![])?;
    b.finish(&y)
}

fn primitive(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Primitive)?;
    let slope = b.param(0, "slope");
    let y = leaky_relu::relu_plus_sloped_negative(&mut b, ctx.input, &slope)?;
    b.finish(&y)
}
