//! The rewrite engine: one patch per planned site, all applied to a copy of the model at once.
//!
//! A patch removes the site's compute nodes and inserts the new form's nodes where the first of
//! them stood, so node order stays topological; the last new node writes the site's output
//! tensor, so consumers and graph outputs keep their names. New names derive from the site
//! output (`<output>.<form>` or `<output>.<kind>` for a substitution) and are made unique across
//! the model. Constants (initializers, Constant nodes and casts of them) that only the removed
//! nodes read are removed; shared ones survive while still used. Every other message is left as
//! it was. The result is validated before it is returned.

mod graph_mut;
mod validate;

use std::collections::{BTreeMap, HashSet};

use anyhow::{Context, Result, bail};

use crate::catalog::emit::{self, EmitCtx};
use crate::onnx::builder;
use crate::onnx::proto::{NodeProto, TensorProto};
use crate::onnx::{GraphKind, Model, ModelIndex};
use crate::plan::{Plan, SiteCtx};
use graph_mut::GraphMut;

/// What one site became.
#[derive(Debug, Clone)]
pub struct Applied {
    pub site: String,
    pub output: String,
    /// Names of the nodes the rewrite inserted.
    pub nodes: Vec<String>,
    /// Names of the initializers (or, in functions, Constant nodes) it added.
    pub constants: Vec<String>,
}

struct Patch {
    remove: Vec<usize>,
    nodes: Vec<NodeProto>,
    initializers: Vec<TensorProto>,
}

/// Applies every rewrite of the plan; returns the new model and what each site became.
pub fn apply(model: &Model, index: &ModelIndex, plan: &Plan) -> Result<(Model, Vec<Applied>)> {
    check_disjoint(plan)?;
    let mut taken = all_names(index);
    let mut patches: BTreeMap<usize, Vec<Patch>> = BTreeMap::new();
    let mut applied = Vec::new();
    for (site, target) in plan.rewrites() {
        let graph = &index.graphs[site.graph_index];
        let opset = graph.opset("").unwrap_or(1);
        let ctx = SiteCtx::new(index, site, opset);
        let args = ctx.args(&target.params);
        let base = if target.kind.id == site.kind {
            format!("{}.{}", site.output, target.form)
        } else {
            format!("{}.{}", site.output, target.kind.id)
        };
        let mut attempt = 1;
        let emitted = loop {
            let prefix = if attempt == 1 {
                base.clone()
            } else {
                format!("{base}.{attempt}")
            };
            let ectx = EmitCtx {
                input: &site.input,
                output: &site.output,
                prefix: &prefix,
                elem_type: ctx.elem_type,
                opset,
                params: &args,
            };
            let e = emit::emit(target.kind, target.form, &ectx)
                .with_context(|| format!("site {} ({}) in {}", site.id, site.kind, site.graph))?;
            if new_names(&e, &site.output)
                .iter()
                .all(|n| !taken.contains(n))
            {
                break e;
            }
            attempt += 1;
        };
        taken.extend(new_names(&emitted, &site.output));
        let is_function = matches!(graph.kind, GraphKind::Function { .. });
        let (nodes, initializers, constants) = if is_function {
            let mut consts: Vec<NodeProto> = emitted
                .initializers
                .iter()
                .map(|t| {
                    builder::node(
                        "Constant",
                        t.name(),
                        &[],
                        &[t.name()],
                        vec![builder::attr_t("value", t.clone())],
                    )
                })
                .collect();
            let names = consts.iter().map(|n| n.name().to_string()).collect();
            consts.extend(emitted.nodes.iter().cloned());
            (consts, Vec::new(), names)
        } else {
            let names = emitted
                .initializers
                .iter()
                .map(|t| t.name().to_string())
                .collect();
            (emitted.nodes.clone(), emitted.initializers.clone(), names)
        };
        applied.push(Applied {
            site: site.id.clone(),
            output: site.output.clone(),
            nodes: emitted.nodes.iter().map(|n| n.name().to_string()).collect(),
            constants,
        });
        patches.entry(site.graph_index).or_default().push(Patch {
            remove: site.node_indices.clone(),
            nodes,
            initializers,
        });
    }
    if patches.is_empty() {
        return Ok((model.clone(), applied));
    }
    validate::input_order(index)?;
    let mut proto = model.proto().clone();
    // Deepest graphs first: a subgraph is found through its parent's node indices, which the
    // parent's own patches shift (the index lists every subgraph after its parent).
    for (g, list) in patches.into_iter().rev() {
        let location = &index.graphs[g].location;
        let mut target = GraphMut::locate(&mut proto, location)
            .with_context(|| format!("graph {} not found", index.graphs[g].path))?;
        apply_patches(&mut target, list);
    }
    let out = model.with_proto(proto);
    validate::check(&out, &applied).context("the rewritten model failed validation")?;
    Ok((out, applied))
}

