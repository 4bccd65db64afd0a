//! celu: max(0, x) + min(0, alpha * (e^(x/alpha) - 1)).

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind, Scale};
use super::numeric::{bisect, finite};
use super::params::Param;

/// Celu accepts only float32 until version 28.
const CELU: OpVersion = OpVersion {
    op_type: "Celu",
    since: 12,
    since_f16_f64: 28,
    since_bf16: 28,
};

pub const KIND: Kind = Kind {
    id: "celu",
    title: "CELU (continuously differentiable ELU)",
    params: &[Param {
        name: "alpha",
        default: 1.0,
        per_channel: false,
        doc: "scale of the negative branch, which tends to -alpha; positive",
    }],
    reference,
    recover,
    breakpoints: |_| vec![0.0],
    fused: &[FusedOp::standard(
        12,
        CELU,
        "float32 only; function body Div, Elu, Mul (ONNX Celu schema); \
         tract 0.23.9 computes alpha != 1 wrongly (the expansion omits the multiplication \
         by alpha), so such sites want the primitive form there",
    )
    .attrs(&[AttrParam { attr: "alpha", param: 0, default: 1.0 }])
    .write(fused)],
    formula: "f(x) = max(0, x) + min(0, alpha * (exp(x / alpha) - 1))",
    source: "Barron 2017, 'Continuously Differentiable Exponential Linear Units', \
             arXiv:1704.07483 (from memory); ONNX operator schema Celu",
    forms: &[
        "fused: Celu(x; alpha) (opset 12; float32 only before opset 28)",
        "primitive: Add(Relu(x), Mul(Sub(Exp(Div(Min(x, 0), alpha)), 1), alpha)) (opset 8)",
        "also seen: Mul(alpha, Elu(Div(x, alpha); alpha = 1)) (the ONNX function body)",
    ],
    example: "A glacier-melt emulator (invented) uses Celu(alpha = 2): celu(-1; 2) = \
              -0.7869386805747332.",
    numeric_notes: "celu(x; 1) equals elu(x; 1) and is reported as elu, which ONNX has since \
                    opset 6. Recovery solves alpha * (e^(-1/alpha) - 1) = f(-1), monotone in \
                    alpha > 0, by bisection on log(alpha). Scale: f(x; alpha) = alpha * \
                    f(x / alpha; 1), so fitted forms of every alpha > 0 are rescaled fits of \
                    celu(x; 1).",
    piecewise_linear: false,
    // celu(x; alpha) = alpha * celu(x / alpha; 1), the ONNX Celu function body.
    scale: Some(Scale::Factor {
        factor: |p| 1.0 / p[0],
        base: &[1.0],
    }),
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    let alpha = p[0];
    x.max(0.0) + (alpha * (x / alpha).exp_m1()).min(0.0)
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let y = finite(f, -1.0)?;
    if !(y > -1.0 && y < 0.0) {
        return None;
    }
    // g(alpha) = alpha * expm1(-1 / alpha) falls from ~0 to -1 as alpha grows.
    let g = |log_alpha: f64| {
        let a = log_alpha.exp();
        a * (-1.0 / a).exp_m1()
    };
    let (lo, hi) = bisect((1e-9f64).ln(), (1e12f64).ln(), |t| g(t) < y);
    Some(vec![(lo / 2.0 + hi / 2.0).exp()])
}

fn fused(b: &mut Builder) -> Result<String, Unavailable> {
    b.require(0, |a| a > 0.0, "must be positive")?;
    KIND.fused[0].write_from_table(b)
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    b.require(0, |a| a > 0.0, "must be positive")?;
    let (alpha, zero, one) = (
        b.param(0, "alpha"),
        b.constant("zero", 0.0),
        b.constant("one", 1.0),
    );
    let x = b.input();
    let positive = b.node(ops::RELU, "relu", &[x], vec![])?;
    // Min before Exp: exp(x / alpha) never sees a positive argument, so it cannot overflow.
    let negative = b.node(ops::MIN, "min", &[x, &zero], vec![])?;
    let scaled = b.node(ops::DIV, "div", &[&negative, &alpha], vec![])?;
    let e = b.node(ops::EXP, "exp", &[&scaled], vec![])?;
    let em1 = b.node(ops::SUB, "sub", &[&e, &one], vec![])?;
    let negative = b.node(ops::MUL, "mul", &[&em1, &alpha], vec![])?;
    b.node(ops::ADD, "add", &[&positive, &negative], vec![])
}
