//! A Loop node of the main graph unrolled into copies of its body, for running a copy of a model
//! (tract 0.23.9 has no Loop). The model itself is never changed.
//!
//! ONNX operator specification, Loop: inputs `M` (trip count), `cond`, then the N loop-carried
//! initial values; the body takes (iteration_num, condition, N carried values) and gives
//! (condition, N carried values, K scan outputs); the Loop's outputs are the N final carried
//! values, then the K scan outputs, each the per-iteration values stacked along a new first axis.
//!
//! A Loop unrolls when its condition is constant true (absent, or a constant true, and the body
//! gives back its condition input or a constant true) and its trip count is known: iteration k's
//! copy reads iteration_num = k (an int64 scalar) and the previous copy's carried values; scan
//! outputs are stacked with Unsqueeze and Concat.

use std::collections::HashMap;

use anyhow::{Context, Result, bail, ensure};

use super::builder::{attr_i, attr_ints, attr_t, node};
use super::proto::{GraphProto, NodeProto, TensorProto, tensor_proto::DataType};

/// Whether a Loop can be unrolled once its trip count is known; why not.
pub fn check(graph: &GraphProto, loop_node: &NodeProto) -> Result<(), String> {
    let body = body(loop_node).map_err(|e| e.to_string())?;
    let cond_in = loop_node.input.get(1).map_or("", String::as_str);
    if !cond_in.is_empty() && !constant_true(graph, None, cond_in, None) {
        return Err(format!(
            "its condition input '{cond_in}' is not a constant true"
        ));
    }
    let body_cond_in = body.input.get(1).map_or("", |v| v.name());
    let body_cond_out = body.output.first().map_or("", |v| v.name());
    if !constant_true(graph, Some(body), body_cond_out, Some(body_cond_in)) {
        return Err(format!(
            "its body computes the condition '{body_cond_out}', so when it stops is known only \
             while running"
        ));
    }
    if loop_node.input.first().is_none_or(|m| m.is_empty()) {
        return Err("it has no trip count".into());
    }
    Ok(())
}

/// The Loop's body graph.
fn body(loop_node: &NodeProto) -> Result<&GraphProto> {
    loop_node
        .attribute
        .iter()
        .find(|a| a.name() == "body")
        .and_then(|a| a.g.as_ref())
        .context("the Loop has no body")
}

/// Whether `name` is a constant true: a Constant node or an initializer holding a single true
/// (or nonzero) value, or the body's condition input `passed` (itself constant true), possibly
/// through Identity nodes, in `body` then in `graph`.
fn constant_true(
    graph: &GraphProto,
    body: Option<&GraphProto>,
    name: &str,
    passed: Option<&str>,
) -> bool {
    let scopes: Vec<&GraphProto> = body.into_iter().chain([graph]).collect();
    let mut name = name.to_string();
    for _ in 0..64 {
        if passed.is_some_and(|p| !p.is_empty() && p == name) {
            return true;
        }
        let producer = scopes
            .iter()
            .find_map(|g| g.node.iter().find(|n| n.output.contains(&name)));
        match producer {
            Some(n) if n.op_type() == "Identity" => match n.input.first() {
                Some(i) => name.clone_from(i),
                None => return false,
            },
            Some(n) if n.op_type() == "Constant" => {
                return n
                    .attribute
                    .iter()
                    .find(|a| a.name() == "value")
                    .and_then(|a| a.t.as_ref())
                    .is_some_and(single_true);
            }
            Some(_) => return false,
            None => {
                return scopes
                    .iter()
                    .find_map(|g| g.initializer.iter().find(|t| t.name() == name))
                    .is_some_and(single_true);
            }
        }
    }
    false
}

/// A tensor of one element that is true (any nonzero value).
fn single_true(t: &TensorProto) -> bool {
    if t.dims.iter().product::<i64>() != 1 {
        return false;
    }
    super::tensor::read(t, std::path::Path::new(""), 1)
        .is_ok_and(|v| v.data.first().is_some_and(|&x| x != 0.0))
}

