//! A site cut out of its model: a model of the site's compute nodes alone, fed the site's input,
//! yielding the site's output. Local drift and per-site latency run it.
//!
//! The isolated graph holds the site's nodes, every initializer they read (from the site's graph
//! or an enclosing one) and the nodes computing the other tensors they read (Constant nodes,
//! Cast/CastLike/Reshape of constants...), in topological order. Its one input is the site's
//! input with the element type and shape of the tensor captured there; its output is the site's
//! output. Several sites can share one isolated model ([`build`] with one [`Part`] per site),
//! each under its own name prefix so their tensors never meet.

use std::collections::HashSet;

use anyhow::{Context, Result, bail, ensure};
use tract_onnx::prelude::{DatumType, Tensor};

use crate::onnx::builder::{self, Dim};
use crate::onnx::proto::{
    GraphProto, ModelProto, NodeProto, TensorProto, TypeProto, ValueInfoProto,
    tensor_proto::DataType, type_proto,
};
use crate::onnx::{Model, ModelIndex};
use crate::scan::Site;

/// Nodes outside the site that an isolated site may need to compute its constants.
const MAX_SUPPORT_NODES: usize = 64;

/// A site's nodes and what they read, taken out of their graph.
#[derive(Debug, Clone)]
pub struct Extract {
    /// Support nodes first, then the site's nodes, in topological order.
    pub nodes: Vec<NodeProto>,
    pub initializers: Vec<TensorProto>,
    pub input: String,
    pub output: String,
}

/// The declared type of an isolated site's input: an element type and, per axis, its size, or
/// `None` where the captured tensors disagree (a symbolic dim then).
#[derive(Debug, Clone, PartialEq)]
pub struct InputDecl {
    pub data_type: DataType,
    pub dims: Vec<Option<usize>>,
}

impl InputDecl {
    /// The declaration that fits every tensor given (one per sample).
    pub fn of<'t>(tensors: impl IntoIterator<Item = &'t Tensor>) -> Result<InputDecl> {
        let mut decl: Option<(DatumType, Vec<Option<usize>>)> = None;
        for t in tensors {
            let shape: Vec<Option<usize>> = t.shape().iter().map(|&d| Some(d)).collect();
            decl = Some(match decl {
                None => (t.datum_type(), shape),
                Some((dt, dims)) => {
                    ensure!(
                        dt == t.datum_type() && dims.len() == shape.len(),
                        "the captured tensors differ in element type or rank between samples"
                    );
                    let dims = dims
                        .iter()
                        .zip(&shape)
                        .map(|(a, b)| if a == b { *a } else { None })
                        .collect();
                    (dt, dims)
                }
            });
        }
        let (dt, dims) = decl.context("no captured tensor to declare an input from")?;
        Ok(InputDecl {
            data_type: onnx_data_type(dt)?,
            dims,
        })
    }
}

impl InputDecl {
    /// A graph input `name` of this type; an axis whose size varies gets a symbolic dim.
    pub fn value_info(&self, name: &str) -> ValueInfoProto {
        let named: Vec<String> = (0..self.dims.len())
            .map(|axis| format!("{name}:axis{axis}"))
            .collect();
        let dims: Vec<Dim> = self
            .dims
            .iter()
            .zip(&named)
            .map(|(d, named)| match d {
                Some(n) => Dim::Size(*n as i64),
                None => Dim::Named(named),
            })
            .collect();
        builder::value(name, self.data_type, &dims)
    }
}

/// One site in an isolated model: its extract, its input declaration, and the prefix its tensor
/// and node names take (empty: names as in the original model).
#[derive(Debug, Clone, Copy)]
pub struct Part<'a> {
    pub extract: &'a Extract,
    pub decl: &'a InputDecl,
    pub prefix: &'a str,
}

impl Part<'_> {
    /// The isolated model's input name for this site.
    pub fn input_name(&self) -> String {
        format!("{}{}", self.prefix, self.extract.input)
    }

    /// The isolated model's output name for this site.
    pub fn output_name(&self) -> String {
        format!("{}{}", self.prefix, self.extract.output)
    }
}

