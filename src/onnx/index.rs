//! The graph index: who produces and who consumes each tensor, constant values, graph inputs and
//! outputs, value_info, opsets and a topological order, for the main graph, every subgraph (If,
//! Loop, Scan attributes, to any depth) and every local function. Building it validates the model:
//! a cycle, a node reading an undefined tensor, a name defined twice in a graph (ONNX IR: graphs are
//! in single static assignment form, and the onnx checker refuses a node output that repeats a
//! graph input, an initializer or a name of an enclosing graph, and a repeated initializer or
//! graph input name) or a tensor whose data disagrees with its shape is an error.

use std::cmp::Reverse;
use std::collections::{BTreeMap, BinaryHeap};

use foldhash::{HashMap, HashMapExt, HashSet, HashSetExt};

use anyhow::{Context, Result, bail};

use super::external;
use super::model::Model;
use super::proto::{
    AttributeProto, FunctionProto, GraphProto, NodeProto, OperatorSetIdProto, SparseTensorProto,
    TensorProto, ValueInfoProto, attribute_proto::AttributeType,
};
use super::tensor::{self, TensorValue};
use crate::text::escape;

/// Tensors larger than this are never treated as constants by queries (they are weights).
pub const CONSTANT_QUERY_LIMIT: u64 = 1 << 20;

/// Shapes whose element count exceeds this are refused as absurd.
pub const ABSURD_ELEMENTS: u64 = 1 << 40;

/// Where a graph sits in the model.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum GraphKind {
    Main,
    /// A graph attribute of a node (If branches, Loop and Scan bodies).
    Subgraph {
        node: String,
        attribute: String,
    },
    /// The body of a local function.
    Function {
        domain: String,
        name: String,
    },
}

/// How to reach a graph inside the model proto: an optional local function, then a chain of
/// (node index, attribute index, index in the attribute's `graphs` list or `None` for `g`).
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct GraphLocation {
    pub function: Option<usize>,
    pub steps: Vec<(usize, usize, Option<usize>)>,
}

/// One graph (or function body) with its lookup tables.
#[derive(Debug)]
pub struct GraphIndex<'m> {
    /// Readable address, e.g. `main`, `main/If_3.then_branch`, `function:custom.Block`.
    pub path: String,
    pub kind: GraphKind,
    /// Where the graph sits in the model proto.
    pub location: GraphLocation,
    /// Index of the enclosing graph in [`ModelIndex::graphs`] (outer scope), if any.
    pub parent: Option<usize>,
    pub nodes: &'m [NodeProto],
    /// Graph inputs (or function inputs), in order.
    pub inputs: Vec<&'m str>,
    /// Graph outputs (or function outputs), in order.
    pub outputs: Vec<&'m str>,
    /// Opset per domain in force in this graph.
    pub opsets: BTreeMap<String, i64>,
    initializers: HashMap<&'m str, &'m TensorProto>,
    value_info: HashMap<&'m str, &'m ValueInfoProto>,
    producer: HashMap<&'m str, usize>,
    consumers: HashMap<&'m str, Vec<usize>>,
    outputs_set: HashSet<&'m str>,
    order: Vec<usize>,
}

/// Index of a whole model: all graphs, main first, each subgraph after its parent.
#[derive(Debug)]
pub struct ModelIndex<'m> {
    pub model: &'m Model,
    pub graphs: Vec<GraphIndex<'m>>,
}

impl<'m> ModelIndex<'m> {
    /// Indexes and validates the model.
    pub fn build(model: &'m Model) -> Result<ModelIndex<'m>> {
        let proto = model.proto();
        let graph = proto.graph.as_ref().context("the model has no graph")?;
        let opsets = opset_map(&proto.opset_import);
        let mut index = ModelIndex {
            model,
            graphs: Vec::new(),
        };
        index.add_graph(
            graph,
            "main".into(),
            GraphKind::Main,
            GraphLocation::default(),
            None,
            &opsets,
            &HashSet::new(),
        )?;
        for (i, f) in proto.functions.iter().enumerate() {
            index.add_function(i, f, &opsets)?;
        }
        Ok(index)
    }

    /// The main graph.
    pub fn main(&self) -> &GraphIndex<'m> {
        &self.graphs[0]
    }

