//! relu: max(0, x).

use super::clip::{self, Bounds};
use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{FusedNode, FusedOp, Kind, Reading, Scale};
use super::numeric::same_f32;

pub const KIND: Kind = Kind {
    id: "relu",
    title: "ReLU (rectified linear unit)",
    params: &[],
    reference,
    recover,
    breakpoints: |_| vec![0.0],
    fused: &[
        FusedOp::standard(
            6,
            ops::RELU,
            "versions 6, 13, 14; an opset-1 form with the legacy consumed_inputs attribute \
             existed (from memory)",
        ),
        FusedOp::standard(
            6,
            OpVersion::new("Clip", 6, 13),
            "with min = 0 and no max (ONNX Clip schema)",
        )
        .read(clip_from_zero),
    ],
    formula: "f(x) = max(0, x)",
    source: "ONNX operator schema Relu (onnx/defs/math/defs.cc); Nair & Hinton 2010, \
             'Rectified Linear Units Improve Restricted Boltzmann Machines' (from memory)",
    forms: &[
        "fused: Relu(x) (opset 6)",
        "primitive: Max(x, 0) (opset 8)",
        "also seen: Clip(x, min = 0) with no upper bound",
    ],
    example: "A tide-gauge anomaly detector (invented) ends each convolution with Relu: \
              relu(-2) = 0, relu(1.5) = 1.5.",
    numeric_notes: "Exact in every precision. Identified only when f(-1) and f(-40) are exactly \
                    0, so a LeakyRelu with a tiny alpha is reported as leaky_relu, not relu.",
    piecewise_linear: true,
    // max(0, s x) / s = max(0, x) for s > 0.
    scale: Some(Scale::Any),
    primitive,
};

fn reference(x: f64, _: &[f64]) -> f64 {
    if x < 0.0 { 0.0 } else { x }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    (same_f32(f(-1.0), 0.0) && same_f32(f(-40.0), 0.0)).then(Vec::new)
}

/// Clip(x, 0) with no upper bound is relu.
fn clip_from_zero(node: &FusedNode, r: Reading) -> Option<Reading> {
    match clip::bounds(node)? {
        Bounds::Known(Some(0.0), None) => Some(r),
        _ => None,
    }
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let zero = b.constant("zero", 0.0);
    let x = b.input();
    b.node(ops::MAX, "max", &[x, &zero], vec![])
}
