//! swish: x * sigmoid(beta * x).

use super::emit::{Builder, EmitCtx, Emitted, FormId, Unavailable, ops};
use super::numeric::{finite, logit, sigmoid};
use super::{FusedOp, Kind, Param, smooth};
use crate::onnx::builder::attr_f;

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
        FusedOp {
            domain: "",
            op_type: "Swish",
            since: 24,
            note: "function op, attribute alpha = beta (default 1.0) (ONNX \
                   Swish schema); tract 0.23.9 ignores alpha and runs alpha = 1",
        },
        FusedOp {
            domain: "com.microsoft",
            op_type: "QuickGelu",
            since: 1,
            note: "x * sigmoid(alpha * x), attribute alpha default 1.702 (from memory)",
        },
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
                    that sigmoid(beta * t) stays away from 0 and 1.",
    piecewise_linear: false,
    fused_form: Some(fused),
    primitive_form: primitive,
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

fn fused(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Fused)?;
    let beta = b.scalar(0)?;
    let attrs = vec![attr_f("alpha", beta as f32)];
    let y = b.node(ops::SWISH, "swish", &[ctx.input], attrs)?;
    b.finish(&y)
}

fn primitive(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Primitive)?;
    let beta = b.param(0, "beta");
    let scaled = b.node(ops::MUL, "mul_beta", &[ctx.input, &beta], vec![])?;
    let s = b.node(ops::SIGMOID, "sigmoid", &[&scaled], vec![])?;
    let y = b.node(ops::MUL, "mul", &[ctx.input, &s], vec![])?;
    b.finish(&y)
}
