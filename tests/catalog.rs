//! The activation catalogue against outside sources: published formulas and check values, the
//! ONNX operator schemas, and worst-case errors of the standard approximations.
//!
//! Every check names its source. Check values with more digits than a paper prints were computed
//! with Python's `math` module in double precision from the formula of the cited paper or ONNX
//! schema.

// Check values keep the digits their sources give.
#![allow(clippy::excessive_precision)]

mod ladder;

use actswap::catalog::substitute::{ErrorBound, max_abs_error, rules};
use actswap::catalog::{Kind, get, identify};
use ladder::Tol;

fn kind(id: &str) -> &'static Kind {
    get(id).unwrap_or_else(|| panic!("no kind {id}"))
}

fn eval(id: &str, x: f64, p: &[f64]) -> f64 {
    kind(id).eval(x, p)
}

fn close(got: f64, want: f64, tol: Tol, what: &str) {
    if let Some(problem) = tol.check(0.0, got, want) {
        panic!("{what}: {problem} ({tol:?})");
    }
}

/// Central difference with one Richardson step: error O(h^4) plus rounding ~eps * |f| / h.
fn derivative(f: impl Fn(f64) -> f64, x: f64) -> f64 {
    let d = |h: f64| (f(x + h) - f(x - h)) / (2.0 * h);
    let h = 1e-3;
    (4.0 * d(h / 2.0) - d(h)) / 3.0
}

#[test]
fn swish_and_silu_check_values() {
    // Elfwing et al. 2017, arXiv:1702.03118 (SiLU minimum); the minimum is
    // at x* = -1 - W(1/e), where f(x*) = x* + 1.
    let x_min = -1.2784645427610738;
    close(
        eval("silu", x_min, &[]),
        -0.2784645427610738,
        Tol::Digits(12),
        "silu(x*)",
    );
    close(
        eval("swish", x_min, &[1.0]),
        -0.2784645427610738,
        Tol::Digits(12),
        "swish(x*; 1)",
    );
    close(
        derivative(|x| eval("silu", x, &[]), x_min),
        0.0,
        Tol::Digits(10),
        "silu'(x*)",
    );
    // Ramachandran et al. 2017, arXiv:1710.05941 (swish, beta = 1), evaluated with Python's math.
    close(
        eval("silu", 1.0, &[]),
        0.7310585786300049,
        Tol::Digits(12),
        "silu(1)",
    );
    close(
        eval("silu", -1.0, &[]),
        -0.2689414213699951,
        Tol::Digits(12),
        "silu(-1)",
    );
    close(
        eval("swish", 1.0, &[1.0]),
        0.7310585786300049,
        Tol::Digits(12),
        "swish(1; 1)",
    );
    close(
        eval("swish", -1.0, &[1.0]),
        -0.2689414213699951,
        Tol::Digits(12),
        "swish(-1; 1)",
    );
}

#[test]
fn swish_derivative_by_central_difference() {
    // Ramachandran et al. 2017, arXiv:1710.05941, f' = f + s(x)(1 - f) for
    // beta = 1: f'(0) = 0.5, f'(2) = 1.0907842488 (given to 10 decimals).
    let f = |x| eval("swish", x, &[1.0]);
    close(derivative(f, 0.0), 0.5, Tol::Digits(10), "swish'(0)");
    close(
        derivative(f, 2.0),
        1.0907842488,
        Tol::Digits(10),
        "swish'(2)",
    );
}

#[test]
fn swish_limits_in_beta() {
    // Ramachandran et al. 2017, arXiv:1710.05941 sec. 4 (from memory):
    // beta -> 0 gives x / 2, beta -> inf gives ReLU.
    for i in -80..=80 {
        let x = f64::from(i) / 8.0;
        close(
            eval("swish", x, &[0.0]),
            x / 2.0,
            Tol::Identical,
            "swish(x; 0)",
        );
        // x * sigmoid(b x) = x/2 + b x^2 / 4 + O(b^3 x^4).
        close(
            eval("swish", x, &[1e-9]),
            x / 2.0,
            Tol::Derived(1e-9 * x * x / 4.0 + 1e-12),
            "swish(x; 1e-9)",
        );
        if x != 0.0 {
            close(
                eval("swish", x, &[1e9]),
                eval("relu", x, &[]),
                Tol::Digits(12),
                "swish(x; 1e9)",
            );
        }
    }
}

