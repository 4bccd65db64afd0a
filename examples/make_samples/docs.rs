//! What the samples hold, written out twice from the same records: `manifest.json` for tests and
//! scripts, `README.md` for people.

use std::fmt::Write as _;

use actswap::onnx::proto::{AttributeProto, attribute_proto::AttributeType};
use serde_json::{Value, json};

use crate::calibrate::{BATCH, TARGET_BOUND, TARGET_SHARE};
use crate::models::Sample;
use crate::net::{NearMiss, Param, Site};

/// The command that regenerates the folder.
pub const COMMAND: &str = "cargo run --example make_samples";

/// Versions that decide the bytes written (read from Cargo.lock).
pub fn versions() -> Value {
    let lock: toml::Table = toml::from_str(include_str!("../../Cargo.lock")).expect("Cargo.lock");
    let packages = lock["package"].as_array().expect("packages");
    let find = |name: &str, prefix: &str| {
        packages
            .iter()
            .filter(|p| p["name"].as_str() == Some(name))
            .filter_map(|p| p["version"].as_str())
            .find(|v| v.starts_with(prefix))
            .unwrap_or("?")
            .to_string()
    };
    json!({
        "actswap": env!("CARGO_PKG_VERSION"),
        "rand": find("rand", "0.9."),
        "rand_distr": find("rand_distr", "0.5."),
        "tract-onnx": find("tract-onnx", ""),
    })
}

/// The manifest: generator, versions, calibration and, per model, its sites and near misses.
pub fn manifest(samples: &[Sample], sizes: &[usize]) -> Value {
    let models: Vec<Value> = samples
        .iter()
        .zip(sizes)
        .map(|(s, &bytes)| {
            json!({
                "file": s.about.file,
                "scenario": s.about.scenario,
                "description": s.about.description,
                "opset": s.about.opset,
                "ir_version": s.proto.ir_version,
                "file_bytes": bytes,
                "seeds": {"weights": s.about.seed, "calibration_input": s.about.seed + 1000},
                "inputs": [io_json(&s.about.input)],
                "outputs": [io_json(&s.about.output)],
                "sites": s.record.sites.iter().enumerate().map(|(i, site)| site_json(i, site)).collect::<Vec<_>>(),
                "near_misses": s.record.near_misses.iter().map(near_miss_json).collect::<Vec<_>>(),
            })
        })
        .collect();
    json!({
        "generator": "examples/make_samples",
        "command": COMMAND,
        "versions": versions(),
        "calibration": {
            "what": "each layer's weight and bias scaled in graph order until `share` of the tensor it feeds lies within +-`bound`",
            "share": TARGET_SHARE,
            "bound": TARGET_BOUND,
            "input": format!("standard normal, batch {BATCH}, seeded StdRng (seed in seeds.calibration_input)"),
            "runtime": "tract-onnx",
        },
        "rules": {
            "site": "nodes computing `output` from `input`; Constant nodes feeding them are listed apart in constant_nodes",
            "nested": "activation ops inside a larger site (Sigmoid in SiLU, Tanh in Mish, Clip in hard-swish) belong to that site",
            "params": "values the formula uses, ONNX defaults included; `attributes` lists what the fused op spells out",
            "near_miss": "no reported site may have the near miss's output with a kind in not_kinds",
            "graph": "`main`, or `main/<node>.<attribute>` for a subgraph",
        },
        "models": models,
    })
}

fn io_json((name, dims): &(&str, Vec<i64>)) -> Value {
    let shape: Vec<Value> = dims
        .iter()
        .map(|&d| if d < 0 { json!("batch") } else { json!(d) })
        .collect();
    json!({"name": name, "elem_type": "FLOAT", "shape": shape})
}

fn param_json(p: &Param) -> Value {
    match p {
        Param::Scalar(v) => json!(*v as f64),
        Param::PerChannel(v) => json!(v.iter().map(|&x| x as f64).collect::<Vec<_>>()),
    }
}

