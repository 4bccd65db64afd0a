//! The emitted forms of every kind, run in tract and held to outside references.
//!
//! Sources:
//! - Values: each kind's f64 reference formula from the catalogue, which is the formula of the
//!   ONNX operator schema or paper it cites (the formulas themselves are checked against the
//!   papers' check values in tests/catalog.rs), evaluated with the parameters rounded to float32
//!   as a model stores them; and check values computed with Python's `math` module from the
//!   cited papers' formulas.
//! - Op versions: the ONNX operator schemas.
//! - Running: tract 0.23.9, plain. Its Celu with alpha != 1 and Swish with alpha != 1 are wrong
//!   (TRACT-NOTES, verified against numpy), so those two fused forms run through the project's
//!   runner (`actswap::run`), whose loaders follow the ONNX Celu and Swish formulas and which is
//!   itself checked against the ONNX conformance data in tests/run_conformance.rs.
//!
//! Inputs: x from -12 to 12 in steps of 1/64, plus the float32 extremes +-f32::MAX, +-1e30,
//! +-88.8 (exp overflows above ln(f32::MAX) = 88.72), +-1e-30, 0 and -0. A reference value that
//! is finite in f64 but beyond float32 must come out as the same infinity; no output may be NaN.

// Check values keep the digits their sources give.
#![allow(clippy::excessive_precision)]

mod ladder;

use std::collections::HashMap;
use std::path::{Path, PathBuf};

use ladder::Tol;

use actswap::catalog::emit::{EmitCtx, Emitted, NEWEST_OPSET, OpNeed, Unavailable, min_opset};
use actswap::catalog::{Form, Kind, ParamValue, Params, all, get};
use actswap::onnx::Model;
use actswap::onnx::builder::{Dim, model, opset, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use actswap::onnx::tensor;
use actswap::run::{NamedTensor, prepare};
use tract_onnx::prelude::*;

/// Channels of the per-channel cases, whose input is `[B, C, 4, 4]`.
const CHANNELS: usize = 3;

/// Which loader runs the model.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Runner {
    /// `tract_onnx::onnx()` as it is.
    Tract,
    /// `actswap::run::prepare`, with Celu and Swish loaders that honour alpha.
    Corrected,
}

/// One (kind, form) pair with its test parameters, the rung it needs in tract and why.
struct Case {
    kind: &'static str,
    form: Form,
    params: Vec<ParamValue>,
    tol: Tol,
    why: &'static str,
    runner: Runner,
    /// A runtime op that overflows to +inf for every x above this (said in `why`).
    overflows_above: Option<f32>,
    /// Position in the table.
    index: usize,
}

fn s(v: f64) -> ParamValue {
    ParamValue::Scalar(v)
}

/// A per-channel parameter (a `[1, C, 1, 1]` tensor in the model, see [`ctx`]).
fn per_channel(values: [f64; CHANNELS]) -> ParamValue {
    ParamValue::PerChannel(values.to_vec())
}

/// The ONNX Selu defaults, the float32 roundings of the paper's constants (ONNX Selu schema).
const SELU: [f64; 2] = [1.67326319217681884765625, 1.05070102214813232421875];