    /// Looks a graph up by its path.
    pub fn graph(&self, path: &str) -> Option<(usize, &GraphIndex<'m>)> {
        self.graphs.iter().enumerate().find(|(_, g)| g.path == path)
    }

    /// The model's opset per domain (`""` is the default ONNX domain).
    pub fn opsets(&self) -> BTreeMap<String, i64> {
        opset_map(&self.model.proto().opset_import)
    }

    /// The value of `name` as seen from graph `g` when it is a constant: an initializer, a
    /// Constant node, or Identity/Cast/CastLike of a constant, here or in an enclosing graph.
    /// Returns `None` for computed tensors and for tensors over [`CONSTANT_QUERY_LIMIT`].
    pub fn constant(&self, g: usize, name: &str) -> Option<TensorValue> {
        self.constant_depth(g, name, 0)
    }

    fn constant_depth(&self, g: usize, name: &str, depth: usize) -> Option<TensorValue> {
        if depth > 16 || name.is_empty() {
            return None;
        }
        let graph = &self.graphs[g];
        if let Some(t) = graph.initializers.get(name) {
            return tensor::read(t, self.model.dir(), CONSTANT_QUERY_LIMIT).ok();
        }
        if let Some(&p) = graph.producer.get(name) {
            let node = &graph.nodes[p];
            return match (node.domain(), node.op_type()) {
                ("" | "ai.onnx", "Constant") => constant_node_value(node, self.model),
                ("" | "ai.onnx", "Identity" | "Cast" | "CastLike") => {
                    let v = self.constant_depth(g, node.input.first()?, depth + 1)?;
                    cast_value(node, v, self, g, depth)
                }
                ("" | "ai.onnx", "Reshape" | "Unsqueeze" | "Squeeze" | "Flatten") => {
                    let v = self.constant_depth(g, node.input.first()?, depth + 1)?;
                    let arg = |i: usize| {
                        node.input
                            .get(i)
                            .filter(|s| !s.is_empty())
                            .and_then(|s| self.constant_depth(g, s, depth + 1))
                    };
                    let dims = reshaped_dims(node, &v.dims, arg(1).map(|a| a.data))?;
                    (dims.iter().product::<usize>() == v.data.len())
                        .then_some(TensorValue { dims, ..v })
                }
                _ => None,
            };
        }
        if graph.inputs.contains(&name) {
            return None;
        }
        graph
            .parent
            .and_then(|p| self.constant_depth(p, name, depth + 1))
    }

    #[allow(clippy::too_many_arguments)]
    fn add_graph(
        &mut self,
        graph: &'m GraphProto,
        path: String,
        kind: GraphKind,
        location: GraphLocation,
        parent: Option<usize>,
        opsets: &BTreeMap<String, i64>,
        outer: &HashSet<&'m str>,
    ) -> Result<()> {
        let inputs: Vec<&str> = graph.input.iter().map(|v| v.name()).collect();
        let outputs: Vec<&str> = graph.output.iter().map(|v| v.name()).collect();
        let shown = escape(&path);
        if let Some(name) = first_repeat(inputs.iter().copied()) {
            bail!(
                "graph {shown}: graph input '{}' is declared twice (ONNX requires unique names in a graph)",
                escape(name)
            );
        }
        if let Some(name) = first_repeat(graph.initializer.iter().map(|t| t.name())) {
            bail!(
                "graph {shown}: initializer '{}' is defined twice (ONNX requires unique names in a graph)",
                escape(name)
            );
        }
        let initializers: HashMap<&str, &TensorProto> =
            graph.initializer.iter().map(|t| (t.name(), t)).collect();
        for t in graph
            .initializer
            .iter()
            .chain(graph.sparse_initializer.iter().flat_map(sparse_parts))
        {
            validate_tensor(t, self.model).with_context(|| format!("graph {shown}"))?;
        }
        let mut value_info = HashMap::new();
        for v in graph
            .input
            .iter()
            .chain(&graph.output)
            .chain(&graph.value_info)
        {
            value_info.entry(v.name()).or_insert(v);
        }
        let mut defined: HashSet<&str> = outer.clone();
        defined.extend(inputs.iter().copied());
        defined.extend(initializers.keys().copied());
        defined.extend(
            graph
                .sparse_initializer
                .iter()
                .filter_map(|s| s.values.as_ref())
                .map(|t| t.name()),
        );
        let gi = self.add_nodes(
            &graph.node,
            path.clone(),
            kind,
            location,
            parent,
            opsets.clone(),
            inputs,
            outputs,
            initializers,
            value_info,
            defined,
        )?;
        self.add_subgraphs(gi, opsets)
    }

