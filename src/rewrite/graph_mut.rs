//! Mutable access to one graph of a model proto, found by its [`GraphLocation`].

use std::collections::HashSet;

use crate::onnx::GraphLocation;
use crate::onnx::proto::{
    FunctionProto, GraphProto, ModelProto, NodeProto, TensorProto, ValueInfoProto,
};

/// A graph or a function body.
pub enum GraphMut<'a> {
    Graph(&'a mut GraphProto),
    Function(&'a mut FunctionProto),
}

impl<'a> GraphMut<'a> {
    /// Follows the location from the model's main graph or local function.
    pub fn locate(model: &'a mut ModelProto, loc: &GraphLocation) -> Option<GraphMut<'a>> {
        let mut cur = match loc.function {
            Some(f) => GraphMut::Function(model.functions.get_mut(f)?),
            None => GraphMut::Graph(model.graph.as_mut()?),
        };
        for &(n, a, k) in &loc.steps {
            let attr = cur.into_nodes().get_mut(n)?.attribute.get_mut(a)?;
            let g = match k {
                None => attr.g.as_mut()?,
                Some(k) => attr.graphs.get_mut(k)?,
            };
            cur = GraphMut::Graph(g);
        }
        Some(cur)
    }

    fn into_nodes(self) -> &'a mut Vec<NodeProto> {
        match self {
            GraphMut::Graph(g) => &mut g.node,
            GraphMut::Function(f) => &mut f.node,
        }
    }

    pub fn nodes(&mut self) -> &mut Vec<NodeProto> {
        match self {
            GraphMut::Graph(g) => &mut g.node,
            GraphMut::Function(f) => &mut f.node,
        }
    }

    /// Initializers; functions have none.
    pub fn initializers(&mut self) -> Option<&mut Vec<TensorProto>> {
        match self {
            GraphMut::Graph(g) => Some(&mut g.initializer),
            GraphMut::Function(_) => None,
        }
    }

    pub fn value_info(&mut self) -> &mut Vec<ValueInfoProto> {
        match self {
            GraphMut::Graph(g) => &mut g.value_info,
            GraphMut::Function(f) => &mut f.value_info,
        }
    }

    /// Every name read by a node (here or in any nested subgraph) or listed as an output.
    pub fn referenced_names(&mut self) -> HashSet<String> {
        let mut names = HashSet::new();
        let (nodes, outputs): (&[NodeProto], Vec<String>) = match self {
            GraphMut::Graph(g) => (
                &g.node,
                g.output.iter().map(|v| v.name().to_string()).collect(),
            ),
            GraphMut::Function(f) => (&f.node, f.output.clone()),
        };
        names.extend(outputs);
        collect_reads(nodes, &mut names);
        names
    }
}

fn collect_reads(nodes: &[NodeProto], names: &mut HashSet<String>) {
    for n in nodes {
        names.extend(n.input.iter().cloned());
        for a in &n.attribute {
            for g in a.g.iter().chain(&a.graphs) {
                names.extend(g.output.iter().map(|v| v.name().to_string()));
                collect_reads(&g.node, names);
            }
        }
    }
}
