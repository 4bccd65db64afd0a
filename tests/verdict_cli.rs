//! One verdict a deployment gate can trust: the whole converted model against the target, a
//! budget always, and the first failing reason as the last line, the JSON's `verdict` and the
//! exit code.
//!
//! Outside references: the op lists are the built-in profiles' own (profiles/*.toml, what the
//! target is declared to run); GELU's largest gap to ReLU, 0.16997 at x = -0.75179, is the GELU
//! minimum (Hendrycks & Gimpel 2016, arXiv:1606.08415; check value computed in double
//! precision); the LayerNormalization, Softmax and Split nodes are torch 2.15's export of a
//! pre-norm encoder layer (tests/fixtures/torch-blocks, manifest.json).

mod cli_support;

use std::path::{Path, PathBuf};
use std::process::Output;

use actswap::onnx::Model;
use actswap::onnx::builder::{Dim, model, node, opset, tensor_f32, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use cli_support::{actswap, path, repo, stderr};
use serde_json::Value;

fn json(out: &Output) -> Value {
    serde_json::from_slice(&out.stdout).unwrap_or_else(|e| panic!("{e}: {}", stderr(out)))
}

fn text(out: &Output) -> String {
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// The last line is the verdict, and no other line says verdict (the caution's "not with this
/// verdict" aside).
fn assert_one_verdict_line(text: &str, verdict: &str) {
    let last = text.trim_end().lines().last().unwrap_or("");
    assert!(
        last == format!("verdict: {verdict}") || last.starts_with(&format!("verdict: {verdict}: ")),
        "{text}"
    );
    let others = text
        .lines()
        .filter(|l| l.contains("verdict") && !l.contains("this verdict"))
        .count();
    assert_eq!(others, 1, "{text}");
}

/// A small classifier, Gemm -> GELU (as the TorchScript exporter spells it) -> Gemm, with fixed
/// weights: 16 features, 32 hidden units, 10 classes. The hidden biases sit near -0.5, where GELU
/// and ReLU differ most, as after a layer whose units are mostly off.
fn gelu_classifier(dir: &Path) -> PathBuf {
    let mut state = 0x2545_f491_4f6c_dd1du64;
    let mut weights = |n: usize, scale: f32| -> Vec<f32> {
        (0..n)
            .map(|_| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                ((state >> 11) as f64 / (1u64 << 53) as f64 * 2.0 - 1.0) as f32 * scale
            })
            .collect()
    };
    let shifted = |v: Vec<f32>, by: f32| v.into_iter().map(|x| x + by).collect::<Vec<f32>>();
    let graph = GraphProto {
        name: Some("crop-moisture".into()),
        node: vec![
            node("Gemm", "fc1", &["x", "w1", "b1"], &["h"], vec![]),
            node("Div", "div", &["h", "sqrt2"], &["hd"], vec![]),
            node("Erf", "erf", &["hd"], &["he"], vec![]),
            node("Add", "add", &["he", "one"], &["ha"], vec![]),
            node("Mul", "mul", &["h", "ha"], &["hm"], vec![]),
            node("Mul", "half", &["hm", "half"], &["g"], vec![]),
            node("Gemm", "fc2", &["g", "w2", "b2"], &["logits"], vec![]),
        ],
        initializer: vec![
            tensor_f32("w1", &[16, 32], &weights(16 * 32, 0.1)),
            tensor_f32("b1", &[32], &shifted(weights(32, 0.5), -0.5)),
            tensor_f32("w2", &[32, 10], &weights(32 * 10, 0.5)),
            tensor_f32("b2", &[10], &weights(10, 0.1)),
            tensor_f32("sqrt2", &[], &[std::f32::consts::SQRT_2]),
            tensor_f32("one", &[], &[1.0]),
            tensor_f32("half", &[], &[0.5]),
        ],
        input: vec![value(
            "x",
            DataType::Float,
            &[Dim::Named("batch"), Dim::Size(16)],
        )],
        output: vec![value(
            "logits",
            DataType::Float,
            &[Dim::Named("batch"), Dim::Size(10)],
        )],
        ..Default::default()
    };
    let proto = model(graph, vec![opset("", 13)], "actswap-tests");
    let file = dir.join("crop-moisture.onnx");
    Model::from_proto(proto, dir.to_path_buf())
        .save(&file, &Default::default())
        .unwrap();
    file
}

#[test]
fn a_model_with_ops_the_target_does_not_run_is_not_ready() {
    let dir = repo("tests/fixtures/torch-blocks/ferry-intent-dynamo-op20");
    let model = dir.join("model.onnx");
    let inputs = dir.join("inputs/b2-s12");
    let args = [
        "audit",
        path(&model),
        "--target",
        "piecewise-linear",
        "--inputs-dir",
        path(&inputs),
        "--no-latency",
    ];
    let out = actswap(&[&args[..], &["--json"]].concat());
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let v = json(&out);
    assert_eq!(v["verdict"], "not_ready");
    let refused = v["readiness"]["refused"].as_array().unwrap();
    let op = |name: &str| refused.iter().find(|r| r["op"] == name);
    let ln = op("LayerNormalization").expect("LayerNormalization refused");
    assert_eq!(
        ln["count"], 3,
        "pre-norm: two sublayer norms and a final one"
    );
    assert_eq!(ln["activation_site"], false);
    assert!(op("Softmax").is_some());
    assert!(
        v["reasons"][0]
            .as_str()
            .unwrap()
            .contains("LayerNormalization")
    );

    let out = actswap(&args);
    let t = text(&out);
    assert!(t.contains("not run by the target:"), "{t}");
    assert_one_verdict_line(&t, "not_ready");
}

#[test]
fn gelu_to_relu_under_the_built_in_profile_fails_its_budget() {
    let tmp = tempfile::tempdir().unwrap();
    let m = gelu_classifier(tmp.path());
    let out = actswap(&[
        "audit",
        path(&m),
        "--target",
        "piecewise-linear",
        "--dim",
        "batch=12",
        "--samples",
        "2",
        "--range=-1,1",
        "--no-latency",
        "--json",
    ]);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let v = json(&out);
    // The only approximation within the 0.3 allowance is ReLU, 0.16997 from GELU at its
    // minimum x = -0.75179.
    let site = &v["plan"]["sites"][0];
    assert_eq!(site["to"]["kind"], "relu");
    let bound = site["error_bound"]["max_abs"].as_f64().unwrap();
    assert!((bound - 0.16997120748).abs() < 5e-11, "{bound}");
    assert_eq!(v["budget_source"], "profile piecewise-linear");
    assert_eq!(v["budget"]["min_cosine"], 0.99);
    assert_eq!(v["verdict"], "over_budget");
    let metrics: Vec<&str> = v["drift"]["offenders"]
        .as_array()
        .unwrap()
        .iter()
        .map(|o| o["metric"].as_str().unwrap())
        .collect();
    assert!(
        metrics.contains(&"cosine") || metrics.contains(&"top1"),
        "{metrics:?}"
    );
}

#[test]
fn nothing_to_compare_is_an_error_not_a_pass() {
    let tmp = tempfile::tempdir().unwrap();
    let m = gelu_classifier(tmp.path());
    let out = actswap(&[
        "audit",
        path(&m),
        "--to",
        "gelu=gelu_tanh",
        "--dim",
        "batch=0",
        "--max-abs",
        "1e-12",
    ]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out));
    assert!(stderr(&out).contains("batch=0"), "{}", stderr(&out));

    // A graph with no node and no output.
    let empty = tmp.path().join("empty.onnx");
    let graph = GraphProto {
        name: Some("empty".into()),
        ..Default::default()
    };
    Model::from_proto(
        model(graph, vec![opset("", 13)], "actswap-tests"),
        tmp.path().to_path_buf(),
    )
    .save(&empty, &Default::default())
    .unwrap();
    let out = actswap(&["audit", path(&empty), "--to", "*=primitive"]);
    assert_eq!(out.status.code(), Some(2), "{}", text(&out));
    let err = stderr(&out);
    assert!(err.contains("nothing to convert or compare"), "{err}");
    assert_eq!(err.trim_end().lines().count(), 1);
}