#[rustfmt::skip]
fn cases() -> Vec<Case> {
    use Form::{Fused, Primitive};
    use Runner::{Corrected, Tract};
    use Tol::{Approx, Close, Exact, TailFloor};
    let case = |kind, form, params: Vec<ParamValue>, tol, runner, why| Case { kind, form, params, tol, why, runner, overflows_above: None, index: 0 };
    let overflowing = |c: Case, above| Case { overflows_above: Some(above), ..c };
    let table = vec![
        case("relu",             Fused,     vec![],                 Exact,  Tract, "one exact op"),
        case("relu",             Primitive, vec![],                 Exact,  Tract, "Max(x, 0) is exact"),
        case("relu6",            Fused,     vec![],                 Exact,  Tract, "Clip is exact"),
        case("relu6",            Primitive, vec![],                 Exact,  Tract, "Min/Max are exact"),
        case("clip",             Fused,     vec![s(-1.5), s(2.5)],  Exact,  Tract, "Clip is exact"),
        case("clip",             Primitive, vec![s(-1.5), s(2.5)],  Exact,  Tract, "Min/Max are exact"),
        case("leaky_relu",       Fused,     vec![s(0.1)],           Exact,  Tract, "one rounding of alpha * x"),
        case("leaky_relu",       Primitive, vec![s(0.1)],           Exact,  Tract, "one rounding of alpha * x; the other term is 0"),
        case("prelu",            Fused,     vec![s(0.25)],          Exact,  Tract, "one rounding of slope * x"),
        case("prelu",            Primitive, vec![s(0.25)],          Exact,  Tract, "one rounding of slope * x; the other term is 0"),
        case("prelu",            Fused,     vec![per_channel([0.25, 0.1, 1.5])], Exact, Tract, "per channel; 1.5 * -f32::MAX must overflow to -inf"),
        case("prelu",            Primitive, vec![per_channel([0.25, 0.1, 1.5])], Exact, Tract, "per channel; 1.5 * -f32::MAX must overflow to -inf"),
        case("thresholded_relu", Fused,     vec![s(1.3)],           Exact,  Tract, "selects x or 0"),
        case("thresholded_relu", Primitive, vec![s(1.3)],           Exact,  Tract, "selects x or 0"),
        case("hard_sigmoid",     Fused,     vec![s(0.2), s(0.5)],   Close,  Tract, "alpha * x + beta rounds twice"),
        case("hard_sigmoid",     Primitive, vec![s(0.2), s(0.5)],   Close,  Tract, "alpha * x + beta rounds twice"),
        case("hard_sigmoid",     Fused,     vec![s(1.0 / 6.0), s(0.5)], Close, Tract, "PyTorch's slope; two roundings"),
        case("hard_sigmoid",     Primitive, vec![s(1.0 / 6.0), s(0.5)], Close, Tract, "PyTorch's slope; two roundings"),
        overflowing(case("hard_swish", Fused, vec![s(1.0)],        Close,  Tract, "float32 1/6 and three roundings; tract's HardSwish kernel overflows above f32::MAX / 6"), f32::MAX / 6.0),
        case("hard_swish",       Primitive, vec![s(1.0)],           Close,  Tract, "float32 1/6 and three roundings"),
        case("hard_swish",       Primitive, vec![per_channel([0.5, 1.0, 1.702])], Close, Tract, "per channel: beta / 6 rounded to float32, three roundings"),
        case("elu",              Fused,     vec![s(0.7)],           Close,  Tract, "exp(x) - 1 cancels near 0: absolute error ~alpha * 6e-8"),
        case("elu",              Primitive, vec![s(0.7)],           Close,  Tract, "exp(x) - 1 cancels near 0: absolute error ~alpha * 6e-8"),
        case("selu",             Fused,     SELU.map(s).to_vec(),   Close,  Tract, "as elu, scaled by gamma"),
        case("selu",             Primitive, SELU.map(s).to_vec(),   Close,  Tract, "as elu, scaled by gamma; gamma * alpha rounded once"),
        case("celu",             Fused,     vec![s(1.5)],           Close,  Corrected, "as elu; plain tract drops the factor alpha"),
        case("celu",             Primitive, vec![s(1.5)],           Close,  Tract, "as elu, plus the rounding of x / alpha"),
        case("sigmoid",          Fused,     vec![],                 Close,  Tract, "tract's rational sigmoid, saturating at 4.8e-7 from 0 or 1"),
        case("sigmoid",          Primitive, vec![],                 Close,  Tract, "the same Sigmoid op"),
        case("tanh",             Fused,     vec![],                 Close,  Tract, "tract's rational tanh, saturating at 6.1e-7 from +-1"),
        case("tanh",             Primitive, vec![],                 Close,  Tract, "the same Tanh op"),
        overflowing(case("softplus", Fused, vec![],                Close,  Tract, "rounding of 1 + e; tract follows the ONNX function body ln(exp(x) + 1), inf above ln(f32::MAX) = 88.72"), 88.7228),
        case("softplus",         Primitive, vec![],                 Close,  Tract, "ln(1 + e) rounds 1 + e: absolute error ~6e-8"),
        case("softsign",         Fused,     vec![],                 Close,  Tract, "two roundings"),
        case("softsign",         Primitive, vec![],                 Close,  Tract, "two roundings"),
        case("silu",             Fused,     vec![],                 Approx, Tract, "tract's Silu clamps x at -14.5 with its sigmoid floor: -6.9e-6 for every x below"),
        case("silu",             Primitive, vec![],                 Approx, Tract, "tract fuses Sigmoid + Mul into the same Silu"),
        case("swish",            Fused,     vec![s(1.702)],         TailFloor, Corrected, "x * Sigmoid(beta x) on tract's sigmoid floor; plain tract ignores alpha"),
        case("swish",            Primitive, vec![s(1.702)],         TailFloor, Tract, "x * Sigmoid(beta x) on tract's sigmoid floor (not fused: beta != 1)"),
        case("swish",            Primitive, vec![per_channel([0.5, 1.0, 1.702])], TailFloor, Tract, "per channel, on tract's sigmoid floor"),
        case("gelu",             Fused,     vec![],                 Close,  Tract, "erf, then 1 + erf cancels for x < 0"),
        case("gelu",             Primitive, vec![],                 Close,  Tract, "erf, then 1 + erf cancels for x < 0"),
        case("gelu_tanh",        Fused,     vec![],                 TailFloor, Tract, "0.5 x (1 + tanh z) on tract's tanh floor"),
        case("gelu_tanh",        Primitive, vec![],                 TailFloor, Tract, "0.5 x (1 + tanh z) on tract's tanh floor"),
        case("mish",             Fused,     vec![],                 Close,  Tract, "ln(1 + e) rounds 1 + e, times |x|; tanh's floor near 1"),
        case("mish",             Primitive, vec![],                 Close,  Tract, "ln(1 + e) rounds 1 + e, times |x|; tanh's floor near 1"),
        case("squared_relu",     Primitive, vec![],                 Exact,  Tract, "one rounding of x * x; +inf above 1.8e19 as the reference"),
        case("shrink",           Fused,     vec![s(0.5), s(0.5)],   Exact,  Tract, "soft shrinkage: one rounding of x - bias"),
        case("shrink",           Primitive, vec![s(0.5), s(0.5)],   Exact,  Tract, "soft shrinkage: selects x -+ bias or 0"),
        case("shrink",           Fused,     vec![s(0.7), s(0.0)],   Exact,  Tract, "hard shrinkage: selects x or 0"),
        case("shrink",           Primitive, vec![s(0.7), s(0.0)],   Exact,  Tract, "hard shrinkage: selects x or 0"),
        case("log_sigmoid",      Primitive, vec![],                 Close,  Tract, "ln(1 + e) rounds 1 + e: absolute error ~6e-8"),
    ];
    table.into_iter().enumerate().map(|(index, c)| Case { index, ..c }).collect()
}

fn kind(id: &str) -> &'static Kind {
    get(id).unwrap_or_else(|| panic!("no kind {id}"))
}

/// The sweep and the float32 extremes.
fn inputs() -> Vec<f32> {
    let mut x: Vec<f32> = (-768..=768).map(|i| i as f32 / 64.0).collect();
    x.extend([
        f32::MAX,
        -f32::MAX,
        1e30,
        -1e30,
        88.8,
        -88.8,
        1e-30,
        -1e-30,
        0.0,
        -0.0,
    ]);
    x
}

