//! swish: x * sigmoid(beta * x).

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind, Scale, bias_input};
use super::numeric::{finite, logit, sigmoid};
use super::params::Param;
use super::smooth;

/// ONNX Swish (a function op from opset 24).
pub const SWISH: OpVersion = OpVersion::new("Swish", 24, 24);
/// com.microsoft QuickGelu, x * sigmoid(alpha * x) (onnxruntime contrib ops, from memory).
pub const QUICK_GELU: OpVersion = OpVersion::new("QuickGelu", 1, 1);

pub const KIND: Kind = Kind {
    id: "swish",
    title: "Swish (x * sigmoid(beta * x))",
    params: &[Param {
        name: "beta",
        default: 1.0,
        per_channel: true,
        doc: "slope inside the sigmoid; ONNX Swish calls it alpha",
    }],
    reference: |x, p| x * sigmoid(p[0] * x),
    recover: recover_beta,
    breakpoints: smooth,
    fused: &[
        FusedOp::standard(
            24,
            SWISH,
            "function op, attribute alpha = beta (default 1.0) (ONNX Swish schema); tract \
             0.23.9 ignores alpha and runs alpha = 1",
        )
        .attrs(&[AttrParam { attr: "alpha", param: 0, default: 1.0 }]),
        FusedOp::vendor(
            "com.microsoft",
            1,
            QUICK_GELU,
            "x * sigmoid(alpha * x), attribute alpha default 1.702 (from memory)",
        )
        .attrs(&[AttrParam { attr: "alpha", param: 0, default: 1.702 }])
        .read(bias_input),
    ],
    formula: "f(x) = x * sigmoid(beta * x)",
    source: "Ramachandran, Zoph & Le 2017, 'Searching for Activation Functions', \
             arXiv:1710.05941 (beta -> 0 gives x/2, beta -> inf gives ReLU)",
    forms: &[
        "fused: Swish(x; alpha = beta) (opset 24; scalar beta only)",
        "primitive: Mul(x, Sigmoid(Mul(x, beta))) (opset 7), beta a scalar or the per-channel \
         tensor",
        "also seen: beta as a [C] or [1, C, 1, 1] initializer (one value per channel)",
    ],
    example: "A fish-species sonar classifier (invented) learned beta = 1.702 for its \
              head: swish(1; 1.702) = 0.8457957659328212.",
    numeric_notes: "Derivative f' = beta * f + sigmoid(beta * x) * (1 - beta * f). Recovery: \
                    beta = logit(f(t) / t) / t at t = 1, with t shrunk when |beta| is large so \
                    that sigmoid(beta * t) stays away from 0 and 1. Scale: f(x; beta) = \
                    f(beta * x; 1) / beta, so fitted forms of every beta > 0 are rescaled \
                    fits of SiLU.",
    piecewise_linear: false,
    // x * sigmoid(beta x) = (beta x) * sigmoid(beta x) / beta: swish is SiLU rescaled.
    scale: Some(Scale::Factor {
        factor: |p| p[0],
        base: &[1.0],
    }),
    primitive,
};

/// beta = logit(f(t) / t) / t, retried at a smaller t until |beta * t| <= 4 (well conditioned).
pub fn recover_beta(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let mut t = 1.0;
    for _ in 0..8 {
        let s = finite(f, t)? / t;
        if !(0.0..=1.0).contains(&s) {
            return None;
        }
        if s == 0.0 || s == 1.0 {
            // sigmoid(beta * t) saturated: |beta| is above ~37 / t.
            t /= 64.0;
            continue;
        }
        let beta = logit(s) / t;
        if (beta * t).abs() <= 4.0 {
            return Some(vec![beta]);
        }
        t = 1.0 / beta.abs();
    }
    None
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let beta = b.param(0, "beta");
    let x = b.input();
    let scaled = b.node(ops::MUL, "mul_beta", &[x, &beta], vec![])?;
    let s = b.node(ops::SIGMOID, "sigmoid", &[&scaled], vec![])?;
    b.node(ops::MUL, "mul", &[x, &s], vec![])
}
