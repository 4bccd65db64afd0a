//! What `actswap info` shows: a model's header, opsets, op counts, typed inputs and outputs,
//! initializer totals, subgraphs and functions.

use std::collections::BTreeMap;
use std::fmt::Write;

use schemars::JsonSchema;
use serde::Serialize;

use super::index::{GraphKind, ModelIndex};
use super::proto::{ValueInfoProto, tensor_proto::DataType};
use super::tensor;
use crate::schema_version::SchemaVersion;
use crate::text::escape;

/// What `actswap info` shows (`--json`).
#[derive(Debug, Serialize, JsonSchema)]
pub struct Summary {
    pub schema_version: SchemaVersion,
    pub model: String,
    pub ir_version: i64,
    pub producer_name: String,
    pub producer_version: String,
    pub domain: String,
    pub model_version: i64,
    pub opsets: BTreeMap<String, i64>,
    pub graph: GraphSummary,
    pub subgraphs: Vec<GraphSummary>,
    pub functions: Vec<GraphSummary>,
    pub external_data: Vec<String>,
}

#[derive(Debug, Serialize, JsonSchema)]
pub struct GraphSummary {
    pub path: String,
    pub nodes: usize,
    /// Node count per op type; ops outside the default domain are keyed `domain:OpType`.
    pub op_counts: BTreeMap<String, usize>,
    pub inputs: Vec<ValueSummary>,
    pub outputs: Vec<ValueSummary>,
    pub initializers: usize,
    pub initializer_bytes: u64,
}

#[derive(Debug, Serialize, JsonSchema)]
pub struct ValueSummary {
    pub name: String,
    /// The TensorProto data type name (FLOAT, INT64, ...), or null when not a typed tensor.
    pub elem_type: Option<String>,
    /// Dimensions: a number, a symbolic name, or null when unknown; null for unknown rank.
    pub shape: Option<Vec<serde_json::Value>>,
}

impl Summary {
    pub fn of(index: &ModelIndex) -> anyhow::Result<Summary> {
        let m = index.model.proto();
        let graphs = |pick: fn(&GraphKind) -> bool| {
            index
                .graphs
                .iter()
                .filter(|g| pick(&g.kind))
                .map(graph_summary)
                .collect::<Vec<_>>()
        };
        Ok(Summary {
            schema_version: SchemaVersion,
            model: index.model.path().display().to_string(),
            ir_version: m.ir_version(),
            producer_name: m.producer_name().into(),
            producer_version: m.producer_version().into(),
            domain: m.domain().into(),
            model_version: m.model_version(),
            opsets: index.opsets(),
            graph: graph_summary(index.main()),
            subgraphs: graphs(|k| matches!(k, GraphKind::Subgraph { .. })),
            functions: graphs(|k| matches!(k, GraphKind::Function { .. })),
            external_data: index.model.external_locations()?.into_iter().collect(),
        })
    }

    /// The readable form.
    pub fn render(&self) -> String {
        let mut s = String::new();
        let opsets: Vec<String> = self
            .opsets
            .iter()
            .map(|(d, v)| format!("{} {v}", escape(if d.is_empty() { "ai.onnx" } else { d })))
            .collect();
        let _ = writeln!(s, "model         {}", escape(&self.model));
        let _ = writeln!(
            s,
            "ir_version    {}   producer {} {}",
            self.ir_version,
            escape(&self.producer_name),
            escape(&self.producer_version)
        );
        let _ = writeln!(s, "opsets        {}", opsets.join(", "));
        render_graph(&mut s, &self.graph, true);
        for g in &self.subgraphs {
            let _ = writeln!(s, "\nsubgraph {}", escape(&g.path));
            render_graph(&mut s, g, false);
        }
        for g in &self.functions {
            let _ = writeln!(s, "\n{}", escape(&g.path));
            render_graph(&mut s, g, false);
        }
        if !self.external_data.is_empty() {
            let shown: Vec<_> = self.external_data.iter().map(|l| escape(l)).collect();
            let _ = writeln!(s, "\nexternal data {}", shown.join(", "));
        }
        s
    }
}

fn render_graph(s: &mut String, g: &GraphSummary, main: bool) {
    for (label, values) in [("inputs", &g.inputs), ("outputs", &g.outputs)] {
        for (i, v) in values.iter().enumerate() {
            let head = if i == 0 { label } else { "" };
            let _ = writeln!(s, "{head:<13} {}", value_text(v));
        }
    }
    if main || g.initializers > 0 {
        let _ = writeln!(
            s,
            "initializers  {} ({})",
            g.initializers,
            human_bytes(g.initializer_bytes)
        );
    }
    let ops: Vec<String> = g
        .op_counts
        .iter()
        .map(|(op, n)| format!("{} {n}", escape(op)))
        .collect();
    let _ = writeln!(s, "nodes         {}: {}", g.nodes, ops.join(", "));
}

fn value_text(v: &ValueSummary) -> String {
    let ty = v.elem_type.as_deref().unwrap_or("?");
    let shape = match &v.shape {
        None => "[?]".to_string(),
        Some(dims) => {
            let d: Vec<String> = dims
                .iter()
                .map(|d| match d {
                    serde_json::Value::String(s) => escape(s).into_owned(),
                    serde_json::Value::Null => "?".into(),
                    other => other.to_string(),
                })
                .collect();
            format!("[{}]", d.join(", "))
        }
    };
    format!("{} {ty} {shape}", escape(&v.name))
}

fn human_bytes(n: u64) -> String {
    match n {
        n if n >= 1 << 30 => format!("{:.1} GiB", n as f64 / (1u64 << 30) as f64),
        n if n >= 1 << 20 => format!("{:.1} MiB", n as f64 / (1u64 << 20) as f64),
        n if n >= 1 << 10 => format!("{:.1} KiB", n as f64 / 1024.0),
        n => format!("{n} B"),
    }
}

fn graph_summary(g: &super::index::GraphIndex) -> GraphSummary {
    let mut op_counts = BTreeMap::new();
    for n in g.nodes {
        let key = match n.domain() {
            "" | "ai.onnx" => n.op_type().to_string(),
            d => format!("{d}:{}", n.op_type()),
        };
        *op_counts.entry(key).or_insert(0) += 1;
    }
    let values = |names: &[&str]| {
        names
            .iter()
            .map(|&name| value_summary(name, g.value_info(name)))
            .collect()
    };
    let inits: Vec<_> = g.initializers().collect();
    GraphSummary {
        path: g.path.clone(),
        nodes: g.nodes.len(),
        op_counts,
        inputs: values(&g.inputs),
        outputs: values(&g.outputs),
        initializers: inits.len(),
        initializer_bytes: inits.iter().map(|t| tensor::stored_bytes(t)).sum(),
    }
}

fn value_summary(name: &str, vi: Option<&ValueInfoProto>) -> ValueSummary {
    let tensor = vi
        .and_then(|v| v.r#type.as_ref())
        .and_then(|t| t.tensor_type.as_ref());
    ValueSummary {
        name: name.to_string(),
        elem_type: tensor
            .and_then(|t| t.elem_type)
            .map(|c| DataType::try_from(c).map_or(format!("{c}"), |d| d.as_str_name().into())),
        shape: tensor.and_then(|t| t.shape.as_ref()).map(|s| {
            s.dim
                .iter()
                .map(|d| match (&d.dim_value, &d.dim_param) {
                    (Some(v), _) => serde_json::Value::from(*v),
                    (None, Some(p)) => serde_json::Value::from(p.clone()),
                    _ => serde_json::Value::Null,
                })
                .collect()
        }),
    }
}
