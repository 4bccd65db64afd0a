//! Unique node names, which tract requires and exporters do not guarantee.
//!
//! tract names a node after its `name`, or its first output when unnamed, and refuses a model
//! where two nodes (or a node and a graph input or initializer) share a name. Node names carry no
//! meaning in ONNX (tensors are wired by tensor name), so renaming them changes nothing that runs.

use std::collections::{HashMap, HashSet};

use tract_onnx::pb::{GraphProto, NodeProto};

use super::RunError;

/// Where a node that tract sees came from in the ONNX graph.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct NodeOrigin {
    /// The node's `op_type`.
    pub op_type: String,
    /// The node's `name` in the ONNX file (may be empty).
    pub onnx_name: String,
    /// The node's position in its graph's node list.
    pub index: usize,
}

impl std::fmt::Display for NodeOrigin {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if self.onnx_name.is_empty() {
            write!(f, "{} (unnamed node #{})", self.op_type, self.index)
        } else {
            write!(f, "{} (node '{}')", self.op_type, self.onnx_name)
        }
    }
}

/// The origin of each top-level node, keyed by the name tract sees.
#[derive(Debug, Clone, Default)]
pub(crate) struct NodeOrigins(HashMap<String, NodeOrigin>);

impl NodeOrigins {
    /// The origin of tract node `name`, or of the ONNX node a tract expansion node (named
    /// `NAME.part`) was wired for.
    pub(crate) fn find(&self, name: &str) -> Option<&NodeOrigin> {
        let mut name = name;
        loop {
            if let Some(origin) = self.0.get(name) {
                return Some(origin);
            }
            name = &name[..name.rfind('.')?];
        }
    }

    /// The ONNX node tract node `name` stands for, as text; `name` itself when none is found.
    pub(crate) fn describe(&self, name: &str) -> String {
        self.find(name)
            .map_or_else(|| format!("node '{name}'"), NodeOrigin::to_string)
    }

    /// Names the ONNX node a tract error is about, when tract's message cites one
    /// (`#12 "name" Op`).
    pub(crate) fn attribute(&self, error: RunError) -> RunError {
        let RunError::Tract { stage, message } = error else {
            return error;
        };
        let cited = message.match_indices('#').find_map(|(at, _)| {
            let rest = message[at + 1..].trim_start_matches(|c: char| c.is_ascii_digit());
            let rest = rest.strip_prefix(" \"")?;
            self.find(&rest[..rest.find('"')?])
        });
        match cited {
            Some(origin) => RunError::NodeFailed {
                stage,
                node: origin.to_string(),
                message,
            },
            None => RunError::Tract { stage, message },
        }
    }
}

/// Gives every node of `graph` and of its subgraphs an explicit name unique within its graph,
/// keeping the original name where it is already unique. Returns the origin of each top-level node
/// keyed by the name tract will see.
pub(crate) fn make_node_names_unique(graph: &mut GraphProto) -> NodeOrigins {
    let mut taken: HashSet<String> = HashSet::new();
    taken.extend(graph.input.iter().map(|i| i.name.clone()));
    taken.extend(graph.initializer.iter().map(|t| t.name.clone()));
    // Names a subgraph reads from outer scopes become tract sources named after them.
    let produced: HashSet<&str> = graph
        .node
        .iter()
        .flat_map(|n| n.output.iter().map(String::as_str))
        .collect();
    let consumed: Vec<String> = graph
        .node
        .iter()
        .flat_map(|n| n.input.iter())
        .filter(|i| !i.is_empty() && !produced.contains(i.as_str()))
        .cloned()
        .collect();
    taken.extend(consumed);

    let mut next_suffix: HashMap<String, usize> = HashMap::new();
    let mut origins = HashMap::with_capacity(graph.node.len());
    for (index, node) in graph.node.iter_mut().enumerate() {
        let base = base_name(node);
        let mut name = base.clone();
        while taken.contains(&name) {
            let k = next_suffix.entry(base.clone()).or_insert(0);
            *k += 1;
            name = format!("{base}#{k}");
        }
        taken.insert(name.clone());
        let origin = NodeOrigin {
            op_type: node.op_type.clone(),
            onnx_name: std::mem::replace(&mut node.name, name.clone()),
            index,
        };
        origins.insert(name, origin);
        for attribute in &mut node.attribute {
            for subgraph in attribute.g.iter_mut().chain(attribute.graphs.iter_mut()) {
                make_node_names_unique(subgraph);
            }
        }
    }
    NodeOrigins(origins)
}

/// The name tract would derive for `node`: its own, else its first output, else its op type.
fn base_name(node: &NodeProto) -> String {
    if !node.name.is_empty() {
        node.name.clone()
    } else if let Some(out) = node.output.first().filter(|o| !o.is_empty()) {
        out.clone()
    } else {
        node.op_type.clone()
    }
}
