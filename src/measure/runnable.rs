//! The copy of a model that tract runs, in memory only: Loops of the main graph unrolled and
//! local functions inlined (tract 0.23.9 has no Loop op and does not inline functions), with
//! where the values of each Loop body and function body went, so that sites there are measured
//! at every iteration and every call. A model with neither runs as it is.

use std::collections::HashMap;
use std::path::Path;

use anyhow::{Context, Result, bail};

use super::capture::{self, widen};
use crate::onnx::inline::inline_functions;
use crate::onnx::proto::{GraphProto, ModelProto, ValueInfoProto};
use crate::onnx::{GraphKind, Model, ModelIndex, unroll};
use crate::run::{Sample, TRACT_VERSION, TractModel};

/// Loops nested deeper than this are left to tract, which refuses them.
const MAX_LOOP_DEPTH: usize = 8;

/// Unrolled copies of all Loops together may hold at most this many nodes.
const MAX_UNROLLED_NODES: usize = 1_000_000;

/// Per body name, its name in the runnable copy: one map per call or iteration.
pub type Instance = HashMap<String, String>;

/// Where the values of Loop and function bodies went: per graph of the model's index, one
/// [`Instance`] per iteration or call in the main graph; or why they cannot be read.
#[derive(Debug, Default)]
pub struct Bodies(HashMap<usize, Result<Vec<Instance>, String>>);

impl Bodies {
    /// The instances of graph `g`, when it is a Loop or function body.
    pub fn of(&self, g: usize) -> Option<&Result<Vec<Instance>, String>> {
        self.0.get(&g)
    }
}

/// A model ready for tract, and where its bodies' values went.
pub struct Runnable {
    pub tract: TractModel,
    pub bodies: Bodies,
}

/// Prepares the model of `index` for running on `samples` (Loop trip counts may depend on the
/// inputs' shapes, and must be the same on every sample).
pub fn prepare(index: &ModelIndex, samples: &[Sample], ceiling: u64) -> Result<Runnable> {
    let model = index.model;
    let proto = model.proto();
    let loops = main_loops(proto);
    if proto.functions.is_empty() && loops.is_empty() {
        let tract = capture::load(model)?.with_memory_ceiling(ceiling);
        return Ok(Runnable {
            tract,
            bodies: Bodies::default(),
        });
    }
    let mut copy = proto.clone();
    let mut bodies = HashMap::new();
    for (at, instances) in unroll_loops(&mut copy, model.dir(), samples, ceiling)? {
        if let Some(g) = loop_body_graph(index, at) {
            bodies.insert(g, Ok(instances));
        }
    }
    let inlined = inline_functions(&copy)?;
    let calls = inlined.as_ref().map_or(&[][..], |i| i.calls.as_slice());
    for (g, graph) in index.graphs.iter().enumerate() {
        let (Some(f), true) = (graph.location.function, graph.location.steps.is_empty()) else {
            continue;
        };
        let calls: Vec<_> = calls.iter().filter(|c| c.function == f).collect();
        let instances = if calls.is_empty() {
            Err(format!("{} is never called", graph.path))
        } else if calls.iter().all(|c| !c.in_main) {
            Err(format!(
                "{} is called only inside branches or bodies, whose values are not captured",
                graph.path
            ))
        } else {
            Ok(calls
                .iter()
                .filter(|c| c.in_main)
                .map(|c| c.names.clone())
                .collect())
        };
        bodies.insert(g, instances);
    }
    match inlined {
        Some(inlined) => copy = inlined.proto,
        None => copy.functions.clear(),
    }
    // Loops that were inside Loop or function bodies are in the main graph now: unrolled in
    // turn, their values not read.
    for _ in 0..MAX_LOOP_DEPTH {
        if main_loops(&copy).is_empty() {
            break;
        }
        unroll_loops(&mut copy, model.dir(), samples, ceiling)?;
    }
    let copy = Model::from_proto(copy, model.dir().to_path_buf());
    let tract = capture::load(&copy)?.with_memory_ceiling(ceiling);
    Ok(Runnable {
        tract,
        bodies: Bodies(bodies),
    })
}

/// Unrolls every Loop of `proto`'s main graph; per Loop, its node index before any unrolling and
/// the name maps of its iterations.
fn unroll_loops(
    proto: &mut ModelProto,
    dir: &Path,
    samples: &[Sample],
    ceiling: u64,
) -> Result<Vec<(usize, Vec<Instance>)>> {
    let mut unrolled = Vec::new();
    let mut shift = 0isize;
    for (j, at) in main_loops(proto).into_iter().enumerate() {
        let now = at
            .checked_add_signed(shift)
            .context("unrolling moved a Loop")?;
        let graph = proto.graph.as_ref().context("the model has no graph")?;
        let node = &graph.node[now];
        let name = node.name().to_string();
        let fail = |why: String| {
            anyhow::anyhow!(
                "Loop node '{name}' cannot run: {why}; tract {TRACT_VERSION} has no Loop op, and \
                 a Loop is unrolled only when its condition is constant true and its trip count \
                 is known before running (`scan` and `swap` still work)"
            )
        };
        unroll::check(graph, node).map_err(fail)?;
        let trips =
            trip_count(proto, dir, now, samples, ceiling).map_err(|e| fail(format!("{e:#}")))?;
        let body_len = body_nodes(&graph.node[now]);
        if trips.saturating_mul(body_len.max(1)) > MAX_UNROLLED_NODES {
            return Err(fail(format!(
                "{trips} iterations of {body_len} nodes exceed the {MAX_UNROLLED_NODES} nodes \
                 an unrolled copy may hold"
            )));
        }
        let opset = default_opset(proto);
        let tag = fresh_tag(proto, j);
        let graph = proto.graph.as_mut().context("the model has no graph")?;
        let before = graph.node.len();
        let instances =
            unroll::unroll(graph, now, trips, &tag, opset).map_err(|e| fail(format!("{e:#}")))?;
        shift += graph.node.len() as isize - before as isize;
        unrolled.push((at, instances));
    }
    Ok(unrolled)
}

