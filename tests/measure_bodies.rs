//! Models with local functions and Loops: tract 0.23.9 runs neither, so the runner inlines the
//! functions and unrolls the Loops in a copy made for running, and sites inside their bodies get
//! drift at every call and iteration.
//!
//! Outside references:
//! - onnxruntime (a general-purpose reference runtime): the outputs of the torch 2.15 exports in
//!   tests/fixtures/torch-subgraphs/ (scripts/gen_torch_subgraphs.py, manifest.json), compared
//!   within 1e-4 absolute plus 1e-4 relative (the bound issue 11 asks of `audit` and `drift`).
//! - ONNX IR specification, "Functions": formal inputs and outputs bind to the call's actual
//!   ones; an attribute with `ref_attr_name` takes the call's attribute of that name, else the
//!   function's default (`attribute_proto`).
//! - ONNX operator specification, Loop: iteration_num counts from 0, carried values chain from
//!   one iteration to the next, scan outputs stack the iterations along a new first axis.
//! - Hard-swish vs SiLU worst case 3 / (1 + e^3) = 0.14227761953270035 at x = +-3 (Howard et al.
//!   2019, arXiv:1905.02244; the closed form of |x sigmoid(x) - hard_swish(x)| at x = 3).

mod cli_support;

use std::path::{Path, PathBuf};

use actswap::measure::capture::run_samples;
use actswap::measure::runnable;
use actswap::measure::{CompareOptions, compare_models};
use actswap::onnx::Model;
use actswap::onnx::builder::{self, Dim, attr_f, attr_g, attr_i, node, opset, value};
use actswap::onnx::proto::{
    AttributeProto, FunctionProto, GraphProto, TensorProto, attribute_proto::AttributeType,
    tensor_proto::DataType,
};
use actswap::run::inputs::read_tensor_file;
use actswap::run::{DEFAULT_MEMORY_CEILING, NamedTensor, Sample, Tensor, prepare};
use cli_support::{actswap, stderr};

const TOL: f64 = 1e-4;
/// Hard-swish vs SiLU (Howard et al. 2019): 3 / (1 + e^3).
const HARD_SWISH_BOUND: f64 = 0.14227761953270035;
const KILN: &str = "kiln-forecast-ts-op17";
const TIDE: &str = "tide-gauge-ts-op17";
const SETS: [&str; 2] = ["b2-s6", "b1-s3"];

fn dir(id: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures/torch-subgraphs")
        .join(id)
}

fn load(id: &str) -> Model {
    Model::load(&dir(id).join("model.onnx")).unwrap()
}

fn npy(id: &str, kind: &str, set: &str, name: &str) -> Tensor {
    read_tensor_file(&dir(id).join(kind).join(set).join(name), 1 << 20).unwrap()
}

fn sample(id: &str, set: &str) -> Sample {
    vec![NamedTensor::new("x", npy(id, "inputs", set, "x.npy"))]
}

/// Max |got - expected| beyond `TOL * (1 + |expected|)`, or the shape mismatch.
fn assert_close(got: &NamedTensor, expected: &Tensor, what: &str) {
    let got = got.to_f64().unwrap();
    let expected = NamedTensor::new("expected", expected.clone())
        .to_f64()
        .unwrap();
    assert_eq!(got.shape(), expected.shape(), "{what}");
    for (g, e) in got.iter().zip(expected.iter()) {
        assert!((g - e).abs() <= TOL * (1.0 + e.abs()), "{what}: {g} vs {e}");
    }
}

fn no_latency() -> CompareOptions {
    CompareOptions {
        latency: None,
        ..CompareOptions::default()
    }
}

#[test]
fn tract_refuses_function_calls_and_loops_as_written() {
    // The defects worked around: tract 0.23.9 loads a call of a local function as an unknown
    // op, and has no Loop op.
    for (id, op) in [(KILN, "KilnBlock"), (TIDE, "Loop")] {
        let model = load(id);
        let err = prepare(&model.encode(), Some(model.dir()))
            .unwrap_err()
            .to_string();
        assert!(err.contains(op), "{id}: {err}");
    }
}