/// A single-site model for `site` of `model`, names kept; see the module doc.
pub fn isolate(model: &Model, index: &ModelIndex, site: &Site, decl: &InputDecl) -> Result<Model> {
    let extract = extract(index, site)?;
    Ok(build(
        model,
        &[Part {
            extract: &extract,
            decl,
            prefix: "",
        }],
    ))
}

/// Takes `site` out of its graph: its nodes, the initializers they read and the support nodes
/// that compute the other tensors they read from constants (or from the site's input).
pub fn extract(index: &ModelIndex, site: &Site) -> Result<Extract> {
    let context = || format!("site {} ({}) in {}", site.id, site.kind.id, site.graph);
    extract_nodes(index, site).with_context(context)
}

fn extract_nodes(index: &ModelIndex, site: &Site) -> Result<Extract> {
    let g = site.graph_index;
    let graph = index.graphs.get(g).context("no such graph")?;
    let inside: HashSet<&str> = site
        .node_indices
        .iter()
        .flat_map(|&n| graph.nodes[n].output.iter().map(String::as_str))
        .collect();
    let mut initializers: Vec<TensorProto> = Vec::new();
    // Support nodes as (graph depth, position in that graph's order, node).
    let mut support: Vec<(usize, usize, NodeProto)> = Vec::new();
    let mut seen: HashSet<String> = HashSet::new();
    let mut pending: Vec<String> = site
        .node_indices
        .iter()
        .flat_map(|&n| graph.nodes[n].input.iter().cloned())
        .collect();
    while let Some(name) = pending.pop() {
        if name.is_empty() || name == site.input || inside.contains(name.as_str()) {
            continue;
        }
        if !seen.insert(name.clone()) {
            continue;
        }
        let mut scope = Some(g);
        let mut found = false;
        while let Some(s) = scope {
            let sg = &index.graphs[s];
            if let Some(t) = sg.initializer(&name) {
                initializers.push(t.clone());
                found = true;
                break;
            }
            if let Some(p) = sg.producer(&name) {
                let node = &sg.nodes[p];
                if node
                    .attribute
                    .iter()
                    .any(|a| a.g.is_some() || !a.graphs.is_empty())
                {
                    bail!("it reads '{name}', computed by a node with subgraphs");
                }
                support.push((depth(index, s), position(sg.order(), p), node.clone()));
                ensure!(
                    support.len() <= MAX_SUPPORT_NODES,
                    "it reads tensors that take more than {MAX_SUPPORT_NODES} other nodes to compute"
                );
                pending.extend(node.input.iter().cloned());
                found = true;
                break;
            }
            if sg.is_input(&name) {
                bail!(
                    "it reads '{name}', an input of graph {}, besides its own input",
                    sg.path
                );
            }
            scope = sg.parent;
        }
        ensure!(found, "it reads '{name}', which no enclosing graph defines");
    }
    let own_depth = depth(index, g);
    support.extend(site.node_indices.iter().map(|&n| {
        (
            own_depth,
            position(graph.order(), n),
            graph.nodes[n].clone(),
        )
    }));
    Ok(Extract {
        nodes: topological(support)?,
        initializers,
        input: site.input.clone(),
        output: site.output.clone(),
    })
}

