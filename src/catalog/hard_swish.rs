//! hard_swish: x * relu6(beta * x + 3) / 6, the MobileNetV3 hard-swish at beta = 1.

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::hard_sigmoid::clipped_line;
use super::kind::{FusedOp, Kind, Scale};
use super::numeric::same_f32;
use super::params::Param;

pub const KIND: Kind = Kind {
    id: "hard_swish",
    title: "Hard-swish",
    params: &[Param {
        name: "beta",
        default: 1.0,
        per_channel: true,
        doc: "slope inside the hard sigmoid, as swish's beta: x * hard_sigmoid(beta * x; 1/6, \
              1/2) = hard_swish(beta * x) / beta; 1 in MobileNetV3 and in the ONNX op",
    }],
    reference,
    recover,
    breakpoints: |p| {
        if p[0] == 0.0 {
            Vec::new()
        } else {
            vec![-3.0 / p[0], 3.0 / p[0]]
        }
    },
    fused: &[FusedOp::standard(
        14,
        OpVersion::new("HardSwish", 14, 22),
        "versions 14, 22, beta = 1 only; function body HardSigmoid(alpha = 0.16666667163372, \
         beta = 0.5) then Mul (ONNX HardSwish schema)",
    )
    .write(fused)],
    formula: "f(x) = x * min(max(0, beta * x + 3), 6) / 6 = x * max(0, min(1, beta * x / 6 + \
              1/2)); beta = 1 is MobileNetV3's x * ReLU6(x + 3) / 6",
    source: "Howard et al. 2019, 'Searching for MobileNetV3', arXiv:1905.02244 \
             (x * ReLU6(x + 3) / 6); ONNX operator schema HardSwish; beta as swish's slope \
             (Ramachandran, Zoph & Le 2017, arXiv:1710.05941)",
    forms: &[
        "fused: HardSwish(x) (opset 14; beta = 1 only)",
        "primitive: Mul(x, Clip(Add(Mul(x, beta/6), 0.5), 0, 1)) (opset 7; Clip with \
         attributes below 11): the ONNX function body with HardSigmoid spelled out, \
         piecewise-linear ops only; beta a scalar or the per-channel tensor",
        "also seen: Mul(x, HardSigmoid(x; alpha = 1/6, beta = 0.5))",
        "also seen: Div(Mul(x, Clip(Add(x, 3), 0, 6)), 6)",
    ],
    example: "A doorbell person detector for a microcontroller (invented) replaces swish by \
              hard-swish: hard_swish(1) = 2/3, hard_swish(-4) = 0, hard_swish(5) = 5.",
    numeric_notes: "Quadratic on (-3/beta, 3/beta), 0 below, x above (beta > 0). Float32 \
                    stores 1/6 as 0.16666667163372; that shifts the output by at most 5e-8 on \
                    (-3, 3) and nothing outside. Only beta = 1 is identified in a model: \
                    x * HardSigmoid(x) with ONNX's default alpha 0.2 (beta 1.2 here) is what an \
                    export holds when PyTorch's 1/6 was lost, and it is reported as the \
                    hard_sigmoid it is. Other slopes are written as the hard form of a swish \
                    (swish-to-hard-swish).",
    piecewise_linear: false,
    // x * relu6(beta x + 3) / 6 = (beta x) * relu6(beta x + 3) / 6 / beta: MobileNetV3's
    // hard-swish rescaled, as swish is SiLU rescaled.
    scale: Some(Scale::Factor {
        factor: |p| p[0],
        base: &[1.0],
    }),
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    // The factor first: exactly 1 for beta * x >= 3, so the tail is exactly x.
    x * ((p[0] * x + 3.0).clamp(0.0, 6.0) / 6.0)
}

/// Only the MobileNetV3 slope: beta = 1, confirmed by identification's probes.
fn recover(_: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    Some(vec![1.0])
}

/// HardSwish has no slope: only beta = 1.
fn fused(b: &mut Builder) -> Result<String, Unavailable> {
    b.require(0, |beta| same_f32(beta, 1.0), "must be 1: HardSwish has no slope")?;
    let x = b.input();
    b.node(KIND.fused[0].op, "hard_swish", &[x], vec![])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let alpha = b.param_map(0, "alpha", |beta| beta / 6.0);
    let beta = b.constant("beta", 0.5);
    let x = b.input();
    let gate = clipped_line(b, x, &alpha, &beta)?;
    b.node(ops::MUL, "mul", &[x, &gate], vec![])
}
