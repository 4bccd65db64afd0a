//! Fitted forms: their bounds against dense evaluation of the catalogue's f64 reference, the
//! emitted graph run in tract against the same reference, and the figures they must reach.
//!
//! Sources:
//! - Values: each kind's f64 reference formula from the catalogue (checked against the cited
//!   papers' check values in tests/catalog.rs), evaluated on a dense grid, as numpy would.
//! - The figure to beat: hard-swish (Howard et al. 2019, "Searching for MobileNetV3",
//!   arXiv:1905.02244) against SiLU (Elfwing et al. 2017), max |error| 3 / (1 + e^3) = 0.1423
//!   at x = +-3.
//! - Running: tract 0.23.9 on single-site float64 models (no rounding of the sum to speak of)
//!   and float32 models (rounding of the sum allowed, see `F32_SUM`).

use std::path::PathBuf;

use actswap::catalog::emit::{EmitCtx, Emitted};
use actswap::catalog::fit::{self, FitRange, Fitted};
use actswap::catalog::{Kind, ParamValue, Params, Scale, get};
use actswap::onnx::Model;
use actswap::onnx::builder::{Dim, model, opset, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use proptest::prelude::*;
use tract_onnx::prelude::*;

fn kind(id: &str) -> &'static Kind {
    get(id).unwrap_or_else(|| panic!("no kind {id}"))
}

const SILU_HARD_SWISH: f64 = 0.142_277_619_532_700_35; // 3 / (1 + e^3)

/// Max |kind - fit| of channel `c` on `n + 1` evenly spaced points of [lo, hi], in f64.
fn dense(f: &Fitted, c: usize, lo: f64, hi: f64, n: usize) -> f64 {
    let p = &f.params[c];
    (0..=n)
        .map(|i| {
            let x = lo + (hi - lo) * i as f64 / n as f64;
            (f.kind.eval(x, p) - f.eval(c, x)).abs()
        })
        .fold(0.0, f64::max)
}

fn fitted(id: &str, params: &[f64], segments: usize, elem: DataType) -> Fitted {
    let range = FitRange::new(-8.0, 8.0).unwrap();
    fit::fit(kind(id), &Params::scalars(params), range, segments, elem).unwrap()
}

#[test]
fn figures_over_minus_8_to_8() {
    // (kind, segments, the figure it must reach)
    let cases = [
        ("silu", 8, 0.015),
        ("silu", 16, 0.005),
        ("gelu", 8, 0.015),
        ("gelu", 16, 0.005),
        ("tanh", 16, 0.01),
        ("sigmoid", 16, 0.01),
    ];
    for (id, k, figure) in cases {
        let f = fitted(id, &[], k, DataType::Double);
        let measured = dense(&f, 0, -8.0, 8.0, 400_000);
        let reported = f.bound.in_range.value;
        println!("{id} {k} segments: reported {reported:.6}, measured {measured:.6}");
        assert!(reported <= figure, "{id} {k}: {reported} > {figure}");
        assert!(
            measured <= reported,
            "{id} {k}: measured {measured} > {reported}"
        );
        assert!(
            reported - measured <= 1e-6,
            "{id} {k}: {reported} vs {measured}"
        );
    }
    let silu8 = fitted("silu", &[], 8, DataType::Float);
    assert!(silu8.bound.over_reals.value < SILU_HARD_SWISH / 10.0);
}

#[test]
fn tails_follow_the_asymptotes() {
    // silu -> 0 and x; sigmoid -> 0 and 1; tanh -> -1 and 1; elu(alpha) -> -alpha and x.
    for (id, params, slopes) in [
        ("silu", vec![], (0.0, 1.0)),
        ("gelu", vec![], (0.0, 1.0)),
        ("sigmoid", vec![], (0.0, 0.0)),
        ("tanh", vec![], (0.0, 0.0)),
        ("elu", vec![0.5], (0.0, 1.0)),
        ("softplus", vec![], (0.0, 1.0)),
        ("leaky_relu", vec![0.1f32 as f64], (0.1f32 as f64, 1.0)),
    ] {
        let f = fitted(id, &params, 8, DataType::Float);
        let pwl = &f.channels[0];
        assert_eq!(
            (pwl.slopes[0], pwl.slopes[pwl.slopes.len() - 1]),
            slopes,
            "{id}"
        );
        // Far out, the error is the gap between the tail and the asymptote, within the bound.
        for x in [-1e6, 1e6] {
            let e = (f.kind.eval(x, &params) - f.eval(0, x)).abs();
            assert!(e <= f.bound.over_reals.value, "{id} at {x}: {e}");
        }
        assert!(f.bound.over_reals.value >= f.bound.in_range.value);
        assert!(f.bound.over_reals.value < 0.1, "{id}: {:?}", f.bound);
    }
    assert!(matches!(
        fit::asymptotes(kind("squared_relu"), &[]),
        Err(fit::FitError::NoAsymptote { .. })
    ));
}

