//! relu: max(0, x).

use super::emit::{Builder, EmitCtx, Emitted, FormId, Unavailable, ops};
use super::numeric::same_f32;
use super::{FusedOp, Kind};

pub const KIND: Kind = Kind {
    id: "relu",
    title: "ReLU (rectified linear unit)",
    params: &[],
    reference,
    recover,
    breakpoints: |_| vec![0.0],
    fused: &[FusedOp {
        domain: "",
        op_type: "Relu",
        since: 6,
        note: "versions 6, 13, 14; an opset-1 form with the legacy consumed_inputs attribute \
               existed (from memory)",
    }],
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
    fused_form: Some(fused),
    primitive_form: primitive,
};

fn reference(x: f64, _: &[f64]) -> f64 {
    if x < 0.0 { 0.0 } else { x }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    (same_f32(f(-1.0), 0.0) && same_f32(f(-40.0), 0.0)).then(Vec::new)
}

fn fused(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Fused)?;
    let y = b.node(ops::RELU, "relu", &[ctx.input], vec![])?;
    b.finish(&y)
}

fn primitive(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Primitive)?;
    let zero = b.constant("zero", 0.0);
    let y = b.node(ops::MAX, "max", &[ctx.input, &zero], vec![])?;
    b.finish(&y)
}