    fn add_function(
        &mut self,
        i: usize,
        f: &'m FunctionProto,
        model_opsets: &BTreeMap<String, i64>,
    ) -> Result<()> {
        let mut opsets = model_opsets.clone();
        opsets.extend(opset_map(&f.opset_import));
        let path = if f.domain().is_empty() {
            format!("function:{}", f.name())
        } else {
            format!("function:{}.{}", f.domain(), f.name())
        };
        let inputs: Vec<&str> = f.input.iter().map(String::as_str).collect();
        let outputs: Vec<&str> = f.output.iter().map(String::as_str).collect();
        let value_info = f.value_info.iter().map(|v| (v.name(), v)).collect();
        let defined: HashSet<&str> = inputs.iter().copied().collect();
        let gi = self.add_nodes(
            &f.node,
            path,
            GraphKind::Function {
                domain: f.domain().to_string(),
                name: f.name().to_string(),
            },
            GraphLocation {
                function: Some(i),
                steps: Vec::new(),
            },
            None,
            opsets.clone(),
            inputs,
            outputs,
            HashMap::new(),
            value_info,
            defined,
        )?;
        self.add_subgraphs(gi, &opsets)
    }

    #[allow(clippy::too_many_arguments)]
    fn add_nodes(
        &mut self,
        nodes: &'m [NodeProto],
        path: String,
        kind: GraphKind,
        location: GraphLocation,
        parent: Option<usize>,
        opsets: BTreeMap<String, i64>,
        inputs: Vec<&'m str>,
        outputs: Vec<&'m str>,
        initializers: HashMap<&'m str, &'m TensorProto>,
        value_info: HashMap<&'m str, &'m ValueInfoProto>,
        mut defined: HashSet<&'m str>,
    ) -> Result<usize> {
        let mut producer = HashMap::with_capacity(nodes.len());
        let mut consumers: HashMap<&str, Vec<usize>> = HashMap::with_capacity(nodes.len());
        let shown = escape(&path);
        for (i, n) in nodes.iter().enumerate() {
            let node = || {
                format!(
                    "node '{}' ({})",
                    escape(&node_label(n, i)),
                    escape(n.op_type())
                )
            };
            for t in n.attribute.iter().flat_map(attribute_tensors) {
                validate_tensor(t, self.model)
                    .with_context(|| format!("graph {shown}, {}", node()))?;
            }
            for o in n.output.iter().filter(|o| !o.is_empty()) {
                if defined.contains(o.as_str()) {
                    let what = if inputs.contains(&o.as_str()) {
                        "a graph input"
                    } else if initializers.contains_key(o.as_str()) {
                        "an initializer"
                    } else {
                        "a name of an enclosing graph"
                    };
                    bail!(
                        "graph {shown}: {} writes '{}', which is already {what} (ONNX graphs assign each name once)",
                        node(),
                        escape(o)
                    );
                }
                if producer.insert(o.as_str(), i).is_some() {
                    bail!(
                        "graph {shown}: tensor '{}' is produced by more than one node (the second is '{}')",
                        escape(o),
                        escape(&node_label(n, i))
                    );
                }
            }
        }
        defined.extend(producer.keys().copied());
        let mut reads: Vec<Vec<&str>> = Vec::with_capacity(nodes.len());
        for (i, n) in nodes.iter().enumerate() {
            let mut r: Vec<&str> = n
                .input
                .iter()
                .filter(|s| !s.is_empty())
                .map(String::as_str)
                .collect();
            for a in &n.attribute {
                for g in a.g.iter().chain(&a.graphs) {
                    free_names(g, &mut r);
                }
            }
            for &name in &r {
                if !defined.contains(name) {
                    bail!(
                        "graph {shown}: node '{}' ({}) reads undefined tensor '{}'",
                        escape(&node_label(n, i)),
                        escape(n.op_type()),
                        escape(name)
                    );
                }
            }
            for &name in n
                .input
                .iter()
                .filter(|s| !s.is_empty())
                .map(String::as_str)
                .collect::<Vec<_>>()
                .iter()
            {
                let c = consumers.entry(name).or_default();
                if c.last() != Some(&i) {
                    c.push(i);
                }
            }
            reads.push(r);
        }
        for &o in &outputs {
            if !defined.contains(o) {
                bail!(
                    "graph {shown}: output '{}' is not produced by any node nor an input",
                    escape(o)
                );
            }
        }
        let order = topological_order(nodes, &reads, &producer)
            .with_context(|| format!("graph {shown}"))?;
        let outputs_set = outputs.iter().copied().collect();
        self.graphs.push(GraphIndex {
            path,
            kind,
            location,
            parent,
            nodes,
            inputs,
            outputs,
            opsets,
            initializers,
            value_info,
            producer,
            consumers,
            outputs_set,
            order,
        });
        Ok(self.graphs.len() - 1)
    }

