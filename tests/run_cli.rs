//! The input options of the commands that run models, end to end: files and `--dim` together,
//! numpy's default float64 for a float32 input, inputs drawn where files give none, and one
//! subfolder of inputs per model in `batch`. Exit codes are the documented contract (README):
//! 0 ok, 2 error with one line on stderr.
//!
//! Model: `y = Sigmoid(x + bias)` over `[batch, width]`, built after the ONNX IR spec.

mod cli_support;
mod run_support;

use std::path::Path;

use cli_support::{actswap, path, stderr};
use ndarray::{ArrayD, IxDyn};
use ndarray_npy::WriteNpyExt;
use run_support::{D, model, node, value_info};
use tract_onnx::pb::tensor_proto::DataType;

fn gate_model(dir: &Path, name: &str, width: i64) -> std::path::PathBuf {
    let shape = [D::S("batch"), D::N(width)];
    let bytes = model(
        17,
        vec![
            node("shift", "Add", &["x", "bias"], &["h"]),
            node("gate", "Sigmoid", &["h"], &["y"]),
        ],
        vec![
            value_info("x", DataType::Float, &shape),
            value_info("bias", DataType::Float, &shape),
        ],
        vec![value_info("y", DataType::Float, &shape)],
        vec![],
        vec![value_info("h", DataType::Float, &shape)],
    );
    let file = dir.join(name);
    std::fs::write(&file, bytes).unwrap();
    file
}

fn write_npy<T: ndarray_npy::WritableElement + Clone>(file: &Path, shape: &[usize], value: T) {
    ArrayD::from_elem(IxDyn(shape), value)
        .write_npy(std::fs::File::create(file).unwrap())
        .unwrap();
}

#[test]
fn files_and_dims_mix_and_float64_files_are_converted() {
    let tmp = tempfile::tempdir().unwrap();
    let m = gate_model(tmp.path(), "gate.onnx", 3);
    let x = tmp.path().join("x.npy");
    write_npy(&x, &[2, 3], 0.5f64);
    let x_arg = format!("x={}", path(&x));
    let run = |dim: &str| {
        actswap(&[
            "drift",
            path(&m),
            path(&m),
            "--no-latency",
            "--input",
            &x_arg,
            "--dim",
            dim,
        ])
    };

    let out = run("batch=2");
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(text.contains("float64 data converted to float32"), "{text}");
    assert!(text.contains("for bias"), "bias is drawn at random: {text}");

    let out = run("batch=3");
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert!(err.contains("'batch'") && err.contains("--dim"), "{err}");
    assert_eq!(err.trim_end().lines().count(), 1, "{err}");
}

#[test]
fn batch_takes_each_models_inputs_from_its_own_subfolder() {
    let tmp = tempfile::tempdir().unwrap();
    let models = tmp.path().join("models");
    std::fs::create_dir_all(&models).unwrap();
    gate_model(&models, "narrow.onnx", 3);
    gate_model(&models, "wide.onnx", 5);
    let inputs = tmp.path().join("inputs");
    for (stem, width) in [("narrow", 3), ("wide", 5)] {
        let own = inputs.join(stem);
        std::fs::create_dir_all(&own).unwrap();
        write_npy(&own.join("input_0.npy"), &[2, width], 0.25f32);
        write_npy(&own.join("input_1.npy"), &[2, width], -0.25f32);
    }
    let out = actswap(&[
        "batch",
        path(&models),
        "-o",
        path(&tmp.path().join("out")),
        "--to",
        "*=primitive",
        "--inputs-dir",
        path(&inputs),
        "--no-latency",
        "--json",
    ]);
    assert_ne!(out.status.code(), Some(2), "{}", stderr(&out));
    let report: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(report["totals"]["errors"], 0, "{report}");
}
