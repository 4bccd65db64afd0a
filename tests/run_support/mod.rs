//! Shared by the runner tests: small ONNX models built message by message after the ONNX IR spec.

#![allow(dead_code)]

use prost::Message;
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::pb::tensor_shape_proto::{Dimension, dimension::Value};
use tract_onnx::pb::{
    AttributeProto, GraphProto, ModelProto, NodeProto, OperatorSetIdProto, TensorProto,
    TensorShapeProto, TypeProto, ValueInfoProto, attribute_proto::AttributeType, type_proto,
};

/// One axis of a declared shape: a size or a `dim_param` name.
#[derive(Debug, Clone, Copy)]
pub enum D {
    N(i64),
    S(&'static str),
}

pub fn node(name: &str, op_type: &str, inputs: &[&str], outputs: &[&str]) -> NodeProto {
    NodeProto {
        name: name.into(),
        op_type: op_type.into(),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: outputs.iter().map(|s| s.to_string()).collect(),
        ..Default::default()
    }
}

/// `node` with an INTS attribute.
pub fn with_ints(mut node: NodeProto, name: &str, values: &[i64]) -> NodeProto {
    node.attribute.push(AttributeProto {
        name: name.into(),
        r#type: AttributeType::Ints as i32,
        ints: values.to_vec(),
        ..Default::default()
    });
    node
}

/// `node` with an INT attribute.
pub fn with_int(mut node: NodeProto, name: &str, value: i64) -> NodeProto {
    node.attribute.push(AttributeProto {
        name: name.into(),
        r#type: AttributeType::Int as i32,
        i: value,
        ..Default::default()
    });
    node
}

pub fn value_info(name: &str, elem_type: DataType, dims: &[D]) -> ValueInfoProto {
    let dim = dims
        .iter()
        .map(|d| Dimension {
            denotation: String::new(),
            value: Some(match d {
                D::N(n) => Value::DimValue(*n),
                D::S(s) => Value::DimParam(s.to_string()),
            }),
        })
        .collect();
    ValueInfoProto {
        name: name.into(),
        r#type: Some(TypeProto {
            denotation: String::new(),
            value: Some(type_proto::Value::TensorType(type_proto::Tensor {
                elem_type: elem_type as i32,
                shape: Some(TensorShapeProto { dim }),
            })),
        }),
        ..Default::default()
    }
}

pub fn f32_tensor(name: &str, dims: &[i64], values: &[f32]) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Float as i32,
        float_data: values.to_vec(),
        ..Default::default()
    }
}

pub fn f64_tensor(name: &str, dims: &[i64], values: &[f64]) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Double as i32,
        double_data: values.to_vec(),
        ..Default::default()
    }
}

pub fn i64_tensor(name: &str, dims: &[i64], values: &[i64]) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Int64 as i32,
        int64_data: values.to_vec(),
        ..Default::default()
    }
}

/// A model of one graph at `opset`.
pub fn model(
    opset: i64,
    nodes: Vec<NodeProto>,
    inputs: Vec<ValueInfoProto>,
    outputs: Vec<ValueInfoProto>,
    initializers: Vec<TensorProto>,
    value_infos: Vec<ValueInfoProto>,
) -> Vec<u8> {
    ModelProto {
        ir_version: 8,
        opset_import: vec![OperatorSetIdProto {
            domain: String::new(),
            version: opset,
        }],
        graph: Some(GraphProto {
            name: "trial".into(),
            node: nodes,
            input: inputs,
            output: outputs,
            initializer: initializers,
            value_info: value_infos,
            ..Default::default()
        }),
        ..Default::default()
    }
    .encode_to_vec()
}