fn attribute_json(a: &AttributeProto) -> Value {
    match a.r#type() {
        AttributeType::Float => json!(a.f() as f64),
        AttributeType::Int => json!(a.i()),
        AttributeType::String => json!(String::from_utf8_lossy(a.s())),
        other => json!(format!("{other:?}")),
    }
}

fn site_json(i: usize, s: &Site) -> Value {
    let params: serde_json::Map<String, Value> = s
        .params
        .iter()
        .map(|(k, p)| (k.to_string(), param_json(p)))
        .collect();
    let attributes: serde_json::Map<String, Value> = s
        .attributes
        .iter()
        .map(|a| (a.name().to_string(), attribute_json(a)))
        .collect();
    json!({
        "id": format!("s{i:02}"),
        "kind": s.kind,
        "form": s.form,
        "params": params,
        "attributes": if s.form == "fused" { Value::Object(attributes) } else { Value::Null },
        "pattern": s.pattern,
        "nodes": s.nodes,
        "constant_nodes": s.constant_nodes,
        "constants": s.constants,
        "shared_constants": s.shared_constants,
        "input": s.input,
        "output": s.output,
        "graph": s.graph,
    })
}

fn near_miss_json(m: &NearMiss) -> Value {
    json!({
        "not_kinds": m.not_kinds,
        "reason": m.reason,
        "inputs": m.inputs,
        "output": m.output,
        "pattern": m.pattern,
        "nodes": m.nodes,
        "graph": m.graph,
    })
}

/// A parameter as the README shows it.
fn param_text(name: &str, p: &Param) -> String {
    match p {
        Param::Scalar(v) => format!("{name}={v}"),
        Param::PerChannel(v) => {
            let lo = v.iter().copied().fold(f32::INFINITY, f32::min);
            let hi = v.iter().copied().fold(f32::NEG_INFINITY, f32::max);
            format!("{name} per channel ({} values, {lo:.3}..{hi:.3})", v.len())
        }
    }
}

fn params_text(s: &Site) -> String {
    if s.params.is_empty() {
        return "-".into();
    }
    let mut parts: Vec<String> = s.params.iter().map(|(k, p)| param_text(k, p)).collect();
    let from_attributes = s.constants.is_empty() && s.constant_nodes.is_empty();
    if s.form == "fused" && from_attributes && s.attributes.is_empty() {
        parts.push("(op defaults)".into());
    }
    parts.join(", ")
}

fn shape_text((name, dims): &(&str, Vec<i64>)) -> String {
    let d: Vec<String> = dims
        .iter()
        .map(|&d| {
            if d < 0 {
                "batch".to_string()
            } else {
                d.to_string()
            }
        })
        .collect();
    format!("`{name}` [{}]", d.join(","))
}

fn where_text(s: &Site) -> String {
    if s.graph == "main" {
        format!("`{}` -> `{}`", s.input, s.output)
    } else {
        format!("`{}` -> `{}` in `{}`", s.input, s.output, s.graph)
    }
}

const INTRO: &str = "# Sample models

Small ONNX models in invented scenarios, each holding activation functions in the
forms exporters write: fused ops, primitive decompositions, and near misses that look
like an activation but are not one. Weights are random: the models compute nothing
useful and serve as demo inputs and as test cases whose true activation sites are
known by construction.

Regenerate them (byte-identical with the versions in `manifest.json`) with

    cargo run --example make_samples

and check them with the onnx checker (full check), onnxruntime and the activation
formulas with

    python3 scripts/check_samples.py

