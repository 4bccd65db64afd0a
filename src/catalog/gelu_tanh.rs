//! gelu_tanh: the tanh approximation of GELU.

use std::f64::consts::{FRAC_1_SQRT_2, FRAC_2_SQRT_PI};

use super::emit::{Builder, OpVersion, Unavailable, ops};
use super::gelu::GELU;
use super::kind::{Fixed, FusedOp, Kind, bias_input};
use super::numeric::sigmoid;
use super::{nothing_to_recover, smooth};

/// sqrt(2 / pi).
const SQRT_2_OVER_PI: f64 = FRAC_2_SQRT_PI * FRAC_1_SQRT_2;

pub const KIND: Kind = Kind {
    id: "gelu_tanh",
    title: "GELU, tanh approximation",
    params: &[],
    reference,
    recover: nothing_to_recover,
    breakpoints: smooth,
    fused: &[
        FusedOp::standard(20, GELU, "approximate = \"tanh\" (ONNX Gelu schema)")
            .fixed(&[Fixed::Str { attr: "approximate", value: "tanh", default: "none" }]),
        FusedOp::vendor(
            "com.microsoft",
            1,
            OpVersion::new("FastGelu", 1, 1),
            "the tanh approximation, of x + bias when the optional bias input is given \
             (from memory)",
        )
        .read(bias_input),
    ],
    formula: "f(x) = 0.5 * x * (1 + tanh(sqrt(2/pi) * (x + 0.044715 * x^3)))",
    source: "Hendrycks & Gimpel 2016, 'Gaussian Error Linear Units (GELUs)', arXiv:1606.08415; \
             ONNX operator schema Gelu (opset 20, approximate = \"tanh\")",
    forms: &[
        "fused: Gelu(x; approximate = \"tanh\") (opset 20)",
        "primitive: Mul(Mul(x, 0.5), Add(Tanh(Mul(Add(x, Mul(Mul(Mul(x, x), x), 0.044715)), \
         0.7978846)), 1)) (opset 7); x^3 as two Mul, since some runtimes lack a float Pow",
        "also seen: x^3 as Pow(x, 3)",
    ],
    example: "A recipe-step language model (invented) uses the tanh form in every block: \
              gelu_tanh(1) = 0.8411919906082768.",
    numeric_notes: "Evaluated as x * sigmoid(2z), z = sqrt(2/pi) * (x + 0.044715 x^3), since \
                    0.5 * (1 + tanh z) = sigmoid(2z) (an identity); this avoids the \
                    cancellation of 1 + tanh z for negative x. Differs from exact GELU by at \
                    most 4.7323552e-4, at x = +-2.69894.",
    piecewise_linear: false,
    scale: None,
    primitive,
};

fn reference(x: f64, _: &[f64]) -> f64 {
    let z = SQRT_2_OVER_PI * (x + 0.044715 * x * x * x);
    x * sigmoid(2.0 * z)
}

fn primitive(b: &mut Builder) -> Result<String, Unavailable> {
    let x = b.input();
    let (cubic, scale, half, one) = (
        b.constant("cubic", 0.044715),
        b.constant("sqrt_2_over_pi", SQRT_2_OVER_PI),
        b.constant("half", 0.5),
        b.constant("one", 1.0),
    );
    // x + 0.044715 * x^3; x^3 may overflow to +-inf, which Tanh takes to +-1.
    let x2 = b.node(ops::MUL, "square", &[x, x], vec![])?;
    let x3 = b.node(ops::MUL, "cube", &[&x2, x], vec![])?;
    let term = b.node(ops::MUL, "mul_cubic", &[&x3, &cubic], vec![])?;
    let inner = b.node(ops::ADD, "add_x", &[x, &term], vec![])?;
    let z = b.node(ops::MUL, "mul_scale", &[&inner, &scale], vec![])?;
    let t = b.node(ops::TANH, "tanh", &[&z], vec![])?;
    let factor = b.node(ops::ADD, "add_one", &[&t, &one], vec![])?;
    let half_x = b.node(ops::MUL, "mul_half", &[x, &half], vec![])?;
    b.node(ops::MUL, "mul", &[&half_x, &factor], vec![])
}
