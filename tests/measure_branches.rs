//! Drift at sites inside subgraphs: If branches (lifted into models of their own and run where
//! the If takes them), nested If branches, and Scan bodies, of the main graph and below a branch.
//!
//! Outside references:
//! - ONNX operator specification, If: the `then_branch` runs when the condition is true, the
//!   `else_branch` otherwise; a branch reads tensors of its enclosing graphs by name.
//! - ONNX operator specification, Scan: the body runs once per slice of the scan input.
//! - hard-swish vs SiLU worst case 3 / (1 + e^3) = 0.14227761953270035 at x = +-3 (Howard et al.
//!   2019, arXiv:1905.02244, hard-swish x * ReLU6(x + 3) / 6; the closed form of
//!   |x sigmoid(x) - hard_swish(x)| at x = 3).
//! - Multiplication of two floats is commutative in IEEE 754 (each product is the exact product
//!   rounded once), so Mul(sigmoid(x), x) equals Mul(x, sigmoid(x)) bit for bit.

use std::path::Path;

use actswap::measure::result::{LocalBasis, SiteDrift};
use actswap::measure::{CompareOptions, DriftReport, compare_models};
use actswap::onnx::Model;
use actswap::onnx::builder::{self, Dim, attr_g, attr_i, node, opset, tensor_f32};
use actswap::onnx::proto::{GraphProto, NodeProto, tensor_proto::DataType};
use actswap::run::{NamedTensor, Sample, Tensor};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;

/// Hard-swish vs SiLU worst case (Howard et al. 2019): 3 / (1 + e^3).
const HARD_SWISH_BOUND: f64 = 0.14227761953270035;

/// door-chime's then-branch silu: `Mul(mix.conv, Sigmoid(mix.conv))`.
const SILU: &str = "branch.then.act";
/// door-chime's else-branch relu.
const RELU: &str = "branch.else.act";

fn door_chime() -> Model {
    Model::load(
        &Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-models/door-chime-keywords.onnx"),
    )
    .unwrap()
}

fn no_latency() -> CompareOptions {
    CompareOptions {
        latency: None,
        ..CompareOptions::default()
    }
}

/// Standard normal values of `shape`, shifted by `shift` (door-chime's If takes the then-branch
/// when mean(mfcc) > 0: see sample-models/README.md).
fn normal(name: &str, shape: &[usize], shift: f32, seed: u64) -> NamedTensor {
    let mut rng = StdRng::seed_from_u64(seed);
    let n = shape.iter().product();
    let v: Vec<f32> = (0..n)
        .map(|_| rng.sample::<f32, _>(StandardNormal) + shift)
        .collect();
    NamedTensor::new(name, Tensor::from_shape(shape, &v).unwrap())
}

fn mfcc_samples(shifts: &[f32]) -> Vec<Sample> {
    shifts
        .iter()
        .enumerate()
        .map(|(k, &s)| vec![normal("mfcc", &[1, 20, 49], s, k as u64)])
        .collect()
}

fn site<'r>(r: &'r DriftReport, output: &str) -> &'r SiteDrift {
    r.sites.iter().find(|s| s.output == output).unwrap()
}

/// A copy of door-chime whose then-branch silu nodes are replaced by `make(input)`.
fn rewrite_then_branch(make: impl Fn(&str) -> Vec<NodeProto>) -> Model {
    let model = door_chime();
    let mut proto = model.proto().clone();
    let graph = proto.graph.as_mut().unwrap();
    let if_node = graph.node.iter_mut().find(|n| n.op_type() == "If").unwrap();
    let then = if_node
        .attribute
        .iter_mut()
        .find(|a| a.name() == "then_branch")
        .unwrap()
        .g
        .as_mut()
        .unwrap();
    then.node = make("mix.conv");
    Model::from_proto(proto, model.dir().to_path_buf())
}

#[test]
fn door_chime_against_itself_drifts_by_exactly_zero_in_both_branches() {
    let model = door_chime();
    // Shifted up, the then-branch runs; shifted down, the else-branch.
    let samples = mfcc_samples(&[0.5, -0.5, 0.5, -0.5]);
    let r = compare_models(&model, &model, &samples, &no_latency()).unwrap();
    assert_eq!(r.sites.len(), 4);
    for output in [SILU, RELU] {
        let s = site(&r, output);
        assert!(s.graph.contains("branch"), "{}", s.graph);
        for d in [&s.local, &s.propagated] {
            let d = d
                .as_ref()
                .unwrap_or_else(|| panic!("{output}: {:?}", s.notes));
            assert_eq!((d.max_abs, d.rms, d.cosine), (0.0, 0.0, 1.0), "{output}");
        }
        assert_eq!(s.local_basis, Some(LocalBasis::Identical));
        assert!(s.input_range.is_some());
    }
    assert!(r.within_budget);
}

