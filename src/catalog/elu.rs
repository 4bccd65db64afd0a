//! elu: x for x >= 0, alpha * (e^x - 1) below.

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind};
use super::numeric::finite;
use super::params::Param;

pub const KIND: Kind = Kind {
    id: "elu",
    title: "ELU (exponential linear unit)",
    params: &[Param {
        name: "alpha",
        default: 1.0,
        per_channel: false,
        doc: "value approached as x -> -inf is -alpha",
    }],
    reference,
    recover,
    breakpoints: |_| vec![0.0],
    fused: &[FusedOp::standard(
        6,
        OpVersion::new("Elu", 6, 22),
        "versions 6, 22 (ONNX Elu schema); alpha default 1.0; an opset-1 \
         form with the legacy consumed_inputs attribute existed (from memory)",
    )
    .attrs(&[AttrParam { attr: "alpha", param: 0, default: 1.0 }])],
    formula: "f(x) = x for x >= 0, alpha * (exp(x) - 1) for x < 0",
    source: "Clevert, Unterthiner & Hochreiter 2015, 'Fast and Accurate Deep Network Learning \
             by Exponential Linear Units (ELUs)', arXiv:1511.07289; ONNX operator schema Elu",
    forms: &[
        "fused: Elu(x; alpha) (opset 6)",
        "primitive: Add(Relu(x), Mul(Sub(Exp(Min(x, 0)), 1), alpha)) (opset 8)",
        "also seen: Where(Less(x, 0), Mul(alpha, Sub(Exp(x), 1)), x) (the ONNX function body)",
    ],
    example: "A river-flow forecaster (invented) uses Elu(alpha = 1): elu(-1) = \
              -0.6321205588285577, elu(2) = 2.",
    numeric_notes: "The negative branch uses expm1: exp(x) - 1 loses the leading digits near \
                    0. Recovery: alpha = f(-1) / (e^-1 - 1).",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    if x < 0.0 { p[0] * x.exp_m1() } else { x }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    Some(vec![finite(f, -1.0)? / (-1.0f64).exp_m1()])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let alpha = b.param(0, "alpha");
    let x = b.input();
    let positive = b.node(ops::RELU, "relu", &[x], vec![])?;
    let em1 = exp_m1_of_negative_part(b, x)?;
    let negative = b.node(ops::MUL, "mul", &[&em1, &alpha], vec![])?;
    b.node(ops::ADD, "add", &[&positive, &negative], vec![])
}

/// Exp(Min(x, 0)) - 1: 0 for x >= 0, and Exp never sees a positive argument, so it cannot
/// overflow (exp(x) is inf above 88.72 in float32).
pub(super) fn exp_m1_of_negative_part(b: &mut Builder, x: &str) -> Result<String, Unavailable> {
    let (zero, one) = (b.constant("zero", 0.0), b.constant("one", 1.0));
    let negative = b.node(ops::MIN, "min", &[x, &zero], vec![])?;
    let e = b.node(ops::EXP, "exp", &[&negative], vec![])?;
    b.node(ops::SUB, "sub", &[&e, &one], vec![])
}
