//! mish: x * tanh(softplus(x)).

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{FusedOp, Kind};
use super::numeric::softplus;
use super::softplus::stable as stable_softplus;
use super::{nothing_to_recover, smooth};

pub const KIND: Kind = Kind {
    id: "mish",
    title: "Mish",
    params: &[],
    reference: |x, _| x * softplus(x).tanh(),
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[FusedOp::standard(
        18,
        OpVersion::new("Mish", 18, 22),
        "versions 18, 22; function body Softplus, Tanh, Mul (ONNX Mish schema)",
    )],
    formula: "f(x) = x * tanh(softplus(x)) = x * tanh(ln(1 + exp(x)))",
    source: "Misra 2019, 'Mish: A Self Regularized Non-Monotonic Activation Function', \
             arXiv:1908.08681; ONNX operator schema Mish",
    forms: &[
        "fused: Mish(x) (opset 18)",
        "primitive: Mul(x, Tanh(Add(Relu(x), Log(Add(Exp(Neg(Abs(x))), 1))))) (opset 7), \
         softplus in the form that never overflows",
        "also seen: Mul(x, Tanh(Softplus(x))), Softplus as Log(Add(Exp(x), 1))",
    ],
    example: "A bird-song species tagger (invented) uses Mish: \
              mish(1) = 0.8650983882673103, mish(-1) = -0.3034014613741089.",
    numeric_notes: "Softplus in its stable form. The ONNX body's naive softplus overflows in \
                    float32 above 88.72, where tanh(inf) = 1 still gives x. Minimum \
                    -0.308843413017 at x = -1.192431217807.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    let sp = stable_softplus(b, x)?;
    let t = b.node(ops::TANH, "tanh", &[&sp], vec![])?;
    b.node(ops::MUL, "mul", &[x, &t], vec![])
}
