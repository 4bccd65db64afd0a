//! selu: gamma * elu(x; alpha).

use super::elu::exp_m1_of_negative_part;
use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::kind::{AttrParam, FusedOp, Kind};
use super::numeric::finite;
use super::params::Param;

#[allow(clippy::excessive_precision)] // the ONNX defaults, digits as the spec writes them
pub const KIND: Kind = Kind {
    id: "selu",
    title: "SELU (scaled exponential linear unit)",
    params: &[
        Param {
            name: "alpha",
            default: 1.67326319217681884765625,
            per_channel: false,
            doc: "negative-branch scale; the ONNX default is the float32 rounding of the \
                  paper's 1.6732632423543772848170429916717",
        },
        Param {
            name: "gamma",
            default: 1.05070102214813232421875,
            per_channel: false,
            doc: "overall scale; the ONNX default is the float32 rounding of the paper's \
                  1.0507009873554804934193349852946",
        },
    ],
    reference,
    recover,
    breakpoints: |_| vec![0.0],
    fused: &[FusedOp::standard(
        6,
        OpVersion::new("Selu", 6, 22),
        "versions 6, 22 (ONNX Selu schema); an opset-1 form with the legacy \
         consumed_inputs attribute existed (from memory)",
    )
    .attrs(&[
        AttrParam { attr: "alpha", param: 0, default: 1.67326319217681884765625 },
        AttrParam { attr: "gamma", param: 1, default: 1.05070102214813232421875 },
    ])],
    formula: "f(x) = gamma * x for x > 0, gamma * alpha * (exp(x) - 1) for x <= 0",
    source: "Klambauer, Unterthiner, Mayr & Hochreiter 2017, 'Self-Normalizing Neural \
             Networks', arXiv:1706.02515 (constants as given in the PyTorch docs); ONNX operator \
             schema Selu (defaults are float32 values)",
    forms: &[
        "fused: Selu(x; alpha, gamma) (opset 6)",
        "primitive: Add(Mul(Relu(x), gamma), Mul(Sub(Exp(Min(x, 0)), 1), gamma * alpha)) \
         (opset 8)",
        "also seen: Mul(gamma, Where(Greater(x, 0), x, Mul(alpha, Sub(Exp(x), 1))))",
    ],
    example: "A tabular credit-default scorer (invented) stacks dense layers with Selu: \
              selu(1) = 1.0507009873554805, selu(-1) = -1.1113307378125625 with the \
              paper's constants.",
    numeric_notes: "The ONNX defaults differ from the paper's constants by -5.0e-8 (alpha) and \
                    +3.5e-8 (gamma); recovery reports whichever the model holds. Recovery: \
                    gamma = f(1), alpha = f(-1) / (gamma * (e^-1 - 1)). With gamma = 1 the \
                    function is elu and is reported as elu.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn reference(x: f64, p: &[f64]) -> f64 {
    let (alpha, gamma) = (p[0], p[1]);
    gamma * if x > 0.0 { x } else { alpha * x.exp_m1() }
}

fn recover(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    let gamma = finite(f, 1.0)?;
    let alpha = finite(f, -1.0)? / (gamma * (-1.0f64).exp_m1());
    (gamma != 0.0 && alpha.is_finite()).then(|| vec![alpha, gamma])
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let (alpha, gamma) = (b.scalar(0)?, b.scalar(1)?);
    // One constant gamma * alpha: one rounding fewer on the negative branch.
    let (gamma_c, scale) = (
        b.constant("gamma", gamma),
        b.constant("gamma_alpha", gamma * alpha),
    );
    let x = b.input();
    let relu = b.node(ops::RELU, "relu", &[x], vec![])?;
    let positive = b.node(ops::MUL, "mul_gamma", &[&relu, &gamma_c], vec![])?;
    let em1 = exp_m1_of_negative_part(b, x)?;
    let negative = b.node(ops::MUL, "mul_gamma_alpha", &[&em1, &scale], vec![])?;
    b.node(ops::ADD, "add", &[&positive, &negative], vec![])
}
