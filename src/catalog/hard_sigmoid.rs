//! hard_sigmoid: max(0, min(1, alpha * x + beta)).

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind};
use super::numeric::{bisect, finite};
use super::params::Param;

/// Recovery looks for the linear zone within +-REACH.
const REACH: f64 = 1e6;

pub const KIND: Kind = Kind {
    id: "hard_sigmoid",
    title: "Hard sigmoid",
    params: &[
        Param {
            name: "alpha",
            default: 0.2,
            per_channel: false,
            doc: "slope; ONNX default 0.2, PyTorch's Hardsigmoid uses 1/6",
        },
        Param {
            name: "beta",
            default: 0.5,
            per_channel: false,
            doc: "offset",
        },
    ],
    reference,
    recover,
    breakpoints,
    fused: &[FusedOp::standard(
        1,
        OpVersion::new("HardSigmoid", 6, 22),
        "versions 1, 6, 22; alpha default 0.2, beta 0.5 (ONNX HardSigmoid schema)",
    )
    .attrs(&[
        AttrParam { attr: "alpha", param: 0, default: 0.2 },
        AttrParam { attr: "beta", param: 1, default: 0.5 },
    ])],
    formula: "f(x) = max(0, min(1, alpha * x + beta))",
    source: "ONNX operator schema HardSigmoid (onnx/defs/math/defs.cc); PyTorch docs \
             (Hardsigmoid: alpha = 1/6)",
    forms: &[
        "fused: HardSigmoid(x; alpha, beta) (opset 6)",
        "primitive: Clip(Add(Mul(x, alpha), beta), 0, 1) (opset 7; Clip with attributes below \
         11): piecewise-linear ops only",
        "also seen: Max(Min(Add(Mul(x, alpha), beta), 1), 0) (the ONNX function body)",
        "also seen: Div(Clip(Add(x, 3), 0, 6), 6) for alpha = 1/6, beta = 0.5",
    ],
    example: "A solar-panel soiling classifier (invented) gates channels with HardSigmoid: \
              hard_sigmoid(1; 0.2, 0.5) = 0.7, hard_sigmoid(1; 1/6, 0.5) = 2/3.",
    numeric_notes: "The ONNX default (0.2) and PyTorch's (1/6) differ by up to 1/12 (at \
                    x = +-2.5); read alpha from the model. Recovery finds where f crosses 1/2 \
                    by bisection and reads slope and offset from two points inside the linear \
                    zone.",
    piecewise_linear: true,
    scale: None,
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    (p[0] * x + p[1]).clamp(0.0, 1.0)
}

fn breakpoints(p: &[f64]) -> Vec<f64> {
    let (alpha, beta) = (p[0], p[1]);
    if alpha == 0.0 {
        Vec::new()
    } else {
        vec![-beta / alpha, (1.0 - beta) / alpha]
    }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let (left, right) = (finite(f, -REACH)?, finite(f, REACH)?);
    let rising = match (left, right) {
        (0.0, 1.0) => true,
        (1.0, 0.0) => false,
        _ => return None,
    };
    let (lo, hi) = bisect(-REACH, REACH, |x| (f(x) >= 0.5) == rising);
    let mid = lo / 2.0 + hi / 2.0;
    let inside = |x: f64| f(x) > 0.0 && f(x) < 1.0;
    let h = (0..=12)
        .map(|k| 10f64.powi(-k))
        .find(|&h| inside(mid - h) && inside(mid + h))?;
    let (a, b) = (f(mid - h), f(mid + h));
    let alpha = (b - a) / (2.0 * h);
    let beta = (a + b) / 2.0 - alpha * mid;
    Some(vec![alpha, beta])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (alpha, beta) = (b.param(0, "alpha"), b.param(1, "beta"));
    let x = b.input();
    clipped_line(b, x, &alpha, &beta)
}

/// Clip(Add(Mul(x, alpha), beta), 0, 1).
pub(super) fn clipped_line(
    b: &mut Builder,
    x: &str,
    alpha: &str,
    beta: &str,
) -> Result<String, Unavailable> {
    let scaled = b.node(ops::MUL, "mul_alpha", &[x, alpha], vec![])?;
    let shifted = b.node(ops::ADD, "add_beta", &[&scaled, beta], vec![])?;
    b.clip("clip", &shifted, 0.0, 1.0)
}