/// A one-site model: input `x`, output `y`, both of element type `elem` and shape `shape`.
fn site_model(emitted: &Emitted, elem: DataType, shape: &[usize], version: i64) -> Vec<u8> {
    let dims: Vec<Dim> = shape.iter().map(|&d| Dim::Size(d as i64)).collect();
    let graph = GraphProto {
        name: Some("site".into()),
        node: emitted.nodes.clone(),
        initializer: emitted.initializers.clone(),
        input: vec![value("x", elem, &dims)],
        output: vec![value("y", elem, &dims)],
        ..Default::default()
    };
    let mut proto = model(graph, vec![opset("", version)], "actswap-tests");
    // The IR version each opset came with (onnx.helper.VERSION_TABLE, onnx 1.23.2).
    proto.ir_version = Some(match version {
        ..=18 => 8,
        19..=20 => 9,
        21..=22 => 10,
        23 => 11,
        _ => 12,
    });
    Model::from_proto(proto, PathBuf::from("."))
        .encode()
        .to_vec()
}

/// A stand-in site reading `x` and writing `y`: per-channel parameters are `[1, C, 1, 1]`.
struct TestSite {
    params: Params,
    elem: DataType,
    version: i64,
}

fn ctx(params: &[ParamValue], elem: DataType, version: i64) -> TestSite {
    TestSite {
        params: Params::new(params.to_vec(), Some(vec![1, CHANNELS, 1, 1])),
        elem,
        version,
    }
}

/// `k`'s `form` written for `site`, as the planner writes it (`Kind::emit`).
fn emit(k: &Kind, form: Form, site: &TestSite) -> Result<Emitted, Unavailable> {
    k.emit(
        form,
        &EmitCtx {
            input: "x",
            output: "y",
            prefix: "site.act",
            elem_type: site.elem,
            opset: site.version,
            params: &site.params,
        },
    )
}

/// The ops `k`'s `form` needs (`Kind::needs`).
fn needs(k: &Kind, form: Form, per_channel: bool) -> Vec<OpNeed> {
    k.needs(form, per_channel)
}

/// Runs a one-input model on `input` and returns its first output.
fn run(bytes: &[u8], runner: Runner, input: Tensor) -> Result<Tensor, String> {
    match runner {
        Runner::Tract => {
            let shape = input.shape().to_vec();
            let plan = tract_onnx::onnx()
                .model_for_read(&mut &bytes[..])
                .and_then(|m| {
                    m.with_input_fact(0, InferenceFact::dt_shape(input.datum_type(), shape))
                })
                .and_then(|m| m.into_optimized())
                .and_then(|m| m.into_runnable())
                .map_err(|e| format!("{e:?}"))?;
            let mut out = plan
                .run(tvec!(input.into_tvalue()))
                .map_err(|e| format!("{e:?}"))?;
            Ok(out.remove(0).into_tensor())
        }
        Runner::Corrected => {
            let model = prepare(bytes, None).map_err(|e| e.to_string())?;
            let mut out = model
                .run(&[NamedTensor::new("x", input)], &[])
                .map_err(|e| e.to_string())?;
            Ok(out.remove(0).tensor)
        }
    }
}

/// The input layout of a case: `[N]`, or `[B, C, 4, 4]` with every channel holding all of `xs`
/// (padded with 0) when a parameter is per channel. Returns the shape, the values and each
/// element's channel.
fn layout(case: &Case, xs: &[f32]) -> (Vec<usize>, Vec<f32>, Vec<usize>) {
    let tensor_param = case
        .params
        .iter()
        .any(|p| matches!(p, ParamValue::PerChannel(_)));
    if !tensor_param {
        return (vec![xs.len()], xs.to_vec(), vec![0; xs.len()]);
    }
    let batch = xs.len().div_ceil(16);
    let mut values = vec![0f32; batch * CHANNELS * 16];
    let mut channel = vec![0; values.len()];
    for b in 0..batch {
        for c in 0..CHANNELS {
            for k in 0..16 {
                let at = (b * CHANNELS + c) * 16 + k;
                values[at] = xs.get(b * 16 + k).copied().unwrap_or(0.0);
                channel[at] = c;
            }
        }
    }
    (vec![batch, CHANNELS, 4, 4], values, channel)
}

/// The case's parameters as the model stores them (float32), for channel `c`.
fn stored_params(case: &Case, c: usize) -> Vec<f64> {
    case.params
        .iter()
        .map(|p| {
            let v = match p {
                ParamValue::Scalar(v) => *v,
                ParamValue::PerChannel(values) => values[c],
            };
            v as f32 as f64
        })
        .collect()
}

/// The opsets a case runs at: the least that has the form and one from the range tract knows
/// best (9 to 18), or the least if that is higher.
fn opsets(k: &Kind, form: Form, per_channel: bool) -> Vec<i64> {
    let least = min_opset(&needs(k, form, per_channel)).expect("form exists");
    let mut v = vec![least, least.max(17)];
    v.dedup();
    v
}

/// Runs `case` at `version`; returns the largest error and every failure.
fn run_case(case: &Case, version: i64) -> Result<(f64, Vec<String>), String> {
    let k = kind(case.kind);
    let emitted = emit(k, case.form, &ctx(&case.params, DataType::Float, version))
        .map_err(|e| e.to_string())?;
    let xs = inputs();
    let (shape, values, channel) = layout(case, &xs);
    let bytes = site_model(&emitted, DataType::Float, &shape, version);
    let input = tract_ndarray::ArrayD::from_shape_vec(shape, values.clone())
        .map_err(|e| e.to_string())?
        .into_tensor();
    if let Some(dir) = std::env::var_os("ACTSWAP_FORMS_DUMP") {
        dump(
            Path::new(&dir),
            case,
            version,
            &bytes,
            &shape_of(&input),
            &values,
            &channel,
        )?;
    }
    let out = run(&bytes, case.runner, input)?;
    let got = out
        .to_plain_array_view::<f32>()
        .map_err(|e| e.to_string())?
        .iter()
        .copied()
        .collect::<Vec<f32>>();
    let mut worst = 0f64;
    let mut failures = Vec::new();
    for ((&x, &y), &c) in values.iter().zip(&got).zip(&channel) {
        let r = k.eval(x as f64, &stored_params(case, c));
        if (r as f32).is_finite() && (y as f64).is_finite() {
            worst = worst.max((y as f64 - r).abs() / (1.0 + r.abs()));
        }
        if case.overflows_above.is_some_and(|above| x > above) {
            if y != f32::INFINITY {
                failures.push(format!(
                    "x = {x:e}: {y:e}, want the runtime's documented +inf"
                ));
            }
            continue;
        }
        if let Some(problem) = case.tol.check(x as f64, y as f64, r) {
            failures.push(format!("x = {x:e} (channel {c}): {problem}"));
        }
    }
    Ok((worst, failures))
}

