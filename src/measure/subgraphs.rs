//! Values computed inside If branches, Scan and Loop bodies and local functions, so that sites
//! there get drift like top-level sites.
//!
//! **If branches.** tract runs an If branch as a model of its own and keeps none of its values,
//! so a branch that holds a measured site is lifted into a model of its own, in memory only: the
//! branch's nodes and initializers, the enclosing graphs' initializers it reads, and every other
//! tensor it reads from an enclosing graph as an input. It runs on the samples where the If took it, fed the values the
//! enclosing graph computed on that sample; on the other samples the site is not reached. Branches
//! nest to any depth (a branch's enclosing graph may itself be a lifted branch).
//!
//! **Scan bodies of the main graph and of If branches.** The main graph (or the lifted branch)
//! runs from a measuring copy, in memory only, whose Scan nodes carry each requested body value
//! out as one more scan output: the values of every iteration stacked along a new leading axis,
//! which element-wise sites measure like any tensor (per-channel parameters broadcast from the
//! right).
//!
//! **Loop bodies of the main graph and local function bodies.** tract runs a copy in which Loops
//! are unrolled and functions inlined ([`super::runnable`]); a body value is read there at every
//! iteration or call, and each iteration or call counts as one more sample. A body inside a Scan
//! or Loop body, a Loop body inside a branch, and branches or bodies inside a function are not
//! captured: [`reach`] says why.

use std::collections::{BTreeMap, BTreeSet, HashMap};

use anyhow::{Context, Result, bail, ensure};

use super::capture::{self, Values, widen};
use super::isolate::InputDecl;
use super::runnable::{self, Instance, Runnable};
use crate::onnx::builder;
use crate::onnx::index::free_names;
use crate::onnx::proto::{GraphProto, ModelProto, TensorProto, ValueInfoProto};
use crate::onnx::{GraphKind, Model, ModelIndex};
use crate::run::{NamedTensor, Sample, TractModel};

/// Whether values of graph `site_graph` can be captured: the main graph, If branches all the way
/// up, a Scan body there, a Loop body of the main graph, or a local function's body; the reason
/// when not.
pub fn reach(index: &ModelIndex, site_graph: usize) -> Result<(), String> {
    let mut g = site_graph;
    loop {
        let graph = &index.graphs[g];
        match &graph.kind {
            GraphKind::Main => return Ok(()),
            GraphKind::Function { .. } if g == site_graph => return Ok(()),
            GraphKind::Function { .. } => {
                return Err(format!(
                    "the site is inside a branch or body of {}, whose values are not captured",
                    graph.path
                ));
            }
            GraphKind::Subgraph { node, attribute } => {
                let Some(parent) = graph.parent else {
                    return Err(format!("{} has no enclosing graph", graph.path));
                };
                let op = index.graphs[parent]
                    .nodes
                    .get(graph.location.steps.last().map_or(usize::MAX, |s| s.0))
                    .map_or("", |n| n.op_type());
                match op {
                    "If" => g = parent,
                    "Scan" | "Loop" if g == site_graph && parent == 0 => return Ok(()),
                    "Scan" if g == site_graph => g = parent,
                    "Loop" if g == site_graph => {
                        return Err(format!(
                            "the site is inside the body of Loop node '{node}', which is not in the main graph; nested Loops run unrolled, but only the values of Loop bodies of the main graph are read"
                        ));
                    }
                    "Scan" | "Loop" => {
                        return Err(format!(
                            "the site is inside a graph nested in the body of {op} node '{node}'; only If branches, Scan bodies in them, and Scan and Loop bodies of the main graph are captured"
                        ));
                    }
                    _ => {
                        return Err(format!(
                            "the site is inside the {attribute} of {op} node '{node}', whose values are not captured (only If branches and Scan and Loop bodies are)"
                        ));
                    }
                }
            }
        }
    }
}

/// The values of every requested graph, per sample.
pub struct Captures {
    main: Vec<Values>,
    /// Per lifted branch or Scan body: per sample, its values where it ran; per Loop or function
    /// body: per sample, then per iteration or call; or why not run.
    branches: HashMap<usize, Result<Vec<Option<Values>>, String>>,
    /// How the figures of a Loop or function body combine its iterations or calls.
    notes: HashMap<usize, String>,
}

impl Captures {
    /// The main graph's values, one per sample.
    pub fn main(&self) -> &[Values] {
        &self.main
    }

