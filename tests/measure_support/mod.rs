//! Shared by the measure tests and the drift benchmark: the torch fixtures (torch 2.15 exports
//! with onnxruntime outputs, see tests/fixtures/torch/manifest.json) and rewrites made by hand
//! with the crate's protobuf types, each keeping the site's output name.

#![allow(dead_code)]

use std::collections::HashSet;
use std::path::{Path, PathBuf};

use actswap::onnx::builder::{attr_f, node, tensor_f32};
use actswap::onnx::proto::{NodeProto, TensorProto};
use actswap::onnx::{Model, ModelIndex};
use actswap::run::inputs::{Binding, InputLoader};
use actswap::run::{Sample, prepare};
use actswap::scan::{self, Site};

/// The folder of a torch fixture.
pub fn fixture_dir(id: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures/torch")
        .join(id)
}

/// Ids of the torch fixtures that have a model and inputs.
pub fn fixture_ids() -> Vec<String> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/torch");
    let manifest: serde_json::Value =
        serde_json::from_slice(&std::fs::read(root.join("manifest.json")).unwrap()).unwrap();
    manifest["models"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|m| m.get("files").is_some())
        .map(|m| m["id"].as_str().unwrap().to_string())
        .collect()
}

pub fn load(id: &str) -> Model {
    Model::load(&fixture_dir(id).join("model.onnx")).unwrap()
}

/// The samples of a fixture's `inputs.npz`, bound to `model`'s inputs.
pub fn samples(id: &str, model: &Model) -> Vec<Sample> {
    let tract = prepare(&model.encode(), Some(model.dir())).unwrap();
    let binding = Binding {
        input: None,
        path: fixture_dir(id).join("inputs.npz"),
    };
    InputLoader::new(tract.inputs())
        .from_bindings(&[binding])
        .unwrap()
}

/// The top-level site of `model` writing `output`.
pub fn site(model: &Model, output: &str) -> Site {
    let index = ModelIndex::build(model).unwrap();
    scan::scan(&index)
        .sites
        .into_iter()
        .find(|s| s.output == output && s.graph_index == 0)
        .unwrap_or_else(|| panic!("no site writes '{output}'"))
}

/// A copy of `model` whose site writing `output` is replaced by the nodes `make(input)` returns
/// (the last must write `output`), with their initializers, placed where the site began.
pub fn replace_site(
    model: &Model,
    output: &str,
    make: impl Fn(&str) -> (Vec<NodeProto>, Vec<TensorProto>),
) -> Model {
    let site = site(model, output);
    let (nodes, initializers) = make(&site.input);
    assert_eq!(nodes.last().unwrap().output, vec![output.to_string()]);
    let first = *site.node_indices.iter().min().unwrap();
    let removed: HashSet<usize> = site.node_indices.iter().copied().collect();
    let mut proto = model.proto().clone();
    let graph = proto.graph.as_mut().unwrap();
    let mut kept = Vec::new();
    for (i, n) in std::mem::take(&mut graph.node).into_iter().enumerate() {
        if i == first {
            kept.extend(nodes.iter().cloned());
        }
        if !removed.contains(&i) {
            kept.push(n);
        }
    }
    graph.node = kept;
    graph.initializer.extend(initializers);
    Model::from_proto(proto, model.dir().to_path_buf())
}

/// SiLU (Sigmoid + Mul) -> hard-swish as HardSigmoid(alpha = 1/6, beta = 0.5) + Mul, the ONNX
/// HardSwish function body (alpha 0.16666667163372 in the spec's float32).
pub fn silu_to_hard_swish(model: &Model, output: &str) -> Model {
    replace_site(model, output, |x| {
        let hs = format!("{output}/hard_sigmoid");
        (
            vec![
                node(
                    "HardSigmoid",
                    &format!("{output}/HardSigmoid"),
                    &[x],
                    &[&hs],
                    vec![attr_f("alpha", 1.0 / 6.0), attr_f("beta", 0.5)],
                ),
                node(
                    "Mul",
                    &format!("{output}/Mul"),
                    &[x, &hs],
                    &[output],
                    vec![],
                ),
            ],
            vec![],
        )
    })
}

/// Exact GELU -> the tanh approximation of Hendrycks & Gimpel 2016,
/// 0.5 x (1 + tanh(sqrt(2/pi) (x + 0.044715 x^3))), spelled in primitive ops (below opset 20).
pub fn gelu_to_tanh(model: &Model, output: &str) -> Model {
    replace_site(model, output, |x| {
        let t = |s: &str| format!("{output}/tanh_gelu/{s}");
        let c = |name: &str, v: f32| tensor_f32(&t(name), &[], &[v]);
        let n = |op: &str, ins: &[&str], out: &str| {
            node(op, &format!("{out}/{op}"), ins, &[out], vec![])
        };
        let (x2, x3, cubic, inner, z, th, one_th, half_x) = (
            t("x2"),
            t("x3"),
            t("cubic"),
            t("inner"),
            t("z"),
            t("tanh"),
            t("one_plus_tanh"),
            t("half_x"),
        );
        (
            vec![
                n("Mul", &[x, x], &x2),
                n("Mul", &[&x2, x], &x3),
                n("Mul", &[&x3, &t("c_cubic")], &cubic),
                n("Add", &[x, &cubic], &inner),
                n("Mul", &[&inner, &t("c_sqrt_2_over_pi")], &z),
                n("Tanh", &[&z], &th),
                n("Add", &[&th, &t("c_one")], &one_th),
                n("Mul", &[x, &t("c_half")], &half_x),
                node(
                    "Mul",
                    &format!("{output}/tanh_gelu/Mul_out"),
                    &[&half_x, &one_th],
                    &[output],
                    vec![],
                ),
            ],
            vec![
                c("c_cubic", 0.044715),
                c(
                    "c_sqrt_2_over_pi",
                    (2.0 / std::f64::consts::PI).sqrt() as f32,
                ),
                c("c_one", 1.0),
                c("c_half", 0.5),
            ],
        )
    })
}