#[test]
fn inlined_and_unrolled_copies_compute_what_onnxruntime_does() {
    for id in [KILN, TIDE] {
        let model = load(id);
        for set in SETS {
            let samples = vec![sample(id, set)];
            let tract = runnable::load(&model, &samples, DEFAULT_MEMORY_CEILING).unwrap();
            let values = run_samples(&tract, &samples, &[], id).unwrap();
            assert_close(
                &values[0]["y"],
                &npy(id, "outputs", set, "y.npy"),
                &format!("{id} {set}"),
            );
        }
    }
}

#[test]
fn body_sites_against_themselves_drift_by_exactly_zero_at_every_call_and_iteration() {
    for (id, runs) in [(KILN, "2 call(s)"), (TIDE, "6 iteration(s)")] {
        let model = load(id);
        let r = compare_models(&model, &model, &[sample(id, "b2-s6")], &no_latency()).unwrap();
        let inside: Vec<_> = r.sites.iter().filter(|s| s.graph != "main").collect();
        assert!(!inside.is_empty(), "{id}");
        for s in inside {
            for d in [&s.local, &s.propagated] {
                let d = d
                    .as_ref()
                    .unwrap_or_else(|| panic!("{id} {}: {:?}", s.id_a, s.notes));
                assert_eq!((d.max_abs, d.cosine), (0.0, 1.0), "{id} {}", s.id_a);
            }
            assert!(s.notes.iter().any(|n| n.contains(runs)), "{:?}", s.notes);
        }
        for o in &r.outputs {
            assert_eq!(o.metrics.as_ref().unwrap().max_abs, 0.0, "{id}");
        }
    }
}

#[test]
fn audit_measures_a_silu_swapped_inside_a_function_and_a_loop() {
    for id in [KILN, TIDE] {
        let input = dir(id).join("inputs/b2-s6/x.npy");
        let out = actswap(&[
            "audit",
            dir(id).join("model.onnx").to_str().unwrap(),
            "--to",
            "silu=hard_swish",
            "--input",
            &format!("x={}", input.display()),
            "--no-latency",
            "--json",
        ]);
        let v: serde_json::Value = serde_json::from_slice(&out.stdout)
            .unwrap_or_else(|e| panic!("{id}: {e}: {}", stderr(&out)));
        assert_ne!(v["verdict"], "unmeasured", "{id}: {:#}", v["reasons"]);
        assert_ne!(v["verdict"], "error", "{id}: {:#}", v["reasons"]);
        let site = v["drift"]["sites"]
            .as_array()
            .unwrap()
            .iter()
            .find(|s| s["kind_a"] == "silu")
            .unwrap();
        let local = site["local"]["max_abs"].as_f64().unwrap();
        assert!(local > 0.0 && local <= HARD_SWISH_BOUND, "{id}: {site:#}");
        assert!(
            site["propagated"]["max_abs"].as_f64().unwrap() > 0.0,
            "{id}"
        );
    }
}

