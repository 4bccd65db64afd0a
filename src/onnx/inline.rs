//! Local functions inlined into a copy of a model, for running it (tract 0.23.9 does not inline
//! them and refuses the call nodes as unknown ops). The model itself is never changed.
//!
//! ONNX IR specification, "Functions": a node whose (domain, op_type, overload) names a local
//! function is a call. Its body replaces it, with
//! - formal inputs bound to the call's actual inputs (a missing or empty one: absent, `""`) and
//!   formal outputs to its actual outputs;
//! - every other value of the body, nested subgraphs included, renamed uniquely per call;
//! - an attribute that refers to the call's (`ref_attr_name`) taking the call's value, else the
//!   function's default (`attribute_proto`), else left out;
//! - the function's opset imports added to the model's (a version that differs from the model's
//!   for the same domain is refused: one graph binds one version per domain).
//!
//! Calls inside bodies are inlined in turn. Each call records where its body's values went, so
//! values inside a function can be read at every call ([`Call`]).

use std::collections::{BTreeSet, HashMap};

use anyhow::{Result, bail};

use super::proto::{
    AttributeProto, FunctionProto, GraphProto, ModelProto, NodeProto, OperatorSetIdProto,
};

/// Calls nested deeper than this are refused (the specification forbids recursion; a malformed
/// model could still hold it).
const MAX_DEPTH: usize = 64;

/// One inlined call.
#[derive(Debug, Clone, PartialEq)]
pub struct Call {
    /// The function called, an index into the model's `functions`.
    pub function: usize,
    /// Whether the call's nodes landed in the main graph (not in a branch or a body).
    pub in_main: bool,
    /// The name in the copy of each value of the function body (formal inputs, node outputs).
    pub names: HashMap<String, String>,
}

/// A copy of a model with every call of a local function inlined, and the calls made.
#[derive(Debug, Clone)]
pub struct Inlined {
    pub proto: ModelProto,
    pub calls: Vec<Call>,
}

/// `proto` with every call of its local functions inlined; `None` when it calls none.
pub fn inline_functions(proto: &ModelProto) -> Result<Option<Inlined>> {
    if proto.functions.is_empty() {
        return Ok(None);
    }
    let mut copy = proto.clone();
    let functions = std::mem::take(&mut copy.functions);
    let mut taken = BTreeSet::new();
    collect_names(&copy, &mut taken);
    let mut inliner = Inliner {
        functions: &functions,
        opsets: copy.opset_import.clone(),
        calls: Vec::new(),
        taken,
    };
    let Some(graph) = copy.graph.as_mut() else {
        bail!("the model has no graph");
    };
    inliner.graph(graph, true, 0)?;
    if inliner.calls.is_empty() {
        return Ok(None);
    }
    copy.opset_import = inliner.opsets;
    Ok(Some(Inlined {
        proto: copy,
        calls: inliner.calls,
    }))
}

struct Inliner<'f> {
    functions: &'f [FunctionProto],
    opsets: Vec<OperatorSetIdProto>,
    calls: Vec<Call>,
    /// Every value and node name in use, so new ones never clash.
    taken: BTreeSet<String>,
}