`manifest.json` lists every site with its kind, form, parameters, nodes, constants,
input and output tensors and graph; the tables below say the same for people.
Each layer's weights are scaled so that, on standard-normal inputs, 99% of the
tensor it feeds (an activation's input) lies in -4..4. Intermediate tensors carry readable
names and no value_info; the batch dimension is the symbolic `batch`.

Drift measured on these models, or on any sample inputs, certifies nothing about a
real model in a safety-relevant role; such models need their own domain's validation.
";

/// The README: an overview table, then each model's sites and near misses.
pub fn readme(samples: &[Sample], sizes: &[usize]) -> String {
    let mut out = String::from(INTRO);
    out.push_str("\n## Overview\n\n");
    out.push_str("| file | scenario | opset (IR) | input -> output | size | activation sites |\n");
    out.push_str("|---|---|---|---|---|---|\n");
    for (s, bytes) in samples.iter().zip(sizes) {
        let sites: Vec<String> = s
            .record
            .sites
            .iter()
            .map(|site| format!("{} ({})", site.kind, site.form))
            .collect();
        let _ = writeln!(
            out,
            "| `{}` | {} | {} ({}) | {} -> {} | {:.1} KB | {}: {} |",
            s.about.file,
            s.about.scenario,
            s.about.opset,
            s.proto.ir_version(),
            shape_text(&s.about.input),
            shape_text(&s.about.output),
            *bytes as f64 / 1000.0,
            sites.len(),
            sites.join(", "),
        );
    }
    for s in samples {
        let _ = write!(
            out,
            "\n## `{}`\n\n{}. Opset {}, IR version {}.\n\n",
            s.about.file,
            s.about.description,
            s.about.opset,
            s.proto.ir_version()
        );
        out.push_str("| id | kind | form | params | ops | input -> output |\n");
        out.push_str("|---|---|---|---|---|---|\n");
        for (i, site) in s.record.sites.iter().enumerate() {
            let _ = writeln!(
                out,
                "| s{i:02} | {} | {} | {} | {} | {} |",
                site.kind,
                site.form,
                params_text(site),
                site.pattern.join(", "),
                where_text(site)
            );
        }
        if !s.record.near_misses.is_empty() {
            out.push_str("\nNear misses (must not be reported as the kinds named):\n\n");
            for m in &s.record.near_misses {
                let _ = writeln!(
                    out,
                    "- `{}` ({}): not {}; {}.",
                    m.output,
                    m.pattern.join(", "),
                    m.not_kinds.join(" or "),
                    m.reason
                );
            }
        }
        if let Some(note) = notes(s.about.file) {
            let _ = writeln!(out, "\n{note}");
        }
    }
    out
}

/// What a table cannot say about a model.
fn notes(file: &str) -> Option<&'static str> {
    match file {
        "orchard-grader.onnx" => Some(
            "`block1.bn.mul` and `block1.bn` are a folded batch norm (per-channel Mul then Add) \
             right before the per-channel swish: they are not part of the site, whose input is \
             `block1.bn`. The ReLU6 Clip takes its bounds from Constant nodes.",
        ),
        "pump-vibration.onnx" => Some(
            "Both GELU sites read the same initializers `gelu.half` (0.5) and `gelu.one` (1.0); a \
             rewrite of one site must leave them in place for the other. The swish beta 1.702 \
             comes from a Constant node.",
        ),
        "door-chime-keywords.onnx" => Some(
            "`branch.if` picks its branch from the data: `branch.cond` = mean(`mfcc`) > 0. The \
             then-branch applies SiLU and the else-branch ReLU to the outer-scope tensor \
             `mix.conv`; the If output is `branch.act`. Inputs shifted by +0.5 or -0.5 take \
             one branch or the other.",
        ),
        "greenhouse-climate.onnx" => Some(
            "Layers alternate Gemm (odd `denseNN`) and MatMul + Add (even). tract 0.23.9 computes \
             Celu with alpha != 1 wrongly, so from `dense09.act` on its values differ from \
             onnxruntime's, which match the ONNX formula.",
        ),
        "beehive-acoustics.onnx" => Some(
            "`block1.act` is x * HardSigmoid(x) at the ONNX defaults (alpha 0.2, beta 0.5): it \
             equals x * clip(0.2x + 0.5, 0, 1), not hard-swish (alpha 1/6). The SiLU at \
             `block2.act` is written Mul(sigmoid(x), x), operands the other way round. tract \
             0.23.9 runs the Swish op as if alpha were 1, so its `stem.act` differs from \
             onnxruntime's, which matches the ONNX formula.",
        ),
        _ => None,
    }
}
