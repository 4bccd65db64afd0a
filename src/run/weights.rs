//! Handing a graph's initializers to tract without its quadratic constant search.
//!
//! tract-onnx 0.23.9 adds each initializer to the model it parses by first comparing its value
//! with every constant already added (to share equal ones), so parsing grows with the square of
//! the initializer count: a second at 6,400 weights, minutes at 30,000. Here the main graph's
//! initializers are taken out of the message before parsing and declared as graph inputs
//! instead; after parsing, each of those inputs becomes a constant holding the tensor, loaded by
//! tract's own tensor reader (external data included). Small initializers of equal encoding
//! are shared as tract shares them (a rewrite adds a few per site): the main graph's nodes read
//! the first of them, and the others' names stand for it.

use std::collections::{HashMap, HashSet};
use std::sync::Arc;

use prost::Message;
use tract_onnx::Onnx;
use tract_onnx::pb::type_proto::{Tensor as TensorType, Value};
use tract_onnx::pb::{GraphProto, TensorProto, TypeProto, ValueInfoProto};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::konst::Const;
use tract_onnx::tract_hir::internal::TractErrorContext;

/// Initializers whose encoding (name aside) is at most this many bytes are shared by value.
const SHARED_BYTES: usize = 1024;

/// The initializers taken out of a graph by [`lift`], to be given back by [`restore`].
pub(crate) struct Lifted {
    tensors: Vec<TensorProto>,
    /// (name, the name of the equal initializer that stands for it).
    aliases: Vec<(String, String)>,
}

/// Takes the initializers out of `graph`, declaring each as a graph input (an initializer that
/// is already an input keeps its place, with the initializer's type). A small initializer equal
/// to an earlier one is dropped and the main graph's nodes read the earlier one instead, unless
/// its name is a graph input or output or is read inside a subgraph.
pub(crate) fn lift(graph: &mut GraphProto) -> Lifted {
    let mut kept_names: HashSet<String> = graph.input.iter().map(|i| i.name.clone()).collect();
    kept_names.extend(graph.output.iter().map(|o| o.name.clone()));
    for node in &graph.node {
        for attr in &node.attribute {
            for g in attr.g.iter().chain(&attr.graphs) {
                read_inside(g, &mut kept_names);
            }
        }
    }
    let mut first_of: HashMap<Vec<u8>, String> = HashMap::new();
    let mut aliases: HashMap<String, String> = HashMap::new();
    let mut tensors = Vec::new();
    for t in std::mem::take(&mut graph.initializer) {
        // The name's field is its bytes plus a tag and a length (at most 11 bytes more): a
        // larger tensor is never copied to be compared.
        let small = t.encoded_len() <= SHARED_BYTES + t.name.len() + 11;
        if small && !kept_names.contains(&t.name) && t.external_data.is_empty() {
            let mut unnamed = t.clone();
            unnamed.name.clear();
            if unnamed.encoded_len() <= SHARED_BYTES {
                let key = unnamed.encode_to_vec();
                if let Some(first) = first_of.get(&key) {
                    aliases.insert(t.name, first.clone());
                    continue;
                }
                first_of.insert(key, t.name.clone());
            }
        }
        tensors.push(t);
    }
    for node in &mut graph.node {
        for input in &mut node.input {
            if let Some(first) = aliases.get(input) {
                input.clone_from(first);
            }
        }
    }
    let declared = |t: &TensorProto| ValueInfoProto {
        name: t.name.clone(),
        r#type: Some(TypeProto {
            denotation: String::new(),
            value: Some(Value::TensorType(TensorType {
                elem_type: t.data_type,
                shape: None,
            })),
        }),
        doc_string: String::new(),
    };
    let mut by_name: HashMap<&str, &TensorProto> =
        tensors.iter().map(|t| (t.name.as_str(), t)).collect();
    for input in &mut graph.input {
        if let Some(t) = by_name.remove(input.name.as_str()) {
            *input = declared(t);
        }
    }
    let mut rest: Vec<&TensorProto> = by_name.into_values().collect();
    rest.sort_by(|a, b| a.name.cmp(&b.name));
    graph.input.extend(rest.into_iter().map(declared));
    Lifted {
        tensors,
        aliases: aliases.into_iter().collect(),
    }
}

