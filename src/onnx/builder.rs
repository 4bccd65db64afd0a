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

/// An int64 tensor stored little-endian in `raw_data`.
pub fn tensor_i64(name: &str, dims: &[i64], values: &[i64]) -> TensorProto {
    let raw: Vec<u8> = values.iter().flat_map(|v| v.to_le_bytes()).collect();
    TensorProto {
        name: Some(name.into()),
        dims: dims.to_vec(),
        data_type: Some(DataType::Int64 as i32),
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