/// A one-site model of element type `elem`, input `x` and output `y` of shape `shape`.
fn site_model(emitted: &Emitted, elem: DataType, shape: &[usize]) -> Vec<u8> {
    let dims: Vec<Dim> = shape.iter().map(|&d| Dim::Size(d as i64)).collect();
    let graph = GraphProto {
        name: Some("site".into()),
        node: emitted.nodes.clone(),
        initializer: emitted.initializers.clone(),
        input: vec![value("x", elem, &dims)],
        output: vec![value("y", elem, &dims)],
        ..Default::default()
    };
    let mut proto = model(graph, vec![opset("", 17)], "actswap-tests");
    proto.ir_version = Some(8);
    Model::from_proto(proto, PathBuf::from("."))
        .encode()
        .to_vec()
}

fn emit(f: &Fitted, params: &Params, elem: DataType) -> Emitted {
    f.emit(&EmitCtx {
        input: "x",
        output: "y",
        prefix: "site.fitted",
        elem_type: elem,
        opset: 17,
        params,
    })
    .unwrap()
}

fn run(bytes: &[u8], input: Tensor) -> Tensor {
    let shape = input.shape().to_vec();
    let plan = tract_onnx::onnx()
        .model_for_read(&mut &bytes[..])
        .and_then(|m| m.with_input_fact(0, InferenceFact::dt_shape(input.datum_type(), shape)))
        .and_then(|m| m.into_optimized())
        .and_then(|m| m.into_runnable())
        .unwrap();
    plan.run(tvec!(input.into_tvalue()))
        .unwrap()
        .remove(0)
        .into_tensor()
}

/// Float32 rounding of the emitted sum: each of at most `segments + 3` additions rounds by half
/// an ulp of a partial sum, |partial| <= 2 (1 + |x|) for these kinds (common practice: the
/// standard model of floating-point addition, Higham, "Accuracy and Stability of Numerical
/// Algorithms", 2002, ch. 2).
fn f32_sum(segments: usize, x: f64) -> f64 {
    (segments + 3) as f64 * f32::EPSILON as f64 * (1.0 + x.abs())
}

#[test]
fn the_emitted_graph_computes_the_fit_in_tract() {
    let xs: Vec<f64> = (0..=2048)
        .map(|i| -12.0 + 24.0 * i as f64 / 2048.0)
        .collect();
    for (id, k) in [
        ("silu", 8),
        ("gelu", 16),
        ("tanh", 16),
        ("sigmoid", 16),
        ("mish", 8),
    ] {
        for elem in [DataType::Double, DataType::Float] {
            let params = Params::scalars(&[]);
            let f = fitted(id, &[], k, elem);
            let e = emit(&f, &params, elem);
            let ops: std::collections::BTreeSet<String> = e.op_types().into_iter().collect();
            assert!(
                ops.iter()
                    .all(|o| ["Max", "Min", "Sub", "Mul", "Add"].contains(&o.as_str())),
                "{ops:?}"
            );
            let bytes = site_model(&e, elem, &[xs.len()]);
            let ys: Vec<f64> = if elem == DataType::Double {
                let t = tract_ndarray::Array1::from(xs.clone())
                    .into_dyn()
                    .into_tensor();
                run(&bytes, t)
                    .to_plain_array_view::<f64>()
                    .unwrap()
                    .iter()
                    .copied()
                    .collect()
            } else {
                let v: Vec<f32> = xs.iter().map(|&x| x as f32).collect();
                let t = tract_ndarray::Array1::from(v).into_dyn().into_tensor();
                run(&bytes, t)
                    .to_plain_array_view::<f32>()
                    .unwrap()
                    .iter()
                    .map(|&y| y as f64)
                    .collect()
            };
            for (&x, &y) in xs.iter().zip(&ys) {
                let x = if elem == DataType::Float {
                    x as f32 as f64
                } else {
                    x
                };
                let slack = if elem == DataType::Float {
                    f32_sum(k, x)
                } else {
                    1e-12 * (1.0 + x.abs())
                };
                assert!(
                    (y - f.eval(0, x)).abs() <= slack,
                    "{id} {elem:?} at {x}: {y} vs {}",
                    f.eval(0, x)
                );
                let err = (y - f.kind.eval(x, &[])).abs();
                let bound = if (-8.0..=8.0).contains(&x) {
                    f.bound.in_range.value
                } else {
                    f.bound.over_reals.value
                };
                assert!(
                    err <= bound + slack,
                    "{id} {elem:?} at {x}: {err} > {bound}"
                );
            }
        }
    }
}