fn shape_of(t: &Tensor) -> Vec<usize> {
    t.shape().to_vec()
}

/// With `ACTSWAP_FORMS_DUMP=DIR`, every case model goes to DIR with a line in DIR/cases.jsonl
/// (kind, form, opset, input shape and values, stored parameters per channel, each element's
/// channel) for scripts/check_forms.py, which validates each model with the onnx checker and
/// runs it in onnxruntime.
fn dump(
    dir: &Path,
    case: &Case,
    version: i64,
    bytes: &[u8],
    shape: &[usize],
    values: &[f32],
    channel: &[usize],
) -> Result<(), String> {
    use std::io::Write;
    std::fs::create_dir_all(dir).map_err(|e| e.to_string())?;
    let name = format!(
        "{}-{}-{}-op{version}.onnx",
        case.index, case.kind, case.form
    );
    std::fs::write(dir.join(&name), bytes).map_err(|e| e.to_string())?;
    let params: Vec<Vec<f64>> = (0..CHANNELS).map(|c| stored_params(case, c)).collect();
    let line = serde_json::json!({
        "file": name, "kind": case.kind, "form": case.form.name(), "opset": version,
        "shape": shape, "params": params, "channel": channel, "x": values,
    });
    let mut f = std::fs::OpenOptions::new()
        .create(true)
        .append(true)
        .open(dir.join("cases.jsonl"))
        .map_err(|e| e.to_string())?;
    writeln!(f, "{line}").map_err(|e| e.to_string())
}

#[test]
fn every_form_matches_its_reference_in_tract() {
    let mut report = Vec::new();
    let mut failed = Vec::new();
    for case in cases() {
        let per_channel = layout(&case, &[0.0]).0.len() == 4;
        for version in opsets(kind(case.kind), case.form, per_channel) {
            let label = format!(
                "{} {} {:?} opset {version} ({:?}, {:?}: {})",
                case.kind, case.form, case.params, case.runner, case.tol, case.why
            );
            match run_case(&case, version) {
                Ok((worst, failures)) => {
                    report.push(format!("{label}: max error / (1 + |ref|) = {worst:.3e}"));
                    if !failures.is_empty() {
                        let shown: Vec<&String> = failures.iter().take(4).collect();
                        failed.push(format!(
                            "{label}: {} failures, e.g. {shown:?}",
                            failures.len()
                        ));
                    }
                }
                Err(e) => failed.push(format!("{label}: {e}")),
            }
        }
    }
    eprintln!("{}", report.join("\n"));
    assert!(failed.is_empty(), "\n{}", failed.join("\n"));
}

/// Runs a form on one value in ideal float32 arithmetic: each op's value as the ONNX operator
/// schema defines it, computed in f64 (libm's erf) and rounded once to float32, as a runtime
/// whose ops are correctly rounded would. A per-channel initializer gives channel `c`'s value.
fn ideal_f32(e: &Emitted, x: f32, c: usize) -> f32 {
    let mut env: HashMap<&str, f64> = HashMap::from([("x", x as f64)]);
    for t in &e.initializers {
        let v = tensor::read(t, Path::new("."), 1 << 20).unwrap();
        env.insert(
            t.name(),
            if v.data.len() == 1 {
                v.data[0]
            } else {
                v.data[c]
            },
        );
    }
    let round = |v: f64| v as f32 as f64;
    for n in &e.nodes {
        let a = |i: usize| env[n.input[i].as_str()];
        let attr = |name: &str| {
            let found = n.attribute.iter().find(|a| a.name() == name);
            found.map(|a| a.f() as f64).unwrap()
        };
        let y = match n.op_type() {
            "Relu" => a(0).max(0.0),
            "Max" => a(0).max(a(1)),
            "Min" => a(0).min(a(1)),
            "Clip" if n.input.len() == 3 => a(0).max(a(1)).min(a(2)),
            "Clip" => a(0).max(attr("min")).min(attr("max")),
            "Abs" => a(0).abs(),
            "Neg" => -a(0),
            "Add" => round(a(0) + a(1)),
            "Sub" => round(a(0) - a(1)),
            "Mul" => round(a(0) * a(1)),
            "Div" => round(a(0) / a(1)),
            "Exp" => round(a(0).exp()),
            "Log" => round(a(0).ln()),
            "Tanh" => round(a(0).tanh()),
            "Erf" => round(libm::erf(a(0))),
            "Sigmoid" if a(0) >= 0.0 => round(1.0 / (1.0 + (-a(0)).exp())),
            "Sigmoid" => round(a(0).exp() / (1.0 + a(0).exp())),
            "Less" => f64::from(u8::from(a(0) < a(1))),
            "Greater" => f64::from(u8::from(a(0) > a(1))),
            "Where" if a(0) != 0.0 => a(1),
            "Where" => a(2),
            op => panic!("no ideal {op}"),
        };
        env.insert(n.output[0].as_str(), y);
    }
    env[e.nodes.last().unwrap().output[0].as_str()] as f32
}

