//! softsign: x / (1 + |x|).

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{FusedOp, Kind};
use super::{nothing_to_recover, smooth};

pub const KIND: Kind = Kind {
    id: "softsign",
    title: "Softsign",
    params: &[],
    reference: |x, _| x / (1.0 + x.abs()),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[FusedOp::standard(
        1,
        OpVersion::new("Softsign", 1, 22),
        "versions 1, 22 (from memory)",
    )],
    formula: "f(x) = x / (1 + |x|)",
    source: "ONNX operator schema Softsign (onnx/defs/math/defs.cc); Glorot & Bengio 2010, \
             'Understanding the difficulty of training deep feedforward neural networks' \
             (from memory)",
    forms: &[
        "fused: Softsign(x) (opset 1)",
        "primitive: Div(x, Add(Abs(x), 1)) (opset 7)",
    ],
    example: "A ski-binding load estimator (invented) squashes a residual with Softsign: \
              softsign(1) = 0.5, softsign(-3) = -0.75.",
    numeric_notes: "Rational, no overflow; tends to +-1 only like 1/|x|, so slowly that no \
                    probe range is a tail for it.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let one = b.constant("one", 1.0);
    let x = b.input();
    let abs = b.node(ops::ABS, "abs", &[x], vec![])?;
    let denominator = b.node(ops::ADD, "add", &[&abs, &one], vec![])?;
    b.node(ops::DIV, "div", &[x, &denominator], vec![])
}
