//! leaky_relu: x for x >= 0, alpha * x below.

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind, Scale};
use super::numeric::finite;
use super::params::Param;

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
    fused: &[FusedOp::standard(
        6,
        OpVersion::new("LeakyRelu", 6, 16),
        "versions 6, 16 (ONNX LeakyRelu schema); alpha default 0.01",
    )
    .attrs(&[AttrParam { attr: "alpha", param: 0, default: 0.01 }])],
    formula: "f(x) = x for x >= 0, alpha * x for x < 0",
    source: "ONNX operator schema LeakyRelu (onnx/defs/math/defs.cc); Maas, Hannun & Ng 2013, \
             'Rectifier Nonlinearities Improve Neural Network Acoustic Models' (from memory)",
    forms: &[
        "fused: LeakyRelu(x; alpha) (opset 6)",
        "primitive: Add(Relu(x), Mul(Min(x, 0), alpha)) (opset 8)",
        "also seen: Where(Less(x, 0), Mul(x, alpha), x) (the ONNX function body)",
        "also seen: Max(x, Mul(x, alpha)) (equal only for 0 <= alpha <= 1)",
    ],
    example: "A seismic-event classifier (invented) uses LeakyRelu(alpha = 0.2): \
              leaky_relu(-2; 0.2) = -0.4, leaky_relu(3; 0.2) = 3.",
    numeric_notes: "Exact up to the rounding of alpha * x. Recovery: alpha = -f(-1). A slope of \
                    exactly 1 is the identity and is not identified.",
    piecewise_linear: true,
    // the same slopes on both sides of 0 at every scale.
    scale: Some(Scale::Any),
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    if x < 0.0 { p[0] * x } else { x }
}

/// alpha = f(-1) / -1; the identity (alpha = 1) is no activation.
pub fn recover_slope(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let alpha = -finite(f, -1.0)?;
    (alpha != 1.0).then(|| vec![alpha])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let alpha = b.param(0, "alpha");
    let x = b.input();
    relu_plus_sloped_negative(b, x, &alpha)
}

/// Relu(x) + Min(x, 0) * slope: each term is 0 where the other applies, so the sum is exact.
pub(super) fn relu_plus_sloped_negative(
    b: &mut Builder,
    x: &str,
    slope: &str,
) -> Result<String, Unavailable> {
    let zero = b.constant("zero", 0.0);
    let positive = b.node(ops::RELU, "relu", &[x], vec![])?;
    let negative = b.node(ops::MIN, "min", &[x, &zero], vec![])?;
    let sloped = b.node(ops::MUL, "mul", &[&negative, slope], vec![])?;
    b.node(ops::ADD, "add", &[&positive, &sloped], vec![])
}
