//! log_sigmoid: ln(sigmoid(x)) = -softplus(-x).

use super::emit::{Builder, Unavailable, ops};
use super::kind::Kind;
use super::{nothing_to_recover, numeric, smooth};

pub const KIND: Kind = Kind {
    id: "log_sigmoid",
    title: "Log-sigmoid",
    params: &[],
    reference: |x, _| -numeric::softplus(-x),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[],
    formula: "f(x) = ln(sigmoid(x)) = -softplus(-x) = -ln(1 + exp(-x))",
    source: "PyTorch documentation, torch.nn.LogSigmoid: log(1 / (1 + exp(-x))) (from memory); \
             ln(sigmoid(x)) = -softplus(-x) by algebra",
    forms: &[
        "fused: none (ONNX has no op for it)",
        "primitive: Sub(Min(x, 0), Log(Add(Exp(Neg(Abs(x))), 1))) (opset 8), which never \
         overflows",
        "also seen: Log(Sigmoid(x)) (TorchScript exporter), Neg(Softplus(Neg(x)))",
    ],
    example: "A parcel-locker fraud scorer (invented) keeps log-probabilities with \
              LogSigmoid: log_sigmoid(0) = -ln 2 = -0.6931471805599453.",
    numeric_notes: "Evaluated as -(max(-x, 0) + ln_1p(exp(-|x|))). Log(Sigmoid(x)) is -inf in \
                    float32 below about -103.3, where sigmoid underflows to 0, and \
                    Neg(Softplus(Neg(x))) with the naive softplus below -88.72; the true \
                    value there is x.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

/// Min(x, 0) - Log(1 + Exp(-|x|)): Exp sees only arguments <= 0, so nothing overflows.
fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (zero, one) = (b.constant("zero", 0.0), b.constant("one", 1.0));
    let x = b.input();
    let negative = b.node(ops::MIN, "min", &[x, &zero], vec![])?;
    let abs = b.node(ops::ABS, "abs", &[x], vec![])?;
    let neg = b.node(ops::NEG, "neg", &[&abs], vec![])?;
    let e = b.node(ops::EXP, "exp", &[&neg], vec![])?;
    let e1 = b.node(ops::ADD, "add_one", &[&e, &one], vec![])?;
    let log = b.node(ops::LOG, "log", &[&e1], vec![])?;
    b.node(ops::SUB, "sub", &[&negative, &log], vec![])
}