    /// How the figures of graph `g` combine its iterations or calls, for a Loop or function body.
    pub fn note(&self, g: usize) -> Option<&str> {
        self.notes.get(&g).map(String::as_str)
    }

    /// Graph `g`'s values per sample (per sample and iteration or call, for a Loop or function
    /// body), `None` where it did not run; why they are missing.
    pub fn at(&self, g: usize) -> Result<Vec<Option<&Values>>, String> {
        if g == 0 {
            return Ok(self.main.iter().map(Some).collect());
        }
        match self.branches.get(&g) {
            Some(Ok(v)) => Ok(v.iter().map(Option::as_ref).collect()),
            Some(Err(e)) => Err(e.clone()),
            None => Err("its graph's values were not requested".into()),
        }
    }
}

/// Runs `runnable` (the model of `index`, or its measuring copy when Scan body values are
/// requested) on every sample, then every If branch with requested values, outermost first;
/// `requests` are tensor names per graph index; `what` names the model in errors. Values of Loop
/// and function bodies are read from the main run, at every iteration and call. An error of the
/// main run is an error; a branch or body that cannot be captured gives its reason.
pub fn capture(
    index: &ModelIndex,
    runnable: &Runnable,
    samples: &[Sample],
    mut requests: BTreeMap<usize, BTreeSet<String>>,
    what: &str,
    ceiling: u64,
) -> Result<Captures> {
    let tract = &runnable.tract;
    let mut failed: HashMap<usize, String> = HashMap::new();
    let mut unrolled: Vec<(usize, Vec<Renamed>)> = Vec::new();
    let mut through_bodies: BTreeSet<String> = BTreeSet::new();
    for g in requests.keys().copied().collect::<Vec<_>>() {
        let Some(instances) = runnable.bodies.of(g) else {
            continue;
        };
        let asks = requests.remove(&g).unwrap_or_default();
        match instances.clone().and_then(|i| read_names(tract, &i, &asks)) {
            Ok(names) => {
                through_bodies.extend(names.iter().flatten().map(|(_, copy)| copy.clone()));
                unrolled.push((g, names));
            }
            Err(why) => {
                failed.insert(g, why.clone());
            }
        }
    }
    let mut scans: Vec<Threaded> = Vec::new();
    let mut branch_scans: BTreeMap<usize, Vec<Threaded>> = BTreeMap::new();
    for g in requests.keys().copied().collect::<Vec<_>>() {
        let Some(parent) = scan_parent(index, g) else {
            continue;
        };
        let asks = (g, requests.remove(&g).unwrap_or_default());
        if parent == 0 {
            scans.push(asks);
        } else {
            requests.entry(parent).or_default();
            branch_scans.entry(parent).or_default().push(asks);
        }
    }
    let mut lifts: BTreeMap<usize, Result<Lift, String>> = BTreeMap::new();
    let mut pending: BTreeSet<usize> = requests.keys().copied().filter(|&g| g != 0).collect();
    while let Some(g) = pending.pop_last() {
        let lift = Lift::plan(index, g)
            .map_err(|e| format!("{e:#}"))
            .and_then(|l| exposed(tract, &l).map(|()| l));
        if let Ok(l) = &lift {
            let asks = requests.entry(l.parent).or_default();
            asks.insert(l.cond.clone());
            asks.extend(l.inputs.iter().cloned());
            if l.parent != 0 {
                pending.insert(l.parent);
            }
        }
        lifts.insert(g, lift);
    }
    let inputs: Vec<&str> = tract.inputs().iter().map(|i| i.name.as_str()).collect();
    let mut extra = requests.remove(&0).unwrap_or_default();
    extra.extend(through_bodies);
    let extra: Vec<String> = extra
        .into_iter()
        .filter(|n| !inputs.contains(&n.as_str()))
        .collect();
    let (main, scan_failure) = if scans.is_empty() {
        (capture::run_samples(tract, samples, &extra, what)?, None)
    } else {
        match run_threaded(index, &scans, samples, &extra, what, ceiling) {
            Ok(values) => (values, None),
            Err(e) => (
                capture::run_samples(tract, samples, &extra, what)?,
                Some(format!("{e:#}")),
            ),
        }
    };
    let mut captures = Captures {
        main,
        branches: failed.into_iter().map(|(g, why)| (g, Err(why))).collect(),
        notes: HashMap::new(),
    };
    for (g, names) in unrolled {
        let values = captures
            .main
            .iter()
            .flat_map(|v| {
                names.iter().map(move |instance| {
                    Some(
                        instance
                            .iter()
                            .filter_map(|(body, copy)| {
                                let t = v.get(copy)?;
                                Some((body.clone(), NamedTensor::new(body, t.tensor.clone())))
                            })
                            .collect(),
                    )
                })
            })
            .collect();
        captures
            .notes
            .insert(g, instances_note(index, g, names.len()));
        captures.branches.insert(g, Ok(values));
    }
    for (g, asks) in &scans {
        let values = match &scan_failure {
            Some(why) => Err(format!(
                "the measuring copy that carries Scan body values out failed: {why}"
            )),
            None => Ok(captures
                .main
                .iter()
                .map(|v| Some(unstacked(v, asks)))
                .collect()),
        };
        captures.branches.insert(*g, values);
    }
    for (g, lift) in lifts {
        let inner = branch_scans.remove(&g).unwrap_or_default();
        let values = lift.and_then(|l| {
            let parent = captures.at(l.parent)?;
            let asks = requests.remove(&g).unwrap_or_default();
            l.run(index, &parent, &asks, &inner, ceiling)
                .with_context(|| format!("{what}, {}", index.graphs[g].path))
                .map_err(|e| format!("{e:#}"))
        });
        for (sg, asks) in &inner {
            let body = match &values {
                Ok(per_sample) => Ok(per_sample
                    .iter()
                    .map(|v| v.as_ref().map(|v| unstacked(v, asks)))
                    .collect()),
                Err(why) => Err(why.clone()),
            };
            captures.branches.insert(*sg, body);
        }
        captures.branches.insert(g, values);
    }
    Ok(captures)
}

