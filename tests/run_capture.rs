//! Capturing intermediate tensors by requesting them as extra outputs.
//!
//! tract's optimizer fuses activation chains (Sigmoid+Mul into SiLU, the Erf chain into GELU);
//! a requested intermediate stops the fusion that would consume it. These tests measure that
//! requesting many intermediates leaves the graph outputs unchanged, and that each captured value
//! is the one the ONNX op specs define (Sigmoid, Mul, Div, Erf, Add, Softplus, Tanh formulas,
//! evaluated in f64; erf from libm, a general-purpose reference library).

use actswap::run::{NamedTensor, prepare};
use prost::Message;
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::pb::tensor_shape_proto::{Dimension, dimension::Value};
use tract_onnx::pb::{
    GraphProto, ModelProto, NodeProto, OperatorSetIdProto, TensorProto, TensorShapeProto,
    TypeProto, ValueInfoProto, type_proto,
};
use tract_onnx::prelude::*;

const WIDTH: usize = 16;
const BLOCKS: usize = 3;

fn node(op_type: &str, inputs: &[&str], output: &str) -> NodeProto {
    NodeProto {
        name: format!("/{output}/{op_type}"),
        op_type: op_type.into(),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: vec![output.to_string()],
        ..Default::default()
    }
}

fn value_info(name: &str, dims: &[i64]) -> ValueInfoProto {
    let dim = dims.iter().map(|&d| Dimension {
        denotation: String::new(),
        value: Some(Value::DimValue(d)),
    });
    ValueInfoProto {
        name: name.into(),
        r#type: Some(TypeProto {
            denotation: String::new(),
            value: Some(type_proto::Value::TensorType(type_proto::Tensor {
                elem_type: DataType::Float as i32,
                shape: Some(TensorShapeProto { dim: dim.collect() }),
            })),
        }),
        ..Default::default()
    }
}

fn constant(name: &str, dims: &[i64], values: Vec<f32>) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Float as i32,
        float_data: values,
        ..Default::default()
    }
}

/// The weight used by every block: a fixed pattern, scaled to keep activations near [-3, 3].
fn weight() -> Vec<f32> {
    (0..WIDTH * WIDTH)
        .map(|i| (i as f32 * 0.37).sin() * 0.35)
        .collect()
}

/// BLOCKS blocks of MatMul; SiLU as Sigmoid+Mul; GELU as Div/Erf/Add/Mul/Mul; Mish as
/// Softplus/Tanh/Mul — the decomposed forms exporters emit.
fn chain_model() -> (Vec<u8>, Vec<String>) {
    let mut nodes = Vec::new();
    let mut x = "x".to_string();
    for b in 0..BLOCKS {
        let t = |s: &str| format!("b{b}_{s}");
        nodes.push(node("MatMul", &[&x, "w"], &t("h")));
        nodes.push(node("Sigmoid", &[&t("h")], &t("sig")));
        nodes.push(node("Mul", &[&t("h"), &t("sig")], &t("silu")));
        nodes.push(node("Div", &[&t("silu"), "sqrt2"], &t("div")));
        nodes.push(node("Erf", &[&t("div")], &t("erf")));
        nodes.push(node("Add", &[&t("erf"), "one"], &t("add")));
        nodes.push(node("Mul", &[&t("silu"), &t("add")], &t("mul")));
        nodes.push(node("Mul", &[&t("mul"), "half"], &t("gelu")));
        nodes.push(node("Softplus", &[&t("gelu")], &t("sp")));
        nodes.push(node("Tanh", &[&t("sp")], &t("tanh")));
        nodes.push(node("Mul", &[&t("gelu"), &t("tanh")], &t("mish")));
        x = t("mish");
    }
    nodes.push(node("Identity", &[&x], "y"));
    let names = nodes.iter().map(|n| n.output[0].clone()).collect();
    let w = WIDTH as i64;
    let model = ModelProto {
        ir_version: 8,
        opset_import: vec![OperatorSetIdProto {
            domain: String::new(),
            version: 17,
        }],
        graph: Some(GraphProto {
            name: "activation_chain".into(),
            node: nodes,
            initializer: vec![
                constant("w", &[w, w], weight()),
                constant("sqrt2", &[], vec![std::f32::consts::SQRT_2]),
                constant("one", &[], vec![1.0]),
                constant("half", &[], vec![0.5]),
            ],
            input: vec![value_info("x", &[4, w])],
            output: vec![value_info("y", &[4, w])],
            ..Default::default()
        }),
        ..Default::default()
    };
    (model.encode_to_vec(), names)
}