#[test]
fn gelu_check_values() {
    // Hendrycks & Gimpel 2016, arXiv:1606.08415; ONNX Gelu (opset 20).
    close(
        eval("gelu", 1.0, &[]),
        0.8413447460685429,
        Tol::Digits(12),
        "gelu(1)",
    );
    close(
        eval("gelu", -1.0, &[]),
        -0.1586552539314571,
        Tol::Digits(12),
        "gelu(-1)",
    );
    close(
        eval("gelu_tanh", 1.0, &[]),
        0.8411919906082768,
        Tol::Digits(12),
        "gelu_tanh(1)",
    );
    close(
        eval("swish", 1.0, &[1.702]),
        0.8457957659328212,
        Tol::Digits(12),
        "x s(1.702 x) at 1",
    );
    // GELU minimum -0.16997120748 at -0.75179152604: Hendrycks & Gimpel's formula minimized
    // numerically in double precision (11 digits kept).
    let x_min = -0.75179152604;
    close(
        eval("gelu", x_min, &[]),
        -0.16997120748,
        Tol::Derived(5e-12),
        "gelu(x_min)",
    );
    close(
        derivative(|x| eval("gelu", x, &[]), x_min),
        0.0,
        Tol::Digits(9),
        "gelu'(x_min)",
    );
}

#[test]
fn gelu_tanh_equals_the_tanh_formula() {
    // 0.5 (1 + tanh z) = s(2z) (an identity of tanh); the formula of Hendrycks & Gimpel 2016,
    // arXiv:1606.08415 with sqrt(2/pi) and 0.044715, evaluated as written.
    let c = (2.0 / std::f64::consts::PI).sqrt();
    for i in -400..=400 {
        let x = f64::from(i) / 40.0;
        let written = 0.5 * x * (1.0 + (c * (x + 0.044715 * x.powi(3))).tanh());
        close(
            eval("gelu_tanh", x, &[]),
            written,
            Tol::Derived(4e-16 * (1.0 + x.abs())),
            "gelu_tanh",
        );
    }
}

#[test]
fn mish_check_values() {
    // Misra 2019, arXiv:1908.08681, evaluated with Python's math.
    close(
        eval("mish", 1.0, &[]),
        0.8650983882673103,
        Tol::Digits(12),
        "mish(1)",
    );
    close(
        eval("mish", -1.0, &[]),
        -0.3034014613741089,
        Tol::Digits(12),
        "mish(-1)",
    );
    // Minimum -0.308843413017 at -1.192431217807: Misra's formula minimized numerically in
    // double precision (12 digits kept).
    let x_min = -1.192431217807;
    close(
        eval("mish", x_min, &[]),
        -0.308843413017,
        Tol::Derived(5e-13),
        "mish(x_min)",
    );
    close(
        derivative(|x| eval("mish", x, &[]), x_min),
        0.0,
        Tol::Digits(9),
        "mish'(x_min)",
    );
}

#[test]
fn hard_swish_check_values() {
    // Howard et al. 2019, arXiv:1905.02244 (x * ReLU6(x + 3) / 6) and the
    // ONNX HardSwish formula x * max(0, min(1, x / 6 + 0.5)).
    close(
        eval("hard_swish", 1.0, &[1.0]),
        2.0 / 3.0,
        Tol::Digits(12),
        "hard_swish(1)",
    );
    for i in -80..=80 {
        let x = f64::from(i) / 10.0;
        let onnx = x * (x / 6.0 + 0.5).clamp(0.0, 1.0);
        let paper = x * (x + 3.0).clamp(0.0, 6.0) / 6.0;
        close(
            eval("hard_swish", x, &[1.0]),
            onnx,
            Tol::Digits(15),
            "hard_swish vs ONNX",
        );
        close(
            eval("hard_swish", x, &[1.0]),
            paper,
            Tol::Digits(15),
            "hard_swish vs paper",
        );
        // ONNX HardSwish function body: HardSigmoid(alpha = 1/6, beta = 0.5), Mul.
        let body = x * eval("hard_sigmoid", x, &[1.0 / 6.0, 0.5]);
        close(
            eval("hard_swish", x, &[1.0]),
            body,
            Tol::Digits(15),
            "hard_swish vs body",
        );
    }
}