/// Orders nodes so each comes after the producers of its inputs, keeping (graph depth, position
/// in the graph's order) wherever that already is an order. A support node may read a site
/// value (CastLike takes only its type), so support nodes do not simply go first.
fn topological(mut nodes: Vec<(usize, usize, NodeProto)>) -> Result<Vec<NodeProto>> {
    nodes.sort_by_key(|(d, p, _)| (*d, *p));
    let produced: HashSet<&str> = nodes
        .iter()
        .flat_map(|(_, _, n)| n.output.iter().map(String::as_str))
        .collect();
    let mut done: HashSet<String> = HashSet::new();
    let mut placed = vec![false; nodes.len()];
    let mut out = Vec::with_capacity(nodes.len());
    while out.len() < nodes.len() {
        let ready = (0..nodes.len()).find(|&i| {
            !placed[i]
                && nodes[i]
                    .2
                    .input
                    .iter()
                    .all(|t| t.is_empty() || !produced.contains(t.as_str()) || done.contains(t))
        });
        let Some(i) = ready else {
            bail!("its nodes depend on each other in a cycle");
        };
        placed[i] = true;
        done.extend(nodes[i].2.output.iter().cloned());
        out.push(nodes[i].2.clone());
    }
    Ok(out)
}

/// How many graphs enclose graph `g`.
fn depth(index: &ModelIndex, g: usize) -> usize {
    let mut d = 0;
    let mut p = index.graphs[g].parent;
    while let Some(pi) = p {
        d += 1;
        p = index.graphs[pi].parent;
    }
    d
}

/// Where `node` stands in `order`: at once when the graph is stored in order there (exports
/// almost always are), else by a search.
fn position(order: &[usize], node: usize) -> usize {
    if order.get(node) == Some(&node) {
        return node;
    }
    order.iter().position(|&n| n == node).unwrap_or(usize::MAX)
}

/// A model of the given parts, with the original model's IR version and opsets; external data
/// is resolved against the original model's folder.
pub fn build(model: &Model, parts: &[Part]) -> Model {
    let original = model.proto();
    let mut graph = GraphProto {
        name: Some("isolated_sites".into()),
        ..Default::default()
    };
    for part in parts {
        let rename = |name: &str| {
            if name.is_empty() {
                String::new()
            } else {
                format!("{}{name}", part.prefix)
            }
        };
        for node in &part.extract.nodes {
            let mut node = node.clone();
            node.input = node.input.iter().map(|i| rename(i)).collect();
            node.output = node.output.iter().map(|o| rename(o)).collect();
            if let Some(name) = node.name.as_mut().filter(|n| !n.is_empty()) {
                *name = rename(name);
            }
            graph.node.push(node);
        }
        for t in &part.extract.initializers {
            let mut t = t.clone();
            t.name = Some(rename(t.name()));
            graph.initializer.push(t);
        }
        graph.input.push(part.decl.value_info(&part.input_name()));
        graph
            .output
            .push(typed_value(&part.output_name(), part.decl.data_type));
    }
    let proto = ModelProto {
        ir_version: original.ir_version,
        opset_import: original.opset_import.clone(),
        producer_name: Some("actswap".into()),
        graph: Some(graph),
        ..Default::default()
    };
    Model::from_proto(proto, model.dir().to_path_buf())
}

/// A value_info with an element type and no shape.
fn typed_value(name: &str, dt: DataType) -> ValueInfoProto {
    ValueInfoProto {
        name: Some(name.into()),
        r#type: Some(TypeProto {
            tensor_type: Some(type_proto::Tensor {
                elem_type: Some(dt as i32),
                shape: None,
            }),
            ..Default::default()
        }),
        ..Default::default()
    }
}

/// The ONNX element type of a tract element type.
fn onnx_data_type(dt: DatumType) -> Result<DataType> {
    Ok(match dt {
        DatumType::F16 => DataType::Float16,
        DatumType::F32 => DataType::Float,
        DatumType::F64 => DataType::Double,
        DatumType::I8 => DataType::Int8,
        DatumType::I16 => DataType::Int16,
        DatumType::I32 => DataType::Int32,
        DatumType::I64 => DataType::Int64,
        DatumType::U8 => DataType::Uint8,
        DatumType::U16 => DataType::Uint16,
        DatumType::U32 => DataType::Uint32,
        DatumType::U64 => DataType::Uint64,
        DatumType::Bool => DataType::Bool,
        other => bail!("element type {other:?} has no ONNX counterpart here"),
    })
}
