//! Malformed models that make tract 0.23.9 panic or abort: each is refused with one line on
//! stderr naming the node, exit code 2, and the process neither aborts nor prints a panic.
//!
//! Attribute rules from the ONNX operator specs: Conv `strides` has one value per spatial axis and
//! `pads` two; Flatten `axis` lies in [-r, r]; Transpose `perm` is a permutation of the axes;
//! Slice `steps` cannot be 0. The sizes follow the spec's output-shape formulas (Conv:
//! `floor((in + pad_begin + pad_end - kernel) / stride) + 1` per spatial axis).

mod cli_support;
mod run_support;

use actswap::run::{NamedTensor, RunError, prepare};
use cli_support::{actswap, path, stderr};
use run_support::{D, f32_tensor, i64_tensor, model, node, value_info, with_int, with_ints};
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::pb::{NodeProto, TensorProto};

/// A one-node model over `x: [1, 1, 4, 4]`.
fn one_node(op: NodeProto, initializers: Vec<TensorProto>) -> Vec<u8> {
    model(
        17,
        vec![op],
        vec![value_info(
            "x",
            DataType::Float,
            &[D::N(1), D::N(1), D::N(4), D::N(4)],
        )],
        vec![value_info("y", DataType::Float, &[])],
        initializers,
        vec![],
    )
}

fn weights() -> Vec<TensorProto> {
    vec![f32_tensor("w", &[1, 1, 3, 3], &[1.0; 9])]
}

/// Runs `drift M M` on `bytes`; returns the exit code and stderr.
fn drift(bytes: &[u8]) -> (Option<i32>, String) {
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("model.onnx");
    std::fs::write(&file, bytes).unwrap();
    let out = actswap(&["drift", path(&file), path(&file), "--no-latency"]);
    (out.status.code(), stderr(&out))
}

fn assert_refused(bytes: &[u8], node: &str, what: &str) {
    let (code, err) = drift(bytes);
    assert_eq!(code, Some(2), "{what}: {err}");
    assert_eq!(err.trim_end().lines().count(), 1, "{what}: one line: {err}");
    assert!(!err.contains("panicked at"), "{what}: {err}");
    assert!(err.contains(&format!("node '{node}'")), "{what}: {err}");
}

#[test]
fn malformed_attributes_are_refused_in_one_line_naming_the_node() {
    let conv = || node("conv0", "Conv", &["x", "w"], &["y"]);
    let cases = [
        (
            "Conv strides empty",
            one_node(with_ints(conv(), "strides", &[]), weights()),
            "conv0",
        ),
        (
            "Conv pads of 3 values",
            one_node(with_ints(conv(), "pads", &[1, 1, 1]), weights()),
            "conv0",
        ),
        (
            "Flatten axis beyond the rank",
            one_node(
                with_int(node("flat0", "Flatten", &["x"], &["y"]), "axis", 9),
                vec![],
            ),
            "flat0",
        ),
        (
            "Transpose perm not a permutation",
            one_node(
                with_ints(
                    node("tr0", "Transpose", &["x"], &["y"]),
                    "perm",
                    &[0, 1, 7, 2],
                ),
                vec![],
            ),
            "tr0",
        ),
        (
            "Slice step 0",
            one_node(
                node("slice0", "Slice", &["x", "st", "en", "ax", "sp"], &["y"]),
                vec![
                    i64_tensor("st", &[1], &[0]),
                    i64_tensor("en", &[1], &[4]),
                    i64_tensor("ax", &[1], &[3]),
                    i64_tensor("sp", &[1], &[0]),
                ],
            ),
            "slice0",
        ),
    ];
    for (what, bytes, node) in cases {
        assert_refused(&bytes, node, what);
    }
}