#[test]
fn exponential_family_check_values() {
    // Clevert et al. 2015, arXiv:1511.07289; ONNX Elu (alpha = 1).
    close(
        eval("elu", -1.0, &[1.0]),
        -0.6321205588285577,
        Tol::Digits(12),
        "elu(-1)",
    );
    close(eval("elu", 2.0, &[1.0]), 2.0, Tol::Digits(12), "elu(2)");
    // Klambauer et al. 2017, arXiv:1706.02515, constants per PyTorch docs.
    let paper = [
        1.6732632423543772848170429916717,
        1.0507009873554804934193349852946,
    ];
    close(
        eval("selu", -1.0, &paper),
        -1.1113307378125625,
        Tol::Digits(12),
        "selu(-1)",
    );
    close(
        eval("selu", 1.0, &paper),
        1.0507009873554805,
        Tol::Digits(12),
        "selu(1)",
    );
    // ONNX Celu formula, celu(-1, alpha = 2), evaluated with Python's math.
    close(
        eval("celu", -1.0, &[2.0]),
        -0.7869386805747332,
        Tol::Digits(12),
        "celu(-1; 2)",
    );
    for i in -60..=60 {
        let x = f64::from(i) / 10.0;
        // ONNX Celu function body Div, Elu, Mul: alpha * elu(x / alpha).
        for a in [0.5, 1.0, 2.0] {
            let body = a * eval("elu", x / a, &[1.0]);
            close(eval("celu", x, &[a]), body, Tol::Digits(15), "celu vs body");
        }
    }
}

#[test]
fn softplus_sigmoid_and_friends() {
    // ONNX Softplus ln(exp(x) + 1): softplus(0) = ln 2.
    close(
        eval("softplus", 0.0, &[]),
        std::f64::consts::LN_2,
        Tol::Digits(12),
        "softplus(0)",
    );
    // Common practice: the stable forms stay finite where exp overflows.
    assert_eq!(eval("softplus", 1000.0, &[]), 1000.0);
    assert_eq!(eval("sigmoid", 1000.0, &[]), 1.0);
    assert_eq!(eval("sigmoid", -1000.0, &[]), 0.0);
    // ONNX Sigmoid 1 / (1 + exp(-x)) at 0.
    close(
        eval("sigmoid", 0.0, &[]),
        0.5,
        Tol::Digits(12),
        "sigmoid(0)",
    );
    for i in -60..=60 {
        let x = f64::from(i) / 4.0;
        let onnx = 1.0 / (1.0 + (-x).exp());
        close(
            eval("sigmoid", x, &[]),
            onnx,
            Tol::Digits(16),
            "sigmoid vs ONNX",
        );
        close(
            eval("softplus", x, &[]),
            (x.exp() + 1.0).ln(),
            Tol::Digits(14),
            "softplus vs ONNX",
        );
        // ONNX Softsign x / (1 + |x|), Tanh (common practice: the formulas of the ONNX schemas).
        close(
            eval("softsign", x, &[]),
            x / (1.0 + x.abs()),
            Tol::Identical,
            "softsign",
        );
        close(eval("tanh", x, &[]), x.tanh(), Tol::Identical, "tanh");
    }
}

#[test]
fn piecewise_kinds_follow_the_onnx_formulas() {
    // ONNX operator schemas: LeakyRelu (alpha * x below 0), ThresholdedRelu (x above alpha,
    // strictly), HardSigmoid max(0, min(1, a x + b)), Clip (min > max gives max, opset 13).
    close(
        eval("leaky_relu", -1.0, &[0.01]),
        -0.01,
        Tol::Digits(12),
        "leaky_relu(-1)",
    );
    assert_eq!(eval("thresholded_relu", 1.0, &[1.0]), 0.0);
    assert_eq!(eval("thresholded_relu", 1.5, &[1.0]), 1.5);
    close(
        eval("hard_sigmoid", 1.0, &[0.2, 0.5]),
        0.7,
        Tol::Digits(12),
        "hard_sigmoid(1)",
    );
    assert_eq!(eval("hard_sigmoid", 3.0, &[0.2, 0.5]), 1.0);
    assert_eq!(eval("clip", 5.0, &[2.0, 1.0]), 1.0);
    assert_eq!(eval("clip", -5.0, &[2.0, 1.0]), 1.0);
    for i in -80..=80 {
        let x = f64::from(i) / 8.0;
        assert_eq!(eval("relu6", x, &[]), eval("clip", x, &[0.0, 6.0]));
        assert_eq!(eval("prelu", x, &[0.25]), eval("leaky_relu", x, &[0.25]));
        assert_eq!(eval("relu", x, &[]), x.max(0.0));
    }
}

