//! clip: x limited to [min, max].

use super::emit::{Builder, EmitCtx, Emitted, FormId, Unavailable, ops};
use super::numeric::finite;
use super::{FusedOp, Kind, Param};

/// How far out recovery probes for the bounds; a bound beyond it is taken as absent.
const REACH: f64 = 1e12;
/// ONNX's default bounds: the lowest and highest float32 (no bound).
const NO_BOUND: f64 = f32::MAX as f64;

pub const KIND: Kind = Kind {
    id: "clip",
    title: "Clip (bounded identity)",
    params: &[
        Param {
            name: "min",
            default: -NO_BOUND,
            per_channel: false,
            doc: "lower bound; the ONNX default is the lowest float32 (no bound)",
        },
        Param {
            name: "max",
            default: NO_BOUND,
            per_channel: false,
            doc: "upper bound; the ONNX default is the highest float32 (no bound)",
        },
    ],
    reference,
    recover,
    breakpoints: |p| vec![p[0], p[1]],
    fused: &[FusedOp {
        domain: "",
        op_type: "Clip",
        since: 6,
        note: "min/max are attributes at opsets 6-10 and optional scalar inputs from opset 11; \
               since 13, min > max sets every output to max (ONNX Clip schema)",
    }],
    formula: "f(x) = min(max(x, min), max); every output is max when min > max",
    source: "ONNX operator schema Clip (onnx/defs/math/defs.cc, old.cc)",
    forms: &[
        "fused: Clip(x, min, max) (opset 6 with attributes, constant inputs from 11)",
        "primitive: Min(Max(x, min), max) (opset 8); min > max gives max, as Clip does",
    ],
    example: "A wind-turbine vibration model (invented) bounds a hidden layer with \
              Clip(x, -1, 1): clip(-3; -1, 1) = -1, clip(0.4; -1, 1) = 0.4.",
    numeric_notes: "Exact in every precision. Recovery reads the bounds at x = -1e12 and \
                    x = 1e12; a side that is not clipped there gets the ONNX default \
                    (+-3.4028234663852886e38). A clip with neither bound active is the \
                    identity and is not identified.",
    piecewise_linear: true,
    fused_form: Some(fused),
    primitive_form: primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    let (min, max) = (p[0], p[1]);
    if min > max {
        max
    } else if x < min {
        min
    } else if x > max {
        max
    } else {
        x
    }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let (lo, hi) = (finite(f, -REACH)?, finite(f, REACH)?);
    let unclipped = |y: f64, x: f64| (y - x).abs() <= 1e-9 * REACH;
    let min = if unclipped(lo, -REACH) { -NO_BOUND } else { lo };
    let max = if unclipped(hi, REACH) { NO_BOUND } else { hi };
    (min < max && (min > -NO_BOUND || max < NO_BOUND)).then(|| vec![min, max])
}

fn fused(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Fused)?;
    let (min, max) = (b.scalar(0)?, b.scalar(1)?);
    let y = b.clip("clip", ctx.input, min, max)?;
    b.finish(&y)
}

fn primitive(ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let mut b = Builder::new(ctx, &KIND, FormId::Primitive)?;
    let (min, max) = (b.param(0, "min"), b.param(1, "max"));
    let lower = b.node(ops::MAX, "max", &[ctx.input, &min], vec![])?;
    let y = b.node(ops::MIN, "min", &[&lower, &max], vec![])?;
    b.finish(&y)
}
