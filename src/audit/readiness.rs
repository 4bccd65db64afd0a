//! Whether a converted model as a whole runs on the target: every node of every graph and local
//! function against the profile (op, domain, opset, element type where the profile lists them).

use std::collections::{BTreeMap, HashSet};

use schemars::JsonSchema;
use serde::Serialize;

use crate::onnx::ModelIndex;
use crate::plan::profile::{Profile, Refusal};
use crate::scan::Site;
use crate::scan::types::Types;

/// How many node labels a refused op lists.
const FIRST_NODES: usize = 3;

/// One op type the target does not run, and where the model uses it.
#[derive(Debug, Clone, PartialEq, Serialize, JsonSchema)]
pub struct RefusedOp {
    /// `Op`, or `domain:Op` outside the default domain.
    pub op: String,
    /// Nodes of this op the target refuses.
    pub count: usize,
    /// The first of them, as `graph/node`.
    pub first_nodes: Vec<String>,
    /// True when one of them is (part of) an activation site of the converted model.
    pub activation_site: bool,
    /// Why, in words.
    pub reason: String,
}

/// The ops of a converted model its target does not run, most frequent first.
#[derive(Debug, Clone, Default, PartialEq, Serialize, JsonSchema)]
pub struct Readiness {
    pub refused: Vec<RefusedOp>,
}

impl Readiness {
    /// True when the target runs every node.
    pub fn ready(&self) -> bool {
        self.refused.is_empty()
    }

    /// The refusals in one line: `LayerNormalization x3 (first: main/ln1), Softmax x1 (...)`.
    pub fn summary(&self) -> String {
        self.refused
            .iter()
            .map(|r| {
                format!(
                    "{} x{} ({}; first: {})",
                    r.op,
                    r.count,
                    r.reason,
                    r.first_nodes.join(", ")
                )
            })
            .collect::<Vec<_>>()
            .join("; ")
    }
}

/// Checks every node of `model` (the converted model, indexed) against `profile`; `sites` are its
/// activation sites, to say whether a refused node belongs to one.
pub fn check(model: &ModelIndex, profile: &Profile, sites: &[Site]) -> Readiness {
    let mut by_op: BTreeMap<String, RefusedOp> = BTreeMap::new();
    let mut types: Vec<Types> = Vec::with_capacity(model.graphs.len());
    let site_nodes: HashSet<(usize, usize)> = sites
        .iter()
        .flat_map(|s| s.node_indices.iter().map(|&n| (s.graph_index, n)))
        .collect();
    for (g, graph) in model.graphs.iter().enumerate() {
        let t = Types::infer(graph, graph.parent.map(|p| &types[p]));
        for (n, node) in graph.nodes.iter().enumerate() {
            let domain = node.domain();
            let opset = graph.opset(domain).unwrap_or(1);
            let elem = node.input.first().and_then(|i| t.of(i));
            let Some(refusal) = profile.refusal(domain, node.op_type(), opset, elem) else {
                continue;
            };
            let op = match domain {
                "" | "ai.onnx" => node.op_type().to_string(),
                d => format!("{d}:{}", node.op_type()),
            };
            let in_site = site_nodes.contains(&(g, n));
            let entry = by_op.entry(op.clone()).or_insert_with(|| RefusedOp {
                op,
                count: 0,
                first_nodes: Vec::new(),
                activation_site: false,
                reason: describe(&refusal, profile),
            });
            entry.count += 1;
            entry.activation_site |= in_site;
            if entry.first_nodes.len() < FIRST_NODES {
                entry
                    .first_nodes
                    .push(format!("{}/{}", graph.path, graph.label(n)));
            }
        }
        types.push(t);
    }
    let mut refused: Vec<RefusedOp> = by_op.into_values().collect();
    refused.sort_by(|a, b| b.count.cmp(&a.count).then(a.op.cmp(&b.op)));
    Readiness { refused }
}

fn describe(refusal: &Refusal, profile: &Profile) -> String {
    match refusal {
        Refusal::Opset { model, max } => {
            format!(
                "the model's opset {model} is above the {max} target '{}' runs",
                profile.name
            )
        }
        Refusal::Op => format!("not an op target '{}' runs", profile.name),
        Refusal::OpOpset => format!("not at this opset on target '{}'", profile.name),
        Refusal::ElemType(dt) => format!(
            "not for {} inputs on target '{}'",
            dt.as_str_name(),
            profile.name
        ),
    }
}