/// A function `Scale(x) = x * alpha` whose alpha is an attribute with default 2, called with
/// alpha = 3 and without it.
fn scale_model() -> Model {
    let mut alpha_ref = AttributeProto {
        name: Some("value_float".into()),
        ref_attr_name: Some("alpha".into()),
        r#type: Some(AttributeType::Float as i32),
        ..Default::default()
    };
    alpha_ref.f = None;
    let function = FunctionProto {
        name: Some("Scale".into()),
        domain: Some("local.fns".into()),
        input: vec!["x".into()],
        output: vec!["y".into()],
        attribute_proto: vec![attr_f("alpha", 2.0)],
        node: vec![
            node("Constant", "c", &[], &["alpha"], vec![alpha_ref]),
            node("Mul", "m", &["x", "alpha"], &["y"], vec![]),
        ],
        opset_import: vec![opset("", 17)],
        ..Default::default()
    };
    let call = |name: &str, out: &str, attrs: Vec<AttributeProto>| {
        let mut n = node("Scale", name, &["x"], &[out], attrs);
        n.domain = Some("local.fns".into());
        n
    };
    let graph = GraphProto {
        name: Some("calls".into()),
        node: vec![
            call("given", "three_x", vec![attr_f("alpha", 3.0)]),
            call("default", "two_x", vec![]),
        ],
        input: vec![value("x", DataType::Float, &[Dim::Size(3)])],
        output: vec![
            value("three_x", DataType::Float, &[Dim::Size(3)]),
            value("two_x", DataType::Float, &[Dim::Size(3)]),
        ],
        ..Default::default()
    };
    let mut proto = builder::model(graph, vec![opset("", 17), opset("local.fns", 1)], "tests");
    proto.functions.push(function);
    Model::from_proto(proto, PathBuf::new())
}

#[test]
fn an_attribute_reference_takes_the_calls_value_else_the_functions_default() {
    let model = scale_model();
    let x = [1.0f32, -2.0, 0.5];
    let samples = vec![vec![NamedTensor::new(
        "x",
        Tensor::from_shape(&[3], &x).unwrap(),
    )]];
    let tract = runnable::load(&model, &samples, DEFAULT_MEMORY_CEILING).unwrap();
    let values = run_samples(&tract, &samples, &[], "calls").unwrap();
    for (out, alpha) in [("three_x", 3.0f32), ("two_x", 2.0)] {
        let want: Vec<f32> = x.iter().map(|v| v * alpha).collect();
        assert_close(
            &values[0][out],
            &Tensor::from_shape(&[3], &want).unwrap(),
            out,
        );
    }
}

fn int64(name: &str, v: i64) -> TensorProto {
    TensorProto {
        name: Some(name.into()),
        data_type: Some(DataType::Int64 as i32),
        int64_data: vec![v],
        ..Default::default()
    }
}

/// One sample for the loop models: `v0` = [1, 2].
fn v0_samples() -> Vec<Sample> {
    vec![vec![NamedTensor::new(
        "v0",
        Tensor::from_shape(&[2], &[1.0f32, 2.0]).unwrap(),
    )]]
}

/// A Loop of 3 iterations: carried v <- v + 1, scan output (v + 1) * 2 + iteration_num; `cond`
/// is the body's condition output (Identity of its input, or a comparison when `stops`).
fn loop_model(stops: bool) -> Model {
    let f = |name: &str| value(name, DataType::Float, &[Dim::Size(2)]);
    let mut body_nodes = vec![
        node("Add", "add", &["v_in", "one"], &["v_out"], vec![]),
        node("Mul", "mul", &["v_out", "two"], &["doubled"], vec![]),
        node(
            "Cast",
            "cast",
            &["i"],
            &["i_f"],
            vec![attr_i("to", DataType::Float as i64)],
        ),
        node("Add", "plus_i", &["doubled", "i_f"], &["scanned"], vec![]),
    ];
    body_nodes.push(if stops {
        node("Less", "less", &["i", "limit"], &["cond_out"], vec![])
    } else {
        node("Identity", "keep", &["cond_in"], &["cond_out"], vec![])
    });
    let body = GraphProto {
        name: Some("body".into()),
        node: body_nodes,
        input: vec![
            value("i", DataType::Int64, &[]),
            value("cond_in", DataType::Bool, &[]),
            f("v_in"),
        ],
        output: vec![
            value("cond_out", DataType::Bool, &[]),
            f("v_out"),
            f("scanned"),
        ],
        ..Default::default()
    };
    let graph = GraphProto {
        name: Some("looped".into()),
        node: vec![node(
            "Loop",
            "steps",
            &["trips", "", "v0"],
            &["v_final", "stacked"],
            vec![attr_g("body", body)],
        )],
        initializer: vec![
            int64("trips", 3),
            int64("limit", 1),
            builder::tensor_f32("one", &[], &[1.0]),
            builder::tensor_f32("two", &[], &[2.0]),
        ],
        input: vec![f("v0")],
        output: vec![
            f("v_final"),
            value("stacked", DataType::Float, &[Dim::Size(3), Dim::Size(2)]),
        ],
        ..Default::default()
    };
    Model::from_proto(
        builder::model(graph, vec![opset("", 17)], "tests"),
        PathBuf::new(),
    )
}