#[test]
fn every_primitive_form_is_sound_in_float32() {
    // Reference: the catalogue formula (see the module doc). Rung: Exact for the cases that
    // are Exact in tract, else Close, at every input including the extremes: no NaN, no
    // overflow the reference does not have, and no loss beyond a few float32 roundings.
    let mut report = Vec::new();
    let mut failed = Vec::new();
    for case in cases().into_iter().filter(|c| c.form == Form::Primitive) {
        let k = kind(case.kind);
        let tol = if case.tol == Tol::Exact {
            Tol::Exact
        } else {
            Tol::Close
        };
        let channels = if layout(&case, &[0.0]).0.len() == 4 {
            CHANNELS
        } else {
            1
        };
        for version in opsets(k, case.form, channels > 1) {
            let e = emit(k, case.form, &ctx(&case.params, DataType::Float, version)).unwrap();
            let mut worst = 0f64;
            for c in 0..channels {
                for x in inputs() {
                    let got = ideal_f32(&e, x, c) as f64;
                    let r = k.eval(x as f64, &stored_params(&case, c));
                    if got.is_finite() && (r as f32).is_finite() {
                        worst = worst.max((got - r).abs() / (1.0 + r.abs()));
                    }
                    if let Some(problem) = tol.check(x as f64, got, r) {
                        failed.push(format!(
                            "{} {:?} opset {version} x = {x:e}: {problem}",
                            case.kind, case.params
                        ));
                    }
                }
            }
            report.push(format!(
                "{} {:?} opset {version}: {tol:?}, max error / (1 + |ref|) = {worst:.3e}",
                case.kind, case.params
            ));
        }
    }
    eprintln!("{}", report.join("\n"));
    assert!(failed.is_empty(), "\n{}", failed.join("\n"));
}

#[test]
fn the_case_table_covers_every_kind_and_form() {
    let table = cases();
    for k in all() {
        for form in Form::ALL {
            // A kind without an ONNX op has no fused form to test.
            let exists = form == Form::Primitive || k.standard_op().is_some();
            assert_eq!(
                table.iter().any(|c| c.kind == k.id && c.form == form),
                exists,
                "test cases for {} {form}",
                k.id
            );
        }
    }
}

#[test]
fn check_values_from_the_sources() {
    // Check values computed in double precision from the papers' formulas: Elfwing et al.
    // 2017 (SiLU), Hendrycks & Gimpel 2016 (GELU and its tanh form), Misra 2019 (Mish), Howard
    // et al. 2019 (hard-swish), Clevert et al. 2015 (ELU), Klambauer et al. 2017 (SELU, paper
    // constants; the ONNX float32 defaults used here differ by 5e-8), Barron 2017 (CELU).
    let checks: &[(&str, &[f64], f64, f64)] = &[
        ("silu", &[], 1.0, 0.7310585786300049),
        ("silu", &[], -1.0, -0.2689414213699951),
        ("silu", &[], -1.2784645427610738, -0.2784645427610738),
        ("swish", &[1.702], 1.0, 0.8457957659328212),
        ("gelu", &[], 1.0, 0.8413447460685429),
        ("gelu", &[], -1.0, -0.1586552539314571),
        ("gelu_tanh", &[], 1.0, 0.8411919906082768),
        ("mish", &[], 1.0, 0.8650983882673103),
        ("mish", &[], -1.0, -0.3034014613741089),
        ("hard_swish", &[1.0], 1.0, 2.0 / 3.0),
        ("softplus", &[], 0.0, std::f64::consts::LN_2),
        ("elu", &[1.0], -1.0, -0.6321205588285577),
        ("selu", &SELU, -1.0, -1.1113307378125625),
        ("selu", &SELU, 1.0, 1.0507009873554805),
        ("celu", &[2.0], -1.0, -0.7869386805747332),
        // So et al. 2021 (squared ReLU); ln(sigmoid(x)) at 0 and -1 (-ln 2, -ln(1 + e)); the
        // ONNX Shrink schema's formula with PyTorch's soft and hard shrinkage settings.
        ("squared_relu", &[], 3.0, 9.0),
        ("squared_relu", &[], -2.0, 0.0),
        ("log_sigmoid", &[], 0.0, -std::f64::consts::LN_2),
        ("log_sigmoid", &[], -1.0, -1.3132616875182228),
        ("shrink", &[0.5, 0.5], 2.0, 1.5),
        ("shrink", &[0.5, 0.5], -0.3, 0.0),
        ("shrink", &[0.5, 0.0], -2.0, -2.0),
    ];
    for &(id, params, x, want) in checks {
        for form in Form::ALL {
            if kind(id).standard_op().is_none() && form == Form::Fused {
                continue;
            }
            let args: Vec<ParamValue> = params.iter().map(|&v| s(v)).collect();
            let version = min_opset(&needs(kind(id), form, false)).unwrap().max(17);
            let emitted = emit(kind(id), form, &ctx(&args, DataType::Float, version)).unwrap();
            let bytes = site_model(&emitted, DataType::Float, &[1], version);
            // Celu and Swish with alpha != 1 need the corrected loaders (TRACT-NOTES).
            let runner = if form == Form::Fused && params.iter().any(|&p| p != 1.0) {
                Runner::Corrected
            } else {
                Runner::Tract
            };
            let input = tract_ndarray::arr1(&[x as f32]).into_dyn().into_tensor();
            let out = run(&bytes, runner, input).unwrap();
            let got = out.to_plain_array_view::<f32>().unwrap()[[0]] as f64;
            // Close: the input and the constants are float32 roundings of the sources' values.
            assert!(
                (got - want).abs() <= 1e-6 * (1.0 + want.abs()),
                "{id} {form} at {x}: got {got}, want {want} (check value)"
            );
        }
    }
}

/// The least opset of each form per the ONNX operator schemas (and the versions in each kind's
/// catalogue entry): the fused op's version, or for a primitive form the newest of its ops (Erf 9, Where 9, Max / Min with broadcasting 8, Add / Mul with
/// broadcasting 7).
#[rustfmt::skip]
const LEAST_OPSET: &[(&str, Option<i64>, i64)] = &[
    // kind              fused     primitive
    ("relu",             Some(6),  8),
    ("relu6",            Some(6),  8),
    ("hard_swish",       Some(14), 7),
    ("clip",             Some(6),  8),
    ("leaky_relu",       Some(6),  8),
    ("prelu",            Some(9),  8),
    ("thresholded_relu", Some(10), 9),
    ("squared_relu",     None,     7),
    ("shrink",           Some(9),  9),
    ("elu",              Some(6),  8),
    ("selu",             Some(6),  8),
    ("celu",             Some(12), 8),
    ("sigmoid",          Some(6),  6),
    ("hard_sigmoid",     Some(6),  7),
    ("tanh",             Some(6),  6),
    ("softplus",         Some(1),  7),
    ("softsign",         Some(1),  7),
    ("silu",             Some(24), 7),
    ("swish",            Some(24), 7),
    ("gelu",             Some(20), 9),
    ("gelu_tanh",        Some(20), 7),
    ("mish",             Some(18), 7),
    ("log_sigmoid",      None,     8),
];

