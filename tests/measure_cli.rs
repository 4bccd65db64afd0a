//! `actswap drift` end to end: exit codes (0 within budget, 1 over budget, 2 error), the JSON
//! keys the schema documents, and clear errors. Models: torch 2.15 exports
//! (tests/fixtures/torch) and hand-made rewrites of them (see measure_support); budgets and the
//! hard-swish bound as in measure_compare.rs (Howard et al. 2019: 3 / (1 + e^3)).

mod measure_support;

use std::path::Path;
use std::process::{Command, Output};

use actswap::onnx::builder::{Dim, model, node, opset, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use actswap::onnx::{Model, SaveOptions};
use measure_support as fx;
use serde_json::Value;

fn drift(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_actswap"))
        .arg("drift")
        .args(args)
        .output()
        .unwrap()
}

fn path(p: &Path) -> &str {
    p.to_str().unwrap()
}

#[test]
fn self_drift_exits_0_with_every_documented_key() {
    let dir = fx::fixture_dir("door-chime-ts-op13");
    let m = dir.join("model.onnx");
    let inputs = format!("{}", dir.join("inputs.npz").display());
    let out = drift(&[
        path(&m),
        path(&m),
        "--input",
        &inputs,
        "--runs",
        "2",
        "--json",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let keys: Vec<&str> = v.as_object().unwrap().keys().map(String::as_str).collect();
    assert_eq!(
        keys,
        [
            "schema_version",
            "model_a",
            "model_b",
            "samples",
            "input_source",
            "tolerance",
            "sites",
            "outputs",
            "unmatched",
            "latency",
            "budgets",
            "offenders",
            "within_budget",
            "caution",
            "budget_source",
            "verdict",
            "reasons"
        ]
    );
    let site = &v["sites"][0];
    for k in [
        "id_a",
        "id_b",
        "output",
        "kind_a",
        "params_a",
        "kind_b",
        "params_b",
        "local",
        "local_basis",
        "propagated",
        "input_range",
        "bound_over_range",
        "latency",
        "notes",
    ] {
        assert!(site.get(k).is_some(), "sites[0] has no '{k}'");
    }
    for k in ["min", "max", "p01", "p99"] {
        assert!(site["input_range"][k].is_number(), "{k}");
    }
    // Nothing changed, so no site is isolated or timed.
    assert_eq!(site["local"]["max_abs"], 0.0);
    assert_eq!(site["local_basis"], "identical");
    assert!(site["latency"].is_null());
    let output = &v["outputs"][0];
    assert!(output["metrics"]["cosine"].is_number() && output.get("top1_agreement").is_some());
    for side in ["a", "b"] {
        for k in ["median_s", "p10_s", "p90_s"] {
            assert!(v["latency"][side][k].as_f64().unwrap() > 0.0);
        }
    }
    assert_eq!(v["within_budget"], true);
    assert!(v["caution"].as_str().unwrap().contains("certifies nothing"));
}

#[test]
fn a_budget_tighter_than_the_drift_exits_1() {
    let id = "leaf-spot-ts-op13";
    let dir = fx::fixture_dir(id);
    let original = dir.join("model.onnx");
    let tmp = tempfile::tempdir().unwrap();
    let rewritten = tmp.path().join("hard-swish.onnx");
    fx::silu_to_hard_swish(&fx::load(id), "/blocks.0/act/Mul_output_0")
        .save(&rewritten, &SaveOptions::default())
        .unwrap();
    let inputs = format!("{}", dir.join("inputs.npz").display());
    let files = [path(&original), path(&rewritten), "--input", &inputs];
    let base = [&files[..], &["--no-latency"]].concat();

    let out = drift(&[&files[..], &["--runs", "2", "--json"]].concat());
    assert_eq!(out.status.code(), Some(0));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let site = v["sites"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["kind_b"] == "hard_swish")
        .unwrap();
    let local = site["local"]["max_abs"].as_f64().unwrap();
    assert!(local > 0.0 && local <= 0.14227761953270035, "{local}");
    assert_eq!(site["local_basis"], "isolated");
    // Latency is measured data: only its presence is checked.
    for k in ["a_median_s", "b_median_s", "ratio"] {
        assert!(site["latency"][k].as_f64().unwrap() > 0.0, "{k}");
    }

    let tight = format!("{}", local / 2.0);
    let out = drift(&[&base[..], &["--site-max-abs", &tight]].concat());
    assert_eq!(out.status.code(), Some(1));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("over budget (1):"), "{text}");
    assert!(text.contains("\nverdict: over_budget: "), "{text}");
    assert!(text.contains("caution: Drift measured on sample inputs certifies nothing"));

    let out = drift(&[&base[..], &["--max-abs", "1e-9"]].concat());
    assert_eq!(out.status.code(), Some(1));
    let loose = drift(&[&base[..], &["--site-max-abs", "0.15", "--max-abs", "10"]].concat());
    assert_eq!(loose.status.code(), Some(0));
}

/// A Sigmoid model whose input has a symbolic batch dim.
fn symbolic_model(dir: &Path) -> std::path::PathBuf {
    let graph = GraphProto {
        name: Some("valve_gate".into()),
        node: vec![node("Sigmoid", "gate", &["valve"], &["level"], vec![])],
        input: vec![value(
            "valve",
            DataType::Float,
            &[Dim::Named("batch"), Dim::Size(4)],
        )],
        output: vec![value(
            "level",
            DataType::Float,
            &[Dim::Named("batch"), Dim::Size(4)],
        )],
        ..Default::default()
    };
    let p = dir.join("valve.onnx");
    Model::from_proto(model(graph, vec![opset("", 13)], "test"), dir.to_path_buf())
        .save(&p, &SaveOptions::default())
        .unwrap();
    p
}

#[test]
fn bad_input_options_exit_2_with_one_line() {
    let tmp = tempfile::tempdir().unwrap();
    let m = symbolic_model(tmp.path());
    let out = drift(&[path(&m), path(&m), "--no-latency"]);
    assert_eq!(out.status.code(), Some(2));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("dimension 'batch' has no size"), "{err}");
    assert_eq!(err.trim_end().lines().count(), 1, "{err}");

    let out = drift(&[
        path(&m),
        path(&m),
        "--dim",
        "batch=3",
        "--samples",
        "2",
        "--no-latency",
    ]);
    assert_eq!(
        out.status.code(),
        Some(0),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains(
            "random normal (mean 0, standard deviation 1), seed 0, dims batch=3 (2 samples)"
        ),
        "{text}"
    );

    for (args, needle) in [
        (vec!["--range", "3,1"], "bad --range"),
        (vec!["--input", "valve=missing.npy"], "missing.npy"),
        (vec!["--min-cosine", "2"], "--min-cosine"),
        (vec!["--dim", "rows=2"], "no input has this dimension"),
    ] {
        let out = drift(&[&[path(&m), path(&m), "--no-latency"][..], &args[..]].concat());
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(needle), "{args:?}: {err}");
    }
    let out = drift(&[path(&m), "nowhere.onnx"]);
    assert_eq!(out.status.code(), Some(2));
}