#[test]
fn an_unrolled_loop_chains_carried_values_and_stacks_scan_outputs() {
    let model = loop_model(false);
    let samples = v0_samples();
    let tract = runnable::load(&model, &samples, DEFAULT_MEMORY_CEILING).unwrap();
    let values = run_samples(&tract, &samples, &[], "loop").unwrap();
    // v: [1,2] -> [2,3] -> [3,4] -> [4,5]; scanned: 2v + k for k = 0, 1, 2.
    assert_close(
        &values[0]["v_final"],
        &Tensor::from_shape(&[2], &[4.0f32, 5.0]).unwrap(),
        "v_final",
    );
    assert_close(
        &values[0]["stacked"],
        &Tensor::from_shape(&[3, 2], &[4.0f32, 6.0, 7.0, 9.0, 10.0, 12.0]).unwrap(),
        "stacked",
    );
}

#[test]
fn a_loop_whose_body_decides_when_to_stop_is_refused_in_one_line() {
    let model = loop_model(true);
    let samples = v0_samples();
    let err = format!(
        "{:#}",
        runnable::load(&model, &samples, DEFAULT_MEMORY_CEILING)
            .err()
            .unwrap()
    );
    for part in [
        "Loop node 'steps'",
        "cond_out",
        "0.23.9",
        "`scan` and `swap` still work",
    ] {
        assert!(err.contains(part), "{err}");
    }
    assert_eq!(err.lines().count(), 1, "{err}");
}

#[test]
fn the_written_conversion_keeps_its_functions_and_loop() {
    // Inlining and unrolling touch only the copy tract runs (lossless rule: a rewrite changes
    // only its sites).
    let tmp = tempfile::tempdir().unwrap();
    for (id, keeps) in [(KILN, "functions"), (TIDE, "Loop")] {
        let out = tmp.path().join(format!("{id}.onnx"));
        let input = dir(id).join("inputs/b2-s6/x.npy");
        let run = actswap(&[
            "audit",
            dir(id).join("model.onnx").to_str().unwrap(),
            "--to",
            "silu=hard_swish",
            "--input",
            &format!("x={}", input.display()),
            "--no-latency",
            "--write-failing",
            "-o",
            out.to_str().unwrap(),
        ]);
        assert!(run.status.code().is_some_and(|c| c < 2), "{}", stderr(&run));
        let written = Model::load(&out).unwrap();
        let original = load(id);
        let proto = written.proto();
        assert_eq!(
            proto.functions.len(),
            original.proto().functions.len(),
            "{keeps}"
        );
        let loops = |p: &actswap::onnx::proto::ModelProto| {
            p.graph
                .as_ref()
                .unwrap()
                .node
                .iter()
                .filter(|n| n.op_type() == "Loop")
                .count()
        };
        assert_eq!(loops(proto), loops(original.proto()), "{keeps}");
    }
}

#[test]
fn samples_that_disagree_on_the_trip_count_are_refused_by_name() {
    let model = load(TIDE);
    let samples: Vec<Sample> = SETS.iter().map(|s| sample(TIDE, s)).collect();
    let err = format!(
        "{:#}",
        compare_models(&model, &model, &samples, &no_latency())
            .err()
            .unwrap()
    );
    assert!(
        err.contains("trip count differs between samples (6, 3)") && err.contains("Loop node"),
        "{err}"
    );
}

