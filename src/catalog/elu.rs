//! elu: x for x >= 0, alpha * (e^x - 1) below.

use super::numeric::finite;
use super::{FusedOp, Kind, Param};

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
    fused: &[FusedOp {
        domain: "",
        op_type: "Elu",
        since: 6,
        note: "versions 6, 22 (ONNX Elu schema); alpha default 1.0; an opset-1 \
               form with the legacy consumed_inputs attribute existed (from memory)",
    }],
    formula: "f(x) = x for x >= 0, alpha * (exp(x) - 1) for x < 0",
    source: "Clevert, Unterthiner & Hochreiter 2015, 'Fast and Accurate Deep Network Learning \
             by Exponential Linear Units (ELUs)', arXiv:1511.07289; ONNX operator schema Elu",
    forms: &[
        "fused: Elu(x; alpha)",
        "primitive: Where(Less(x, 0), Mul(alpha, Sub(Exp(x), 1)), x)",
    ],
    example: "A river-flow forecaster (invented) uses Elu(alpha = 1): elu(-1) = \
              -0.6321205588285577, elu(2) = 2.",
    numeric_notes: "The negative branch uses expm1: exp(x) - 1 loses the leading digits near \
                    0. Recovery: alpha = f(-1) / (e^-1 - 1).",
    piecewise_linear: false,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    if x < 0.0 { p[0] * x.exp_m1() } else { x }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    Some(vec![finite(f, -1.0)? / (-1.0f64).exp_m1()])
}