/// (body name, name in the runnable copy) of each value asked of one instance of a body.
type Renamed = Vec<(String, String)>;

/// Per instance of a Loop or function body, each of `asks` with its name in the runnable copy;
/// an error when tract does not compute one of them.
fn read_names(
    tract: &TractModel,
    instances: &[Instance],
    asks: &BTreeSet<String>,
) -> Result<Vec<Renamed>, String> {
    instances
        .iter()
        .map(|instance| {
            asks.iter()
                .map(|ask| {
                    let copy = instance.get(ask).cloned().unwrap_or_else(|| ask.clone());
                    let known = tract.outlets.contains_key(&copy)
                        || tract.inputs().iter().any(|i| i.name == copy);
                    if known {
                        Ok((ask.clone(), copy))
                    } else {
                        Err(format!(
                            "'{ask}' is not computed by the copy tract runs (as '{copy}')"
                        ))
                    }
                })
                .collect()
        })
        .collect()
}

/// How a body's figures combine: every iteration or call counts as one more sample.
fn instances_note(index: &ModelIndex, g: usize, n: usize) -> String {
    let graph = &index.graphs[g];
    let what = match graph.kind {
        GraphKind::Function { .. } => "call(s) from the main graph",
        _ => "iteration(s) per sample",
    };
    format!(
        "{} measured at {n} {what}: the figures cover them all, each counted as one more sample",
        graph.path
    )
}

/// An If branch to lift: where its inputs come from and when it runs.
struct Lift {
    graph: GraphProto,
    parent: usize,
    /// The If's condition, a tensor of the enclosing graph.
    cond: String,
    /// The condition's value that takes this branch.
    when: bool,
    /// Tensors of enclosing graphs the branch reads, other than initializers: its inputs.
    inputs: Vec<String>,
    /// Initializers of enclosing graphs the branch reads.
    outer: Vec<TensorProto>,
}