#[test]
fn a_loop_inside_a_loop_body_is_unrolled_in_turn() {
    // The outer Loop runs twice; its body runs the 3-iteration Loop above on its carried value,
    // so v0 + 2 * 3 comes out.
    let inner_model = loop_model(false);
    let mut proto = inner_model.proto().clone();
    let graph = proto.graph.as_mut().unwrap();
    let mut inner = graph.node.remove(0);
    inner.name = Some("inner".into());
    inner.input = vec!["trips".into(), String::new(), "w_in".into()];
    inner.output = vec!["w_out".into(), "inner_stacked".into()];
    let f = |name: &str| value(name, DataType::Float, &[Dim::Size(2)]);
    let outer_body = GraphProto {
        name: Some("outer_body".into()),
        node: vec![
            inner,
            node(
                "Identity",
                "pass",
                &["outer_cond"],
                &["outer_cond_out"],
                vec![],
            ),
        ],
        input: vec![
            value("j", DataType::Int64, &[]),
            value("outer_cond", DataType::Bool, &[]),
            f("w_in"),
        ],
        output: vec![value("outer_cond_out", DataType::Bool, &[]), f("w_out")],
        ..Default::default()
    };
    graph.node = vec![node(
        "Loop",
        "outer",
        &["outer_trips", "", "v0"],
        &["v_final"],
        vec![attr_g("body", outer_body)],
    )];
    graph.initializer.push(int64("outer_trips", 2));
    graph.output.truncate(1);
    let model = Model::from_proto(proto, PathBuf::new());
    let samples = v0_samples();
    let tract = runnable::load(&model, &samples, DEFAULT_MEMORY_CEILING).unwrap();
    let values = run_samples(&tract, &samples, &[], "nested loops").unwrap();
    assert_close(
        &values[0]["v_final"],
        &Tensor::from_shape(&[2], &[7.0f32, 8.0]).unwrap(),
        "v_final",
    );
}

#[test]
fn a_function_called_only_inside_a_branch_says_why_it_is_not_measured() {
    // SiLU as a local function (x * sigmoid(x)), called in an If's then-branch only.
    let function = FunctionProto {
        name: Some("Act".into()),
        domain: Some("local.fns".into()),
        input: vec!["x".into()],
        output: vec!["y".into()],
        node: vec![
            node("Sigmoid", "s", &["x"], &["s"], vec![]),
            node("Mul", "m", &["x", "s"], &["y"], vec![]),
        ],
        opset_import: vec![opset("", 17)],
        ..Default::default()
    };
    let mut call = node("Act", "act", &["x"], &["t"], vec![]);
    call.domain = Some("local.fns".into());
    let f = |name: &str| value(name, DataType::Float, &[Dim::Size(3)]);
    let then = GraphProto {
        name: Some("then".into()),
        node: vec![call],
        output: vec![f("t")],
        ..Default::default()
    };
    let other = GraphProto {
        name: Some("else".into()),
        node: vec![node("Neg", "neg", &["x"], &["n"], vec![])],
        output: vec![f("n")],
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
        input: vec![f("x"), value("c", DataType::Bool, &[])],
        output: vec![f("out")],
        ..Default::default()
    };
    let mut proto = builder::model(graph, vec![opset("", 17), opset("local.fns", 1)], "tests");
    proto.functions.push(function);
    let model = Model::from_proto(proto, PathBuf::new());
    let samples = vec![vec![
        NamedTensor::new("x", Tensor::from_shape(&[3], &[1.0f32, -2.0, 0.5]).unwrap()),
        NamedTensor::new("c", Tensor::from(true)),
    ]];
    let r = compare_models(&model, &model, &samples, &no_latency()).unwrap();
    // The model runs (the call is inlined inside the branch) and its output is compared.
    assert_eq!(r.outputs[0].metrics.as_ref().unwrap().max_abs, 0.0);
    let s = r.sites.iter().find(|s| s.kind_a.id == "silu").unwrap();
    assert!(s.local.is_none());
    assert!(
        s.notes
            .iter()
            .any(|n| n.contains("called only inside branches or bodies")),
        "{:?}",
        s.notes
    );
}