/// The tract model of `model` as [`prepare`] makes it, without the body maps.
pub fn load(model: &Model, samples: &[Sample], ceiling: u64) -> Result<TractModel> {
    let index = ModelIndex::build(model)?;
    Ok(prepare(&index, samples, ceiling)?.tract)
}

/// Indices of the main graph's Loop nodes, in order.
fn main_loops(proto: &ModelProto) -> Vec<usize> {
    proto.graph.as_ref().map_or(Vec::new(), |g| {
        g.node
            .iter()
            .enumerate()
            .filter(|(_, n)| n.op_type() == "Loop" && n.domain().is_empty())
            .map(|(i, _)| i)
            .collect()
    })
}

fn body_nodes(loop_node: &crate::onnx::proto::NodeProto) -> usize {
    loop_node
        .attribute
        .iter()
        .filter_map(|a| a.g.as_ref())
        .map(|g| g.node.len())
        .sum()
}

/// The index of the body graph of the main graph's Loop at node `at` of the original model.
fn loop_body_graph(index: &ModelIndex, at: usize) -> Option<usize> {
    index.graphs.iter().position(|g| {
        matches!(g.kind, GraphKind::Subgraph { .. })
            && g.parent == Some(0)
            && g.location.function.is_none()
            && g.location.steps.len() == 1
            && g.location.steps[0].0 == at
    })
}

/// The model's default-domain opset.
fn default_opset(proto: &ModelProto) -> i64 {
    proto
        .opset_import
        .iter()
        .find(|o| o.domain().is_empty())
        .map_or(1, |o| o.version())
}

/// `loop{j}`, salted until no name of the main graph starts with it.
fn fresh_tag(proto: &ModelProto, j: usize) -> String {
    let mut tag = format!("loop{j}");
    let names: Vec<&str> = proto
        .graph
        .iter()
        .flat_map(|g| {
            g.node
                .iter()
                .flat_map(|n| n.output.iter().map(String::as_str).chain([n.name()]))
                .chain(g.initializer.iter().map(|t| t.name()))
                .chain(g.input.iter().map(|v| v.name()))
        })
        .collect();
    while names.iter().any(|n| n.starts_with(&tag)) {
        tag.insert(0, '_');
    }
    tag
}

/// The trip count of the Loop at node `at` of `proto`'s main graph: the value of its `M` input,
/// computed by running the part of the graph it depends on over `samples`. Every sample must
/// give the same count.
fn trip_count(
    proto: &ModelProto,
    dir: &Path,
    at: usize,
    samples: &[Sample],
    ceiling: u64,
) -> Result<usize> {
    let graph = proto.graph.as_ref().context("the model has no graph")?;
    let m = graph.node[at].input[0].clone();
    let mut prefix = proto.clone();
    let g = prefix.graph.as_mut().context("the model has no graph")?;
    g.node = ancestors(graph, at, &m);
    g.output = vec![ValueInfoProto {
        name: Some(m.clone()),
        ..Default::default()
    }];
    g.value_info.clear();
    let prefix = Model::from_proto(prefix, dir.to_path_buf());
    let tract = load(&prefix, samples, ceiling).context("computing the trip count")?;
    let values = capture::run_samples(&tract, samples, &[], "the trip count")?;
    let mut counts: Vec<i64> = Vec::new();
    for v in &values {
        let t = v.get(&m).context("the trip count was not computed")?;
        let x = widen(t)?;
        let Some(&c) = x.iter().next() else {
            bail!("the trip count '{m}' is empty");
        };
        let c = c as i64;
        if !counts.contains(&c) {
            counts.push(c);
        }
    }
    match counts.as_slice() {
        [c] if *c >= 0 => Ok(*c as usize),
        [c] => bail!("its trip count is negative ({c})"),
        _ => bail!(
            "its trip count differs between samples ({}): give samples of one shape",
            counts
                .iter()
                .map(i64::to_string)
                .collect::<Vec<_>>()
                .join(", ")
        ),
    }
}

/// The nodes of `graph` before node `at` that `name` depends on, in graph order.
fn ancestors(graph: &GraphProto, at: usize, name: &str) -> Vec<crate::onnx::proto::NodeProto> {
    let mut wanted: std::collections::HashSet<String> = [name.to_string()].into();
    let mut keep = vec![false; at];
    for i in (0..at).rev() {
        let n = &graph.node[i];
        if n.output.iter().any(|o| wanted.contains(o)) {
            keep[i] = true;
            wanted.extend(n.input.iter().cloned());
            for a in &n.attribute {
                for sg in a.g.iter().chain(&a.graphs) {
                    let mut free = Vec::new();
                    crate::onnx::index::free_names(sg, &mut free);
                    wanted.extend(free.into_iter().map(str::to_string));
                }
            }
        }
    }
    graph.node[..at]
        .iter()
        .zip(keep)
        .filter(|(_, k)| *k)
        .map(|(n, _)| n.clone())
        .collect()
}
