//! Models whose node names repeat, which exporters produce and tract 0.23.9 refuses
//! ("Duplicate node name"), run through the runner; and ops tract lacks are named in the error.
//!
//! Expected values come from the ONNX operator specs' formulas (Sigmoid: 1 / (1 + e^-x); Mul;
//! Relu: max(0, x); Neg), evaluated in f64.

use actswap::run::{NamedTensor, RunError, prepare};
use prost::Message;
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::pb::tensor_shape_proto::{Dimension, dimension::Value};
use tract_onnx::pb::{
    GraphProto, ModelProto, NodeProto, OperatorSetIdProto, TensorShapeProto, TypeProto,
    ValueInfoProto, type_proto,
};
use tract_onnx::prelude::*;

fn node(name: &str, op_type: &str, inputs: &[&str], outputs: &[&str]) -> NodeProto {
    NodeProto {
        name: name.into(),
        op_type: op_type.into(),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: outputs.iter().map(|s| s.to_string()).collect(),
        ..Default::default()
    }
}

fn value_info(name: &str, dims: &[i64]) -> ValueInfoProto {
    let shape = TensorShapeProto {
        dim: dims
            .iter()
            .map(|&d| Dimension {
                denotation: String::new(),
                value: Some(Value::DimValue(d)),
            })
            .collect(),
    };
    ValueInfoProto {
        name: name.into(),
        r#type: Some(TypeProto {
            denotation: String::new(),
            value: Some(type_proto::Value::TensorType(type_proto::Tensor {
                elem_type: DataType::Float as i32,
                shape: Some(shape),
            })),
        }),
        ..Default::default()
    }
}

fn model(nodes: Vec<NodeProto>) -> Vec<u8> {
    ModelProto {
        ir_version: 8,
        opset_import: vec![OperatorSetIdProto {
            domain: String::new(),
            version: 18,
        }],
        graph: Some(GraphProto {
            name: "repeated_names".into(),
            node: nodes,
            input: vec![value_info("x", &[2, 3])],
            output: vec![value_info("y", &[2, 3])],
            ..Default::default()
        }),
        ..Default::default()
    }
    .encode_to_vec()
}

/// Two nodes named "block"; an unnamed node whose output "tail" is another node's name; a node
/// named like the graph input.
fn repeated_names_model() -> Vec<u8> {
    model(vec![
        node("block", "Sigmoid", &["x"], &["s"]),
        node("block", "Mul", &["x", "s"], &["m"]),
        node("", "Relu", &["m"], &["tail"]),
        node("tail", "Neg", &["tail"], &["n"]),
        node("x", "Identity", &["n"], &["y"]),
    ])
}

#[test]
fn stock_tract_refuses_the_model() {
    let bytes = repeated_names_model();
    let result = tract_onnx::onnx()
        .model_for_read(&mut bytes.as_slice())
        .and_then(|m| m.into_typed());
    let message = format!(
        "{:#}",
        result.expect_err("stock tract refuses repeated node names")
    );
    assert!(message.contains("Duplicate node name"), "{message}");
}

#[test]
fn runner_runs_a_model_with_repeated_node_names() {
    let model = prepare(&repeated_names_model(), None).expect("loads");
    let xs = [-3.0f32, -1.0, -0.25, 0.0, 0.5, 4.0];
    let x = tract_ndarray::Array2::from_shape_vec((2, 3), xs.to_vec()).unwrap();
    let out = model
        .run(&[NamedTensor::new("x", x.into_dyn().into())], &[])
        .expect("runs");
    assert_eq!(out[0].name, "y");
    assert_eq!(out[0].tensor.datum_type(), DatumType::F32);
    for (&x, &y) in xs.iter().zip(out[0].to_f64().unwrap().iter()) {
        let x = x as f64;
        let expected = -(x / (1.0 + (-x).exp())).max(0.0);
        assert!((y - expected).abs() <= 1e-6, "x={x}: {y} vs {expected}");
    }
}

#[test]
fn intermediate_tensors_of_renamed_nodes_can_be_requested() {
    let model = prepare(&repeated_names_model(), None).expect("loads");
    let x = tract_ndarray::Array2::<f32>::from_elem((2, 3), 1.0);
    let out = model.run(
        &[NamedTensor::new("x", x.into_dyn().into())],
        &["s".into(), "tail".into()],
    );
    let names: Vec<String> = out.expect("runs").into_iter().map(|t| t.name).collect();
    assert_eq!(names, ["y", "s", "tail"]);
}

#[test]
fn an_op_tract_lacks_is_named_with_its_node() {
    let bytes = model(vec![
        node("first", "Relu", &["x"], &["r"]),
        node("odd_one", "NoSuchActivation", &["r"], &["y"]),
    ]);
    let error = prepare(&bytes, None).expect_err("tract has no such op");
    assert!(matches!(error, RunError::UnsupportedOps(_)));
    let message = error.to_string();
    assert!(
        message.contains("NoSuchActivation") && message.contains("odd_one"),
        "{message}"
    );
    assert!(!message.contains('\n'), "one line: {message}");
}