#[test]
fn each_form_needs_the_opset_of_its_ops_and_refuses_a_lower_one() {
    assert_eq!(LEAST_OPSET.len(), all().len());
    for &(id, fused, primitive) in LEAST_OPSET {
        let k = kind(id);
        let args: Vec<ParamValue> = k.defaults().into_iter().map(s).collect();
        if fused.is_none() {
            assert!(needs(k, Form::Fused, false).is_empty(), "{id}: no ONNX op");
            assert_eq!(
                emit(k, Form::Fused, &ctx(&args, DataType::Float, NEWEST_OPSET)).unwrap_err(),
                Unavailable::NoFusedOp { kind: k.id }
            );
        }
        let forms = [(Form::Fused, fused), (Form::Primitive, Some(primitive))];
        for (form, least) in forms.into_iter().filter_map(|(f, l)| Some((f, l?))) {
            assert_eq!(
                min_opset(&needs(k, form, false)),
                Some(least),
                "{id} {form}"
            );
            assert!(
                emit(k, form, &ctx(&args, DataType::Float, least)).is_ok(),
                "{id} {form}"
            );
            if least > 1 {
                match emit(k, form, &ctx(&args, DataType::Float, least - 1)) {
                    Err(Unavailable::NeedsOpset { needs, have, .. }) => {
                        assert!(
                            needs > have && have == least - 1,
                            "{id} {form}: {needs} {have}"
                        )
                    }
                    other => panic!("{id} {form} at opset {}: {other:?}", least - 1),
                }
            }
        }
    }
    // The op that is missing is named: Gelu is opset 20 (ONNX Gelu schema).
    let e = emit(kind("gelu"), Form::Fused, &ctx(&[], DataType::Float, 19)).unwrap_err();
    assert_eq!(
        e,
        Unavailable::NeedsOpset {
            op: "Gelu",
            needs: 20,
            have: 19
        }
    );
    assert_eq!(
        e.to_string(),
        "Gelu needs opset 20 for this element type; the graph has opset 19"
    );
}

#[test]
fn needs_agrees_with_what_emit_writes() {
    for k in all() {
        for form in Form::ALL {
            for per_channel in [false, true] {
                let listed = needs(k, form, per_channel);
                let params: Vec<ParamValue> = k
                    .params
                    .iter()
                    .map(|p| {
                        if per_channel && p.per_channel {
                            per_channel_param(p.default)
                        } else {
                            s(p.default)
                        }
                    })
                    .collect();
                for version in 1..=NEWEST_OPSET {
                    let Ok(e) = emit(k, form, &ctx(&params, DataType::Float, version)) else {
                        continue;
                    };
                    let what = format!("{} {form} per_channel={per_channel} opset {version}", k.id);
                    for n in &e.nodes {
                        let op = n.op_type();
                        let need = listed.iter().find(|o| o.op_type == op);
                        assert!(
                            need.is_some_and(|o| o.since <= version),
                            "{what}: {op} vs {listed:?}"
                        );
                        assert!(
                            e.ops.iter().any(|o| o.op_type == op),
                            "{what}: {op} not in ops"
                        );
                    }
                    for o in &e.ops {
                        assert!(o.since <= version, "{what}: {o:?}");
                        assert!(
                            e.nodes.iter().any(|n| n.op_type() == o.op_type),
                            "{what}: {o:?}"
                        );
                    }
                }
            }
        }
    }
}

fn per_channel_param(v: f64) -> ParamValue {
    per_channel([v; CHANNELS])
}

#[test]
fn names_come_from_the_prefix_and_the_last_node_writes_the_output() {
    for k in all() {
        for form in Form::ALL {
            if form == Form::Fused && k.standard_op().is_none() {
                continue;
            }
            let args: Vec<ParamValue> = k.defaults().into_iter().map(s).collect();
            let e = emit(k, form, &ctx(&args, DataType::Float, NEWEST_OPSET)).unwrap();
            let what = format!("{} {form}", k.id);
            let initializers: Vec<&str> = e.initializers.iter().map(|t| t.name()).collect();
            let mut known: Vec<&str> = vec!["x"];
            known.extend(&initializers);
            let mut names: Vec<&str> = initializers.clone();
            for (i, n) in e.nodes.iter().enumerate() {
                names.push(n.name());
                for input in &n.input {
                    assert!(
                        known.contains(&input.as_str()),
                        "{what}: {input} used before it is written"
                    );
                }
                let out = n.output[0].as_str();
                if i + 1 == e.nodes.len() {
                    assert_eq!(out, "y", "{what}: the last node writes the site's output");
                } else {
                    assert!(out.starts_with("site.act.t."), "{what}: {out}");
                    names.push(out);
                }
                known.push(out);
            }
            for name in &names {
                assert!(name.starts_with("site.act."), "{what}: {name}");
            }
            for t in &initializers {
                assert!(t.starts_with("site.act.c."), "{what}: {t}");
            }
            let mut unique = names.clone();
            unique.sort();
            unique.dedup();
            assert_eq!(
                unique.len(),
                names.len(),
                "{what}: repeated names in {names:?}"
            );
            assert!(e.nodes.iter().all(|n| n.op_type() != "Constant"), "{what}");
        }
    }
}

