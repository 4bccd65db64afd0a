//! Element types of one graph's tensors, so the scanner can tell float computations (where
//! activations live) from integer and boolean ones (index arithmetic, masks), and a reader that
//! takes only a tensor's type from one that takes its values.
//!
//! Declared types come first (graph inputs and outputs, value_info, initializers, Constant
//! nodes); the rest follow the ONNX operator schemas' type rules for the ops that change the
//! type (Cast, CastLike, comparisons, logical ops, Shape, Size, ...), and for every other op the
//! type of its first typed input (element-wise ops keep their input's type). Unknown stays
//! unknown.

use crate::onnx::attrs;
use crate::onnx::index::{ABSENT, GraphIndex, TensorId};
use crate::onnx::proto::tensor_proto::DataType;
use crate::onnx::proto::{AttributeProto, NodeProto};

/// Element types of one graph's tensors, by tensor id.
#[derive(Debug)]
pub struct Types<'a, 'm> {
    graph: &'a GraphIndex<'m>,
    known: Vec<Option<DataType>>,
}

impl<'a, 'm> Types<'a, 'm> {
    /// The types of `graph`'s tensors; `outer` gives the enclosing graph's, for names a
    /// subgraph reads from its outer scope.
    pub fn infer(graph: &'a GraphIndex<'m>, outer: Option<&Types>) -> Types<'a, 'm> {
        let mut known: Vec<Option<DataType>> = match outer {
            Some(o) => (0..graph.tensor_count())
                .map(|id| o.of(graph.tensor_name(id as TensorId)))
                .collect(),
            None => vec![None; graph.tensor_count()],
        };
        let mut set = |name: &str, dt: DataType| {
            if let Some(id) = graph.tensor_id(name) {
                known[id as usize] = Some(dt);
            }
        };
        for t in graph.initializers() {
            if let Some(dt) = t.data_type.and_then(|c| DataType::try_from(c).ok()) {
                set(t.name(), dt);
            }
        }
        let declared = |name: &str| {
            graph
                .value_info(name)
                .and_then(|v| v.r#type.as_ref())
                .and_then(|t| t.tensor_type.as_ref())
                .and_then(|t| t.elem_type)
                .and_then(|c| DataType::try_from(c).ok())
                .filter(|dt| *dt != DataType::Undefined)
        };
        for name in &graph.inputs {
            if let Some(dt) = declared(name) {
                set(name, dt);
            }
        }
        for &n in graph.order() {
            let node = &graph.nodes[n];
            let ins = graph.node_inputs(n);
            let input = |i: usize| {
                ins.get(i)
                    .filter(|&&id| id != ABSENT)
                    .and_then(|&id| known[id as usize])
            };
            let inferred = output_type(node, &input);
            for (k, &id) in graph.node_outputs(n).iter().enumerate() {
                if id == ABSENT {
                    continue;
                }
                let dt = declared(&node.output[k]).or(if k == 0 { inferred } else { None });
                if dt.is_some() {
                    known[id as usize] = dt;
                }
            }
        }
        Types { graph, known }
    }

    /// The element type of `tensor`, when known.
    pub fn of(&self, tensor: &str) -> Option<DataType> {
        self.of_id(self.graph.tensor_id(tensor)?)
    }

    /// The element type of tensor `id` of the graph, when known.
    pub fn of_id(&self, id: TensorId) -> Option<DataType> {
        self.known.get(id as usize).copied().flatten()
    }
}

/// True for the element types activations compute in.
pub fn is_float(dt: DataType) -> bool {
    matches!(
        dt,
        DataType::Float | DataType::Float16 | DataType::Double | DataType::Bfloat16
    )
}

/// The type of a default-domain node's first output, from its op's type rule.
fn output_type(node: &NodeProto, input: &dyn Fn(usize) -> Option<DataType>) -> Option<DataType> {
    if !matches!(node.domain(), "" | "ai.onnx") {
        return None;
    }
    let code = |c: i64| DataType::try_from(c as i32).ok();
    match node.op_type() {
        "Cast" => attrs::int(node, "to").and_then(code),
        "CastLike" => input(1),
        "Equal" | "Greater" | "Less" | "GreaterOrEqual" | "LessOrEqual" | "And" | "Or" | "Xor"
        | "Not" | "IsNaN" | "IsInf" => Some(DataType::Bool),
        "Shape" | "Size" | "NonZero" | "ArgMax" | "ArgMin" => Some(DataType::Int64),
        "Where" => input(1).or_else(|| input(2)),
        "Constant" => node.attribute.first().and_then(constant_type),
        "ConstantOfShape" => node
            .attribute
            .iter()
            .find(|a| a.name() == "value")
            .and_then(|a| a.t.as_ref())
            .and_then(|t| t.data_type)
            .and_then(|c| DataType::try_from(c).ok())
            .or(Some(DataType::Float)),
        _ => (0..node.input.len()).find_map(input),
    }
}

/// The type of a Constant node's value attribute.
fn constant_type(a: &AttributeProto) -> Option<DataType> {
    match a.name() {
        "value" => {
            a.t.as_ref()
                .and_then(|t| t.data_type)
                .and_then(|c| DataType::try_from(c).ok())
        }
        "value_float" | "value_floats" => Some(DataType::Float),
        "value_int" | "value_ints" => Some(DataType::Int64),
        "value_string" | "value_strings" => Some(DataType::String),
        _ => None,
    }
}
