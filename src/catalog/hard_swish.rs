//! hard_swish: x * relu6(x + 3) / 6.

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::hard_sigmoid::clipped_line;
use super::kind::{FusedOp, Kind};
use super::nothing_to_recover;

pub const KIND: Kind = Kind {
    id: "hard_swish",
    title: "Hard-swish",
    params: &[],
    reference,
    recover: nothing_to_recover,
    breakpoints: |_| vec![-3.0, 3.0],
    fused: &[FusedOp::standard(
        14,
        OpVersion::new("HardSwish", 14, 22),
        "versions 14, 22; function body HardSigmoid(alpha = 0.16666667163372, beta = 0.5) \
         then Mul (ONNX HardSwish schema)",
    )],
    formula: "f(x) = x * min(max(0, x + 3), 6) / 6 = x * max(0, min(1, x / 6 + 1/2))",
    source: "Howard et al. 2019, 'Searching for MobileNetV3', arXiv:1905.02244 \
             (x * ReLU6(x + 3) / 6); ONNX operator schema HardSwish",
    forms: &[
        "fused: HardSwish(x) (opset 14)",
        "primitive: Mul(x, Clip(Add(Mul(x, 1/6), 0.5), 0, 1)) (opset 7; Clip with attributes \
         below 11): the ONNX function body with HardSigmoid spelled out, piecewise-linear ops \
         only",
        "also seen: Mul(x, HardSigmoid(x; alpha = 1/6, beta = 0.5))",
        "also seen: Div(Mul(x, Clip(Add(x, 3), 0, 6)), 6)",
    ],
    example: "A doorbell person detector for a microcontroller (invented) replaces swish by \
              hard-swish: hard_swish(1) = 2/3, hard_swish(-4) = 0, hard_swish(5) = 5.",
    numeric_notes: "Quadratic on (-3, 3), 0 below, x above. Float32 stores 1/6 as \
                    0.16666667163372; that shifts the output by at most 5e-8 on (-3, 3) \
                    and nothing outside.",
    piecewise_linear: false,
    primitive,
};

fn reference(x: f64, _: &[f64]) -> f64 {
    // The factor first: exactly 1 for x >= 3, so the tail is exactly x.
    x * ((x + 3.0).clamp(0.0, 6.0) / 6.0)
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (alpha, beta) = (b.constant("alpha", 1.0 / 6.0), b.constant("beta", 0.5));
    let x = b.input();
    let gate = clipped_line(b, x, &alpha, &beta)?;
    b.node(ops::MUL, "mul", &[x, &gate], vec![])
}