#[test]
fn constants_take_the_element_type_of_the_input() {
    // ONNX type constraints: every input of these ops shares the type T of x.
    for elem in [
        DataType::Float,
        DataType::Float16,
        DataType::Double,
        DataType::Bfloat16,
    ] {
        for (id, form, args) in [
            ("gelu", Form::Primitive, vec![]),
            ("gelu_tanh", Form::Primitive, vec![]),
            (
                "swish",
                Form::Primitive,
                vec![per_channel([0.5, 1.0, 1.702])],
            ),
            ("clip", Form::Fused, vec![s(-1.5), s(2.5)]),
            ("hard_swish", Form::Primitive, vec![s(1.0)]),
            ("celu", Form::Primitive, vec![s(1.5)]),
        ] {
            let e = emit(kind(id), form, &ctx(&args, elem, NEWEST_OPSET)).unwrap();
            assert!(!e.initializers.is_empty(), "{id}");
            for t in &e.initializers {
                let v = tensor::read(t, &PathBuf::from("."), 1 << 20).unwrap();
                assert_eq!(v.data_type, elem, "{id} {}", t.name());
                for x in &v.data {
                    let rounded = match elem {
                        DataType::Float => *x as f32 as f64,
                        DataType::Float16 => half::f16::from_f64(*x).to_f64(),
                        DataType::Bfloat16 => half::bf16::from_f64(*x).to_f64(),
                        _ => *x,
                    };
                    assert_eq!(rounded, *x, "{id} {}: not a value of the type", t.name());
                }
                let per_channel = id == "swish";
                let dims: &[i64] = if per_channel { &[1, 3, 1, 1] } else { &[] };
                assert_eq!(t.dims, dims, "{id} {}", t.name());
            }
        }
    }
    // A constant keeps as much of its value as the type holds: 1/sqrt(2) in double.
    let e = emit(
        kind("gelu"),
        Form::Primitive,
        &ctx(&[], DataType::Double, 13),
    )
    .unwrap();
    let c = e
        .initializers
        .iter()
        .find(|t| t.name().ends_with(".c.rsqrt2"))
        .unwrap();
    let v = tensor::read(c, &PathBuf::from("."), 1).unwrap();
    assert_eq!(v.data, [std::f64::consts::FRAC_1_SQRT_2]);
}

#[test]
fn float16_and_double_sites_run_in_their_own_type() {
    // Reference: the catalogue formula. Tolerance: for float16, 2^-9 * (1 + |x|): a few
    // roundings at its unit roundoff 2^-11 on terms as large as x (the factor of x near 0 or 1
    // cancels, as 1 + erf does), and tract's float16 sigmoid, which clamps its input at +-6.92
    // and so stops 1e-3 short of 0 and 1 (tract-linalg 0.23.9, generic/sigmoid.rs); for
    // double, 1e-12 * (1 + |x|) (common practice: a few ulps of 2^-53 through exp and tanh).
    // tract 0.23.9 has no double Erf or Sigmoid ("does not support F64"), and its double Elu is
    // only float32-accurate (1.2e-8 off at x = -6): those run in float16 only.
    let xs: Vec<f64> = (-96..=96).map(|i| i as f64 / 16.0).collect();
    let both = [DataType::Float16, DataType::Double];
    for (id, form, params, types) in [
        ("gelu", Form::Primitive, vec![], &both[..1]),
        ("swish", Form::Primitive, vec![1.702], &both[..1]),
        ("hard_swish", Form::Primitive, vec![1.0], &both[..]),
        ("softplus", Form::Primitive, vec![], &both[..]),
        ("mish", Form::Primitive, vec![], &both[..]),
        ("elu", Form::Fused, vec![0.7], &both[..1]),
    ] {
        let k = kind(id);
        let args: Vec<ParamValue> = params.iter().map(|&v| s(v)).collect();
        for &elem in types {
            let version = 17;
            let e = emit(k, form, &ctx(&args, elem, version)).unwrap();
            let bytes = site_model(&e, elem, &[xs.len()], version);
            let (input, stored): (Tensor, Vec<f64>) = match elem {
                DataType::Float16 => {
                    let h: Vec<f16> = xs.iter().map(|&x| f16::from_f64(x)).collect();
                    let p = params.iter().map(|&p| f16::from_f64(p).to_f64()).collect();
                    (tract_ndarray::arr1(&h).into_dyn().into_tensor(), p)
                }
                _ => (
                    tract_ndarray::arr1(&xs).into_dyn().into_tensor(),
                    params.clone(),
                ),
            };
            let out = run(&bytes, Runner::Tract, input).unwrap();
            assert_eq!(
                out.datum_type(),
                if elem == DataType::Double {
                    f64::datum_type()
                } else {
                    f16::datum_type()
                }
            );
            let got = actswap::run::to_f64_array("y", &out).unwrap();
            for (&x, &y) in xs.iter().zip(got.iter()) {
                let r = k.eval(x, &stored);
                let tol = match elem {
                    DataType::Float16 => 2f64.powi(-9) * (1.0 + x.abs()),
                    _ => 1e-12 * (1.0 + x.abs()),
                };
                assert!(
                    (y - r).abs() <= tol,
                    "{id} {form} {elem:?} at {x}: {y} vs {r}"
                );
            }
        }
    }
}

#[test]
fn element_types_raise_the_opset_where_the_schemas_say() {
    // ONNX operator schemas (onnx 1.23.2 type constraints): Celu takes float32 only until 28;
    // bfloat16 arrives in 13 for the arithmetic ops, 16 for Where and LeakyRelu, 22 for Elu.
    let celu = [s(1.5)];
    assert_eq!(
        emit(
            kind("celu"),
            Form::Fused,
            &ctx(&celu, DataType::Float16, 21)
        )
        .unwrap_err(),
        Unavailable::NeedsOpset {
            op: "Celu",
            needs: 28,
            have: 21
        }
    );
    assert!(emit(kind("celu"), Form::Fused, &ctx(&celu, DataType::Double, 28)).is_ok());
    assert!(
        emit(
            kind("celu"),
            Form::Primitive,
            &ctx(&celu, DataType::Float16, 12)
        )
        .is_ok()
    );
    let bf16 = |id: &str, form, params: &[ParamValue], version| {
        emit(kind(id), form, &ctx(params, DataType::Bfloat16, version))
    };
    assert!(matches!(
        bf16("thresholded_relu", Form::Primitive, &[s(1.0)], 13),
        Err(Unavailable::NeedsOpset {
            op: "Where",
            needs: 16,
            ..
        })
    ));
    assert!(bf16("thresholded_relu", Form::Primitive, &[s(1.0)], 16).is_ok());
    assert!(matches!(
        bf16("gelu", Form::Primitive, &[], 12),
        Err(Unavailable::NeedsOpset { needs: 13, .. })
    ));
    assert!(matches!(
        bf16("relu6", Form::Fused, &[], 12),
        Err(Unavailable::NeedsOpset {
            op: "Clip",
            needs: 13,
            ..
        })
    ));
    assert!(matches!(
        bf16("elu", Form::Fused, &[s(1.0)], 21),
        Err(Unavailable::NeedsOpset {
            op: "Elu",
            needs: 22,
            ..
        })
    ));
    let e = bf16("gelu", Form::Primitive, &[], 13).unwrap();
    assert!(e.ops.iter().all(|o: &OpNeed| o.since == 13), "{:?}", e.ops);
}

