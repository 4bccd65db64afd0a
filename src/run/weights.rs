//! Handing a graph's initializers to tract without its quadratic constant search.
//!
//! tract-onnx 0.23.9 adds each initializer to the model it parses by first comparing its value
//! with every constant already added (to share equal ones), so parsing grows with the square of
//! the initializer count: a second at 6,400 weights, minutes at 30,000. Here the main graph's
//! initializers are taken out of the message before parsing and declared as graph inputs
//! instead; after parsing, each of those inputs becomes a constant holding the tensor, loaded by
//! tract's own tensor reader (external data included). Equal initializers are not shared, which
//! changes no value.

use std::sync::Arc;

use tract_onnx::Onnx;
use tract_onnx::pb::type_proto::{Tensor as TensorType, Value};
use tract_onnx::pb::{GraphProto, TensorProto, TypeProto, ValueInfoProto};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::konst::Const;
use tract_onnx::tract_hir::internal::TractErrorContext;

/// Takes the initializers out of `graph`, declaring each as a graph input (an initializer that
/// is already an input keeps its place, with the initializer's type). Returns them, to be given
/// back by [`restore`] once tract has parsed the graph.
pub(crate) fn lift(graph: &mut GraphProto) -> Vec<TensorProto> {
    let lifted = std::mem::take(&mut graph.initializer);
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
    let mut by_name: std::collections::HashMap<&str, &TensorProto> =
        lifted.iter().map(|t| (t.name.as_str(), t)).collect();
    for input in &mut graph.input {
        if let Some(t) = by_name.remove(input.name.as_str()) {
            *input = declared(t);
        }
    }
    let mut rest: Vec<&TensorProto> = by_name.into_values().collect();
    rest.sort_by(|a, b| a.name.cmp(&b.name));
    graph.input.extend(rest.into_iter().map(declared));
    lifted
}

/// Turns the inputs [`lift`] declared back into constants of `model`, which tract parsed from
/// the lifted graph, and drops them from its inputs. `model_dir` resolves external data.
pub(crate) fn restore(
    onnx: &Onnx,
    model: &mut InferenceModel,
    outlets: &std::collections::HashMap<String, OutletId>,
    lifted: &[TensorProto],
    model_dir: Option<&str>,
) -> TractResult<()> {
    let mut constant = vec![false; model.nodes.len()];
    for t in lifted {
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

    /// y = x * w + b, with `w` also declared as a graph input (as exporters of IR version 3
    /// did) and two initializers of equal value; ONNX Mul and Add broadcast (ONNX operator
    /// spec), so y = [1*2+3, 2*2+3] = [5, 7].
    #[test]
    fn initializers_come_back_as_constants() {
        let graph = GraphProto {
            name: Some("g".into()),
            node: vec![
                node("Mul", "mul", &["x", "w"], &["xw"], vec![]),
                node("Add", "add", &["xw", "b"], &["y"], vec![]),
            ],
            initializer: vec![
                tensor_f32("w", &[1], &[2.0]),
                tensor_f32("b", &[1], &[3.0]),
                tensor_f32("unused", &[1], &[2.0]),
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
        assert_eq!(y[0].tensor, tensor1(&[5.0f32, 7.0]));
    }
}