    /// Indexes the graph attributes of every node of graph `gi`.
    fn add_subgraphs(&mut self, gi: usize, opsets: &BTreeMap<String, i64>) -> Result<()> {
        let nodes = self.graphs[gi].nodes;
        let base = self.graphs[gi].path.clone();
        let mut visible: HashSet<&'m str> = HashSet::new();
        {
            let g = &self.graphs[gi];
            visible.extend(g.inputs.iter().copied());
            visible.extend(g.initializers.keys().copied());
            visible.extend(g.producer.keys().copied());
            let mut p = g.parent;
            while let Some(pi) = p {
                let pg = &self.graphs[pi];
                visible.extend(pg.inputs.iter().copied());
                visible.extend(pg.initializers.keys().copied());
                visible.extend(pg.producer.keys().copied());
                p = pg.parent;
            }
        }
        let base_location = self.graphs[gi].location.clone();
        for (i, n) in nodes.iter().enumerate() {
            for (ai, a) in n.attribute.iter().enumerate() {
                let single = a.g.iter().map(|g| (g, a.name().to_string(), None));
                let many = a
                    .graphs
                    .iter()
                    .enumerate()
                    .map(|(k, g)| (g, format!("{}[{k}]", a.name()), Some(k)));
                for (g, attr, k) in single.chain(many) {
                    let path = format!("{base}/{}.{attr}", node_label(n, i));
                    let kind = GraphKind::Subgraph {
                        node: node_label(n, i),
                        attribute: attr,
                    };
                    let mut location = base_location.clone();
                    location.steps.push((i, ai, k));
                    self.add_graph(g, path, kind, location, Some(gi), opsets, &visible)?;
                }
            }
        }
        Ok(())
    }
}

impl<'m> GraphIndex<'m> {
    /// Index of the node producing `tensor` in this graph.
    pub fn producer(&self, tensor: &str) -> Option<usize> {
        self.producer.get(tensor).copied()
    }

    /// Indices of the nodes of this graph reading `tensor` (each once, in node order).
    pub fn consumers(&self, tensor: &str) -> &[usize] {
        self.consumers.get(tensor).map_or(&[], Vec::as_slice)
    }

