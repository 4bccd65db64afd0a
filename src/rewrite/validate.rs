//! Checks a rewritten model before anyone sees it: every input defined and no cycle (the graph
//! index refuses both), nodes stored in topological order, every op within the graph's opset
//! (the emitters refuse others), and names introduced by the rewrite unique.

use std::collections::HashMap;

use anyhow::{Result, bail};

use crate::onnx::{Model, ModelIndex};

use super::Applied;

pub fn check(model: &Model, applied: &[Applied]) -> Result<()> {
    let index = ModelIndex::build(model)?;
    for g in &index.graphs {
        if !g.is_stored_in_order() {
            bail!("graph {}: nodes are not in topological order", g.path);
        }
        let mut seen: HashMap<&str, usize> = HashMap::new();
        for n in g.nodes {
            *seen.entry(n.name()).or_default() += 1;
        }
        for a in applied {
            for name in &a.nodes {
                if seen.get(name.as_str()).copied().unwrap_or(0) > 1 {
                    bail!("graph {}: node name '{name}' is not unique", g.path);
                }
            }
        }
    }
    Ok(())
}
