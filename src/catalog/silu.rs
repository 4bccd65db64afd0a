//! silu: x * sigmoid(x), swish with beta = 1.

use super::emit::{Builder, EmitCtx, Emitted, FormId, Unavailable, ops};
use super::numeric::{same_f32, sigmoid};
use super::{FusedOp, Kind, smooth, swish};

pub const KIND: Kind = Kind {
    id: "silu",
    title: "SiLU (sigmoid linear unit, swish with beta = 1)",
    params: &[],
    reference: |x, _| x * sigmoid(x),
    recover,
    breakpoints: smooth,
    fused: &[
        FusedOp {
            domain: "",
            op_type: "Swish",
            since: 24,
            note: "function op with alpha = 1.0, its default (ONNX Swish schema)",
        },
        FusedOp {
            domain: "com.microsoft",
            op_type: "QuickGelu",
            since: 1,
            note: "x * sigmoid(alpha * x) with alpha = 1 (its default is 1.702) (from memory)",
        },
    ],
    formula: "f(x) = x * sigmoid(x) = x / (1 + exp(-x))",
    source: "Elfwing, Uchibe & Doya 2017, 'Sigmoid-Weighted Linear Units for Neural Network \
             Function Approximation in Reinforcement Learning', arXiv:1702.03118; \
             Ramachandran, Zoph & Le 2017, arXiv:1710.05941",
    forms: &[
        "fused: Swish(x) (opset 24; alpha left at its default 1.0)",
        "primitive: Mul(x, Sigmoid(x)) (opset 7)",
        "also seen: Mul(Sigmoid(x), x) (operands swapped)",
    ],
    example: "A vineyard frost-risk model (invented) exported at opset 17 has Sigmoid then Mul \
              after each convolution: silu(1) = 0.7310585786300049, silu(-1) = \
              -0.2689414213699951.",
    numeric_notes: "Minimum -0.2784645427610738 at x = -1 - W(1/e) = -1.2784645427610738. \
                    Identified when swish's recovered beta rounds to 1.0 in float32; any other \
                    beta is reported as swish with that beta.",
    piecewise_linear: false,
    fused_form: Some(fused),
    primitive_form: primitive,
};

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let beta = swish::recover_beta(f)?;
    same_f32(beta[0], 1.0).then(Vec::new)
}

fn fused(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Fused)?;
    let y = b.node(ops::SWISH, "swish", &[ctx.input], vec![])?;
    b.finish(&y)
}

fn primitive(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Primitive)?;
    let s = b.node(ops::SIGMOID, "sigmoid", &[ctx.input], vec![])?;
    let y = b.node(ops::MUL, "mul", &[ctx.input, &s], vec![])?;
    b.finish(&y)
}