impl Lift {
    fn plan(index: &ModelIndex, g: usize) -> Result<Lift> {
        let graph = &index.graphs[g];
        let parent = graph.parent.context("the main graph is not a branch")?;
        let &(n, a, k) = graph
            .location
            .steps
            .last()
            .context("no node holds the graph")?;
        let node = &index.graphs[parent].nodes[n];
        let attr = &node.attribute[a];
        ensure!(node.op_type() == "If", "only If branches are lifted");
        let when = match attr.name() {
            "then_branch" => true,
            "else_branch" => false,
            other => bail!("If attribute '{other}' is not a branch"),
        };
        let body = match k {
            None => attr.g.as_ref(),
            Some(k) => attr.graphs.get(k),
        }
        .context("the branch graph is missing")?;
        let cond = node
            .input
            .first()
            .context("the If has no condition")?
            .clone();
        let mut free = Vec::new();
        free_names(body, &mut free);
        let mut seen = BTreeSet::new();
        let (mut inputs, mut outer) = (Vec::new(), Vec::new());
        for name in free.into_iter().filter(|n| seen.insert(*n)) {
            let mut scope = Some(parent);
            let mut initializer = None;
            while let Some(s) = scope {
                let sg = &index.graphs[s];
                if sg.producer(name).is_some() || sg.is_input(name) {
                    break;
                }
                if let Some(t) = sg.initializer(name) {
                    initializer = Some(t.clone());
                    break;
                }
                scope = sg.parent;
            }
            match initializer {
                Some(t) => outer.push(t),
                None => inputs.push(name.to_string()),
            }
        }
        Ok(Lift {
            graph: body.clone(),
            parent,
            cond,
            when,
            inputs,
            outer,
        })
    }

    /// Runs the lifted branch on the samples where the enclosing graph's values (`parent`, per
    /// sample) take it, keeping the `asks` tensors.
    fn run(
        &self,
        index: &ModelIndex,
        parent: &[Option<&Values>],
        asks: &BTreeSet<String>,
        scans: &[Threaded],
        ceiling: u64,
    ) -> Result<Vec<Option<Values>>> {
        let mut reached = Vec::new();
        for (s, values) in parent.iter().enumerate() {
            let Some(values) = values else { continue };
            let cond = values
                .get(&self.cond)
                .with_context(|| format!("condition '{}' was not captured", self.cond))?;
            let taken = widen(cond)?.iter().next().is_some_and(|&c| c != 0.0);
            if taken == self.when {
                let sample = self
                    .inputs
                    .iter()
                    .map(|name| {
                        let v = values
                            .get(name)
                            .with_context(|| format!("'{name}' was not captured"))?;
                        Ok(NamedTensor::new(name, v.tensor.clone()))
                    })
                    .collect::<Result<Sample>>()?;
                reached.push((s, sample));
            }
        }
        let mut out: Vec<Option<Values>> = parent.iter().map(|_| None).collect();
        if reached.is_empty() {
            return Ok(out);
        }
        let mut graph = self.graph.clone();
        thread(&mut graph, index, scans)?;
        graph.input = (0..self.inputs.len())
            .map(|i| {
                let decl = InputDecl::of(reached.iter().map(|(_, s)| &s[i].tensor))?;
                Ok(decl.value_info(&self.inputs[i]))
            })
            .collect::<Result<_>>()?;
        graph.initializer.extend(self.outer.iter().cloned());
        graph.value_info.clear();
        let original = index.model.proto();
        let proto = ModelProto {
            ir_version: original.ir_version,
            opset_import: original.opset_import.clone(),
            producer_name: Some("actswap".into()),
            graph: Some(graph),
            functions: original.functions.clone(),
            ..Default::default()
        };
        let model = Model::from_proto(proto, index.model.dir().to_path_buf());
        let samples: Vec<Sample> = reached.iter().map(|(_, s)| s.clone()).collect();
        let tract = runnable::load(&model, &samples, ceiling)?;
        let extra: Vec<String> = asks
            .iter()
            .filter(|n| !self.inputs.contains(n))
            .cloned()
            .chain(threaded_names(scans))
            .collect();
        let values = capture::run_samples(&tract, &samples, &extra, "lifted branch")?;
        for ((s, _), v) in reached.iter().zip(values) {
            out[*s] = Some(v);
        }
        Ok(out)
    }
}

/// Whether the main graph's run can give what `lift` reads from it (tract exposes every tensor
/// a node computes, not every name a file may hold).
fn exposed(tract: &TractModel, lift: &Lift) -> Result<(), String> {
    if lift.parent != 0 {
        return Ok(());
    }
    let known =
        |n: &str| tract.outlets.contains_key(n) || tract.inputs().iter().any(|i| i.name == n);
    match std::iter::once(&lift.cond)
        .chain(&lift.inputs)
        .find(|n| !known(n))
    {
        Some(n) => Err(format!(
            "the branch reads '{n}', which the run of the main graph does not give"
        )),
        None => Ok(()),
    }
}

/// The suffix of a Scan body value carried out of its Scan, iterations stacked.
const STACKED: &str = "|iterations";

/// The main-graph name of body value `name`, iterations stacked.
fn stacked(name: &str) -> String {
    format!("{name}{STACKED}")
}