/// Names an emission introduces (nodes, intermediate tensors, initializers).
fn new_names(e: &emit::Emitted, output: &str) -> Vec<String> {
    let mut v: Vec<String> = e.nodes.iter().map(|n| n.name().to_string()).collect();
    v.extend(
        e.nodes
            .iter()
            .flat_map(|n| n.output.iter())
            .filter(|o| o.as_str() != output)
            .cloned(),
    );
    v.extend(e.initializers.iter().map(|t| t.name().to_string()));
    v
}

/// Every node, tensor and initializer name in the model.
fn all_names(index: &ModelIndex) -> HashSet<String> {
    let mut names = HashSet::new();
    for g in &index.graphs {
        names.extend(g.inputs.iter().map(|s| s.to_string()));
        names.extend(g.outputs.iter().map(|s| s.to_string()));
        names.extend(g.initializers().map(|t| t.name().to_string()));
        for n in g.nodes {
            names.insert(n.name().to_string());
            names.extend(n.output.iter().cloned());
        }
    }
    names
}

/// Applies a graph's patches in one pass, then drops constants nothing reads any more.
fn apply_patches(g: &mut GraphMut, patches: Vec<Patch>) {
    let removed: HashSet<usize> = patches
        .iter()
        .flat_map(|p| p.remove.iter().copied())
        .collect();
    let mut insert_at: BTreeMap<usize, Vec<NodeProto>> = BTreeMap::new();
    let mut new_inits = Vec::new();
    for p in patches {
        let at = *p.remove.iter().min().expect("a site has nodes");
        insert_at.entry(at).or_default().extend(p.nodes);
        new_inits.extend(p.initializers);
    }
    let old = std::mem::take(g.nodes());
    let mut read_by_removed: HashSet<String> = HashSet::new();
    let mut dropped_outputs: HashSet<String> = HashSet::new();
    let mut kept = Vec::with_capacity(old.len());
    for (i, n) in old.into_iter().enumerate() {
        if let Some(new) = insert_at.remove(&i) {
            kept.extend(new);
        }
        if removed.contains(&i) {
            read_by_removed.extend(n.input.iter().cloned());
            dropped_outputs.extend(n.output.iter().cloned());
        } else {
            kept.push(n);
        }
    }
    *g.nodes() = kept;
    // Constants of the removed nodes that nothing reads any more, to a fixpoint (a Constant
    // feeding a CastLike feeding the site).
    loop {
        let used = g.referenced_names();
        let nodes = g.nodes();
        let before = nodes.len();
        nodes.retain(|n| {
            let dead = is_constant_op(n)
                && n.output
                    .iter()
                    .all(|o| read_by_removed.contains(o) && !used.contains(o));
            if dead {
                read_by_removed.extend(n.input.iter().cloned());
                dropped_outputs.extend(n.output.iter().cloned());
            }
            !dead
        });
        if nodes.len() == before {
            break;
        }
    }
    let used = g.referenced_names();
    if let Some(inits) = g.initializers() {
        inits.retain(|t| !read_by_removed.contains(t.name()) || used.contains(t.name()));
        inits.extend(new_inits);
    }
    let produced: HashSet<String> = g
        .nodes()
        .iter()
        .flat_map(|n| n.output.iter().cloned())
        .collect();
    g.value_info()
        .retain(|v| !dropped_outputs.contains(v.name()) || produced.contains(v.name()));
}

/// Ops that only produce or reshape constants.
fn is_constant_op(n: &NodeProto) -> bool {
    matches!(n.domain(), "" | "ai.onnx")
        && matches!(
            n.op_type(),
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

/// Refuses a plan whose sites overlap (each node may belong to one site).
fn check_disjoint(plan: &Plan) -> Result<()> {
    let mut seen: HashSet<(usize, usize)> = HashSet::new();
    for (site, _) in plan.rewrites() {
        for &n in &site.node_indices {
            if !seen.insert((site.graph_index, n)) {
                bail!("site {} shares node {n} with another site", site.id);
            }
        }
    }
    Ok(())
}