#[test]
fn branch_silu_to_hard_swish_drifts_within_the_published_bound() {
    let model = door_chime();
    let rewritten = rewrite_then_branch(|x| {
        vec![
            node(
                "HardSigmoid",
                "branch.then.act.hs",
                &[x],
                &["branch.then.act.hard_sigmoid"],
                vec![
                    builder::attr_f("alpha", 1.0 / 6.0),
                    builder::attr_f("beta", 0.5),
                ],
            ),
            node(
                "Mul",
                "branch.then.act",
                &[x, "branch.then.act.hard_sigmoid"],
                &[SILU],
                vec![],
            ),
        ]
    });
    let samples = mfcc_samples(&[0.5, 0.4, -0.5]);
    let r = compare_models(&model, &rewritten, &samples, &no_latency()).unwrap();
    let s = site(&r, SILU);
    assert_eq!((s.kind_a.id, s.kind_b.id), ("silu", "hard_swish"));
    let local = s.local.as_ref().unwrap();
    assert!(
        local.max_abs > 0.0 && local.max_abs <= HARD_SWISH_BOUND,
        "{local:?}"
    );
    assert_eq!(s.local_basis, Some(LocalBasis::Isolated));
    // The isolated original reproduces its value in the lifted branch (same ops, same input).
    assert!(
        s.isolation_max_abs.unwrap() <= 1e-5,
        "{:?}",
        s.isolation_max_abs
    );
    // Nothing upstream changed, so the propagated drift is the local drift on the same values.
    let propagated = s.propagated.as_ref().unwrap();
    assert!(
        (propagated.max_abs - local.max_abs).abs() <= 1e-6,
        "{propagated:?}"
    );
    let bound = s.bound_over_range.unwrap();
    assert!(local.max_abs <= bound + 1e-6 && bound <= HARD_SWISH_BOUND + 1e-9);
    // The output feels the change; the else-branch relu is left as it was.
    assert!(r.outputs[0].metrics.as_ref().unwrap().max_abs > 0.0);
    assert_eq!(site(&r, RELU).local.as_ref().unwrap().max_abs, 0.0);
}

#[test]
fn an_exact_rewrite_inside_a_branch_drifts_by_zero() {
    let model = door_chime();
    // SiLU with Mul's operands the other way round (the torch exporters' sigmoid(x)*x form).
    let rewritten = rewrite_then_branch(|x| {
        vec![
            node("Sigmoid", "sig", &[x], &["branch.then.act.sig"], vec![]),
            node("Mul", "mul", &["branch.then.act.sig", x], &[SILU], vec![]),
        ]
    });
    let samples = mfcc_samples(&[0.5, 0.3]);
    let r = compare_models(&model, &rewritten, &samples, &no_latency()).unwrap();
    let s = site(&r, SILU);
    assert_eq!(s.local_basis, Some(LocalBasis::Isolated));
    assert_eq!(s.local.as_ref().unwrap().max_abs, 0.0);
    assert_eq!(s.propagated.as_ref().unwrap().max_abs, 0.0);
}

#[test]
fn a_branch_no_sample_takes_is_reported_as_not_reached() {
    let model = door_chime();
    let samples = mfcc_samples(&[-0.5, -0.6]);
    let r = compare_models(&model, &model, &samples, &no_latency()).unwrap();
    let s = site(&r, SILU);
    assert!(s.local.is_none() && s.propagated.is_none());
    assert!(
        s.notes
            .iter()
            .any(|n| n.contains("not reached on these samples")),
        "{:?}",
        s.notes
    );
    assert!(site(&r, RELU).propagated.is_some());
}

fn f32_value(name: &str, dims: &[i64]) -> actswap::onnx::proto::ValueInfoProto {
    let dims: Vec<Dim> = dims.iter().map(|&d| Dim::Size(d)).collect();
    builder::value(name, DataType::Float, &dims)
}

fn branch(name: &str, nodes: Vec<NodeProto>, output: &str) -> GraphProto {
    GraphProto {
        name: Some(name.into()),
        node: nodes,
        output: vec![f32_value(output, &[1, 8])],
        ..Default::default()
    }
}