    /// True when `tensor` is one of this graph's outputs.
    pub fn is_output(&self, tensor: &str) -> bool {
        self.outputs_set.contains(tensor)
    }

    /// True when `tensor` is one of this graph's inputs.
    pub fn is_input(&self, tensor: &str) -> bool {
        self.inputs.contains(&tensor)
    }

    /// The initializer named `tensor` in this graph.
    pub fn initializer(&self, tensor: &str) -> Option<&'m TensorProto> {
        self.initializers.get(tensor).copied()
    }

    /// The initializers of this graph.
    pub fn initializers(&self) -> impl Iterator<Item = &'m TensorProto> + '_ {
        self.initializers.values().copied()
    }

    /// Declared type and shape of `tensor` (graph inputs, outputs and value_info).
    pub fn value_info(&self, tensor: &str) -> Option<&'m ValueInfoProto> {
        self.value_info.get(tensor).copied()
    }

    /// Node indices in a topological order (the file's order wherever it already is one).
    pub fn order(&self) -> &[usize] {
        &self.order
    }

    /// True when the nodes are stored in a topological order.
    pub fn is_stored_in_order(&self) -> bool {
        self.order.iter().enumerate().all(|(i, &n)| i == n)
    }

    /// The opset version of `domain` in force here (`""` and `ai.onnx` are the same domain).
    pub fn opset(&self, domain: &str) -> Option<i64> {
        let d = if domain == "ai.onnx" { "" } else { domain };
        self.opsets.get(d).copied()
    }

    /// The node's readable label: its name, or `<op_type>_<index>` when unnamed.
    pub fn label(&self, node: usize) -> String {
        node_label(&self.nodes[node], node)
    }
}

/// A node's name, or `<op_type>_<index>` when it has none.
pub fn node_label(n: &NodeProto, index: usize) -> String {
    if n.name().is_empty() {
        format!("{}_{index}", n.op_type())
    } else {
        n.name().to_string()
    }
}

fn opset_map(imports: &[OperatorSetIdProto]) -> BTreeMap<String, i64> {
    imports
        .iter()
        .map(|o| {
            let d = if o.domain() == "ai.onnx" {
                ""
            } else {
                o.domain()
            };
            (d.to_string(), o.version())
        })
        .collect()
}

/// Names a subgraph reads from its enclosing scopes (used but not defined inside it).
pub fn free_names<'m>(g: &'m GraphProto, out: &mut Vec<&'m str>) {
    let mut defined: HashSet<&str> = g.input.iter().map(|v| v.name()).collect();
    defined.extend(g.initializer.iter().map(|t| t.name()));
    defined.extend(
        g.node
            .iter()
            .flat_map(|n| n.output.iter().map(String::as_str)),
    );
    let mut inner = Vec::new();
    for n in &g.node {
        inner.extend(n.input.iter().filter(|s| !s.is_empty()).map(String::as_str));
        for a in &n.attribute {
            for sg in a.g.iter().chain(&a.graphs) {
                free_names(sg, &mut inner);
            }
        }
    }
    inner.extend(g.output.iter().map(|v| v.name()));
    out.extend(inner.into_iter().filter(|n| !defined.contains(n)));
}

/// Kahn's algorithm, always taking the lowest ready index so a sorted graph keeps its order.
fn topological_order(
    nodes: &[NodeProto],
    reads: &[Vec<&str>],
    producer: &HashMap<&str, usize>,
) -> Result<Vec<usize>> {
    let n = nodes.len();
    let mut indegree = vec![0usize; n];
    let mut users: Vec<Vec<usize>> = vec![Vec::new(); n];
    for (i, r) in reads.iter().enumerate() {
        let mut deps: Vec<usize> = r.iter().filter_map(|t| producer.get(t).copied()).collect();
        deps.sort_unstable();
        deps.dedup();
        for d in deps {
            if d == i {
                bail!(
                    "node '{}' ({}) reads its own output: the graph has a cycle",
                    escape(&node_label(&nodes[i], i)),
                    escape(nodes[i].op_type())
                );
            }
            indegree[i] += 1;
            users[d].push(i);
        }
    }
    let mut ready: BinaryHeap<Reverse<usize>> =
        (0..n).filter(|&i| indegree[i] == 0).map(Reverse).collect();
    let mut order = Vec::with_capacity(n);
    while let Some(Reverse(i)) = ready.pop() {
        order.push(i);
        for &u in &users[i] {
            indegree[u] -= 1;
            if indegree[u] == 0 {
                ready.push(Reverse(u));
            }
        }
    }
    if order.len() < n {
        let stuck = (0..n).find(|&i| indegree[i] > 0).unwrap_or(0);
        bail!(
            "the graph has a cycle through node '{}' ({})",
            escape(&node_label(&nodes[stuck], stuck)),
            escape(nodes[stuck].op_type())
        );
    }
    Ok(order)
}

