//! An activation site: data that every later stage (plan, rewrite, measure, report) takes as is.

use std::collections::BTreeMap;

use serde::Serialize;

/// A parameter value: one number, or one per channel.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(untagged)]
pub enum ParamValue {
    Scalar(f64),
    PerChannel(Vec<f64>),
}

/// How the site is spelled in the graph.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum Form {
    /// One node of an op that computes the kind.
    Fused,
    /// A chain of element-wise primitive ops.
    Decomposed,
}

/// One activation found in a model.
#[derive(Debug, Clone, Serialize)]
pub struct Site {
    /// Stable id: `s<N>`, numbered in graph order, then node order.
    pub id: String,
    /// Catalogue kind id.
    pub kind: String,
    /// Parameters by catalogue name, at full precision.
    pub params: BTreeMap<String, ParamValue>,
    /// Shape of the constant per-channel parameters come from (e.g. `[1, 16, 1, 1]`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub param_shape: Option<Vec<usize>>,
    pub form: Form,
    /// Domain of the fused op when it is not the default ONNX domain (e.g. `com.microsoft`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub domain: Option<String>,
    /// Op types of the site's compute nodes, in topological order.
    pub ops: Vec<String>,
    /// Labels of the site's compute nodes (name, or `<op>_<index>` when unnamed).
    pub nodes: Vec<String>,
    /// Constant tensors the site reads (initializers or Constant-node outputs).
    pub constants: Vec<String>,
    /// The tensor the activation is applied to.
    pub input: String,
    /// The tensor holding the activation's result.
    pub output: String,
    /// Path of the graph the site lives in (`main`, `main/If_3.then_branch`, ...).
    pub graph: String,
    /// Whether the site can be replaced without changing anything else in the graph.
    pub rewritable: bool,
    pub notes: Vec<String>,
    /// Index of the graph in `ModelIndex::graphs` (not serialized).
    #[serde(skip)]
    pub graph_index: usize,
    /// Indices of the compute nodes in their graph's node list (not serialized).
    #[serde(skip)]
    pub node_indices: Vec<usize>,
}
