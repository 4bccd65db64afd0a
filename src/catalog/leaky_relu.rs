//! leaky_relu: x for x >= 0, alpha * x below.

use super::numeric::finite;
use super::{FusedOp, Kind, Param};

pub const KIND: Kind = Kind {
    id: "leaky_relu",
    title: "Leaky ReLU",
    params: &[Param {
        name: "alpha",
        default: 0.01,
        per_channel: false,
        doc: "slope for x < 0",
    }],
    reference,
    recover: recover_slope,
    breakpoints: |_| vec![0.0],
    fused: &[FusedOp {
        domain: "",
        op_type: "LeakyRelu",
        since: 6,
        note: "versions 6, 16 (ONNX LeakyRelu schema); alpha default 0.01",
    }],
    formula: "f(x) = x for x >= 0, alpha * x for x < 0",
    source: "ONNX operator schema LeakyRelu (onnx/defs/math/defs.cc); Maas, Hannun & Ng 2013, \
             'Rectifier Nonlinearities Improve Neural Network Acoustic Models' (from memory)",
    forms: &[
        "fused: LeakyRelu(x; alpha)",
        "primitive: Where(Less(x, 0), Mul(x, alpha), x)",
        "also seen: Max(x, Mul(x, alpha)) (equal only for 0 <= alpha <= 1)",
    ],
    example: "A seismic-event classifier (invented) uses LeakyRelu(alpha = 0.2): \
              leaky_relu(-2; 0.2) = -0.4, leaky_relu(3; 0.2) = 3.",
    numeric_notes: "Exact up to the rounding of alpha * x. Recovery: alpha = -f(-1). A slope of \
                    exactly 1 is the identity and is not identified.",
    piecewise_linear: true,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    if x < 0.0 { p[0] * x } else { x }
}

/// alpha = f(-1) / -1; the identity (alpha = 1) is no activation.
pub fn recover_slope(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let alpha = -finite(f, -1.0)?;
    (alpha != 1.0).then(|| vec![alpha])
}
