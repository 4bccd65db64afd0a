//! sigmoid: 1 / (1 + e^-x).

use super::emit::{Builder, Unavailable, ops};
use super::kind::{FusedOp, Kind};
use super::{nothing_to_recover, numeric, smooth};

pub const KIND: Kind = Kind {
    id: "sigmoid",
    title: "Sigmoid (logistic function)",
    params: &[],
    reference: |x, _| numeric::sigmoid(x),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[FusedOp::standard(
        1,
        ops::SIGMOID,
        "versions 1, 6, 13 (ONNX Sigmoid schema)",
    )],
    formula: "f(x) = 1 / (1 + exp(-x))",
    source: "ONNX operator schema Sigmoid (onnx/defs/math/defs.cc)",
    forms: &[
        "fused: Sigmoid(x) (opset 6)",
        "primitive: Sigmoid(x) (opset 6): Sigmoid is itself a basic op",
        "also seen: Reciprocal(Add(Exp(Neg(x)), 1)), Div(1, Add(1, Exp(Neg(x))))",
    ],
    example: "A leak detector for a water network (invented) outputs Sigmoid(logit): \
              sigmoid(0) = 0.5, sigmoid(2) = 0.8807970779778823.",
    numeric_notes: "Evaluated by sign: 1 / (1 + exp(-x)) for x >= 0, exp(x) / (1 + exp(x)) \
                    below. exp(x) / (1 + exp(x)) alone is NaN above x = 88.72 in float32 \
                    (88.72 = ln of the largest float32).",
    piecewise_linear: false,
    scale: None,
    primitive,
};

/// Sigmoid is itself a basic op.
fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    b.node(ops::SIGMOID, "sigmoid", &[x], vec![])
}
