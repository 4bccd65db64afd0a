//! gelu: x * Phi(x), exact (erf) form.

use std::f64::consts::FRAC_1_SQRT_2;

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{Fixed, FusedOp, Kind, bias_input};
use super::{nothing_to_recover, smooth};

/// ONNX Gelu (opset 20), both forms.
pub const GELU: OpVersion = OpVersion::new("Gelu", 20, 20);

pub const KIND: Kind = Kind {
    id: "gelu",
    title: "GELU (exact, erf form)",
    params: &[],
    reference: |x, _| 0.5 * x * libm::erfc(-x * FRAC_1_SQRT_2),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[
        FusedOp::standard(
            20,
            GELU,
            "approximate = \"none\" (the default) (ONNX Gelu schema)",
        )
        .fixed(&[Fixed::Str { attr: "approximate", value: "none", default: "none" }]),
        FusedOp::vendor(
            "com.microsoft",
            1,
            OpVersion::new("Gelu", 1, 1),
            "exact erf GELU (from memory)",
        )
        .read(bias_input),
        FusedOp::vendor(
            "com.microsoft",
            1,
            OpVersion::new("BiasGelu", 1, 1),
            "exact erf GELU of A + B, B a bias input (from memory)",
        )
        .read(bias_input),
    ],
    formula: "f(x) = x * Phi(x) = 0.5 * x * (1 + erf(x / sqrt(2)))",
    source: "Hendrycks & Gimpel 2016, 'Gaussian Error Linear Units (GELUs)', arXiv:1606.08415; \
             ONNX operator schema Gelu (opset 20)",
    forms: &[
        "fused: Gelu(x) (opset 20)",
        "primitive: Mul(Mul(x, 0.5), Add(Erf(Mul(x, 0.70710678)), 1)) (opset 9); the 0.5 first, \
         so 2 * x never overflows",
        "also seen: Mul(Mul(x, Add(Erf(Div(x, 1.4142135)), 1)), 0.5)",
        "also seen: the same chain with the Mul 0.5 first, Mul(x, 0.70710677) instead of the \
         Div, or one 0.5 / 1 / sqrt 2 constant shared by several sites",
    ],
    example: "A legal-clause tagging transformer (invented) exported at opset 17 has \
              Div, Erf, Add, Mul, Mul in every feed-forward block: gelu(1) = \
              0.8413447460685429, gelu(-1) = -0.1586552539314571.",
    numeric_notes: "Evaluated as 0.5 * x * erfc(-x / sqrt(2)) (libm), which keeps the negative \
                    tail accurate: 1 + erf(x / sqrt(2)) cancels to 0 below x = -8.3 in double. \
                    Minimum -0.16997120748 at x = -0.75179152604. The float32 sqrt(2) \
                    (1.4142135) shifts outputs by under 1e-8.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (half, rsqrt2, one) = (
        b.constant("half", 0.5),
        b.constant("rsqrt2", FRAC_1_SQRT_2),
        b.constant("one", 1.0),
    );
    let x = b.input();
    let half_x = b.node(ops::MUL, "mul_half", &[x, &half], vec![])?;
    let scaled = b.node(ops::MUL, "mul_rsqrt2", &[x, &rsqrt2], vec![])?;
    let erf = b.node(ops::ERF, "erf", &[&scaled], vec![])?;
    let cdf2 = b.node(ops::ADD, "add_one", &[&erf, &one], vec![])?;
    b.node(ops::MUL, "mul", &[&half_x, &cdf2], vec![])
}
