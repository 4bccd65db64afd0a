//! Loading ONNX model bytes into tract, with unique node names and corrected op loaders.

use std::collections::HashMap;
use std::path::Path;
use std::sync::Arc;

use prost::Message;
use tract_onnx::pb::tensor_proto::DataLocation;
use tract_onnx::pb::{GraphProto, ModelProto, TensorProto, ValueInfoProto};
use tract_onnx::prelude::{InferenceModel, OutletId};
use tract_onnx::tract_core::ops::unimpl::UnimplementedOp;

use super::ceiling::DEFAULT_MEMORY_CEILING;
use super::execute::Compilation;
use super::guard::guarded;
use super::names::{NodeOrigins, make_node_names_unique};
use super::signature::{InputSpec, read_inputs};
use super::{RunError, framework, weights};

/// A model parsed by tract, not yet typed or optimized; see [`TractModel::compile`] and
/// [`TractModel::run`].
#[derive(Debug, Clone)]
pub struct TractModel {
    pub(crate) model: InferenceModel,
    pub(crate) outlets: HashMap<String, OutletId>,
    pub(crate) inputs: Vec<InputSpec>,
    pub(crate) outputs: Vec<String>,
    pub(crate) origins: Arc<NodeOrigins>,
    pub(crate) memory_ceiling: u64,
    pub(crate) compilation: Compilation,
}

/// Decodes `model_bytes` and loads them into tract. `model_dir` is the folder external data is
/// resolved against (none: the model must carry all its data).
///
/// Node names are made unique first (see the `names` module) and Celu and Swish load with the
/// corrected loaders. A model with ops tract cannot run is refused here, naming each op type and
/// node.
pub fn prepare(model_bytes: &[u8], model_dir: Option<&Path>) -> Result<TractModel, RunError> {
    let proto = ModelProto::decode(model_bytes).map_err(|e| RunError::Decode(e.to_string()))?;
    load(proto, model_dir)
}

/// [`prepare`] for a model given in parts: its encoding without the main graph's initializers,
/// then each of those initializers encoded on its own, in graph order. The whole encoding is
/// never held at once, so loading a re-encoded model holds its weights twice at the most
/// (tract's decoded message, then tract's tensors), not three times.
pub fn prepare_parts(
    head: &[u8],
    initializers: impl IntoIterator<Item = Vec<u8>>,
    model_dir: Option<&Path>,
) -> Result<TractModel, RunError> {
    let decode_error = |e: prost::DecodeError| RunError::Decode(e.to_string());
    let mut proto = ModelProto::decode(head).map_err(decode_error)?;
    let graph = proto
        .graph
        .as_mut()
        .ok_or_else(|| RunError::Decode("no graph".to_string()))?;
    for tensor in initializers {
        // Decoded from a buffer that owns the bytes, prost hands the tensor data over as a
        // slice of it: the data is copied once, into the message, instead of twice.
        let tensor = bytes::Bytes::from(tensor);
        graph
            .initializer
            .push(TensorProto::decode(tensor).map_err(decode_error)?);
    }
    load(proto, model_dir)
}

/// Loads a decoded model into tract; see [`prepare`].
fn load(mut proto: ModelProto, model_dir: Option<&Path>) -> Result<TractModel, RunError> {
    let graph = proto
        .graph
        .as_mut()
        .ok_or_else(|| RunError::Decode("no graph".to_string()))?;
    let origins = make_node_names_unique(graph);
    let initializers = graph.initializer.iter().map(|t| t.name.as_str()).collect();
    let inputs = read_inputs(&graph.input, &initializers)?;
    let outputs = graph.output.iter().map(|o| o.name.clone()).collect();
    let dir = model_dir
        .map(|d| {
            d.to_str()
                .ok_or_else(|| RunError::file(d, "folder name is not valid UTF-8"))
        })
        .transpose()?;
    if model_dir.is_none() {
        refuse_external_data(graph)?;
    }
    let lifted = weights::lift(graph);
    let onnx = framework::corrected_onnx();
    let mut parsed =
        guarded("load the model", || onnx.parse(&proto, dir)).map_err(|e| origins.attribute(e))?;
    if !parsed.unresolved_inputs.is_empty() {
        return Err(RunError::UndefinedTensors(parsed.unresolved_inputs));
    }
    guarded("load the initializers", || {
        weights::restore(
            &onnx,
            &mut parsed.model,
            &mut parsed.outlets_by_name,
            &lifted,
            dir,
        )
    })
    .map_err(|e| origins.attribute(e))?;
    let unsupported: Vec<String> = parsed
        .model
        .nodes()
        .iter()
        .filter(|node| node.op_is::<UnimplementedOp>())
        .map(|node| origins.describe(&node.name))
        .collect();
    if !unsupported.is_empty() {
        return Err(RunError::UnsupportedOps(unsupported));
    }
    Ok(TractModel {
        model: parsed.model,
        outlets: parsed.outlets_by_name,
        inputs,
        outputs,
        origins: Arc::new(origins),
        memory_ceiling: DEFAULT_MEMORY_CEILING,
        compilation: Compilation::default(),
    })
}