#[test]
fn onnx_spec_defaults() {
    // ONNX operator schemas (attribute defaults).
    let default = |id: &str, name: &str| {
        let k = kind(id);
        k.params[k.param_index(name).unwrap()].default
    };
    assert_eq!(default("hard_sigmoid", "alpha"), 0.2);
    assert_eq!(default("hard_sigmoid", "beta"), 0.5);
    assert_eq!(default("leaky_relu", "alpha"), 0.01);
    assert_eq!(default("elu", "alpha"), 1.0);
    assert_eq!(default("thresholded_relu", "alpha"), 1.0);
    assert_eq!(default("celu", "alpha"), 1.0);
    assert_eq!(default("swish", "beta"), 1.0); // ONNX Swish alpha default 1.0
    // Selu's defaults are the float32 roundings of the paper's constants.
    assert_eq!(default("selu", "alpha"), 1.67326319217681884765625);
    assert_eq!(default("selu", "gamma"), 1.05070102214813232421875);
    assert_eq!(
        default("selu", "alpha"),
        f64::from(1.6732632423543772848_f64 as f32)
    );
    assert_eq!(
        default("selu", "gamma"),
        f64::from(1.0507009873554804934_f64 as f32)
    );
    // ONNX Clip: no bound by default, the lowest and highest float32 (from memory).
    assert_eq!(default("clip", "min"), f64::from(f32::MIN));
    assert_eq!(default("clip", "max"), f64::from(f32::MAX));
}

#[test]
fn fused_ops_and_the_opset_that_introduced_them() {
    // ONNX operator schemas (the version history of each op).
    let first = |id: &str| {
        let f = &kind(id).fused[0];
        (f.domain, f.op.op_type, f.introduced)
    };
    assert_eq!(first("hard_swish"), ("", "HardSwish", 14));
    assert_eq!(first("gelu"), ("", "Gelu", 20));
    assert_eq!(first("gelu_tanh"), ("", "Gelu", 20));
    assert_eq!(first("mish"), ("", "Mish", 18));
    assert_eq!(first("celu"), ("", "Celu", 12));
    assert_eq!(first("swish"), ("", "Swish", 24));
    assert_eq!(first("silu"), ("", "Swish", 24));
    assert_eq!(first("thresholded_relu"), ("", "ThresholdedRelu", 10));
    assert_eq!(first("prelu"), ("", "PRelu", 9));
    assert_eq!(first("relu6"), ("", "Clip", 6));
    assert_eq!(first("sigmoid"), ("", "Sigmoid", 1));
    assert_eq!(first("hard_sigmoid"), ("", "HardSigmoid", 1));
    // Vendor-domain GELU ops (from memory): exact erf forms and the tanh form.
    let vendor = |id: &str| -> Vec<&str> {
        kind(id)
            .fused
            .iter()
            .filter(|f| f.domain == "com.microsoft")
            .map(|f| f.op.op_type)
            .collect()
    };
    assert_eq!(vendor("gelu"), ["Gelu", "BiasGelu"]);
    assert_eq!(vendor("gelu_tanh"), ["FastGelu"]);
    assert_eq!(vendor("swish"), ["QuickGelu"]);
}

fn over_reals(from: &str, fp: &[f64], to: &str, tp: &[f64]) -> ErrorBound {
    max_abs_error(
        (kind(from), fp),
        (kind(to), tp),
        f64::NEG_INFINITY,
        f64::INFINITY,
    )
}

