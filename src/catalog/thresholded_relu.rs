//! thresholded_relu: x above alpha, 0 elsewhere.

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind};
use super::numeric::{bisect, finite};
use super::params::Param;

/// Bisection bracket; its odd width keeps every midpoint off x = 0, where f is 0 for any alpha.
const BRACKET: (f64, f64) = (-1e6, 1e6 + 1.0);

pub const KIND: Kind = Kind {
    id: "thresholded_relu",
    title: "Thresholded ReLU",
    params: &[Param {
        name: "alpha",
        default: 1.0,
        per_channel: false,
        doc: "threshold; outputs are 0 up to and including alpha",
    }],
    reference,
    recover,
    breakpoints: |p| vec![p[0]],
    fused: &[FusedOp::standard(
        10,
        OpVersion::new("ThresholdedRelu", 10, 22),
        "versions 10, 22 (ONNX ThresholdedRelu schema); alpha default 1.0",
    )
    .attrs(&[AttrParam { attr: "alpha", param: 0, default: 1.0 }])],
    formula: "f(x) = x for x > alpha, 0 otherwise",
    source: "ONNX operator schema ThresholdedRelu (onnx/defs/math/defs.cc); Konda, Memisevic & \
             Krueger 2014, 'Zero-bias autoencoders and the benefits of co-adapting features', \
             arXiv:1402.3337 (from memory)",
    forms: &[
        "fused: ThresholdedRelu(x; alpha) (opset 10)",
        "primitive: Where(Greater(x, alpha), x, 0) (opset 9)",
    ],
    example: "A beehive acoustic monitor (invented) gates features with ThresholdedRelu(1.0): \
              thresholded_relu(1; 1) = 0, thresholded_relu(1.5; 1) = 1.5.",
    numeric_notes: "Discontinuous: jumps from 0 to alpha at x = alpha. Recovery bisects the jump \
                    to adjacent doubles and reports the last x where f is 0, so a float32 \
                    alpha is recovered exactly.",
    piecewise_linear: true,
    scale: None,
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    if x > p[0] { x } else { 0.0 }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let (lo, hi) = BRACKET;
    if finite(f, lo)? != 0.0 || finite(f, hi)? != hi {
        return None;
    }
    let (alpha, _) = bisect(lo, hi, |x| f(x) != 0.0);
    Some(vec![alpha])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (alpha, zero) = (b.param(0, "alpha"), b.constant("zero", 0.0));
    let x = b.input();
    let above = b.node(ops::GREATER, "greater", &[x, &alpha], vec![])?;
    b.node(ops::WHERE, "where", &[&above, x, &zero], vec![])
}