/// x [1, 8]; if mean(x) > 0: (h = x + 1; if mean(x) > 0: silu(h) else relu(h)) else -x.
/// The silu sits two branches deep and reads a tensor computed in the outer branch.
fn nested_if() -> Model {
    let silu = vec![
        node("Sigmoid", "inner.sig", &["h"], &["inner.s"], vec![]),
        node("Mul", "inner.mul", &["h", "inner.s"], &["inner.y"], vec![]),
    ];
    let relu = vec![node("Relu", "inner.relu", &["h"], &["inner.r"], vec![])];
    let outer_then = vec![
        node("Add", "outer.add", &["x", "one"], &["h"], vec![]),
        node(
            "If",
            "inner.if",
            &["cond"],
            &["inner.out"],
            vec![
                attr_g("then_branch", branch("inner_then", silu, "inner.y")),
                attr_g("else_branch", branch("inner_else", relu, "inner.r")),
            ],
        ),
    ];
    let outer_else = vec![node("Neg", "outer.neg", &["x"], &["outer.n"], vec![])];
    let graph = GraphProto {
        name: Some("nested".into()),
        node: vec![
            node(
                "ReduceMean",
                "mean",
                &["x"],
                &["m"],
                vec![attr_i("keepdims", 0)],
            ),
            node("Greater", "gt", &["m", "zero"], &["cond"], vec![]),
            node(
                "If",
                "outer.if",
                &["cond"],
                &["y"],
                vec![
                    attr_g("then_branch", branch("outer_then", outer_then, "inner.out")),
                    attr_g("else_branch", branch("outer_else", outer_else, "outer.n")),
                ],
            ),
        ],
        initializer: vec![
            tensor_f32("one", &[], &[1.0]),
            tensor_f32("zero", &[], &[0.0]),
        ],
        input: vec![f32_value("x", &[1, 8])],
        output: vec![f32_value("y", &[1, 8])],
        ..Default::default()
    };
    let proto = builder::model(graph, vec![opset("", 13)], "test");
    Model::from_proto(proto, std::env::temp_dir())
}

#[test]
fn a_site_two_branches_deep_reading_a_branch_value_is_measured() {
    let model = nested_if();
    let samples: Vec<Sample> = [0.8, -0.8, 0.6]
        .iter()
        .enumerate()
        .map(|(k, &s)| vec![normal("x", &[1, 8], s, k as u64)])
        .collect();
    let r = compare_models(&model, &model, &samples, &no_latency()).unwrap();
    let s = site(&r, "inner.y");
    assert_eq!(s.kind_a.id, "silu");
    assert!(s.graph.contains("inner.if"), "{}", s.graph);
    for d in [&s.local, &s.propagated] {
        let d = d.as_ref().unwrap_or_else(|| panic!("{:?}", s.notes));
        assert_eq!((d.max_abs, d.cosine), (0.0, 1.0));
    }
    // The observed input is h = x + 1 on the two samples that take both branches.
    let range = s.input_range.unwrap();
    let lowest = samples
        .iter()
        .filter(|v| v[0].to_f64().unwrap().mean().unwrap() > 0.0)
        .flat_map(|v| v[0].to_f64().unwrap().into_iter())
        .fold(f64::INFINITY, f64::min);
    assert!(
        (range.min - (lowest + 1.0)).abs() <= 1e-6,
        "{range:?} {lowest}"
    );
}

/// x [4, 8] scanned along axis 0; the body computes silu of each row (ONNX Scan, opset 11).
fn scan_model() -> Model {
    let body = GraphProto {
        name: Some("row".into()),
        node: vec![
            node("Sigmoid", "row.sig", &["row.x"], &["row.s"], vec![]),
            node("Mul", "row.mul", &["row.x", "row.s"], &["row.y"], vec![]),
        ],
        input: vec![f32_value("row.x", &[8])],
        output: vec![f32_value("row.y", &[8])],
        ..Default::default()
    };
    let graph = GraphProto {
        name: Some("scanned".into()),
        node: vec![node(
            "Scan",
            "rows",
            &["x"],
            &["y"],
            vec![attr_g("body", body), attr_i("num_scan_inputs", 1)],
        )],
        input: vec![f32_value("x", &[4, 8])],
        output: vec![f32_value("y", &[4, 8])],
        ..Default::default()
    };
    let proto = builder::model(graph, vec![opset("", 11)], "test");
    Model::from_proto(proto, std::env::temp_dir())
}