#[test]
fn the_target_budget_and_inputs_are_recorded_in_every_format() {
    let tmp = tempfile::tempdir().unwrap();
    let sample = repo("sample-models/orchard-grader.onnx");
    let report = tmp.path().join("audit.html");
    let out = actswap(&[
        "audit",
        path(&sample),
        "--target",
        "piecewise-linear",
        "--dim",
        "batch=1",
        "--no-latency",
        "--report",
        path(&report),
    ]);
    let t = text(&out);
    assert!(
        t.contains("converted for  target piecewise-linear (built in)"),
        "{t}"
    );
    assert!(
        t.contains("budget         min cosine 0.99, min top-1 0.95"),
        "{t}"
    );
    let html = std::fs::read_to_string(&report).unwrap();
    for fact in [
        "target piecewise-linear (built in)",
        "min cosine <span class=\"num\" title=\"0.99\">",
        "profile piecewise-linear",
        "seed 0",
    ] {
        assert!(html.contains(fact), "HTML lacks {fact}");
    }
    assert!(html.contains(env!("CARGO_PKG_VERSION")));

    // A profile file is named with its SHA-256.
    let profile = tmp.path().join("npu.toml");
    std::fs::write(
        &profile,
        "name = \"orchard-npu\"\nmax_approx_error = 0.3\n[ops]\n\"*\" = \"*\"\n",
    )
    .unwrap();
    let out = actswap(&[
        "audit",
        path(&sample),
        "--target",
        path(&profile),
        "--dim",
        "batch=1",
        "--no-latency",
        "--json",
    ]);
    let v = json(&out);
    let converted = v["converted_for"].as_str().unwrap();
    assert!(converted.contains("orchard-npu (file "), "{converted}");
    assert!(converted.contains("sha256 "), "{converted}");
    assert_eq!(v["budget_source"], "default", "a profile without a budget");
    assert!(v["inputs"].as_str().unwrap().contains("seed 0"));
    assert_eq!(v["actswap"], env!("CARGO_PKG_VERSION"));

    let outdir = tmp.path().join("converted");
    let md = tmp.path().join("summary.md");
    let out = actswap(&[
        "batch",
        path(&sample),
        "--target",
        "piecewise-linear",
        "--dim",
        "batch=1",
        "--no-latency",
        "-o",
        path(&outdir),
        "--markdown",
        path(&md),
        "--json",
    ]);
    let v = json(&out);
    assert!(
        v["converted_for"]
            .as_str()
            .unwrap()
            .contains("piecewise-linear")
    );
    assert_eq!(v["budget"]["min_top1"], 0.95);
    let md = std::fs::read_to_string(&md).unwrap();
    assert!(
        md.contains("converted for  target piecewise-linear"),
        "{md}"
    );
    assert!(md.contains("budget         min cosine 0.99"), "{md}");
}

