//! shrink: the ONNX Shrink family, soft shrink (bias = lambd) and hard shrink (bias = 0).

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind};
use super::numeric::{bisect, finite};
use super::params::Param;

/// How far out recovery looks for the end of the dead zone.
const REACH: f64 = 1e6;

pub const KIND: Kind = Kind {
    id: "shrink",
    title: "Shrink (soft and hard shrinkage)",
    params: &[
        Param {
            name: "lambd",
            default: 0.5,
            per_channel: false,
            doc: "half-width of the zone mapped to 0",
        },
        Param {
            name: "bias",
            default: 0.0,
            per_channel: false,
            doc: "moved towards 0 outside the zone: lambd for soft shrink, 0 for hard shrink",
        },
    ],
    reference,
    recover,
    breakpoints: |p| vec![-p[0], p[0]],
    fused: &[FusedOp::standard(
        9,
        OpVersion::new("Shrink", 9, OpVersion::NEVER),
        "version 9; attributes lambd (default 0.5) and bias (default 0.0); no bfloat16 \
         (ONNX Shrink schema)",
    )
    .attrs(&[
        AttrParam { attr: "lambd", param: 0, default: 0.5 },
        AttrParam { attr: "bias", param: 1, default: 0.0 },
    ])],
    formula: "f(x) = x + bias for x < -lambd, x - bias for x > lambd, 0 otherwise",
    source: "ONNX operator schema Shrink (onnx/defs/math/defs.cc, opset 9); soft shrinkage \
             (bias = lambd) and hard shrinkage (bias = 0) as in the PyTorch docs for \
             Softshrink and Hardshrink",
    forms: &[
        "fused: Shrink(x; lambd, bias) (opset 9)",
        "primitive: Where(Greater(x, lambd), Sub(x, bias), Where(Less(x, -lambd), Add(x, \
         bias), 0)) (opset 9)",
        "also seen: Where(Or(Greater(x, l), Less(x, -l)), x, 0) (hard shrink), Add of two \
         Where (soft shrink), Where(LessOrEqual(Abs(x), l), 0, Sub(x, Mul(Sign(x), l)))",
    ],
    example: "A vibration-denoising autoencoder for wind turbines (invented) soft-shrinks \
              its wavelet coefficients with lambd = 0.5: shrink(2; 0.5, 0.5) = 1.5, \
              shrink(0.3; 0.5, 0.5) = 0, shrink(-2; 0.5, 0) = -2.",
    numeric_notes: "Exact up to the rounding of x -+ bias. Discontinuous at +-lambd unless \
                    bias = lambd. Recovery bisects the end of the dead zone on x > 0 to \
                    adjacent doubles and reads bias = x - f(x) beyond it; lambd = bias = 0 is \
                    the identity and is not identified.",
    piecewise_linear: true,
    scale: None,
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    let (lambd, bias) = (p[0], p[1]);
    if x < -lambd {
        x + bias
    } else if x > lambd {
        x - bias
    } else {
        0.0
    }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    if finite(f, 0.0)? != 0.0 || finite(f, REACH)? == 0.0 {
        return None;
    }
    let (lambd, _) = bisect(0.0, REACH, |x| f(x) != 0.0);
    let x = 2.0 * lambd + 2.0;
    let bias = x - finite(f, x)?;
    (lambd != 0.0 || bias != 0.0).then(|| vec![lambd, bias])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (lambd, bias) = (b.scalar(0)?, b.scalar(1)?);
    let (hi, lo) = (b.constant("lambd", lambd), b.constant("neg_lambd", -lambd));
    let (bias, zero) = (b.constant("bias", bias), b.constant("zero", 0.0));
    let x = b.input();
    let above = b.node(ops::GREATER, "greater", &[x, &hi], vec![])?;
    let below = b.node(ops::LESS, "less", &[x, &lo], vec![])?;
    let down = b.node(ops::SUB, "sub", &[x, &bias], vec![])?;
    let up = b.node(ops::ADD, "add", &[x, &bias], vec![])?;
    let inner = b.node(ops::WHERE, "where_below", &[&below, &up, &zero], vec![])?;
    b.node(ops::WHERE, "where", &[&above, &down, &inner], vec![])
}