#[test]
fn clip_takes_attributes_before_opset_11_and_inputs_from_it() {
    // ONNX Clip schema: min / max attributes in versions 6-10, optional inputs from 11.
    let params = [s(-1.5), s(2.5)];
    let old = emit(
        kind("clip"),
        Form::Fused,
        &ctx(&params, DataType::Float, 10),
    )
    .unwrap();
    let node = &old.nodes[0];
    assert_eq!(node.input, ["x"]);
    let attrs: Vec<(&str, f32)> = node.attribute.iter().map(|a| (a.name(), a.f())).collect();
    assert_eq!(attrs, [("min", -1.5), ("max", 2.5)]);
    assert_eq!(
        old.ops,
        [OpNeed {
            op_type: "Clip",
            since: 6
        }]
    );
    let new = emit(
        kind("clip"),
        Form::Fused,
        &ctx(&params, DataType::Float, 11),
    )
    .unwrap();
    assert_eq!(
        new.nodes[0].input,
        ["x", "site.act.c.clip.min", "site.act.c.clip.max"]
    );
    assert!(new.nodes[0].attribute.is_empty());
    assert_eq!(
        new.ops,
        [OpNeed {
            op_type: "Clip",
            since: 11
        }]
    );
}

#[test]
fn per_channel_parameters_go_where_the_op_takes_a_tensor() {
    // ONNX Swish takes alpha as a float attribute; PRelu's slope is an input (ONNX schemas).
    let beta = [per_channel([0.5, 1.0, 1.702])];
    assert_eq!(
        emit(kind("swish"), Form::Fused, &ctx(&beta, DataType::Float, 24)).unwrap_err(),
        Unavailable::PerChannel {
            kind: "swish",
            form: Form::Fused
        }
    );
    assert!(needs(kind("swish"), Form::Fused, true).is_empty());
    assert_eq!(
        min_opset(&needs(kind("swish"), Form::Primitive, true)),
        Some(7)
    );
    let prelu = emit(kind("prelu"), Form::Fused, &ctx(&beta, DataType::Float, 16)).unwrap();
    assert_eq!(prelu.initializers[0].dims, [1, 3, 1, 1]);
    // A scalar parameter is a rank-0 initializer.
    let scalar = emit(
        kind("prelu"),
        Form::Fused,
        &ctx(&[s(0.25)], DataType::Float, 16),
    )
    .unwrap();
    assert!(scalar.initializers[0].dims.is_empty());
}

#[test]
fn bad_sites_are_refused_with_one_line() {
    let k = kind("swish");
    let refusals = [
        emit(k, Form::Primitive, &ctx(&[], DataType::Float, 17)).unwrap_err(),
        emit(
            k,
            Form::Primitive,
            &ctx(&[ParamValue::PerChannel(vec![1.0; 2])], DataType::Float, 17),
        )
        .unwrap_err(),
        emit(k, Form::Primitive, &ctx(&[s(1.0)], DataType::Int32, 17)).unwrap_err(),
        emit(
            kind("celu"),
            Form::Primitive,
            &ctx(&[s(0.0)], DataType::Float, 17),
        )
        .unwrap_err(),
        emit(
            kind("celu"),
            Form::Fused,
            &ctx(&[s(-1.0)], DataType::Float, 17),
        )
        .unwrap_err(),
    ];
    assert!(matches!(
        refusals[0],
        Unavailable::ParamCount {
            expected: 1,
            found: 0,
            ..
        }
    ));
    assert!(matches!(
        refusals[1],
        Unavailable::ParamShape { values: 2, .. }
    ));
    assert!(matches!(
        refusals[2],
        Unavailable::ElemType {
            elem_type: DataType::Int32,
            ..
        }
    ));
    assert!(matches!(
        refusals[3],
        Unavailable::BadParam { param: "alpha", .. }
    ));
    assert!(matches!(
        refusals[4],
        Unavailable::BadParam { value: -1.0, .. }
    ));
    for r in &refusals {
        let text = r.to_string();
        assert!(!text.is_empty() && !text.contains('\n'), "{text:?}");
    }
    assert_eq!(
        refusals[2].to_string(),
        "swish: element type INT32 is not FLOAT, FLOAT16, DOUBLE or BFLOAT16"
    );
}

#[test]
fn form_names_round_trip() {
    for form in Form::ALL {
        assert_eq!(form.to_string().parse::<Form>(), Ok(form));
    }
    assert_eq!("fused".parse::<Form>(), Ok(Form::Fused));
    let err = "approximate".parse::<Form>().unwrap_err();
    assert_eq!(
        err.to_string(),
        "unknown form 'approximate' (expected fused or primitive)"
    );
}

#[test]
fn fused_forms_write_the_catalogue_op() {
    for k in all() {
        let ops = needs(k, Form::Fused, false);
        let Some(op) = k.standard_op() else {
            assert!(ops.is_empty(), "{}: no ONNX op, no fused form", k.id);
            continue;
        };
        assert_eq!(ops.len(), 1, "{}: one op", k.id);
        assert_eq!(ops[0].op_type, op.op.op_type, "{}", k.id);
        assert!(ops[0].since >= op.introduced, "{}", k.id);
    }
}