/// Checks a stored tensor against its shape without reading external bytes.
fn validate_tensor(t: &TensorProto, model: &Model) -> Result<()> {
    let n = tensor::element_count(t, ABSURD_ELEMENTS)?;
    let external_bytes = external::is_external(t)
        .then(|| external::stored_len(model.dir(), t))
        .transpose()
        .with_context(|| format!("tensor '{}'", escape(t.name())))?;
    tensor::check_data(t, n as u64, external_bytes)
        .with_context(|| format!("tensor '{}'", escape(t.name())))
}

/// The tensors an attribute holds: `t`, `tensors`, and the parts of its sparse tensors.
fn attribute_tensors(a: &AttributeProto) -> impl Iterator<Item = &TensorProto> {
    a.t.iter().chain(&a.tensors).chain(
        a.sparse_tensor
            .iter()
            .chain(&a.sparse_tensors)
            .flat_map(sparse_parts),
    )
}

/// A sparse tensor's values and indices.
fn sparse_parts(s: &SparseTensorProto) -> impl Iterator<Item = &TensorProto> {
    s.values.iter().chain(&s.indices)
}

/// The first name that occurs twice.
fn first_repeat<'a>(names: impl Iterator<Item = &'a str>) -> Option<&'a str> {
    let mut seen = HashSet::new();
    names.into_iter().find(|n| !seen.insert(*n))
}

/// The value of a Constant node (value, value_float(s), value_int(s)).
fn constant_node_value(node: &NodeProto, model: &Model) -> Option<TensorValue> {
    use super::proto::tensor_proto::DataType;
    let a: &AttributeProto = node.attribute.first()?;
    match a.name() {
        "value" => tensor::read(a.t.as_ref()?, model.dir(), CONSTANT_QUERY_LIMIT).ok(),
        "value_float" => Some(TensorValue {
            dims: vec![],
            data: vec![a.f? as f64],
            data_type: DataType::Float,
        }),
        "value_floats" => Some(TensorValue {
            dims: vec![a.floats.len()],
            data: a.floats.iter().map(|&v| v as f64).collect(),
            data_type: DataType::Float,
        }),
        "value_int" => Some(TensorValue {
            dims: vec![],
            data: vec![a.i? as f64],
            data_type: DataType::Int64,
        }),
        "value_ints" => Some(TensorValue {
            dims: vec![a.ints.len()],
            data: a.ints.iter().map(|&v| v as f64).collect(),
            data_type: DataType::Int64,
        }),
        _ => None,
    }
}

/// Applies Identity / Cast / CastLike to a constant value, rounding to the target float type.
fn cast_value(
    node: &NodeProto,
    mut v: TensorValue,
    index: &ModelIndex,
    g: usize,
    depth: usize,
) -> Option<TensorValue> {
    use super::proto::tensor_proto::DataType;
    let target = match node.op_type() {
        "Identity" => return Some(v),
        "Cast" => {
            let to = node.attribute.iter().find(|a| a.name() == "to")?;
            if to.r#type.is_some_and(|t| t != AttributeType::Int as i32) && to.i.is_none() {
                return None;
            }
            DataType::try_from(to.i? as i32).ok()?
        }
        _ => match element_type_of(index, g, node.input.get(1)?, depth) {
            Some(t) => t,
            // The reference tensor's type is not declared: keep the value as it is.
            None => return Some(v),
        },
    };
    v.data = v
        .data
        .iter()
        .map(|&x| match target {
            DataType::Float => x as f32 as f64,
            DataType::Float16 => half::f16::from_f64(x).to_f64(),
            DataType::Bfloat16 => half::bf16::from_f64(x).to_f64(),
            DataType::Double => x,
            _ => x.trunc(),
        })
        .collect();
    v.data_type = target;
    Some(v)
}

