//! The graph index: who produces and who consumes each tensor, constant values, graph inputs and
//! outputs, value_info, opsets and a topological order, for the main graph, every subgraph (If,
//! Loop, Scan attributes, to any depth) and every local function. Building it validates the model:
//! a cycle, a node reading an undefined tensor, a name defined twice in a graph (ONNX IR: graphs are
//! in single static assignment form, and the onnx checker refuses a node output that repeats a
//! graph input, an initializer or a name of an enclosing graph, and a repeated initializer or
//! graph input name) or a tensor whose data disagrees with its shape is an error.
//!
//! Each graph numbers the tensor names it mentions once ([`TensorId`]) and keeps its wiring in
//! flat vectors by number (each node's inputs and outputs, the producer of each tensor, the
//! readers of each tensor), so a graph of a million nodes costs tens of bytes per node, and later
//! stages can compare integers instead of hashing names.

use std::cmp::Reverse;
use std::collections::{BTreeMap, BinaryHeap};

use foldhash::{HashMap, HashSet, HashSetExt};
use string_interner::{DefaultStringInterner, Symbol, symbol::SymbolU32};

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

/// A tensor name's number in its graph: every name a node, graph input, graph output or
/// initializer of the graph mentions has one, in order of first mention.
pub type TensorId = u32;

/// The [`TensorId`] of an absent optional input or output (an empty name).
pub const ABSENT: TensorId = u32::MAX;

/// No node of the graph produces the tensor.
const NO_NODE: u32 = u32::MAX;

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
    outputs_set: HashSet<&'m str>,
    /// The graph's tensor names, numbered.
    names: DefaultStringInterner,
    wiring: Wiring,
    order: Vec<usize>,
}

/// A graph's wiring by tensor id: node `n`'s inputs are `inputs[input_starts[n]..input_starts[n +
/// 1]]` ([`ABSENT`] for an empty name), and likewise its outputs; a tensor's readers are
/// `readers[reader_starts[t]..reader_starts[t + 1]]`.
#[derive(Debug, Default)]
struct Wiring {
    inputs: Vec<TensorId>,
    input_starts: Vec<u32>,
    outputs: Vec<TensorId>,
    output_starts: Vec<u32>,
    /// The node producing each tensor ([`NO_NODE`] for none).
    producer: Vec<u32>,
    readers: Vec<usize>,
    reader_starts: Vec<u32>,
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

    /// [`ModelIndex::constant`] of tensor `id` of graph `g`: a tensor computed by an op that
    /// never gives a constant is ruled out without looking its name up.
    pub fn constant_by_id(&self, g: usize, id: TensorId) -> Option<TensorValue> {
        let graph = &self.graphs[g];
        if id == ABSENT
            || graph
                .producer_of(id)
                .is_some_and(|p| !is_constant_op(&graph.nodes[p]))
        {
            return None;
        }
        self.constant(g, graph.tensor_name(id))
    }

