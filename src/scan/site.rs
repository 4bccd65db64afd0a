//! An activation site: typed data that every later stage (plan, rewrite, measure, report) takes
//! as is, without going back to the graph.

use std::borrow::Cow;

use schemars::{JsonSchema, Schema, SchemaGenerator};
use serde::{Serialize, Serializer};

use crate::catalog::{Kind, NamedParams, ParamValue, Params};
use crate::onnx::proto::tensor_proto::DataType;

/// How the site is spelled in the graph.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "lowercase")]
pub enum Spelling {
    /// One node of an op that computes the kind.
    Fused,
    /// A chain of element-wise primitive ops.
    Decomposed,
}

/// One activation found in a model.
#[derive(Debug, Clone)]
pub struct Site {
    /// Stable id: `s<N>`, numbered in graph order, then node order.
    pub id: String,
    pub kind: &'static Kind,
    /// Parameters in the kind's order, at full precision; `None` when one is only known at run
    /// time.
    pub params: Option<Params>,
    pub spelling: Spelling,
    /// Domain of the fused op when it is not the default ONNX domain (e.g. `com.microsoft`).
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
    /// Whether the site can be replaced without changing anything else in the graph (but the
    /// readers of `type_readers`).
    pub rewritable: bool,
    pub notes: Vec<String>,
    /// Nodes outside the site that read one of its intermediates for its type or shape only;
    /// the rewrite points them at the tensor given.
    pub type_readers: Vec<TypeReader>,
    /// Element type of the input: declared, else that of the site's float constants, else
    /// float32.
    pub elem_type: DataType,
    /// The default-domain opset of the site's graph.
    pub opset: i64,
    /// Index of the graph in `ModelIndex::graphs`.
    pub graph_index: usize,
    /// Indices of the compute nodes in their graph's node list.
    pub node_indices: Vec<usize>,
}

/// An input of a node outside a site that takes an intermediate of the site for its element
/// type or shape only, and the tensor of the same type and shape it can read instead.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TypeReader {
    /// The reading node's index in the site's graph.
    pub node: usize,
    /// The input position.
    pub slot: usize,
    pub tensor: String,
}

impl Site {
    /// The value of the parameter called `name`, when known.
    pub fn param(&self, name: &str) -> Option<&ParamValue> {
        let i = self.kind.param_index(name)?;
        self.params.as_ref().map(|p| &p.values()[i])
    }

    /// The parameters as `{name: value}` (`{}` when unknown).
    pub fn named_params(&self) -> NamedParams<'_> {
        NamedParams::of(self.kind.params, self.params.as_ref())
    }
}

/// The scan JSON of a site (the stable schema of `actswap scan --json`).
#[derive(Serialize, JsonSchema)]
struct SiteJson<'a> {
    /// Stable id: `s<N>`, numbered in graph order, then node order.
    id: &'a str,
    /// The kind's id (see `actswap catalog`).
    kind: &'static str,
    params: NamedParams<'a>,
    #[serde(skip_serializing_if = "Option::is_none")]
    param_shape: Option<&'a [usize]>,
    form: Spelling,
    #[serde(skip_serializing_if = "Option::is_none")]
    domain: Option<&'a str>,
    ops: &'a [String],
    nodes: &'a [String],
    constants: &'a [String],
    input: &'a str,
    output: &'a str,
    graph: &'a str,
    rewritable: bool,
    notes: &'a [String],
}

impl Serialize for Site {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        SiteJson {
            id: &self.id,
            kind: self.kind.id,
            params: self.named_params(),
            param_shape: self.params.as_ref().and_then(Params::shape),
            form: self.spelling,
            domain: self.domain.as_deref(),
            ops: &self.ops,
            nodes: &self.nodes,
            constants: &self.constants,
            input: &self.input,
            output: &self.output,
            graph: &self.graph,
            rewritable: self.rewritable,
            notes: &self.notes,
        }
        .serialize(s)
    }
}

impl JsonSchema for Site {
    fn schema_name() -> Cow<'static, str> {
        "Site".into()
    }

    fn json_schema(g: &mut SchemaGenerator) -> Schema {
        SiteJson::json_schema(g)
    }
}
