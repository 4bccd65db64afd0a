//! clip: x limited to [min, max].

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{FusedNode, FusedOp, Kind, Reading};
use super::numeric::finite;
use super::params::{Param, Params};
use crate::onnx::attrs;

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
    fused: &[FusedOp::standard(
        6,
        OpVersion::new("Clip", 6, 13),
        "min/max are attributes at opsets 6-10 and optional scalar inputs from opset 11; \
         since 13, min > max sets every output to max (ONNX Clip schema)",
    )
    .read(read)
    .write(fused)],
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
    scale: None,
    primitive,
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

/// A Clip node's bounds: `None` where a side is unbounded (absent, or beyond float32's range).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Bounds {
    Known(Option<f64>, Option<f64>),
    /// A bound is an input computed at run time.
    Runtime,
}

/// Reads a Clip node's bounds: attributes before opset 11, optional constant inputs from 11.
pub fn bounds(node: &FusedNode) -> Option<Bounds> {
    let (lo, hi) = if node.opset < 11 {
        (
            attrs::float(node.node, "min"),
            attrs::float(node.node, "max"),
        )
    } else {
        let bound = |i: usize| -> Result<Option<f64>, ()> {
            match node.node.input.get(i).map(String::as_str) {
                None | Some("") => Ok(None),
                Some(_) => match (node.constant)(i) {
                    Some(c) if c.values.len() == 1 => Ok(Some(c.values[0])),
                    _ => Err(()),
                },
            }
        };
        match (bound(1), bound(2)) {
            (Ok(lo), Ok(hi)) => (lo, hi),
            _ => return Some(Bounds::Runtime),
        }
    };
    Some(Bounds::Known(
        lo.filter(|v| *v > f32::MIN as f64),
        hi.filter(|v| *v < f32::MAX as f64),
    ))
}

/// Any Clip the special cases (relu, relu6) did not claim.
fn read(node: &FusedNode, r: Reading) -> Option<Reading> {
    Some(match bounds(node)? {
        Bounds::Known(lo, hi) => Reading {
            params: Some(Params::scalars(&[
                lo.unwrap_or(f64::NEG_INFINITY),
                hi.unwrap_or(f64::INFINITY),
            ])),
            ..r
        },
        Bounds::Runtime => {
            let mut r = r;
            r.params = None;
            r.notes.push("a bound is computed at run time".into());
            r.rewritable = false;
            r
        }
    })
}

fn fused(b: &mut Builder) -> Result<String, Unavailable> {
    let (min, max) = (b.scalar(0)?, b.scalar(1)?);
    let x = b.input();
    b.clip("clip", x, min, max)
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (min, max) = (b.param(0, "min"), b.param(1, "max"));
    let x = b.input();
    let lower = b.node(ops::MAX, "max", &[x, &min], vec![])?;
    b.node(ops::MIN, "min", &[&lower, &max], vec![])
}
