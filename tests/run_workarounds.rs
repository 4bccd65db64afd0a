//! Workarounds for defects of tract 0.23.9, each beside the defect it works around: stock tract
//! shows the defect, the runner gives the value of the ONNX operator spec's definition.
//! (Celu and Swish, whose `alpha` tract ignores, are checked against the ONNX conformance
//! outputs in `run_conformance.rs`; repeated node names in `run_names.rs`.)

mod run_support;

use actswap::run::{NamedTensor, TRACT_VERSION, prepare};
use run_support::{D, f32_tensor, f64_tensor, model, node, value_info};
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::prelude::*;

/// tract defect: Pow computes in the common type of base and exponent and keeps it, so a float32
/// base raised to a float64 exponent gives float64 (ONNX spec, Pow since opset 12: the output has
/// the base's type T, the exponent any numeric type T1). The next op then fails to type.
/// Expected: `(x ^ 0.5) @ w`, the spec's Pow and MatMul, in f64.
#[test]
fn pow_with_a_wider_exponent_keeps_the_base_type() {
    let bytes = model(
        17,
        vec![
            node("root", "Pow", &["x", "half"], &["r"]),
            node("project", "MatMul", &["r", "w"], &["y"]),
        ],
        vec![value_info("x", DataType::Float, &[D::N(2), D::N(3)])],
        vec![value_info("y", DataType::Float, &[D::N(2), D::N(2)])],
        vec![
            f64_tensor("half", &[], &[0.5]),
            f32_tensor("w", &[3, 2], &[1.0, -1.0, 0.5, 2.0, -0.25, 0.75]),
        ],
        vec![],
    );
    let stock = tract_onnx::onnx()
        .model_for_read(&mut bytes.as_slice())
        .and_then(|m| m.into_typed());
    let message = format!("{:#}", stock.expect_err("stock tract fails to type"));
    assert!(
        message.contains("F64") && message.contains("F32"),
        "{message}"
    );

    let xs = [0.25f32, 1.0, 4.0, 9.0, 2.0, 0.5];
    let x = tract_ndarray::Array2::from_shape_vec((2, 3), xs.to_vec()).unwrap();
    let out = prepare(&bytes, None)
        .unwrap()
        .run(&[NamedTensor::new("x", x.into_dyn().into())], &[])
        .unwrap();
    assert_eq!(out[0].tensor.datum_type(), DatumType::F32);
    let w = [[1.0, -1.0], [0.5, 2.0], [-0.25, 0.75]];
    let got = out[0].to_f64().unwrap();
    for i in 0..2 {
        for j in 0..2 {
            let e: f64 = (0..3)
                .map(|k| (xs[i * 3 + k] as f64).sqrt() * w[k][j])
                .sum();
            assert!((got[[i, j]] - e).abs() <= 1e-6, "{} vs {e}", got[[i, j]]);
        }
    }
}

/// The version errors name is the one the build resolved (Cargo.lock).
#[test]
fn the_tract_version_named_in_errors_is_the_one_built() {
    let lock = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/Cargo.lock")).unwrap();
    let entry = lock
        .split("[[package]]")
        .find(|p| p.contains("name = \"tract-onnx\"\n"))
        .expect("tract-onnx in Cargo.lock");
    assert!(
        entry.contains(&format!("version = \"{TRACT_VERSION}\"")),
        "{entry}"
    );
}

/// tract defect: integers derived from a shape (here a mask of ones over the sequence, built
/// from a Range up to its length, as decoders export it to count position ids) are symbolic dims
/// (TDim) inside tract, and its CumSum kernel sums only plain numbers, so typing the model with
/// concrete input sizes fails ("CumSum: TDim is not a number"). Expected (ONNX spec, Range,
/// GreaterOrEqual, Cast, Expand, CumSum): 1, 2, ..., seq on every row.
#[test]
fn cumsum_sums_values_derived_from_a_shape() {
    use run_support::{i64_tensor, with_int};
    let cast = |name: &str, input: &str, output: &str| {
        with_int(
            node(name, "Cast", &[input], &[output]),
            "to",
            DataType::Int64 as i64,
        )
    };
    let bytes = model(
        17,
        vec![
            node("shape", "Shape", &["ids"], &["shape"]),
            with_int(
                node("seq", "Gather", &["shape", "one"], &["seq"]),
                "axis",
                0,
            ),
            cast("seq_i64", "seq", "seq_i64"),
            node("range", "Range", &["zero", "seq_i64", "one"], &["steps"]),
            node("row", "Unsqueeze", &["steps", "first"], &["row"]),
            node("valid", "GreaterOrEqual", &["row", "zero"], &["valid"]),
            cast("ones", "valid", "ones"),
            node("grid", "Expand", &["ones", "shape"], &["grid"]),
            node("count", "CumSum", &["grid", "axis"], &["counted"]),
        ],
        vec![value_info(
            "ids",
            DataType::Int64,
            &[D::S("batch"), D::S("seq")],
        )],
        vec![value_info(
            "counted",
            DataType::Int64,
            &[D::S("batch"), D::S("seq")],
        )],
        vec![
            i64_tensor("zero", &[], &[0]),
            i64_tensor("one", &[], &[1]),
            i64_tensor("axis", &[], &[1]),
            i64_tensor("first", &[1], &[0]),
        ],
        vec![],
    );
    let stock = tract_onnx::onnx()
        .model_for_read(&mut bytes.as_slice())
        .and_then(|m| m.with_input_fact(0, i64::fact([2, 5]).into()))
        .and_then(|m| m.into_typed());
    let message = format!("{:#}", stock.expect_err("stock tract fails to type"));
    assert!(message.contains("TDim is not a number"), "{message}");

    let ids = tract_ndarray::Array2::<i64>::zeros((2, 5));
    let out = prepare(&bytes, None)
        .unwrap()
        .run(&[NamedTensor::new("ids", ids.into_dyn().into())], &[])
        .unwrap();
    let got = out[0].to_f64().unwrap();
    assert_eq!(got.shape(), [2, 5]);
    for row in got.rows() {
        assert_eq!(row.to_vec(), [1.0, 2.0, 3.0, 4.0, 5.0]);
    }
}
