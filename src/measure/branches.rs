//! Values computed inside If branches, so that sites there get drift like top-level sites.
//!
//! tract runs an If branch as a model of its own and keeps none of its values, so a branch that
//! holds a measured site is lifted into a model of its own, in memory only: the branch's nodes and
//! initializers, the enclosing graphs' initializers it reads, and every other tensor it reads from
//! an enclosing graph as an input. It runs on the samples where the If took it, fed the values the
//! enclosing graph computed on that sample; on the other samples the site is not reached. Branches
//! nest to any depth (a branch's enclosing graph may itself be a lifted branch). Scan and Loop
//! bodies and local functions are not lifted: [`reach`] says why.

use std::collections::{BTreeMap, BTreeSet, HashMap};

use anyhow::{Context, Result, bail, ensure};

use super::capture::{self, Values, widen};
use super::isolate::InputDecl;
use crate::onnx::index::free_names;
use crate::onnx::proto::{GraphProto, ModelProto, TensorProto};
use crate::onnx::{GraphKind, ModelIndex};
use crate::run::{self, NamedTensor, Sample, TractModel};

/// Whether values of graph `g` can be captured: the main graph, or If branches all the way up;
/// the reason when not.
pub fn reach(index: &ModelIndex, g: usize) -> Result<(), String> {
    let mut g = g;
    loop {
        let graph = &index.graphs[g];
        match &graph.kind {
            GraphKind::Main => return Ok(()),
            GraphKind::Function { .. } => {
                return Err(format!(
                    "the site is inside {}, whose values are not captured (local functions are not inlined)",
                    graph.path
                ));
            }
            GraphKind::Subgraph { node, attribute } => {
                let parent = graph.parent.expect("a subgraph has an enclosing graph");
                let op = index.graphs[parent]
                    .nodes
                    .get(graph.location.steps.last().map_or(usize::MAX, |s| s.0))
                    .map_or("", |n| n.op_type());
                if op != "If" {
                    return Err(format!(
                        "the site is inside the {attribute} of {op} node '{node}', whose values are not captured (only If branches are)"
                    ));
                }
                g = parent;
            }
        }
    }
}

/// The values of every requested graph, per sample.
pub struct Captures {
    main: Vec<Values>,
    /// Per lifted branch: per sample, its values where the If took the branch; or why not run.
    branches: HashMap<usize, Result<Vec<Option<Values>>, String>>,
}

impl Captures {
    /// The main graph's values, one per sample.
    pub fn main(&self) -> &[Values] {
        &self.main
    }

    /// Graph `g`'s values per sample, `None` where it did not run; why they are missing.
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

/// Runs `tract` (the model of `index`) on every sample, then every If branch with requested
/// values, outermost first; `requests` are tensor names per graph index; `what` names the model in
/// errors. An error of the main run is an error; a branch that cannot run gives its reason.
pub fn capture(
    index: &ModelIndex,
    tract: &TractModel,
    samples: &[Sample],
    mut requests: BTreeMap<usize, BTreeSet<String>>,
    what: &str,
    ceiling: u64,
) -> Result<Captures> {
    let mut lifts: BTreeMap<usize, Result<Lift, String>> = BTreeMap::new();
    let mut pending: BTreeSet<usize> = requests.keys().copied().filter(|&g| g != 0).collect();
    while let Some(g) = pending.pop_last() {
        let lift = Lift::plan(index, g).map_err(|e| format!("{e:#}"));
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
    let extra: Vec<String> = requests
        .remove(&0)
        .unwrap_or_default()
        .into_iter()
        .filter(|n| !inputs.contains(&n.as_str()))
        .collect();
    let mut captures = Captures {
        main: capture::run_samples(tract, samples, &extra, what)?,
        branches: HashMap::new(),
    };
    for (g, lift) in lifts {
        let values = lift.and_then(|l| {
            let parent = captures.at(l.parent)?;
            let asks = requests.remove(&g).unwrap_or_default();
            l.run(index, &parent, &asks, ceiling)
                .with_context(|| format!("{what}, {}", index.graphs[g].path))
                .map_err(|e| format!("{e:#}"))
        });
        captures.branches.insert(g, values);
    }
    Ok(captures)
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
        let model = crate::onnx::Model::from_proto(proto, index.model.dir().to_path_buf());
        let tract = run::prepare(&model.encode(), Some(model.dir()))?.with_memory_ceiling(ceiling);
        let extra: Vec<String> = asks
            .iter()
            .filter(|n| !self.inputs.contains(n))
            .cloned()
            .collect();
        let samples: Vec<Sample> = reached.iter().map(|(_, s)| s.clone()).collect();
        let values = capture::run_samples(&tract, &samples, &extra, "lifted branch")?;
        for ((s, _), v) in reached.iter().zip(values) {
            out[*s] = Some(v);
        }
        Ok(out)
    }
}