    fn constant_depth(&self, g: usize, name: &str, depth: usize) -> Option<TensorValue> {
        if depth > 16 || name.is_empty() {
            return None;
        }
        let graph = &self.graphs[g];
        if let Some(t) = graph.initializers.get(name) {
            return tensor::read(t, self.model.dir(), CONSTANT_QUERY_LIMIT).ok();
        }
        if let Some(p) = graph.producer(name) {
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
        let mut value_info = HashMap::default();
        for v in graph
            .input
            .iter()
            .chain(&graph.output)
            .chain(&graph.value_info)
        {
            value_info.entry(v.name()).or_insert(v);
        }
        let predefined: Vec<&str> = inputs
            .iter()
            .copied()
            .chain(graph.initializer.iter().map(|t| t.name()))
            .chain(
                graph
                    .sparse_initializer
                    .iter()
                    .filter_map(|s| s.values.as_ref())
                    .map(|t| t.name()),
            )
            .collect();
        let scope = Scope {
            path,
            kind,
            location,
            parent,
            opsets: opsets.clone(),
        };
        let gi = self.add_nodes(
            &graph.node,
            scope,
            Names {
                inputs,
                outputs,
                predefined,
                outer,
            },
            initializers,
            value_info,
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
        let scope = Scope {
            path,
            kind: GraphKind::Function {
                domain: f.domain().to_string(),
                name: f.name().to_string(),
            },
            location: GraphLocation {
                function: Some(i),
                steps: Vec::new(),
            },
            parent: None,
            opsets: opsets.clone(),
        };
        let gi = self.add_nodes(
            &f.node,
            scope,
            Names {
                predefined: inputs.clone(),
                inputs,
                outputs,
                outer: &HashSet::new(),
            },
            HashMap::default(),
            value_info,
        )?;
        self.add_subgraphs(gi, &opsets)
    }

    /// Numbers the graph's tensors, wires its nodes by number, checks that each name is
    /// assigned once and every read is defined, and orders the nodes.
    fn add_nodes(
        &mut self,
        nodes: &'m [NodeProto],
        scope: Scope,
        known: Names<'m, '_>,
        initializers: HashMap<&'m str, &'m TensorProto>,
        value_info: HashMap<&'m str, &'m ValueInfoProto>,
    ) -> Result<usize> {
        let shown = escape(&scope.path);
        // A graph names about one tensor per node besides its inputs and initializers.
        let mut names = DefaultStringInterner::with_capacity(nodes.len() + known.predefined.len());
        for &name in &known.predefined {
            names.get_or_intern(name);
        }
        // Ids below this are graph inputs and initializers.
        let predefined = names.len();
        let mut w = Wiring {
            input_starts: Vec::with_capacity(nodes.len() + 1),
            output_starts: Vec::with_capacity(nodes.len() + 1),
            ..Wiring::default()
        };
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
            w.output_starts.push(w.outputs.len() as u32);
            for o in &n.output {
                let id = intern(&mut names, o);
                w.outputs.push(id);
                if id == ABSENT {
                    continue;
                }
                if (id as usize) < predefined || known.outer.contains(o.as_str()) {
                    let what = if known.inputs.contains(&o.as_str()) {
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
                if w.producer.len() <= id as usize {
                    w.producer.resize(names.len(), NO_NODE);
                }
                if w.producer[id as usize] != NO_NODE {
                    bail!(
                        "graph {shown}: tensor '{}' is produced by more than one node (the second is '{}')",
                        escape(o),
                        escape(&node_label(n, i))
                    );
                }
                w.producer[id as usize] = i as u32;
            }
        }
        w.output_starts.push(w.outputs.len() as u32);
        let defined = |id: usize, producer: &[u32]| {
            id < predefined || producer.get(id).is_some_and(|&p| p != NO_NODE)
        };
        let is_defined = |names: &DefaultStringInterner, producer: &[u32], name: &str| {
            names
                .get(name)
                .is_some_and(|s| defined(s.to_usize(), producer))
                || known.outer.contains(name)
        };
        // Names each node's subgraphs read from this graph or further out.
        let mut free: Vec<(usize, Vec<TensorId>)> = Vec::new();
        for (i, n) in nodes.iter().enumerate() {
            w.input_starts.push(w.inputs.len() as u32);
            let mut outer_reads = Vec::new();
            for a in &n.attribute {
                for g in a.g.iter().chain(&a.graphs) {
                    free_names(g, &mut outer_reads);
                }
            }
            let undefined = |name: &str| {
                anyhow::anyhow!(
                    "graph {shown}: node '{}' ({}) reads undefined tensor '{}'",
                    escape(&node_label(n, i)),
                    escape(n.op_type()),
                    escape(name)
                )
            };
            for name in &n.input {
                let id = if name.is_empty() {
                    ABSENT
                } else {
                    // A name of this graph has its id already; one of an enclosing graph is
                    // numbered on its first read.
                    match names.get(name.as_str()) {
                        Some(s) if defined(s.to_usize(), &w.producer) => s.to_usize() as TensorId,
                        _ if known.outer.contains(name.as_str()) => intern(&mut names, name),
                        _ => return Err(undefined(name)),
                    }
                };
                w.inputs.push(id);
            }
            if let Some(name) = outer_reads
                .iter()
                .find(|name| !is_defined(&names, &w.producer, name))
            {
                return Err(undefined(name));
            }
            if !outer_reads.is_empty() {
                let ids = outer_reads.iter().map(|s| intern(&mut names, s)).collect();
                free.push((i, ids));
            }
        }
        w.input_starts.push(w.inputs.len() as u32);
        for &o in &known.outputs {
            if !is_defined(&names, &w.producer, o) {
                bail!(
                    "graph {shown}: output '{}' is not produced by any node nor an input",
                    escape(o)
                );
            }
        }
        for &o in &known.outputs {
            names.get_or_intern(o);
        }
        w.producer.resize(names.len(), NO_NODE);
        w.index_readers(names.len());
        let order =
            topological_order(nodes, &w, &free).with_context(|| format!("graph {shown}"))?;
        let outputs_set = known.outputs.iter().copied().collect();
        self.graphs.push(GraphIndex {
            path: scope.path,
            kind: scope.kind,
            location: scope.location,
            parent: scope.parent,
            nodes,
            inputs: known.inputs,
            outputs: known.outputs,
            opsets: scope.opsets,
            initializers,
            value_info,
            outputs_set,
            names,
            wiring: w,
            order,
        });
        Ok(self.graphs.len() - 1)
    }

    /// Indexes the graph attributes of every node of graph `gi`.
    fn add_subgraphs(&mut self, gi: usize, opsets: &BTreeMap<String, i64>) -> Result<()> {
        let nodes = self.graphs[gi].nodes;
        let has_subgraphs = |n: &NodeProto| {
            n.attribute
                .iter()
                .any(|a| a.g.is_some() || !a.graphs.is_empty())
        };
        if !nodes.iter().any(has_subgraphs) {
            return Ok(());
        }
        let base = self.graphs[gi].path.clone();
        let mut visible: HashSet<&'m str> = HashSet::new();
        let mut p = Some(gi);
        while let Some(pi) = p {
            let pg = &self.graphs[pi];
            visible.extend(pg.inputs.iter().copied());
            visible.extend(pg.initializers.keys().copied());
            visible.extend(
                pg.nodes
                    .iter()
                    .flat_map(|n| &n.output)
                    .filter(|o| !o.is_empty())
                    .map(String::as_str),
            );
            p = pg.parent;
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

/// Where a graph being indexed sits, and the opsets in force there.
struct Scope {
    path: String,
    kind: GraphKind,
    location: GraphLocation,
    parent: Option<usize>,
    opsets: BTreeMap<String, i64>,
}

/// The names a graph being indexed declares, and those it sees from enclosing graphs.
struct Names<'m, 'o> {
    inputs: Vec<&'m str>,
    outputs: Vec<&'m str>,
    /// Graph inputs and initializers (sparse ones included): defined before any node.
    predefined: Vec<&'m str>,
    outer: &'o HashSet<&'m str>,
}

/// The id of `name`, numbering it if it is new; [`ABSENT`] for the empty name.
fn intern(names: &mut DefaultStringInterner, name: &str) -> TensorId {
    if name.is_empty() {
        ABSENT
    } else {
        names.get_or_intern(name).to_usize() as TensorId
    }
}

impl Wiring {
    /// Lists each tensor's readers (each node once, in node order) from the node inputs.
    fn index_readers(&mut self, tensors: usize) {
        let nodes = self.input_starts.len() - 1;
        fn distinct(w: &Wiring, n: usize) -> impl Iterator<Item = usize> + '_ {
            let ins = w.inputs(n);
            (0..ins.len())
                .filter(move |&k| ins[k] != ABSENT && !ins[..k].contains(&ins[k]))
                .map(move |k| ins[k] as usize)
        }
        let mut starts = vec![0u32; tensors + 1];
        for n in 0..nodes {
            for t in distinct(self, n) {
                starts[t + 1] += 1;
            }
        }
        for t in 0..tensors {
            starts[t + 1] += starts[t];
        }
        let mut fill: Vec<u32> = starts[..tensors].to_vec();
        let mut readers = vec![0usize; starts[tensors] as usize];
        for n in 0..nodes {
            for t in distinct(self, n) {
                readers[fill[t] as usize] = n;
                fill[t] += 1;
            }
        }
        self.readers = readers;
        self.reader_starts = starts;
    }

    fn inputs(&self, n: usize) -> &[TensorId] {
        &self.inputs[self.input_starts[n] as usize..self.input_starts[n + 1] as usize]
    }

    fn outputs(&self, n: usize) -> &[TensorId] {
        &self.outputs[self.output_starts[n] as usize..self.output_starts[n + 1] as usize]
    }

    fn producer(&self, t: TensorId) -> Option<usize> {
        self.producer
            .get(t as usize)
            .filter(|&&p| p != NO_NODE)
            .map(|&p| p as usize)
    }
}

impl<'m> GraphIndex<'m> {
    /// The id of `tensor` in this graph, when the graph mentions it.
    pub fn tensor_id(&self, tensor: &str) -> Option<TensorId> {
        self.names.get(tensor).map(|s| s.to_usize() as TensorId)
    }

    /// The name of tensor `id` (not [`ABSENT`]).
    pub fn tensor_name(&self, id: TensorId) -> &str {
        SymbolU32::try_from_usize(id as usize)
            .and_then(|s| self.names.resolve(s))
            .unwrap_or_default()
    }

    /// How many tensors the graph mentions (ids are below this).
    pub fn tensor_count(&self) -> usize {
        self.names.len()
    }

    /// Node `n`'s inputs by id, in order ([`ABSENT`] for an empty name).
    pub fn node_inputs(&self, n: usize) -> &[TensorId] {
        self.wiring.inputs(n)
    }

    /// Node `n`'s outputs by id, in order ([`ABSENT`] for an empty name).
    pub fn node_outputs(&self, n: usize) -> &[TensorId] {
        self.wiring.outputs(n)
    }

    /// The node producing tensor `id` in this graph.
    pub fn producer_of(&self, id: TensorId) -> Option<usize> {
        self.wiring.producer(id)
    }

    /// The nodes of this graph reading tensor `id` (each once, in node order).
    pub fn readers_of(&self, id: TensorId) -> &[usize] {
        let w = &self.wiring;
        match w.reader_starts.get(id as usize..id as usize + 2) {
            Some(&[a, b]) => &w.readers[a as usize..b as usize],
            _ => &[],
        }
    }

    /// Index of the node producing `tensor` in this graph.
    pub fn producer(&self, tensor: &str) -> Option<usize> {
        self.producer_of(self.tensor_id(tensor)?)
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
    w: &Wiring,
    free: &[(usize, Vec<TensorId>)],
) -> Result<Vec<usize>> {
    let n = nodes.len();
    let mut indegree = vec![0u32; n];
    // Edges (producer, reader), one per distinct dependency.
    let mut edges: Vec<(u32, u32)> = Vec::with_capacity(w.inputs.len());
    let mut extra = free.iter().peekable();
    let mut deps: Vec<usize> = Vec::new();
    for i in 0..n {
        deps.clear();
        deps.extend(w.inputs(i).iter().filter_map(|&t| w.producer(t)));
        if let Some((_, ids)) = extra.next_if(|(node, _)| *node == i) {
            deps.extend(ids.iter().filter_map(|&t| w.producer(t)));
        }
        deps.sort_unstable();
        deps.dedup();
        for &d in &deps {
            if d == i {
                bail!(
                    "node '{}' ({}) reads its own output: the graph has a cycle",
                    escape(&node_label(&nodes[i], i)),
                    escape(nodes[i].op_type())
                );
            }
            indegree[i] += 1;
            edges.push((d as u32, i as u32));
        }
    }
    // The readers of each node, grouped by node in reading order.
    let mut starts = vec![0usize; n + 1];
    for &(d, _) in &edges {
        starts[d as usize + 1] += 1;
    }
    for i in 0..n {
        starts[i + 1] += starts[i];
    }
    let mut fill = starts.clone();
    let mut users = vec![0u32; edges.len()];
    for &(d, u) in &edges {
        users[fill[d as usize]] = u;
        fill[d as usize] += 1;
    }
    drop((edges, fill));
    let mut ready: BinaryHeap<Reverse<usize>> =
        (0..n).filter(|&i| indegree[i] == 0).map(Reverse).collect();
    let mut order = Vec::with_capacity(n);
    while let Some(Reverse(i)) = ready.pop() {
        order.push(i);
        for &u in &users[starts[i]..starts[i + 1]] {
            let u = u as usize;
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

/// Whether `node` only produces or reshapes constants: a Constant node, or an op
/// [`ModelIndex::constant`] follows to its input (Identity, Cast, CastLike, Reshape, Unsqueeze,
/// Squeeze, Flatten).
pub fn is_constant_op(node: &NodeProto) -> bool {
    matches!(node.domain(), "" | "ai.onnx")
        && matches!(
            node.op_type(),
            "Constant"
                | "Identity"
                | "Cast"
                | "CastLike"
                | "Reshape"
                | "Unsqueeze"
                | "Squeeze"
                | "Flatten"
        )
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