/// The main graph's Loop node at `at` replaced by `trips` copies of its body; `tag` makes its
/// names unique (`{tag}|{k}|NAME` for iteration k); `opset` is the model's default-domain opset
/// (Unsqueeze takes its axes as an input from 13 on). Returns, per iteration, the name in the
/// graph of each body value.
pub fn unroll(
    graph: &mut GraphProto,
    at: usize,
    trips: usize,
    tag: &str,
    opset: i64,
) -> Result<Vec<HashMap<String, String>>> {
    let loop_node = graph.node[at].clone();
    check(graph, &loop_node).map_err(|e| anyhow::anyhow!(e))?;
    let body = body(&loop_node)?;
    let carried = body.input.len().saturating_sub(2);
    ensure!(
        loop_node.input.len() >= 2 + carried,
        "the Loop gives {} carried values, its body takes {carried}",
        loop_node.input.len().saturating_sub(2)
    );
    let scans = body.output.len().saturating_sub(1 + carried);
    if trips == 0 && scans > 0 {
        bail!("zero iterations leave its scan outputs without a shape");
    }
    let mut nodes: Vec<NodeProto> = Vec::new();
    let mut inits: Vec<TensorProto> = Vec::new();
    let mut state: Vec<String> = loop_node.input[2..2 + carried].to_vec();
    let mut stacked: Vec<Vec<String>> = vec![Vec::new(); scans];
    let mut instances = Vec::with_capacity(trips);
    for k in 0..trips {
        let prefix = format!("{tag}|{k}|");
        let mut names: HashMap<String, String> = HashMap::new();
        let iter_name = format!("{prefix}iteration_num");
        let cond_name = format!("{prefix}condition");
        nodes.push(node(
            "Constant",
            &iter_name,
            &[],
            &[&iter_name],
            vec![attr_t("value", int64_scalar(k as i64))],
        ));
        nodes.push(node(
            "Constant",
            &cond_name,
            &[],
            &[&cond_name],
            vec![attr_t("value", bool_scalar())],
        ));
        if let Some(i) = body.input.first() {
            names.insert(i.name().to_string(), iter_name);
        }
        if let Some(i) = body.input.get(1) {
            names.insert(i.name().to_string(), cond_name);
        }
        for (i, v) in body.input.iter().skip(2).enumerate() {
            names.insert(v.name().to_string(), state[i].clone());
        }
        for n in &body.node {
            for o in n.output.iter().filter(|o| !o.is_empty()) {
                names.insert(o.clone(), format!("{prefix}{o}"));
            }
        }
        for t in &body.initializer {
            names.insert(t.name().to_string(), format!("{prefix}{}", t.name()));
        }
        let local = |n: &str| -> String {
            if n.is_empty() {
                return String::new();
            }
            names.get(n).cloned().unwrap_or_else(|| n.to_string())
        };
        for t in &body.initializer {
            let mut t = t.clone();
            t.name = Some(local(t.name()));
            inits.push(t);
        }
        for n in &body.node {
            let mut n = n.clone();
            for s in n.input.iter_mut().chain(n.output.iter_mut()) {
                *s = local(s);
            }
            for a in &mut n.attribute {
                for g in a.g.iter_mut().chain(a.graphs.iter_mut()) {
                    rename_free(g, &local);
                }
            }
            n.name = Some(format!("{prefix}{}", n.name()));
            nodes.push(n);
        }
        state = (0..carried)
            .map(|i| local(body.output[1 + i].name()))
            .collect();
        for (s, out) in stacked.iter_mut().enumerate() {
            let value = local(body.output[1 + carried + s].name());
            let one = format!("{prefix}{value}|stacked");
            nodes.push(unsqueeze(&value, &one, opset, &mut inits, &prefix));
            out.push(one);
        }
        instances.push(names);
    }
    for (i, out) in loop_node.output.iter().enumerate() {
        if out.is_empty() {
            continue;
        }
        let name = format!("{tag}|out{i}");
        if i < carried {
            nodes.push(node("Identity", &name, &[&state[i]], &[out], vec![]));
        } else if let Some(parts) = stacked.get(i - carried) {
            let parts: Vec<&str> = parts.iter().map(String::as_str).collect();
            nodes.push(node(
                "Concat",
                &name,
                &parts,
                &[out],
                vec![attr_i("axis", 0)],
            ));
        }
    }
    graph.node.splice(at..=at, nodes);
    graph.initializer.extend(inits);
    Ok(instances)
}

/// Renames the values a nested subgraph reads from the body (names it does not define).
fn rename_free(g: &mut GraphProto, rename: &dyn Fn(&str) -> String) {
    let mut free = Vec::new();
    super::index::free_names(g, &mut free);
    let map: HashMap<String, String> = free
        .into_iter()
        .map(|n| (n.to_string(), rename(n)))
        .collect();
    rename_in(g, &map);
}

fn rename_in(g: &mut GraphProto, map: &HashMap<String, String>) {
    for n in &mut g.node {
        for s in n.input.iter_mut() {
            if let Some(r) = map.get(s.as_str()) {
                s.clone_from(r);
            }
        }
        for a in &mut n.attribute {
            for sg in a.g.iter_mut().chain(a.graphs.iter_mut()) {
                rename_in(sg, map);
            }
        }
    }
    for o in &mut g.output {
        if let Some(r) = o.name.as_deref().and_then(|n| map.get(n)) {
            o.name = Some(r.clone());
        }
    }
}

/// `Unsqueeze(value)` on axis 0 into `out`, in the form `opset` takes.
fn unsqueeze(
    value: &str,
    out: &str,
    opset: i64,
    inits: &mut Vec<TensorProto>,
    prefix: &str,
) -> NodeProto {
    if opset >= 13 {
        let axes = format!("{prefix}{value}|axes");
        inits.push(TensorProto {
            name: Some(axes.clone()),
            dims: vec![1],
            data_type: Some(DataType::Int64 as i32),
            int64_data: vec![0],
            ..Default::default()
        });
        node("Unsqueeze", out, &[value, &axes], &[out], vec![])
    } else {
        node(
            "Unsqueeze",
            out,
            &[value],
            &[out],
            vec![attr_ints("axes", &[0])],
        )
    }
}

fn int64_scalar(v: i64) -> TensorProto {
    TensorProto {
        data_type: Some(DataType::Int64 as i32),
        int64_data: vec![v],
        ..Default::default()
    }
}

fn bool_scalar() -> TensorProto {
    TensorProto {
        data_type: Some(DataType::Bool as i32),
        int32_data: vec![1],
        ..Default::default()
    }
}