#[test]
fn plan_and_measurement_describe_the_same_site() {
    let sample = repo("sample-models/greenhouse-climate.onnx");
    let out = actswap(&[
        "audit",
        path(&sample),
        "--target",
        "piecewise-linear",
        "--dim",
        "batch=1",
        "--no-latency",
        "--json",
    ]);
    let v = json(&out);
    let planned = v["plan"]["sites"].as_array().unwrap();
    for d in v["drift"]["sites"].as_array().unwrap() {
        let p = planned.iter().find(|p| p["site"] == d["id_a"]).unwrap();
        assert_eq!(d["id_b"], d["id_a"]);
        if p["action"] == "rewrite" {
            assert_eq!(d["kind_b"], p["to"]["kind"], "{}", d["id_a"]);
            assert_eq!(d["params_b"], p["to"]["params"], "{}", d["id_a"]);
            assert_eq!(d["ops_b"], p["to"]["ops"], "{}", d["id_a"]);
        } else {
            assert_eq!(d["kind_b"], d["kind_a"]);
        }
        let notes = d["notes"].to_string();
        assert!(!notes.contains("read different tensors"), "{notes}");
    }
    // The sigmoid after a bias Add (s16): the plan's hard sigmoid is what is measured.
    let s16 = planned.iter().find(|p| p["site"] == "s16").unwrap();
    assert_eq!(s16["kind"], "sigmoid");
    assert_eq!(s16["to"]["kind"], "hard_sigmoid");
}