/// Runs the measuring copy that carries the `scans` body values out, requesting `extra` too.
fn run_threaded(
    index: &ModelIndex,
    scans: &[(usize, BTreeSet<String>)],
    samples: &[Sample],
    extra: &[String],
    what: &str,
    ceiling: u64,
) -> Result<Vec<Values>> {
    let copy = thread_scans(index, scans)?;
    let tract = runnable::load(&copy, samples, ceiling)?;
    let mut extra = extra.to_vec();
    extra.extend(threaded_names(scans));
    capture::run_samples(&tract, samples, &extra, what)
}

/// The body values `asks` of a run of the measuring copy, under their body names.
fn unstacked(values: &Values, asks: &BTreeSet<String>) -> Values {
    asks.iter()
        .filter_map(|n| {
            let t = values.get(&stacked(n))?;
            Some((n.clone(), NamedTensor::new(n, t.tensor.clone())))
        })
        .collect()
}

/// A Scan body and the values to carry out of it.
type Threaded = (usize, BTreeSet<String>);

/// The names the threaded Scans give their carried values under, iterations stacked.
fn threaded_names(scans: &[Threaded]) -> impl Iterator<Item = String> + '_ {
    scans
        .iter()
        .flat_map(|(_, asks)| asks.iter().map(|n| stacked(n)))
}

/// The graph holding the Scan node whose body is graph `g`, when it is one.
fn scan_parent(index: &ModelIndex, g: usize) -> Option<usize> {
    let graph = &index.graphs[g];
    let parent = graph.parent?;
    if graph.location.function.is_some() {
        return None;
    }
    let &(n, _, _) = graph.location.steps.last()?;
    (index.graphs[parent].nodes.get(n)?.op_type() == "Scan").then_some(parent)
}

/// The name to read body value `name` from. tract reshapes a body output in place to stack it,
/// and its other readers see the reshaped value; so a body output's producer is made to write
/// `name|raw`, with an Identity back to `name` right after it, and `name|raw` is read.
fn unhook_output(body: &mut GraphProto, name: &str) -> String {
    let producer = body
        .node
        .iter()
        .position(|n| n.output.iter().any(|o| o == name));
    match producer {
        Some(p) if body.output.iter().any(|o| o.name() == name) => {
            let raw = format!("{name}|raw");
            for o in body.node[p].output.iter_mut().filter(|o| *o == name) {
                o.clone_from(&raw);
            }
            let restore = builder::node("Identity", &raw, &[&raw], &[name], vec![]);
            body.node.insert(p + 1, restore);
            raw
        }
        _ => name.to_string(),
    }
}

/// A copy of the model whose main-graph Scan nodes carry the requested body values out
/// ([`thread`]).
fn thread_scans(index: &ModelIndex, scans: &[Threaded]) -> Result<Model> {
    let mut proto = index.model.proto().clone();
    let main = proto.graph.as_mut().context("the model has no graph")?;
    thread(main, index, scans)?;
    Ok(Model::from_proto(proto, index.model.dir().to_path_buf()))
}

/// Makes the Scan nodes of `graph` (the graph holding them, or a lifted copy of it) carry the
/// requested body values out as extra scan outputs (each through an Identity, so body inputs
/// and outer values work too).
fn thread(graph: &mut GraphProto, index: &ModelIndex, scans: &[Threaded]) -> Result<()> {
    for (g, asks) in scans {
        let &(n, a, _) = index.graphs[*g]
            .location
            .steps
            .last()
            .context("no node holds the body")?;
        let scan = graph.node.get_mut(n).context("the Scan node is missing")?;
        let body = scan.attribute[a]
            .g
            .as_mut()
            .context("the Scan has no body")?;
        for name in asks {
            let inner = format!("{name}|per-iteration");
            let source = unhook_output(body, name);
            body.node.push(builder::node(
                "Identity",
                &inner,
                &[&source],
                &[&inner],
                vec![],
            ));
            body.output.push(ValueInfoProto {
                name: Some(inner),
                ..Default::default()
            });
        }
        scan.output.extend(asks.iter().map(|n| stacked(n)));
        for attr in scan
            .attribute
            .iter_mut()
            .filter(|a| matches!(a.name(), "scan_output_axes" | "scan_output_directions"))
        {
            attr.ints.extend(std::iter::repeat_n(0, asks.len()));
        }
    }
    Ok(())
}
