//! Symbolic dims as exporters write them: named in the graph inputs and again in the `value_info`
//! of intermediate values (torch's dynamo exporter does so for nearly every value).
//!
//! Expected values come from the ONNX operator specs' definitions (Pow: `x ^ y`, output typed as
//! the base; CumSum: inclusive running sum along `axis`; Cast; Add; Relu: `max(0, x)`), evaluated
//! in f64.

mod run_support;

use actswap::run::{NamedTensor, RunError, prepare};
use run_support::{D, f64_tensor, i64_tensor, model, node, value_info};
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::prelude::*;

/// `y = x ^ 2.0 + Cast<float>(CumSum(mask, axis 1))` over `[batch, seq]`, with a float64
/// exponent and `value_info` naming `batch` and `seq` for every intermediate value: position
/// ids from a padding mask, as decoders compute them.
fn masked_positions_model() -> Vec<u8> {
    let bs = [D::S("batch"), D::S("seq")];
    model(
        17,
        vec![
            node("square", "Pow", &["x", "two"], &["sq"]),
            node("positions", "CumSum", &["mask", "axis"], &["pos"]),
            run_support::with_int(node("to_float", "Cast", &["pos"], &["posf"]), "to", 1),
            node("sum", "Add", &["sq", "posf"], &["y"]),
        ],
        vec![
            value_info("x", DataType::Float, &bs),
            value_info("mask", DataType::Int64, &bs),
        ],
        vec![value_info("y", DataType::Float, &bs)],
        vec![
            f64_tensor("two", &[], &[2.0]),
            i64_tensor("axis", &[], &[1]),
        ],
        vec![
            value_info("sq", DataType::Float, &bs),
            value_info("pos", DataType::Int64, &bs),
            value_info("posf", DataType::Float, &bs),
        ],
    )
}

fn sample(batch: usize, seq: usize) -> Vec<NamedTensor> {
    let x = tract_ndarray::Array2::from_shape_fn((batch, seq), |(b, s)| {
        (b as f32 - 0.5) * 1.25 + s as f32 * 0.5
    });
    let mask = tract_ndarray::Array2::from_shape_fn((batch, seq), |(b, s)| i64::from(s >= b));
    vec![
        NamedTensor::new("x", x.into_dyn().into()),
        NamedTensor::new("mask", mask.into_dyn().into()),
    ]
}

/// The spec's formula for [`masked_positions_model`], in f64.
fn expected(sample: &[NamedTensor]) -> Vec<f64> {
    let x = sample[0].to_f64().unwrap();
    let mask = sample[1].to_f64().unwrap();
    let (batch, seq) = (x.shape()[0], x.shape()[1]);
    let mut out = Vec::new();
    for b in 0..batch {
        let mut running = 0.0;
        for s in 0..seq {
            running += mask[[b, s]];
            out.push(x[[b, s]].powf(2.0) + running);
        }
    }
    out
}

#[test]
fn symbolic_value_info_takes_the_sizes_of_the_inputs() {
    let model = prepare(&masked_positions_model(), None).expect("loads");
    for (batch, seq) in [(2, 3), (1, 5), (3, 1)] {
        let sample = sample(batch, seq);
        let out = model.run(&sample, &["pos".into()]).expect("runs");
        assert_eq!(out[0].tensor.shape(), [batch, seq]);
        assert_eq!(
            out[0].tensor.datum_type(),
            DatumType::F32,
            "Pow keeps the base type"
        );
        let got = out[0].to_f64().unwrap();
        for (g, e) in got.iter().zip(expected(&sample)) {
            assert!((g - e).abs() <= 1e-6 * e.abs().max(1.0), "{g} vs {e}");
        }
        assert_eq!(
            out[1].tensor.datum_type(),
            DatumType::I64,
            "CumSum stays int64"
        );
    }
}

/// Why the runner fixes the dims first: stock tract, given concrete inputs, still reads `batch`
/// from the `value_info` and cannot unify the two (tract 0.23.9).
#[test]
fn stock_tract_cannot_unify_symbolic_value_info_with_concrete_inputs() {
    let bs = [D::S("batch"), D::S("seq")];
    let bytes = model(
        17,
        vec![
            node("rectify", "Relu", &["x"], &["r"]),
            node("negate", "Neg", &["r"], &["y"]),
        ],
        vec![value_info("x", DataType::Float, &bs)],
        vec![value_info("y", DataType::Float, &bs)],
        vec![],
        vec![value_info("r", DataType::Float, &bs)],
    );
    let mut stock = tract_onnx::onnx()
        .model_for_read(&mut bytes.as_slice())
        .unwrap();
    stock.set_input_fact(0, f32::fact([2, 3]).into()).unwrap();
    let message = format!("{:#}", stock.into_typed().expect_err("stock tract fails"));
    assert!(message.contains("Impossible to unify"), "{message}");

    let model = prepare(&bytes, None).unwrap();
    let x = tract_ndarray::Array2::from_shape_fn((2, 3), |(i, j)| i as f32 - j as f32);
    let out = model
        .run(&[NamedTensor::new("x", x.clone().into_dyn().into())], &[])
        .unwrap();
    let got = out[0].to_f64().unwrap();
    for (g, x) in got.iter().zip(x.iter()) {
        assert_eq!(*g, -(*x as f64).max(0.0));
    }
}

#[test]
fn inputs_that_disagree_on_a_dim_are_refused_by_name() {
    let model = prepare(&masked_positions_model(), None).unwrap();
    let mut sample = sample(2, 3);
    sample[1] = self::sample(3, 3).remove(1);
    let error = model.run(&sample, &[]).expect_err("batch is 2 and 3");
    assert!(
        matches!(&error, RunError::DimConflict { dim, .. } if dim == "batch"),
        "{error}"
    );
    let text = error.to_string();
    assert!(text.contains("'x'") && text.contains("'mask'"), "{text}");
}