#[test]
fn worst_case_errors_over_the_real_line() {
    // Max abs error over R of the two published formulas, found numerically in double precision
    // (digits as kept): Hendrycks & Gimpel 2016 for GELU, its tanh form and x s(1.702 x).
    let e = over_reals("gelu", &[], "gelu_tanh", &[]);
    close(
        e.value,
        4.7323552e-4,
        Tol::Derived(5e-12),
        "tanh-GELU vs GELU",
    );
    close(
        e.at.abs(),
        2.69894,
        Tol::Derived(5e-6),
        "tanh-GELU vs GELU at",
    );
    let e = over_reals("gelu", &[], "swish", &[1.702]);
    close(
        e.value,
        2.0334872e-2,
        Tol::Derived(5e-10),
        "x s(1.702 x) vs GELU",
    );
    close(
        e.at.abs(),
        2.27040,
        Tol::Derived(5e-6),
        "x s(1.702 x) vs GELU at",
    );
    // Howard et al. 2019 hard-swish vs swish, 3 / (1 + e^3) at +-3.
    let e = over_reals("silu", &[], "hard_swish", &[1.0]);
    close(
        e.value,
        0.14227761953270035,
        Tol::Digits(16),
        "hard-swish vs swish",
    );
    close(
        e.value,
        3.0 / (1.0 + 3f64.exp()),
        Tol::Digits(16),
        "hard-swish vs swish, 3/(1+e^3)",
    );
    assert_eq!(e.at.abs(), 3.0);
    let e = over_reals("sigmoid", &[], "hard_sigmoid", &[1.0 / 6.0, 0.5]);
    close(
        e.value,
        0.06918,
        Tol::Derived(5e-6),
        "HardSigmoid(1/6) vs sigmoid",
    );
    close(
        e.at.abs(),
        1.317,
        Tol::Derived(5e-4),
        "HardSigmoid(1/6) vs sigmoid at",
    );
    let e = over_reals("sigmoid", &[], "hard_sigmoid", &[0.2, 0.5]);
    close(
        e.value,
        0.07586,
        Tol::Derived(5e-6),
        "HardSigmoid(0.2) vs sigmoid",
    );
    close(
        e.at.abs(),
        2.5,
        Tol::Derived(5e-4),
        "HardSigmoid(0.2) vs sigmoid at",
    );
}

#[test]
fn unbounded_and_limit_errors_are_detected() {
    // sigmoid -> 1 while relu grows like x (common practice: the limits of both formulas).
    let e = over_reals("sigmoid", &[], "relu", &[]);
    assert_eq!((e.value, e.at), (f64::INFINITY, f64::INFINITY));
    let e = over_reals("leaky_relu", &[0.01], "relu", &[]);
    assert_eq!((e.value, e.at), (f64::INFINITY, f64::NEG_INFINITY));
    // elu -> -alpha as x -> -inf while relu is 0: the sup alpha is approached, not reached.
    let e = over_reals("elu", &[0.7], "relu", &[]);
    close(e.value, 0.7, Tol::Digits(15), "elu vs relu");
    assert_eq!(e.at, f64::NEG_INFINITY);
    // softplus - relu = ln(1 + e^-|x|), largest at 0 (ONNX Softplus formula).
    let e = over_reals("softplus", &[], "relu", &[]);
    assert_eq!((e.value, e.at), (std::f64::consts::LN_2, 0.0));
}

#[test]
fn the_rule_table_carries_the_bounds() {
    let table = rules();
    let bound = |name: &str| {
        let r = table.get(name).unwrap_or_else(|| panic!("no rule {name}"));
        let from = r.from.unwrap();
        r.error_over_reals(from, &from.defaults()).unwrap()
    };
    close(
        bound("gelu-to-tanh").value,
        4.7323552e-4,
        Tol::Derived(5e-12),
        "gelu-to-tanh",
    );
    close(
        bound("gelu-tanh-to-erf").value,
        4.7323552e-4,
        Tol::Derived(5e-12),
        "gelu-tanh-to-erf",
    );
    close(
        bound("gelu-to-sigmoid-1702").value,
        2.0334872e-2,
        Tol::Derived(5e-10),
        "gelu-to-sigmoid-1702",
    );
    close(
        bound("silu-to-hard-swish").value,
        0.14227761953270035,
        Tol::Digits(16),
        "silu-to-hard-swish",
    );
    close(
        bound("sigmoid-to-hard").value,
        0.06918,
        Tol::Derived(5e-6),
        "sigmoid-to-hard",
    );
    close(
        bound("sigmoid-to-hard-0.2").value,
        0.07586,
        Tol::Derived(5e-6),
        "sigmoid-to-hard-0.2",
    );
    // tanh vs Clip(-1, 1): 1 - tanh(1) at x = +-1 (common practice: both formulas).
    close(
        bound("tanh-to-hard-tanh").value,
        1.0 - 1f64.tanh(),
        Tol::Digits(15),
        "tanh-to-hard-tanh",
    );
    let any = table.get("any-to-relu").unwrap();
    let e = any.error_over_reals(kind("gelu"), &[]).unwrap();
    // |gelu - relu| peaks at the GELU minimum (Hendrycks & Gimpel's formula, minimized numerically: -0.16997120748).
    close(e.value, 0.16997120748, Tol::Derived(5e-12), "gelu to relu");
    close(e.at.abs(), 0.75179152604, Tol::Digits(7), "gelu to relu at");
}

