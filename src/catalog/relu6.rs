//! relu6: x limited to [0, 6].

use super::emit::{Builder, EmitCtx, Emitted, FormId, Unavailable, ops};
use super::numeric::same_f32;
use super::{FusedOp, Kind, clip};

pub const KIND: Kind = Kind {
    id: "relu6",
    title: "ReLU6 (Clip to [0, 6])",
    params: &[],
    reference,
    recover,
    breakpoints: |_| vec![0.0, 6.0],
    fused: &[FusedOp {
        domain: "",
        op_type: "Clip",
        since: 6,
        note: "min = 0, max = 6: attributes at opsets 6-10, optional scalar inputs from opset 11 \
               (ONNX Clip schema); ONNX has no Relu6 op",
    }],
    formula: "f(x) = min(max(0, x), 6)",
    source: "ONNX operator schema Clip; Krizhevsky 2010, 'Convolutional Deep Belief Networks \
             on CIFAR-10' (from memory); the building block of hard-swish in Howard et al. 2019, \
             MobileNetV3, arXiv:1905.02244",
    forms: &[
        "fused: Clip(x, 0, 6) (opset 6 with attributes, constant inputs from 11)",
        "primitive: Min(Max(x, 0), 6) (opset 8)",
        "also seen: Min(Relu(x), 6)",
    ],
    example: "A parcel-sorting camera network (invented) uses Clip(x, 0, 6) after each \
              depthwise convolution: relu6(7.5) = 6, relu6(-1) = 0, relu6(2) = 2.",
    numeric_notes: "Exact in every precision (0 and 6 are exact float32 values). Identified \
                    when the recovered clip bounds round to 0 and 6 in float32.",
    piecewise_linear: true,
    fused_form: Some(fused),
    primitive_form: primitive,
};

fn reference(x: f64, _: &[f64]) -> f64 {
    x.clamp(0.0, 6.0)
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let b = (clip::KIND.recover)(f)?;
    (same_f32(b[0], 0.0) && same_f32(b[1], 6.0)).then(Vec::new)
}

fn fused(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Fused)?;
    let y = b.clip("clip", ctx.input, 0.0, 6.0)?;
    b.finish(&y)
}

fn primitive(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Primitive)?;
    let (zero, six) = (b.constant("zero", 0.0), b.constant("six", 6.0));
    let lower = b.node(ops::MAX, "max", &[ctx.input, &zero], vec![])?;
    let y = b.node(ops::MIN, "min", &[&lower, &six], vec![])?;
    b.finish(&y)
}