#[test]
fn per_channel_parameters_get_one_fit_per_channel() {
    let swish = kind("swish");
    let betas = vec![0.5, 1.0, 1.702];
    let params = Params::new(
        vec![ParamValue::PerChannel(betas.clone())],
        Some(vec![1, 3, 1, 1]),
    );
    let range = FitRange::new(-6.0, 6.0).unwrap();
    let f = fit::fit(swish, &params, range, 8, DataType::Float).unwrap();
    assert_eq!(f.channels.len(), 3);
    for (c, beta) in betas.iter().enumerate() {
        let alone = fit::fit(swish, &Params::scalars(&[*beta]), range, 8, DataType::Float).unwrap();
        assert_eq!(f.channels[c], alone.channels[0]);
        assert!(dense(&f, c, -6.0, 6.0, 100_000) <= f.bound.in_range.value);
    }
    let e = emit(&f, &params, DataType::Float);
    let shaped = e
        .initializers
        .iter()
        .filter(|t| t.dims == [1, 3, 1, 1])
        .count();
    assert!(shaped > 0, "per-channel knots and slopes are [1, C, 1, 1]");
    // The fewest segments within an allowance, for every channel.
    let s = fit::smallest(swish, &params, range, 0.01, 32, DataType::Float).unwrap();
    assert!(s.bound.in_range.value <= 0.01);
    let fewer = fit::fit(swish, &params, range, s.segments - 1, DataType::Float).unwrap();
    assert!(fewer.bound.in_range.value > 0.01);
}

#[test]
fn constants_are_rounded_before_the_bound_is_computed() {
    // Float16 knots and slopes are coarse: the bound is that of the rounded function.
    let f = fitted("silu", &[], 16, DataType::Float16);
    for pwl in &f.channels {
        for v in pwl.knots.iter().chain(&pwl.slopes) {
            assert_eq!(half::f16::from_f64(*v).to_f64(), *v);
        }
    }
    assert!(dense(&f, 0, -8.0, 8.0, 200_000) <= f.bound.in_range.value);
}

/// Kinds with a linear asymptote on both sides, with parameter ranges that keep them so.
fn kinds_and_params() -> impl Strategy<Value = (&'static str, Vec<f64>)> {
    prop_oneof![
        Just(("silu", vec![])),
        Just(("gelu", vec![])),
        Just(("gelu_tanh", vec![])),
        Just(("tanh", vec![])),
        Just(("sigmoid", vec![])),
        Just(("mish", vec![])),
        Just(("softplus", vec![])),
        Just(("softsign", vec![])),
        Just(("log_sigmoid", vec![])),
        Just(("relu", vec![])),
        Just(("hard_swish", vec![1.0])),
        (0.2f64..4.0).prop_map(|b| ("swish", vec![(b as f32) as f64])),
        (0.1f64..3.0).prop_map(|a| ("elu", vec![(a as f32) as f64])),
        (0.1f64..3.0).prop_map(|a| ("celu", vec![(a as f32) as f64])),
        (0.01f64..0.5).prop_map(|a| ("leaky_relu", vec![(a as f32) as f64])),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(48))]

    /// For random kinds, parameters, ranges and segment counts, the reported bound is never
    /// below the error on a dense grid, inside the range and beyond it.
    #[test]
    fn the_bound_is_never_below_the_measured_error(
        (id, params) in kinds_and_params(),
        lo in -12.0f64..0.0,
        width in 0.5f64..20.0,
        segments in 1usize..24,
    ) {
        let range = FitRange::new(lo, lo + width).unwrap();
        let f = fit::fit(kind(id), &Params::scalars(&params), range, segments, DataType::Float)
            .unwrap();
        let inside = dense(&f, 0, range.lo, range.hi, 20_000);
        prop_assert!(inside <= f.bound.in_range.value, "{} vs {:?}", inside, f.bound);
        let wide = dense(&f, 0, range.lo - 100.0, range.hi + 100.0, 50_000);
        prop_assert!(wide <= f.bound.over_reals.value, "{} vs {:?}", wide, f.bound);
    }
}