/// Adds every name read by the nodes of `graph` and of the graphs nested in it to `names`.
fn read_inside(graph: &GraphProto, names: &mut HashSet<String>) {
    for node in &graph.node {
        names.extend(node.input.iter().cloned());
        for attr in &node.attribute {
            for g in attr.g.iter().chain(&attr.graphs) {
                read_inside(g, names);
            }
        }
    }
}

/// Turns the inputs [`lift`] declared back into constants of `model`, which tract parsed from
/// the lifted graph, drops them from its inputs, and gives each shared initializer's name the
/// outlet of the one that stands for it. `model_dir` resolves external data.
pub(crate) fn restore(
    onnx: &Onnx,
    model: &mut InferenceModel,
    outlets: &mut HashMap<String, OutletId>,
    lifted: &Lifted,
    model_dir: Option<&str>,
) -> TractResult<()> {
    let mut constant = vec![false; model.nodes.len()];
    for t in &lifted.tensors {
        let tensor: Arc<Tensor> =
            tract_onnx::tensor::load_tensor(&*onnx.provider, t, model_dir)?.into_arc_tensor();
        let outlet = outlets
            .get(&t.name)
            .with_context(|| format!("initializer '{}' was not parsed", t.name))?;
        let fact = InferenceFact::try_from(&tensor)?;
        let node = &mut model.nodes[outlet.node];
        node.op = Box::new(Const::new(tensor)?);
        node.outputs[0].fact = fact;
        constant[outlet.node] = true;
    }
    model.inputs.retain(|i| !constant[i.node]);
    for (name, first) in &lifted.aliases {
        if let Some(&outlet) = outlets.get(first) {
            outlets.insert(name.clone(), outlet);
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use prost::Message;
    use tract_onnx::prelude::*;

    use crate::onnx::builder::{Dim, model, node, opset, tensor_f32, value};
    use crate::onnx::proto::GraphProto;
    use crate::onnx::proto::tensor_proto::DataType;
    use crate::run::{NamedTensor, prepare};

    /// y = x * w + b + b2, with `w` also declared as a graph input (as exporters of IR version 3
    /// did), `b2` equal to `b` (shared) and an unused initializer equal to `w`; ONNX Mul and
    /// Add broadcast (ONNX operator spec), so y = [1*2+3+3, 2*2+3+3] = [8, 10].
    #[test]
    fn initializers_come_back_as_constants() {
        let graph = GraphProto {
            name: Some("g".into()),
            node: vec![
                node("Mul", "mul", &["x", "w"], &["xw"], vec![]),
                node("Add", "add", &["xw", "b"], &["xwb"], vec![]),
                node("Add", "add2", &["xwb", "b2"], &["y"], vec![]),
            ],
            initializer: vec![
                tensor_f32("w", &[1], &[2.0]),
                tensor_f32("b", &[1], &[3.0]),
                tensor_f32("unused", &[1], &[2.0]),
                tensor_f32("b2", &[1], &[3.0]),
            ],
            input: vec![
                value("x", DataType::Float, &[Dim::Size(2)]),
                value("w", DataType::Float, &[Dim::Size(1)]),
            ],
            output: vec![value("y", DataType::Float, &[Dim::Size(2)])],
            ..Default::default()
        };
        let bytes = model(graph, vec![opset("", 17)], "test").encode_to_vec();
        let tract = prepare(&bytes, None).unwrap();
        assert_eq!(tract.inputs().len(), 1, "only x is an input");
        let x = NamedTensor {
            name: "x".into(),
            tensor: tensor1(&[1.0f32, 2.0]),
        };
        let y = tract.run(&[x], &[]).unwrap();
        assert_eq!(y[0].tensor, tensor1(&[8.0f32, 10.0]));
        assert_eq!(
            tract.outlets["b2"], tract.outlets["b"],
            "b2 shares b's constant"
        );
    }
}