#[test]
fn onnx_function_bodies_are_identified() {
    // ONNX operator schemas: function bodies with their float32 constants, evaluated in f64.
    let sixth = f64::from(0.16666667163372f32);
    let hard_swish_body = |x: f64| x * (sixth * x + 0.5).clamp(0.0, 1.0);
    let sqrt2 = f64::from(std::f32::consts::SQRT_2);
    let gelu_body = |x: f64| 0.5 * x * (libm::erf(x / sqrt2) + 1.0);
    let c = f64::from((2.0 / std::f64::consts::PI).sqrt() as f32);
    let k = f64::from(0.044715f32);
    let gelu_tanh_body = |x: f64| 0.5 * x * ((c * (x + k * x.powi(3))).tanh() + 1.0);
    let mish_body = |x: f64| x * ((x.exp() + 1.0).ln()).tanh();
    let swish_body = |x: f64| x * (1.0 / (1.0 + (-(f64::from(2.5f32)) * x).exp()));
    let cases: [(&dyn Fn(f64) -> f64, &str); 5] = [
        (&hard_swish_body, "hard_swish"),
        (&gelu_body, "gelu"),
        (&gelu_tanh_body, "gelu_tanh"),
        (&mish_body, "mish"),
        (&swish_body, "swish"),
    ];
    for (f, id) in cases {
        assert_eq!(identify(f).map(|(k, _)| k.id), Some(id));
    }
    let (_, beta) = identify(&swish_body).unwrap();
    close(beta[0], 2.5, Tol::Digits(14), "swish beta");
}

#[test]
fn rescaled_swish_bounds_at_any_beta_match_the_formulas() {
    // The bound for swish -> hard-swish with the same beta comes from one rescaled computation
    // (x s(b x) - x relu6(b x + 3) / 6 = (silu(b x) - hard_swish(b x)) / b). Reference: both
    // published formulas in f64 (Ramachandran et al. 2017, arXiv:1710.05941; Howard et al.
    // 2019, arXiv:1905.02244), written here independently, on a dense grid around the
    // quadratic part, where the worst case lies; at beta = 1 it is the 0.1423 of the
    // hard-swish literature's comparison (common practice).
    for beta in [0.25, 0.5, 1.0, 1.702, 4.0] {
        let swish = |x: f64| x / (1.0 + (-beta * x).exp());
        let bound = over_reals("swish", &[beta], "hard_swish", &[beta]);
        bound_is_the_dense_maximum(bound, beta, &|x| {
            swish(x) - x * (beta * x + 3.0).clamp(0.0, 6.0) / 6.0
        });
        close(
            bound.value * beta,
            0.1423,
            Tol::Derived(5e-5),
            "swish vs hard-swish, times beta",
        );
        // ReLU holds at every scale: |x s(b x) - max(0, x)| = |t| s(-b |t|), whose maximum is
        // W(1/e) / b = 0.2784645 / b (W the Lambert function; from memory, checked here on the
        // dense grid).
        let bound = over_reals("swish", &[beta], "relu", &[]);
        bound_is_the_dense_maximum(bound, beta, &|x| swish(x) - x.max(0.0));
        close(
            bound.value * beta,
            0.2784645,
            Tol::Derived(1e-6),
            "swish vs ReLU, times beta",
        );
    }
}

/// `bound` is the maximum of |difference| on a dense grid of [-10, 10] / beta (never below it,
/// at most 1e-9 above).
fn bound_is_the_dense_maximum(bound: ErrorBound, beta: f64, difference: &dyn Fn(f64) -> f64) {
    let dense = (0..=400_000)
        .map(|i| (-10.0 + 20.0 * i as f64 / 400_000.0) / beta)
        .map(|x| difference(x).abs())
        .fold(0.0, f64::max);
    assert!(
        bound.value >= dense * (1.0 - 1e-12) && bound.value <= dense + 1e-9,
        "beta {beta}: bound {} against the dense grid's {dense}",
        bound.value
    );
}