/// Swish in f64 as Ramachandran et al. 2017 write it (arXiv:1710.05941), independently of the
/// catalogue: x * sigmoid(beta * x).
fn swish_formula(x: f64, beta: f64) -> f64 {
    x / (1.0 + (-beta * x).exp())
}

#[test]
fn a_declared_change_of_scale_is_exact() {
    // swish(x; beta) = silu(beta x) / beta (algebra on Ramachandran et al.'s formula);
    // celu(x; alpha) = alpha * celu(x / alpha; 1) (the ONNX Celu function body);
    // x * relu6(beta x + 3) / 6 = hard_swish(beta x) / beta (algebra on Howard et al. 2019's
    // x * ReLU6(x + 3) / 6).
    for (id, values) in [
        ("swish", vec![0.1, 0.5, 1.0, 1.702, 2.0, 7.5]),
        ("celu", vec![0.1, 0.5, 1.0, 2.0, 7.5]),
        ("hard_swish", vec![0.1, 0.5, 1.0, 1.702, 2.0, 7.5]),
    ] {
        let k = kind(id);
        let Some(Scale::Factor { factor, base }) = k.scale else {
            panic!("{id} declares a change of scale");
        };
        for v in values {
            let s = factor(&[v]);
            for i in 0..=400 {
                let x = -20.0 + 40.0 * i as f64 / 400.0;
                let direct = k.eval(x, &[v]);
                let rescaled = k.eval(s * x, base) / s;
                assert!(
                    (direct - rescaled).abs() <= 1e-14 * (1.0 + direct.abs()),
                    "{id}({x}; {v}): {direct} vs {rescaled}"
                );
            }
        }
    }
}

#[test]
fn kinds_that_hold_at_every_scale_do() {
    // max(0, s x) / s = max(0, x) and the same for one slope per side (ONNX Relu, LeakyRelu and
    // PRelu definitions): f(s x; p) / s = f(x; p) for every s > 0.
    for (id, p) in [
        ("relu", vec![]),
        ("leaky_relu", vec![0.01]),
        ("prelu", vec![0.25]),
    ] {
        let k = kind(id);
        assert!(
            matches!(k.scale, Some(Scale::Any)),
            "{id} holds at every scale"
        );
        for s in [1e-3, 0.5, 1.702, 7.5, 1e3] {
            for i in 0..=400 {
                let x = -20.0 + 40.0 * i as f64 / 400.0;
                let direct = k.eval(x, &p);
                assert!((direct - k.eval(s * x, &p) / s).abs() <= 1e-14 * (1.0 + direct.abs()));
            }
        }
    }
}

#[test]
fn a_shared_fit_bounds_each_channel_by_its_own_error() {
    // Channels of one site whose rescaled ranges share a fit of SiLU: each channel's bound is
    // computed on its own rounded constants. Reference: the swish formula in f64 on a dense
    // grid (numpy-style evaluation), inside the range and 100 beyond each end.
    let swish = kind("swish");
    let betas: Vec<f64> = (0..48)
        .map(|i| (0.5 * 4f64.powf(i as f64 / 47.0)) as f32 as f64)
        .chain([0.3, 3.0, 1.0])
        .collect();
    for range in [
        FitRange::new(-8.0, 8.0).unwrap(),
        FitRange::new(-2.5, 6.0).unwrap(),
    ] {
        for segments in [4, 8, 16] {
            for elem in [DataType::Float, DataType::Double] {
                for &beta in &betas {
                    let (pwl, b) = fit::fit_channel(swish, &[beta], range, segments, elem).unwrap();
                    let err = |x: f64| (swish_formula(x, beta) - pwl.eval(x)).abs();
                    let grid = |lo: f64, hi: f64, n: usize| {
                        (0..=n)
                            .map(|i| err(lo + (hi - lo) * i as f64 / n as f64))
                            .fold(0.0, f64::max)
                    };
                    let inside = grid(range.lo, range.hi, 20_000);
                    let wide = grid(range.lo - 100.0, range.hi + 100.0, 50_000);
                    let case = format!("beta {beta}, {range}, {segments}, {elem:?}");
                    assert!(inside <= b.in_range.value, "{case}: {inside} > {:?}", b);
                    assert!(wide <= b.over_reals.value, "{case}: {wide} > {:?}", b);
                    // The bound inside is the error inside (the grid's spacing aside).
                    assert!(
                        b.in_range.value - inside <= 1e-6,
                        "{case}: {inside} vs {b:?}"
                    );
                }
            }
        }
    }
}
