//! squared_relu: relu(x)^2.

use super::emit::{Builder, Unavailable, ops};
use super::kind::Kind;
use super::nothing_to_recover;

pub const KIND: Kind = Kind {
    id: "squared_relu",
    title: "Squared ReLU",
    params: &[],
    reference: |x, _| if x > 0.0 { x * x } else { 0.0 },
    recover: nothing_to_recover,
    breakpoints: |_| vec![0.0],
    fused: &[],
    formula: "f(x) = max(0, x)^2",
    source: "So et al. 2021, 'Primer: Searching for Efficient Transformers for Language \
             Modeling', arXiv:2109.08668 (the feed-forward activation of Primer)",
    forms: &[
        "fused: none (ONNX has no op for it)",
        "primitive: Mul(Relu(x), Relu(x)) (opset 7), one Relu read twice",
        "also seen: Pow(Relu(x), 2) (relu(x) ** 2 in PyTorch), Mul(r, r) (torch.square)",
    ],
    example: "A river-barge docking language model (invented) uses squared ReLU in its \
              feed-forward blocks: squared_relu(3) = 9, squared_relu(-2) = 0.",
    numeric_notes: "One rounding of x * x; overflows to +inf in float32 above \
                    sqrt(3.4028235e38) = 1.8446743e19.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    let r = b.node(ops::RELU, "relu", &[x], vec![])?;
    b.node(ops::MUL, "mul", &[&r, &r], vec![])
}
