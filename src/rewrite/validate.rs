//! Checks a rewritten model before anyone sees it: every input defined and no cycle (the graph
//! index refuses both), nodes stored in topological order, every op within the graph's opset
//! (the emitters refuse others), and names introduced by the rewrite unique. And, before a
//! rewrite, that the input itself stores its nodes in topological order, so a fault of the input
//! is never blamed on the rewrite.

use std::collections::HashMap;

use anyhow::{Result, bail};

use crate::onnx::{Model, ModelIndex};
use crate::text::escape;

/// Refuses an input model whose nodes are not stored in topological order. Source: ONNX IR
/// ("the nodes of a graph are topologically sorted") and the onnx checker, which refuses such a
/// model (from memory).
pub fn input_order(index: &ModelIndex) -> Result<()> {
    if let Some(g) = index.graphs.iter().find(|g| !g.is_stored_in_order()) {
        let late = (0..g.nodes.len()).find_map(|i| {
            g.nodes[i]
                .input
                .iter()
                .find(|t| g.producer(t).is_some_and(|p| p > i))
                .map(|t| (i, t))
        });
        let detail = match late {
            Some((i, t)) => format!(
                ": node '{}' reads '{}' before the node that produces it",
                escape(&g.label(i)),
                escape(t)
            ),
            None => String::new(),
        };
        bail!(
            "the input model's graph {} is not in topological order{detail} (ONNX requires sorted nodes); it is not rewritten",
            escape(&g.path)
        );
    }
    Ok(())
}

use super::Applied;

pub fn check(model: &Model, applied: &[Applied]) -> Result<()> {
    let index = ModelIndex::build(model)?;
    for g in &index.graphs {
        if !g.is_stored_in_order() {
            bail!(
                "graph {}: nodes are not in topological order",
                escape(&g.path)
            );
        }
        let mut seen: HashMap<&str, usize> = HashMap::new();
        for n in g.nodes {
            *seen.entry(n.name()).or_default() += 1;
        }
        for a in applied {
            for name in &a.nodes {
                if seen.get(name.as_str()).copied().unwrap_or(0) > 1 {
                    bail!(
                        "graph {}: node name '{}' is not unique",
                        escape(&g.path),
                        escape(name)
                    );
                }
            }
        }
    }
    Ok(())
}
