//! softplus: ln(1 + e^x).

use super::emit::{Builder, Unavailable, ops};
use super::kind::{FusedOp, Kind};
use super::{nothing_to_recover, numeric, smooth};

pub const KIND: Kind = Kind {
    id: "softplus",
    title: "Softplus",
    params: &[],
    reference: |x, _| numeric::softplus(x),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[FusedOp::standard(
        1,
        ops::SOFTPLUS,
        "versions 1, 22; function body Exp, Add 1, Log, which is the naive form \
         (ONNX Softplus schema)",
    )],
    formula: "f(x) = ln(exp(x) + 1)",
    source: "ONNX operator schema Softplus (onnx/defs/math/defs.cc); Dugas et al. 2001, \
             'Incorporating Second-Order Functional Knowledge for Better Option Pricing' \
             (from memory)",
    forms: &[
        "fused: Softplus(x) (opset 1)",
        "primitive: Add(Relu(x), Log(Add(Exp(Neg(Abs(x))), 1))) (opset 7), which never \
         overflows",
        "also seen: Log(Add(Exp(x), 1)) (the ONNX function body; inf above 88.72 in float32)",
        "also seen: Where(Greater(x, 20), x, Softplus(x)) (PyTorch's threshold)",
    ],
    example: "A rainfall-intensity model (invented) keeps its scale output positive with \
              Softplus: softplus(0) = ln 2 = 0.6931471805599453.",
    numeric_notes: "Evaluated as max(x, 0) + ln_1p(exp(-|x|)). The naive ln(1 + exp(x)) is \
                    inf in float32 above x = 88.72 and 0 below about -16.64, where \
                    1 + exp(x) rounds to 1; the thresholded export returns x above 20, off by \
                    at most 2.1e-9.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    stable(b, x)
}

/// Relu(x) + Log(1 + Exp(-|x|)): Exp sees only arguments <= 0, so nothing overflows.
pub(super) fn stable(b: &mut Builder, x: &str) -> Result<String, Unavailable> {
    let one = b.constant("one", 1.0);
    let positive = b.node(ops::RELU, "relu", &[x], vec![])?;
    let abs = b.node(ops::ABS, "abs", &[x], vec![])?;
    let neg = b.node(ops::NEG, "neg", &[&abs], vec![])?;
    let e = b.node(ops::EXP, "exp", &[&neg], vec![])?;
    let e1 = b.node(ops::ADD, "add_one", &[&e, &one], vec![])?;
    let log = b.node(ops::LOG, "log", &[&e1], vec![])?;
    b.node(ops::ADD, "add", &[&positive, &log], vec![])
}