/// Sizes that would make tract abort the process on a failed allocation are refused before.
#[test]
fn sizes_over_the_memory_ceiling_are_refused_before_allocation() {
    // Conv pads of 2^32 - 1: spatial outputs of 2^33 + 2 (ONNX Conv output-shape formula).
    let padded = one_node(
        with_ints(
            node("conv0", "Conv", &["x", "w"], &["y"]),
            "pads",
            &[4294967295; 4],
        ),
        weights(),
    );
    // AveragePool window of 10^10 elements, padded so that the output is 1 x 1 x 5 x 5.
    let window = one_node(
        with_ints(
            with_ints(
                node("pool0", "AveragePool", &["x"], &["y"]),
                "kernel_shape",
                &[100000; 2],
            ),
            "pads",
            &[50000; 4],
        ),
        vec![],
    );
    for (bytes, node) in [(padded, "conv0"), (window, "pool0")] {
        assert_refused(&bytes, node, node);
        let (_, err) = drift(&bytes);
        assert!(err.contains("memory ceiling"), "{err}");
    }
}

/// The ceiling is an option of the runner: a model that fits the default is refused under a
/// lower one, naming the largest value's node.
#[test]
fn the_memory_ceiling_is_an_option_of_the_runner() {
    let bytes = one_node(node("conv0", "Conv", &["x", "w"], &["y"]), weights());
    let x = tract_onnx::prelude::tract_ndarray::Array4::<f32>::ones((1, 1, 4, 4));
    let sample = [NamedTensor::new("x", x.into_dyn().into())];
    let model = prepare(&bytes, None).unwrap();
    let out = model.run(&sample, &[]).unwrap();
    // Valid 3x3 convolution of ones by ones: 9 everywhere (ONNX Conv).
    assert!(out[0].to_f64().unwrap().iter().all(|&v| v == 9.0));
    let error = model
        .with_memory_ceiling(32)
        .run(&sample, &[])
        .expect_err("16 floats of input are over 32 bytes");
    assert!(matches!(error, RunError::OverMemory { .. }), "{error}");
}

#[test]
fn an_op_tract_lacks_names_the_version_and_what_still_works() {
    let bytes = one_node(node("odd0", "NoSuchOp", &["x"], &["y"]), vec![]);
    let error = prepare(&bytes, None).expect_err("no such op").to_string();
    assert!(
        error.contains("tract 0.23.9") && error.contains("odd0") && error.contains("`scan`"),
        "{error}"
    );
}

/// `--max-memory` sets that ceiling from the command line for `drift`, `audit` and `batch`: the
/// sample model (a 1 x 3 x 32 x 32 float input, 12 KiB) is refused under 1 KiB with exit 2 and
/// one line, and audited under the default (README, Exit codes: this tool's contract).
#[test]
fn max_memory_sets_the_ceiling_from_the_command_line() {
    let sample = env!("CARGO_MANIFEST_DIR").to_string() + "/sample-models/orchard-grader.onnx";
    let tmp = tempfile::tempdir().unwrap();
    let out_dir = tmp.path().join("converted");
    let kib = (1.0f64 / (1024.0 * 1024.0)).to_string();
    let common = ["--to", "*=primitive", "--dim", "batch=1", "--no-latency"];
    let cases: [Vec<&str>; 3] = [
        [&["audit", sample.as_str()][..], &common].concat(),
        [
            &["drift", sample.as_str(), sample.as_str()][..],
            &common[2..],
        ]
        .concat(),
        [
            &["batch", sample.as_str(), "-o", path(&out_dir)][..],
            &common,
        ]
        .concat(),
    ];
    for args in cases {
        let refused = actswap(&[&args[..], &["--max-memory", &kib]].concat());
        let err = stderr(&refused);
        assert_eq!(refused.status.code(), Some(2), "{args:?}: {err}");
        assert!(err.contains("memory ceiling"), "{args:?}: {err}");
        if args[0] != "batch" {
            assert_eq!(err.lines().count(), 1, "{args:?}: {err}");
        }
        let fits = actswap(&args);
        assert_eq!(fits.status.code(), Some(0), "{args:?}: {}", stderr(&fits));
    }
    let audit = [
        "audit",
        sample.as_str(),
        "--to",
        "*=primitive",
        "--max-memory",
        "0",
    ];
    let bad = actswap(&audit);
    assert_eq!(bad.status.code(), Some(2));
    assert!(stderr(&bad).contains("--max-memory must be a positive number"));
}
