//! The rewrite engine: one patch per planned site, all applied to a copy of the model at once.
//!
//! The plan holds the form it wrote for each site; the rewrite only names and applies it. A
//! patch removes the site's compute nodes and inserts the new form's nodes where the first of
//! them stood, so node order stays topological; the last new node writes the site's output
//! tensor, so consumers and graph outputs keep their names. New names derive from the site
//! output (`<output>.<form>` or `<output>.<kind>` for a substitution) and are made unique across
//! the model (`.2`, `.3`, ... after the prefix). Constants (initializers, Constant nodes and casts
//! of them) that only the removed nodes read are removed; shared ones survive while still used.
//! Every other message is left as it was. The result is validated before it is returned.

mod graph_mut;
mod validate;

use std::collections::{BTreeMap, HashSet};

use anyhow::{Context, Result, bail};

use crate::catalog::Form;
use crate::onnx::builder;
use crate::onnx::index::is_constant_op;
use crate::onnx::proto::{NodeProto, TensorProto};
use crate::onnx::{GraphKind, Model, ModelIndex};
use crate::plan::{Action, Plan};
use crate::scan::{Site, Spelling, TypeReader};
use graph_mut::GraphMut;

/// What one site became.
#[derive(Debug, Clone)]
pub struct Applied {
    pub site: String,
    pub output: String,
    /// Names of the nodes the rewrite inserted.
    pub nodes: Vec<String>,
    /// The first output of each inserted node, in order (the last is the site's output).
    pub node_outputs: Vec<String>,
    /// Names of the initializers (or, in functions, Constant nodes) it added.
    pub constants: Vec<String>,
}

struct Patch {
    remove: Vec<usize>,
    nodes: Vec<NodeProto>,
    initializers: Vec<TensorProto>,
    /// Readers of the site's intermediates that take only a type or shape, pointed elsewhere.
    rewire: Vec<TypeReader>,
}

/// Applies every rewrite of the plan; returns the new model and what each site became.
pub fn apply(model: &Model, index: &ModelIndex, plan: &Plan) -> Result<(Model, Vec<Applied>)> {
    check_disjoint(plan)?;
    let mut taken = all_names(index);
    let mut patches: BTreeMap<usize, Vec<Patch>> = BTreeMap::new();
    let mut applied = Vec::new();
    for (site, replacement) in plan.rewrites() {
        let graph = &index.graphs[site.graph_index];
        let base = &replacement.emitted;
        let mut attempt = 1;
        let emitted = loop {
            let e = if attempt == 1 {
                base.clone()
            } else {
                base.renamed(&format!("{}.{attempt}", base.prefix), &site.output)
            };
            if e.new_names(&site.output).iter().all(|n| !taken.contains(n)) {
                break e;
            }
            attempt += 1;
        };
        taken.extend(emitted.new_names(&site.output));
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
            node_outputs: emitted
                .nodes
                .iter()
                .map(|n| n.output.first().cloned().unwrap_or_default())
                .collect(),
            constants,
        });
        patches.entry(site.graph_index).or_default().push(Patch {
            remove: site.node_indices.clone(),
            nodes,
            initializers,
            rewire: site.type_readers.clone(),
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

/// Every planned site's counterpart in the rewritten model, in plan order: the new form for a
/// site the rewrite replaced, the site itself for one it kept. Nodes are found again by the
/// tensors they write, which the rewrite keeps (`original` indexes the model the plan was made
/// for, `rewritten` the result of [`apply`]).
pub fn counterparts(
    plan: &Plan,
    applied: &[Applied],
    original: &ModelIndex,
    rewritten: &ModelIndex,
) -> Result<Vec<Site>> {
    let mut applied = applied.iter();
    plan.sites
        .iter()
        .map(|p| {
            let site = &p.site;
            let graph = &rewritten.graphs[site.graph_index];
            let locate = |outputs: &mut dyn Iterator<Item = &str>| -> Result<Vec<usize>> {
                outputs
                    .map(|o| {
                        graph.producer(o).with_context(|| {
                            format!(
                                "site {}: no node writes '{o}' in the rewritten model",
                                site.id
                            )
                        })
                    })
                    .collect()
            };
            match &p.action {
                Action::Rewrite(r) => {
                    let a = applied.next().context("one applied patch per rewrite")?;
                    Ok(Site {
                        kind: r.kind,
                        params: Some(r.params.clone()),
                        spelling: match r.form {
                            Form::Fused => Spelling::Fused,
                            Form::Primitive | Form::Fitted => Spelling::Decomposed,
                        },
                        domain: None,
                        ops: r.ops(),
                        nodes: a.nodes.clone(),
                        constants: a.constants.clone(),
                        rewritable: true,
                        notes: Vec::new(),
                        type_readers: Vec::new(),
                        node_indices: locate(&mut a.node_outputs.iter().map(String::as_str))?,
                        ..site.clone()
                    })
                }
                _ => {
                    let nodes = original.graphs[site.graph_index].nodes;
                    let mut outputs = site
                        .node_indices
                        .iter()
                        .map(|&n| nodes[n].output.first().map_or("", String::as_str));
                    Ok(Site {
                        node_indices: locate(&mut outputs)?,
                        type_readers: Vec::new(),
                        ..site.clone()
                    })
                }
            }
        })
        .collect()
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
    let mut rewire: BTreeMap<usize, Vec<TypeReader>> = BTreeMap::new();
    for p in patches {
        let at = *p.remove.iter().min().expect("a site has nodes");
        insert_at.entry(at).or_default().extend(p.nodes);
        new_inits.extend(p.initializers);
        for r in p.rewire {
            rewire.entry(r.node).or_default().push(r);
        }
    }
    let old = std::mem::take(g.nodes());
    let mut read_by_removed: HashSet<String> = HashSet::new();
    let mut dropped_outputs: HashSet<String> = HashSet::new();
    let mut kept = Vec::with_capacity(old.len());
    for (i, mut n) in old.into_iter().enumerate() {
        for r in rewire.remove(&i).unwrap_or_default() {
            n.input[r.slot] = r.tensor;
        }
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