impl Inliner<'_> {
    /// Inlines every call of `graph`'s nodes, and of their subgraphs.
    fn graph(&mut self, graph: &mut GraphProto, in_main: bool, depth: usize) -> Result<()> {
        let nodes = std::mem::take(&mut graph.node);
        graph.node = self.nodes(nodes, in_main, depth)?;
        Ok(())
    }

    fn nodes(
        &mut self,
        nodes: Vec<NodeProto>,
        in_main: bool,
        depth: usize,
    ) -> Result<Vec<NodeProto>> {
        let mut out = Vec::with_capacity(nodes.len());
        for mut node in nodes {
            match self.callee(&node) {
                Some(f) => {
                    if depth >= MAX_DEPTH {
                        bail!(
                            "local function calls nest deeper than {MAX_DEPTH} at node '{}'",
                            node.name()
                        );
                    }
                    let body = self.expand(f, &node, in_main)?;
                    out.extend(self.nodes(body, in_main, depth + 1)?);
                }
                None => {
                    for a in &mut node.attribute {
                        for g in a.g.iter_mut().chain(a.graphs.iter_mut()) {
                            self.graph(g, false, depth)?;
                        }
                    }
                    out.push(node);
                }
            }
        }
        Ok(out)
    }

    /// The local function `node` calls.
    fn callee(&self, node: &NodeProto) -> Option<usize> {
        self.functions.iter().position(|f| {
            f.name() == node.op_type()
                && f.domain() == node.domain()
                && f.overload() == node.overload()
        })
    }

    /// The body of function `f` for the call `call`: renamed, bound and with attributes resolved.
    fn expand(&mut self, f: usize, call: &NodeProto, in_main: bool) -> Result<Vec<NodeProto>> {
        let function = &self.functions[f];
        self.import_opsets(function)?;
        let k = self.calls.len();
        let prefix = self.fresh_prefix(k, function.name());
        let mut names: HashMap<String, String> = HashMap::new();
        for (i, formal) in function.input.iter().enumerate() {
            let actual = call.input.get(i).cloned().unwrap_or_default();
            names.insert(formal.clone(), actual);
        }
        for (i, formal) in function.output.iter().enumerate() {
            let actual = call
                .output
                .get(i)
                .filter(|o| !o.is_empty())
                .cloned()
                .unwrap_or_else(|| format!("{prefix}{formal}"));
            names.insert(formal.clone(), actual);
        }
        let rename = |name: &str, names: &HashMap<String, String>| -> String {
            if name.is_empty() {
                return String::new();
            }
            names
                .get(name)
                .cloned()
                .unwrap_or_else(|| format!("{prefix}{name}"))
        };
        let mut body = function.node.clone();
        for node in &mut body {
            for o in &node.output {
                if !o.is_empty() && !names.contains_key(o) {
                    names.insert(o.clone(), format!("{prefix}{o}"));
                }
            }
        }
        for node in &mut body {
            rename_node(node, &|n| rename(n, &names));
            node.name = Some(format!("{prefix}{}", node.name()));
            resolve_attributes(&mut node.attribute, call, function);
        }
        self.calls.push(Call {
            function: f,
            in_main,
            names,
        });
        Ok(body)
    }

    /// A prefix no name of the model starts with: `f{k}|NAME|`, salted on a clash.
    fn fresh_prefix(&mut self, k: usize, name: &str) -> String {
        let mut prefix = format!("f{k}|{name}|");
        while self
            .taken
            .range(prefix.clone()..)
            .next()
            .is_some_and(|t| t.starts_with(&prefix))
        {
            prefix.insert(0, '_');
        }
        self.taken.insert(prefix.clone());
        prefix
    }

    /// Adds the function's opset imports to the model's; a version that differs is refused.
    fn import_opsets(&mut self, function: &FunctionProto) -> Result<()> {
        for o in &function.opset_import {
            match self.opsets.iter().find(|m| m.domain() == o.domain()) {
                Some(m) if m.version() != o.version() => bail!(
                    "local function '{}' imports opset {} of domain '{}' but the model imports {}: \
                     one graph binds one version per domain, so it is not inlined",
                    function.name(),
                    o.version(),
                    o.domain(),
                    m.version()
                ),
                Some(_) => {}
                None => self.opsets.push(o.clone()),
            }
        }
        Ok(())
    }
}

/// Renames every value `node` reads and writes, in its subgraphs too.
fn rename_node(node: &mut NodeProto, rename: &dyn Fn(&str) -> String) {
    for s in node.input.iter_mut().chain(node.output.iter_mut()) {
        *s = rename(s);
    }
    for a in &mut node.attribute {
        for g in a.g.iter_mut().chain(a.graphs.iter_mut()) {
            rename_graph(g, rename);
        }
    }
}

fn rename_graph(graph: &mut GraphProto, rename: &dyn Fn(&str) -> String) {
    for v in graph
        .input
        .iter_mut()
        .chain(graph.output.iter_mut())
        .chain(graph.value_info.iter_mut())
    {
        v.name = v.name.as_deref().map(rename);
    }
    for t in &mut graph.initializer {
        t.name = t.name.as_deref().map(rename);
    }
    for node in &mut graph.node {
        rename_node(node, rename);
    }
}

/// Resolves attribute references (`ref_attr_name`) against the call's attributes, then the
/// function's defaults; an unresolved reference is left out. Subgraphs are resolved too.
fn resolve_attributes(attrs: &mut Vec<AttributeProto>, call: &NodeProto, function: &FunctionProto) {
    let mut kept = Vec::with_capacity(attrs.len());
    for mut a in attrs.drain(..) {
        match a.ref_attr_name.clone() {
            Some(r) => {
                let given = call
                    .attribute
                    .iter()
                    .find(|c| c.name() == r)
                    .or_else(|| function.attribute_proto.iter().find(|d| d.name() == r));
                if let Some(given) = given {
                    let mut value = given.clone();
                    value.name = a.name.clone();
                    value.ref_attr_name = None;
                    kept.push(value);
                }
            }
            None => {
                for g in a.g.iter_mut().chain(a.graphs.iter_mut()) {
                    for n in &mut g.node {
                        resolve_attributes(&mut n.attribute, call, function);
                    }
                }
                kept.push(a);
            }
        }
    }
    *attrs = kept;
}

/// Every value and node name of the model's graphs (function bodies aside).
fn collect_names(proto: &ModelProto, out: &mut BTreeSet<String>) {
    fn graph(g: &GraphProto, out: &mut BTreeSet<String>) {
        out.extend(
            g.input
                .iter()
                .chain(&g.output)
                .map(|v| v.name().to_string()),
        );
        out.extend(g.initializer.iter().map(|t| t.name().to_string()));
        for n in &g.node {
            out.extend(n.input.iter().chain(&n.output).cloned());
            out.insert(n.name().to_string());
            for a in &n.attribute {
                for sg in a.g.iter().chain(&a.graphs) {
                    graph(sg, out);
                }
            }
        }
    }
    if let Some(g) = &proto.graph {
        graph(g, out);
    }
}