/// The element type of a tensor when the graph declares it or it is a constant.
fn element_type_of(
    index: &ModelIndex,
    g: usize,
    tensor: &str,
    depth: usize,
) -> Option<super::proto::tensor_proto::DataType> {
    use super::proto::tensor_proto::DataType;
    let graph = &index.graphs[g];
    if let Some(vi) = graph.value_info(tensor) {
        let code = vi.r#type.as_ref()?.tensor_type.as_ref()?.elem_type?;
        return DataType::try_from(code).ok();
    }
    index
        .constant_depth(g, tensor, depth + 1)
        .map(|v| v.data_type)
}

/// The shape a shape-only op (Reshape, Unsqueeze, Squeeze, Flatten) gives a constant of shape
/// `dims`; `arg` is the op's second input when it is constant (shape or axes from opset 13).
fn reshaped_dims(node: &NodeProto, dims: &[usize], arg: Option<Vec<f64>>) -> Option<Vec<usize>> {
    let n: usize = dims.iter().product();
    let axes = || -> Option<Vec<i64>> {
        match &arg {
            Some(a) => Some(a.iter().map(|&v| v as i64).collect()),
            None => super::attrs::get(node, "axes").map(|a| a.ints.clone()),
        }
    };
    match node.op_type() {
        "Reshape" => {
            let shape = arg?;
            let mut out: Vec<i64> = shape.iter().map(|&v| v as i64).collect();
            for (i, d) in out.iter_mut().enumerate() {
                if *d == 0 {
                    *d = *dims.get(i)? as i64;
                }
            }
            let known: i64 = out.iter().filter(|&&d| d != -1).product();
            if out.iter().filter(|&&d| d == -1).count() == 1 && known > 0 {
                let inferred = n as i64 / known;
                out.iter_mut()
                    .filter(|d| **d == -1)
                    .for_each(|d| *d = inferred);
            }
            out.iter().map(|&d| usize::try_from(d).ok()).collect()
        }
        "Unsqueeze" => {
            let rank = dims.len() + axes()?.len();
            let mut axes: Vec<usize> = axes()?
                .iter()
                .map(|&a| usize::try_from(if a < 0 { a + rank as i64 } else { a }).ok())
                .collect::<Option<_>>()?;
            axes.sort_unstable();
            let mut out = dims.to_vec();
            for a in axes {
                (a <= out.len()).then(|| out.insert(a, 1))?;
            }
            Some(out)
        }
        "Squeeze" => match axes() {
            None => Some(dims.iter().copied().filter(|&d| d != 1).collect()),
            Some(axes) => {
                let rank = dims.len() as i64;
                let drop: Vec<usize> = axes
                    .iter()
                    .map(|&a| usize::try_from(if a < 0 { a + rank } else { a }).ok())
                    .collect::<Option<_>>()?;
                Some(
                    dims.iter()
                        .enumerate()
                        .filter(|(i, _)| !drop.contains(i))
                        .map(|(_, &d)| d)
                        .collect(),
                )
            }
        },
        _ => {
            let axis = super::attrs::int(node, "axis").unwrap_or(1);
            let axis = usize::try_from(if axis < 0 {
                axis + dims.len() as i64
            } else {
                axis
            })
            .ok()?;
            let outer: usize = dims.get(..axis)?.iter().product();
            Some(vec![outer, n / outer.max(1)])
        }
    }
}