#[test]
fn a_scan_body_site_gets_drift_over_every_iteration() {
    let model = scan_model();
    let samples = vec![
        vec![normal("x", &[4, 8], 0.0, 1)],
        vec![normal("x", &[4, 8], 1.0, 2)],
    ];
    let r = compare_models(&model, &model, &samples, &no_latency()).unwrap();
    let s = site(&r, "row.y");
    for d in [&s.local, &s.propagated] {
        let d = d.as_ref().unwrap_or_else(|| panic!("{:?}", s.notes));
        assert_eq!((d.max_abs, d.cosine), (0.0, 1.0));
    }
    // The observed range covers every row of every sample: all of x (the body's input is the
    // row being scanned).
    let all = samples
        .iter()
        .flat_map(|v| v[0].to_f64().unwrap().into_iter());
    let (lo, hi) = all.fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), x| {
        (l.min(x), h.max(x))
    });
    let range = s.input_range.unwrap();
    assert_eq!((range.min, range.max), (lo, hi));

    // The body's silu as hard-swish (HardSigmoid(1/6, 1/2) then Mul: the ONNX HardSwish body).
    let mut proto = model.proto().clone();
    let body = proto.graph.as_mut().unwrap().node[0].attribute[0]
        .g
        .as_mut()
        .unwrap();
    body.node[0] = node(
        "HardSigmoid",
        "row.hs",
        &["row.x"],
        &["row.s"],
        vec![
            builder::attr_f("alpha", 1.0 / 6.0),
            builder::attr_f("beta", 0.5),
        ],
    );
    let rewritten = Model::from_proto(proto, std::env::temp_dir());
    let r = compare_models(&model, &rewritten, &samples, &no_latency()).unwrap();
    let s = site(&r, "row.y");
    assert_eq!(s.kind_b.id, "hard_swish");
    let local = s.local.as_ref().unwrap_or_else(|| panic!("{:?}", s.notes));
    assert!(
        local.max_abs > 0.0 && local.max_abs <= HARD_SWISH_BOUND,
        "{local:?}"
    );
    assert!(s.isolation_max_abs.unwrap() <= 1e-5);
    let output = r.outputs[0].metrics.as_ref().unwrap();
    // The graph output is the stacked site output: the same figures.
    assert_eq!(output.max_abs, s.propagated.as_ref().unwrap().max_abs);
}

#[test]
fn a_scan_body_below_a_branch_is_measured_where_the_branch_runs() {
    let scan = scan_model().proto().graph.clone().unwrap();
    let then = GraphProto {
        name: Some("then".into()),
        node: scan.node.clone(),
        output: vec![f32_value("y", &[4, 8])],
        ..Default::default()
    };
    let other = GraphProto {
        name: Some("else".into()),
        node: vec![node("Neg", "neg", &["x"], &["n"], vec![])],
        output: vec![f32_value("n", &[4, 8])],
        ..Default::default()
    };
    let graph = GraphProto {
        name: Some("guarded".into()),
        node: vec![node(
            "If",
            "guard",
            &["c"],
            &["out"],
            vec![attr_g("then_branch", then), attr_g("else_branch", other)],
        )],
        input: vec![
            f32_value("x", &[4, 8]),
            builder::value("c", DataType::Bool, &[]),
        ],
        output: vec![f32_value("out", &[4, 8])],
        ..Default::default()
    };
    let model = Model::from_proto(
        builder::model(graph, vec![opset("", 11)], "test"),
        std::env::temp_dir(),
    );
    let sample = |c: bool, seed: u64| {
        vec![
            normal("x", &[4, 8], 0.0, seed),
            NamedTensor::new("c", Tensor::from(c)),
        ]
    };
    // The branch runs on the first and third samples only.
    let samples = vec![sample(true, 1), sample(false, 2), sample(true, 3)];
    let r = compare_models(&model, &model, &samples, &no_latency()).unwrap();
    let s = site(&r, "row.y");
    for d in [&s.local, &s.propagated] {
        let d = d.as_ref().unwrap_or_else(|| panic!("{:?}", s.notes));
        assert_eq!((d.max_abs, d.cosine), (0.0, 1.0));
        // Two samples of 4 rows of 8 (ONNX Scan: the body runs once per row).
        assert_eq!(d.compared, 2 * 4 * 8);
    }
    // The range is that of the two samples that took the branch.
    let taken = [&samples[0], &samples[2]]
        .into_iter()
        .flat_map(|v| v[0].to_f64().unwrap().into_iter());
    let (lo, hi) = taken.fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), x| {
        (l.min(x), h.max(x))
    });
    let range = s.input_range.unwrap();
    assert_eq!((range.min, range.max), (lo, hi));
    assert_eq!(r.outputs[0].metrics.as_ref().unwrap().max_abs, 0.0);
}