/// The inputs a model takes (graph inputs that are not initializers, in graph order), read from
/// its bytes without loading it into tract, and without copying its weights: only the main
/// graph's inputs and its initializers' names are decoded ([`ModelInputs`]).
pub fn input_specs(model_bytes: &[u8]) -> Result<Vec<InputSpec>, RunError> {
    let proto = ModelInputs::decode(model_bytes).map_err(|e| RunError::Decode(e.to_string()))?;
    let graph = proto
        .graph
        .as_ref()
        .ok_or_else(|| RunError::Decode("no graph".to_string()))?;
    let initializers = graph.initializer.iter().map(|t| t.name.as_str()).collect();
    read_inputs(&graph.input, &initializers)
}

/// What [`input_specs`] reads of a `ModelProto` (field numbers of the ONNX schema); prost skips
/// every other field, tensor data included, without copying it.
#[derive(Clone, PartialEq, prost::Message)]
struct ModelInputs {
    #[prost(message, optional, tag = "7")]
    graph: Option<GraphInputs>,
}

/// A `GraphProto`'s initializers (by name) and inputs.
#[derive(Clone, PartialEq, prost::Message)]
struct GraphInputs {
    #[prost(message, repeated, tag = "5")]
    initializer: Vec<TensorName>,
    #[prost(message, repeated, tag = "11")]
    input: Vec<ValueInfoProto>,
}

/// A `TensorProto`'s name.
#[derive(Clone, PartialEq, prost::Message)]
struct TensorName {
    #[prost(string, tag = "8")]
    name: String,
}

/// Refuses a graph whose initializers live in external files, which need the model's folder.
fn refuse_external_data(graph: &GraphProto) -> Result<(), RunError> {
    let external = graph
        .initializer
        .iter()
        .find(|t| t.data_location == Some(DataLocation::External as i32));
    match external {
        Some(t) => Err(RunError::ExternalDataWithoutFolder {
            tensor: t.name.clone(),
            location: t
                .external_data
                .iter()
                .find(|e| e.key == "location")
                .map(|e| e.value.clone())
                .unwrap_or_default(),
        }),
        None => Ok(()),
    }
}

impl TractModel {
    /// The graph inputs that are not initializers, in graph order.
    pub fn inputs(&self) -> &[InputSpec] {
        &self.inputs
    }

    /// The graph output names, in graph order.
    pub fn output_names(&self) -> &[String] {
        &self.outputs
    }

    /// Sets the memory ceiling of every compile (default [`DEFAULT_MEMORY_CEILING`]): a model
    /// whose values would take more bytes, one of them or all together, is refused before it runs.
    pub fn with_memory_ceiling(self, bytes: u64) -> Self {
        TractModel {
            memory_ceiling: bytes,
            ..self
        }
    }

    /// Sets how far every compile takes the model (default [`Compilation::Optimized`]).
    pub fn with_compilation(self, compilation: Compilation) -> Self {
        TractModel {
            compilation,
            ..self
        }
    }
}

#[cfg(test)]
mod tests {
    use prost::Message;

    use super::{input_specs, prepare};
    use crate::onnx::builder::{Dim, model, node, opset, tensor_f32, value};
    use crate::onnx::proto::GraphProto;
    use crate::onnx::proto::tensor_proto::DataType;

    /// The inputs read without decoding the weights are those loading the model reads: graph
    /// inputs in order, less an initializer also declared as an input (ONNX IR.md, "Graphs":
    /// an initializer may also be named among the graph inputs, as IR versions before 4
    /// required; paraphrased from memory).
    #[test]
    fn inputs_read_alone_are_those_of_the_loaded_model() {
        let weights: Vec<f32> = (0..4096).map(|i| i as f32).collect();
        let graph = GraphProto {
            name: Some("g".into()),
            node: vec![
                node("Mul", "mul", &["x", "w"], &["xw"], vec![]),
                node("Add", "add", &["xw", "z"], &["y"], vec![]),
            ],
            initializer: vec![tensor_f32("w", &[4096], &weights)],
            input: vec![
                value(
                    "x",
                    DataType::Float,
                    &[Dim::Named("batch"), Dim::Size(4096)],
                ),
                value("w", DataType::Float, &[Dim::Size(4096)]),
                value("z", DataType::Float, &[Dim::Size(1), Dim::Size(4096)]),
            ],
            output: vec![value(
                "y",
                DataType::Float,
                &[Dim::Named("batch"), Dim::Size(4096)],
            )],
            ..Default::default()
        };
        let bytes = model(graph, vec![opset("", 17)], "test").encode_to_vec();
        let specs = input_specs(&bytes).unwrap();
        let names: Vec<&str> = specs.iter().map(|s| s.name.as_str()).collect();
        assert_eq!(names, ["x", "z"]);
        assert_eq!(specs, prepare(&bytes, None).unwrap().inputs());
    }
}
