//! silu: x * sigmoid(x), swish with beta = 1.

use super::emit::{Builder, Unavailable, ops};
use super::kind::{Fixed, FusedOp, Kind, bias_input};
use super::numeric::{same_f32, sigmoid};
use super::swish::{self, QUICK_GELU, SWISH};
use super::smooth;

pub const KIND: Kind = Kind {
    id: "silu",
    title: "SiLU (sigmoid linear unit, swish with beta = 1)",
    params: &[],
    reference: |x, _| x * sigmoid(x),
    recover,
    breakpoints: smooth,
    fused: &[
        FusedOp::standard(
            24,
            SWISH,
            "function op with alpha = 1.0, its default (ONNX Swish schema)",
        )
        .fixed(&[Fixed::Float { attr: "alpha", value: 1.0, default: 1.0 }]),
        FusedOp::vendor(
            "com.microsoft",
            1,
            QUICK_GELU,
            "x * sigmoid(alpha * x) with alpha = 1 (its default is 1.702) (from memory)",
        )
        .fixed(&[Fixed::Float { attr: "alpha", value: 1.0, default: 1.702 }])
        .read(bias_input),
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
    scale: None,
    primitive,
};

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let beta = swish::recover_beta(f)?;
    same_f32(beta[0], 1.0).then(Vec::new)
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    let s = b.node(ops::SIGMOID, "sigmoid", &[x], vec![])?;
    b.node(ops::MUL, "mul", &[x, &s], vec![])
}
