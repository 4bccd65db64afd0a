//! Constructors for the protobuf messages a program writes: nodes, attributes, initializers and
//! typed value_info. Used by the sample-model generator, the rewrite engine and tests.

use bytes::Bytes;

use super::proto::{
    AttributeProto, GraphProto, ModelProto, NodeProto, OperatorSetIdProto, TensorProto,
    TensorShapeProto, TypeProto, ValueInfoProto, attribute_proto::AttributeType,
    tensor_proto::DataType, tensor_shape_proto::Dimension, type_proto,
};

/// A node of the default domain.
pub fn node(
    op: &str,
    name: &str,
    inputs: &[&str],
    outputs: &[&str],
    attrs: Vec<AttributeProto>,
) -> NodeProto {
    NodeProto {
        op_type: Some(op.into()),
        name: Some(name.into()),
        input: inputs.iter().map(|s| s.to_string()).collect(),
        output: outputs.iter().map(|s| s.to_string()).collect(),
        attribute: attrs,
        ..Default::default()
    }
}

/// A float attribute.
pub fn attr_f(name: &str, v: f32) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Float as i32),
        f: Some(v),
        ..Default::default()
    }
}

/// An integer attribute.
pub fn attr_i(name: &str, v: i64) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Int as i32),
        i: Some(v),
        ..Default::default()
    }
}

/// A list-of-integers attribute.
pub fn attr_ints(name: &str, v: &[i64]) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Ints as i32),
        ints: v.to_vec(),
        ..Default::default()
    }
}

/// A string attribute.
pub fn attr_s(name: &str, v: &str) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::String as i32),
        s: Some(Bytes::copy_from_slice(v.as_bytes())),
        ..Default::default()
    }
}

/// A tensor attribute (Constant's `value`).
pub fn attr_t(name: &str, t: TensorProto) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Tensor as i32),
        t: Some(t),
        ..Default::default()
    }
}

/// A graph attribute (If branches, Loop bodies).
pub fn attr_g(name: &str, g: GraphProto) -> AttributeProto {
    AttributeProto {
        name: Some(name.into()),
        r#type: Some(AttributeType::Graph as i32),
        g: Some(g),
        ..Default::default()
    }
}

/// A float32 tensor stored little-endian in `raw_data`.
pub fn tensor_f32(name: &str, dims: &[i64], values: &[f32]) -> TensorProto {
    let raw: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    TensorProto {
        name: Some(name.into()),
        dims: dims.to_vec(),
        data_type: Some(DataType::Float as i32),
        raw_data: Some(Bytes::from(raw)),
        ..Default::default()
    }
}

/// A float64 tensor stored little-endian in `raw_data`.
pub fn tensor_f64(name: &str, dims: &[i64], values: &[f64]) -> TensorProto {
    let raw: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    raw_tensor(name, dims, DataType::Double, raw)
}

/// A float16 tensor stored little-endian in `raw_data`.
pub fn tensor_f16(name: &str, dims: &[i64], values: &[half::f16]) -> TensorProto {
    let raw: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    raw_tensor(name, dims, DataType::Float16, raw)
}

/// A bfloat16 tensor stored little-endian in `raw_data`.
pub fn tensor_bf16(name: &str, dims: &[i64], values: &[half::bf16]) -> TensorProto {
    let raw: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    raw_tensor(name, dims, DataType::Bfloat16, raw)
}

/// A tensor of the floating-point type `dt` holding `values` rounded to nearest in that type;
/// `None` when `dt` is not FLOAT, FLOAT16, DOUBLE or BFLOAT16.
pub fn tensor_float(name: &str, dt: DataType, dims: &[i64], values: &[f64]) -> Option<TensorProto> {
    Some(match dt {
        DataType::Float => {
            let v: Vec<f32> = values.iter().map(|&v| v as f32).collect();
            tensor_f32(name, dims, &v)
        }
        DataType::Double => tensor_f64(name, dims, values),
        DataType::Float16 => {
            let v: Vec<half::f16> = values.iter().map(|&v| half::f16::from_f64(v)).collect();
            tensor_f16(name, dims, &v)
        }
        DataType::Bfloat16 => {
            let v: Vec<half::bf16> = values.iter().map(|&v| half::bf16::from_f64(v)).collect();
            tensor_bf16(name, dims, &v)
        }
        _ => return None,
    })
}

fn raw_tensor(name: &str, dims: &[i64], dt: DataType, raw: Vec<u8>) -> TensorProto {
    TensorProto {
        name: Some(name.into()),
        dims: dims.to_vec(),
        data_type: Some(dt as i32),
        raw_data: Some(Bytes::from(raw)),
        ..Default::default()
    }
}

/// A dimension: a size or a symbolic name.
#[derive(Debug, Clone, Copy)]
pub enum Dim<'a> {
    Size(i64),
    Named(&'a str),
}

/// A tensor-typed value_info of element type `dt`.
pub fn value(name: &str, dt: DataType, dims: &[Dim]) -> ValueInfoProto {
    let dim = dims
        .iter()
        .map(|d| match d {
            Dim::Size(v) => Dimension {
                dim_value: Some(*v),
                ..Default::default()
            },
            Dim::Named(p) => Dimension {
                dim_param: Some(p.to_string()),
                ..Default::default()
            },
        })
        .collect();
    ValueInfoProto {
        name: Some(name.into()),
        r#type: Some(TypeProto {
            tensor_type: Some(type_proto::Tensor {
                elem_type: Some(dt as i32),
                shape: Some(TensorShapeProto { dim }),
            }),
            ..Default::default()
        }),
        ..Default::default()
    }
}

/// An opset import (`""` is the default domain).
pub fn opset(domain: &str, version: i64) -> OperatorSetIdProto {
    OperatorSetIdProto {
        domain: Some(domain.into()),
        version: Some(version),
    }
}

/// A model around `graph`, with IR version 8 (readable by every runtime in use) unless set later.
pub fn model(graph: GraphProto, opsets: Vec<OperatorSetIdProto>, producer: &str) -> ModelProto {
    ModelProto {
        ir_version: Some(8),
        producer_name: Some(producer.into()),
        producer_version: Some(env!("CARGO_PKG_VERSION").into()),
        opset_import: opsets,
        graph: Some(graph),
        ..Default::default()
    }
}