fn input() -> NamedTensor {
    let x = tract_ndarray::Array2::from_shape_fn((4, WIDTH), |(i, j)| {
        ((i * WIDTH + j) as f32 * 0.21).cos() * 2.5
    });
    NamedTensor::new("x", x.into_dyn().into())
}

#[test]
fn requesting_every_intermediate_leaves_the_outputs_bit_identical() {
    let (bytes, names) = chain_model();
    let model = prepare(&bytes, None).unwrap();
    let sample = [input()];
    let plain = model.run(&sample, &[]).unwrap();
    let captured = model.run(&sample, &names).unwrap();
    assert_eq!(
        captured.len(),
        names.len(),
        "y once, then every other node output"
    );
    assert_eq!(captured[0].name, "y");
    assert_eq!(
        plain[0].tensor, captured[0].tensor,
        "bit-identical graph output"
    );
    // Each block's output requested alone, too.
    for b in 0..BLOCKS {
        let one = model.run(&sample, &[format!("b{b}_silu")]).unwrap();
        assert_eq!(plain[0].tensor, one[0].tensor, "block {b}");
    }
}

#[test]
fn captured_intermediates_follow_the_op_formulas() {
    let (bytes, names) = chain_model();
    let model = prepare(&bytes, None).unwrap();
    let out = model.run(&[input()], &names).unwrap();
    let get = |name: &str| {
        out.iter()
            .find(|t| t.name == name)
            .unwrap()
            .to_f64()
            .unwrap()
    };
    let tol = |v: f64| 1e-5 + 1e-5 * v.abs();
    for b in 0..BLOCKS {
        let t = |s: &str| format!("b{b}_{s}");
        let h = get(&t("h"));
        let (sig, silu, gelu, mish) = (
            get(&t("sig")),
            get(&t("silu")),
            get(&t("gelu")),
            get(&t("mish")),
        );
        for i in 0..h.len() {
            let hv = h.as_slice().unwrap()[i];
            let s = 1.0 / (1.0 + (-hv).exp());
            let si = hv * s;
            let g = 0.5 * si * (1.0 + libm::erf(si / std::f64::consts::SQRT_2));
            let m = g * (g.exp().ln_1p()).tanh();
            let at = |a: &ndarray::ArrayD<f64>| a.as_slice().unwrap()[i];
            assert!((at(&sig) - s).abs() <= tol(s), "block {b} sigmoid {i}");
            assert!((at(&silu) - si).abs() <= tol(si), "block {b} silu {i}");
            assert!((at(&gelu) - g).abs() <= tol(g), "block {b} gelu {i}");
            assert!((at(&mish) - m).abs() <= tol(m), "block {b} mish {i}");
        }
    }
}

#[test]
fn an_unknown_tensor_name_is_refused() {
    let (bytes, _) = chain_model();
    let model = prepare(&bytes, None).unwrap();
    let error = model.run(&[input()], &["b9_h".to_string()]).unwrap_err();
    assert_eq!(error.to_string(), "no tensor named 'b9_h' in the model");
}

#[test]
fn a_compiled_plan_runs_again_and_refuses_another_shape() {
    let (bytes, _) = chain_model();
    let model = prepare(&bytes, None).unwrap();
    let plan = model.compile(&[input()], &[]).unwrap();
    let first = plan.run(&[input()]).unwrap();
    let second = plan.run(&[input()]).unwrap();
    assert_eq!(first, second);
    let other = NamedTensor::new(
        "x",
        tract_ndarray::Array2::<f32>::zeros((4, WIDTH + 1))
            .into_dyn()
            .into(),
    );
    assert!(plan.run(&[other]).is_err());
}

/// Models and plans can be shared between threads (an audit may run samples in parallel).
#[test]
fn models_and_plans_are_send_and_sync() {
    fn shared<T: Send + Sync>() {}
    shared::<actswap::run::TractModel>();
    shared::<actswap::run::Compiled>();
}
