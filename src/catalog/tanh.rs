//! tanh: hyperbolic tangent.

use super::emit::{Builder, Unavailable, ops};
use super::kind::{FusedOp, Kind};
use super::{nothing_to_recover, smooth};

pub const KIND: Kind = Kind {
    id: "tanh",
    title: "Hyperbolic tangent",
    params: &[],
    reference: |x, _| x.tanh(),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[FusedOp::standard(
        6,
        ops::TANH,
        "versions 6, 13 (from memory); an opset-1 form with the legacy consumed_inputs \
         attribute existed (from memory)",
    )],
    formula: "f(x) = tanh(x) = (exp(x) - exp(-x)) / (exp(x) + exp(-x))",
    source: "ONNX operator schema Tanh (onnx/defs/math/defs.cc)",
    forms: &[
        "fused: Tanh(x) (opset 6)",
        "primitive: Tanh(x) (opset 6): Tanh is itself a basic op",
        "also seen: Sub(Mul(Sigmoid(Mul(x, 2)), 2), 1)",
    ],
    example: "A handwriting-stroke recurrent model (invented) squashes its cell state with \
              Tanh: tanh(1) = 0.7615941559557649.",
    numeric_notes: "tanh(x) = 2 * sigmoid(2x) - 1 exactly, but that form cancels near 0 \
                    (absolute error ~6e-8 in float32 instead of a relative one).",
    piecewise_linear: false,
    scale: None,
    primitive,
};

/// Tanh is itself a basic op.
fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    b.node(ops::TANH, "tanh", &[x], vec![])
}
