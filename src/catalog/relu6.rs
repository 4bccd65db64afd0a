//! relu6: x limited to [0, 6].

use super::clip::{self, Bounds};
use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{FusedNode, FusedOp, Kind, Reading};
use super::numeric::same_f32;

pub const KIND: Kind = Kind {
    id: "relu6",
    title: "ReLU6 (Clip to [0, 6])",
    params: &[],
    reference,
    recover,
    breakpoints: |_| vec![0.0, 6.0],
    fused: &[FusedOp::standard(
        6,
        OpVersion::new("Clip", 6, 13),
        "min = 0, max = 6: attributes at opsets 6-10, optional scalar inputs from opset 11 \
         (ONNX Clip schema); ONNX has no Relu6 op",
    )
    .read(clip_zero_six)
    .write(fused)],
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
    scale: None,
    primitive,
};

fn reference(x: f64, _: &[f64]) -> f64 {
    x.clamp(0.0, 6.0)
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let b = (clip::KIND.recover)(f)?;
    (same_f32(b[0], 0.0) && same_f32(b[1], 6.0)).then(Vec::new)
}

/// Clip(x, 0, 6).
fn clip_zero_six(node: &FusedNode, r: Reading) -> Option<Reading> {
    match clip::bounds(node)? {
        Bounds::Known(Some(lo), Some(hi)) if lo == 0.0 && hi == 6.0 => Some(r),
        _ => None,
    }
}

fn fused(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    b.clip("clip", x, 0.0, 6.0)
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (zero, six) = (b.constant("zero", 0.0), b.constant("six", 6.0));
    let x = b.input();
    let lower = b.node(ops::MAX, "max", &[x, &zero], vec![])?;
    b.node(ops::MIN, "min", &[&lower, &six], vec![])
}