#[test]
fn prefer_applies_only_to_sites_the_target_does_not_run() {
    let sample = repo("sample-models/greenhouse-climate.onnx");
    let out = actswap(&[
        "swap",
        path(&sample),
        "--target",
        "piecewise-linear",
        "--dry-run",
        "--json",
    ]);
    let v = json(&out);
    let leaky = v["sites"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["kind"] == "leaky_relu")
        .expect("greenhouse has a fused LeakyRelu");
    assert_eq!(leaky["from"]["ops"], serde_json::json!(["LeakyRelu"]));
    assert_eq!(leaky["action"], "keep", "{leaky}");
    assert_eq!(leaky["reason"], "accepted by the target");
}

/// door-chime's If (sample-models/README.md) takes its then-branch, which holds a SiLU (s3,
/// rewritten here to hard-swish), when
/// mean(mfcc) > 0 (ONNX operator specification, If: `then_branch` runs when the condition is
/// true). Uniform inputs in [-2, -1] never take it; inputs in [1, 2] always do.
fn door_chime_audit(range: &str) -> Output {
    actswap(&[
        "audit",
        repo("sample-models/door-chime-keywords.onnx")
            .to_str()
            .unwrap(),
        "--to",
        "silu=hard_swish",
        "--dim",
        "batch=1",
        "--dist",
        "uniform",
        "--range",
        range,
        "--samples",
        "2",
        "--no-latency",
        "--json",
    ])
}

#[test]
fn a_rewritten_site_the_samples_never_reach_is_unmeasured_not_a_pass() {
    let out = door_chime_audit("-2,-1");
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let v = json(&out);
    assert_eq!(v["verdict"], "unmeasured", "{v:#}");
    let reason = v["reasons"][0].as_str().unwrap();
    assert!(
        reason.contains("s3 (silu)") && reason.contains("give inputs that reach it"),
        "{reason}"
    );
    // The ReLU of the else-branch is left as it was, so only the SiLU is named.
    assert!(!reason.contains("s4"), "{reason}");
}

#[test]
fn the_same_site_reached_by_the_samples_passes() {
    let out = door_chime_audit("1,2");
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let v = json(&out);
    assert_eq!(v["verdict"], "pass", "{v:#}");
    let s3 = v["drift"]["sites"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["id_a"] == "s3")
        .unwrap();
    // Hard-swish vs SiLU differ by at most 3 / (1 + e^3) (Howard et al. 2019,
    // arXiv:1905.02244; reference-facts check value).
    let local = s3["local"]["max_abs"].as_f64().unwrap();
    assert!(local > 0.0 && local <= 0.14227761953270035, "{s3:#}");
}

/// Run options whose inputs never take door-chime's then-branch (see [`door_chime_audit`]).
const NEVER_THEN: [&str; 8] = [
    "--dim",
    "batch=1",
    "--dist",
    "uniform",
    "--range",
    "-2,-1",
    "--no-latency",
    "--json",
];

#[test]
fn drift_of_two_files_counts_only_the_sites_that_differ() {
    // A model against itself: its unreached branch site is not rewritten, so it does not count.
    let door = repo("sample-models/door-chime-keywords.onnx");
    let d = door.to_str().unwrap();
    let out = actswap(&[&["drift", d, d][..], &NEVER_THEN].concat());
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert_eq!(json(&out)["verdict"], "pass");
}

#[test]
fn batch_counts_unmeasured_models_and_exits_1() {
    let tmp = tempfile::tempdir().unwrap();
    let out_dir = tmp.path().join("out");
    let door = repo("sample-models/door-chime-keywords.onnx");
    let head = [
        "batch",
        door.to_str().unwrap(),
        "-o",
        path(&out_dir),
        "--to",
        "silu=hard_swish",
    ];
    let out = actswap(&[&head[..], &NEVER_THEN].concat());
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let v = json(&out);
    assert_eq!(v["models"][0]["verdict"], "unmeasured", "{v:#}");
    assert_eq!(v["totals"]["unmeasured"], 1, "{v:#}");
    // Written only on pass.
    assert!(v["models"][0]["output"].is_null(), "{v:#}");
}
