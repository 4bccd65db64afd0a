//! Synthetic models the benchmarks generate into a temporary folder (none is committed): chains
//! whose size is set by one number, so a series doubles it.

use std::path::Path;

use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

use actswap::onnx::builder::{Dim, model, node, opset, tensor_f32, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use actswap::onnx::{Model, SaveOptions};

/// A graph with one float input `x` of shape [1, width] and no nodes yet.
fn start(name: &str, width: usize) -> GraphProto {
    GraphProto {
        name: Some(name.into()),
        input: vec![value(
            "x",
            DataType::Float,
            &[Dim::Size(1), Dim::Size(width as i64)],
        )],
        ..Default::default()
    }
}

/// Closes the graph with `last` as its output [1, width] and writes it to `path`.
fn finish(mut g: GraphProto, last: &str, width: usize, path: &Path) {
    g.output.push(value(
        last,
        DataType::Float,
        &[Dim::Size(1), Dim::Size(width as i64)],
    ));
    let proto = model(g, vec![opset("", 13)], "actswap-bench");
    let dir = path.parent().unwrap_or(Path::new(".")).to_path_buf();
    Model::from_proto(proto, dir)
        .save(path, &SaveOptions::default())
        .expect("the generated model is written");
}

/// `blocks` blocks of a MatMul by a seeded [width, width] weight followed by a SiLU (Sigmoid,
/// Mul): one SiLU site per block, 4 * width^2 bytes of weights per block.
pub fn matmul_silu(path: &Path, blocks: usize, width: usize) {
    let mut rng = StdRng::seed_from_u64(blocks as u64 * 31 + width as u64);
    let mut g = start("matmul_silu", width);
    let scale = 1.0 / (width as f32).sqrt();
    let mut x = "x".to_string();
    for b in 0..blocks {
        let t = |s: &str| format!("b{b}.{s}");
        let w: Vec<f32> = (0..width * width)
            .map(|_| rng.random_range(-scale..scale))
            .collect();
        g.initializer
            .push(tensor_f32(&t("w"), &[width as i64, width as i64], &w));
        g.node.push(node(
            "MatMul",
            &t("mm"),
            &[&x, &t("w")],
            &[&t("mm")],
            vec![],
        ));
        g.node.push(node(
            "Sigmoid",
            &t("sig"),
            &[&t("mm")],
            &[&t("sig")],
            vec![],
        ));
        g.node.push(node(
            "Mul",
            &t("silu"),
            &[&t("mm"), &t("sig")],
            &[&t("silu")],
            vec![],
        ));
        x = t("silu");
    }
    finish(g, &x, width, path);
}

/// Nodes per block of [`three_sites`].
pub const THREE_SITES_BLOCK: usize = 10;

/// An element-wise chain of 10-node blocks on [1, 16] tensors, three sites per block: a scale
/// (Mul), a SiLU (Sigmoid, Mul), a shift (Add), a Relu, a scale and shift (Mul, Add), a Tanh and
/// a scale and shift again. `nodes / 10` blocks.
pub fn three_sites(path: &Path, nodes: usize) {
    const WIDTH: usize = 16;
    let mut g = start("three_sites", WIDTH);
    for (name, v) in [("scale", 0.9f32), ("shift", 0.1)] {
        g.initializer.push(tensor_f32(name, &[], &[v]));
    }
    let mut x = "x".to_string();
    for b in 0..nodes / THREE_SITES_BLOCK {
        let t = |s: &str| format!("b{b}.{s}");
        let steps: [(&str, &str, [&str; 2]); THREE_SITES_BLOCK] = [
            ("Mul", "in", [&x, "scale"]),
            ("Sigmoid", "sig", [&t("in"), ""]),
            ("Mul", "silu", [&t("in"), &t("sig")]),
            ("Add", "a1", [&t("silu"), "shift"]),
            ("Relu", "relu", [&t("a1"), ""]),
            ("Mul", "m2", [&t("relu"), "scale"]),
            ("Add", "a2", [&t("m2"), "shift"]),
            ("Tanh", "tanh", [&t("a2"), ""]),
            ("Mul", "m3", [&t("tanh"), "scale"]),
            ("Add", "out", [&t("m3"), "shift"]),
        ];
        for (op, name, inputs) in steps {
            let inputs: Vec<&str> = inputs.into_iter().filter(|s| !s.is_empty()).collect();
            g.node
                .push(node(op, &t(name), &inputs, &[&t(name)], vec![]));
        }
        x = t("out");
    }
    finish(g, &x, WIDTH, path);
}

/// A chain of `nodes` Relu nodes on a [1, 16] tensor: one site per node.
pub fn relu_chain(path: &Path, nodes: usize) {
    const WIDTH: usize = 16;
    let mut g = start("relu_chain", WIDTH);
    let mut x = "x".to_string();
    for i in 0..nodes {
        let y = format!("r{i}");
        g.node.push(node("Relu", &y, &[&x], &[&y], vec![]));
        x = y;
    }
    finish(g, &x, WIDTH, path);
}

/// Nodes per block of [`elementwise_blocks`].
pub const ELEMENTWISE_BLOCK: usize = 10;

/// The all-element-wise worst case of the scanner, in memory: `nodes / 10` blocks of a Mul by a
/// per-block constant (a stand-in for a layer), a SiLU (Sigmoid, Mul), an exact GELU spelled as
/// five ops and a gating Mul(x, Sigmoid(y)); every node ends a candidate chain.
pub fn elementwise_blocks(nodes: usize) -> Model {
    let mut g = GraphProto {
        name: Some("bench".into()),
        input: vec![value("x0", DataType::Float, &[Dim::Size(1), Dim::Size(16)])],
        ..Default::default()
    };
    g.initializer
        .push(tensor_f32("sqrt2", &[], &[std::f32::consts::SQRT_2]));
    g.initializer.push(tensor_f32("one", &[], &[1.0]));
    g.initializer.push(tensor_f32("half", &[], &[0.5]));
    let mut x = "x0".to_string();
    for b in 0..nodes / ELEMENTWISE_BLOCK {
        let t = |s: &str| format!("b{b}.{s}");
        g.initializer
            .push(tensor_f32(&t("w"), &[], &[1.0 + (b % 7) as f32 * 0.01]));
        let steps: [(&str, &str, Vec<String>); ELEMENTWISE_BLOCK] = [
            ("Mul", "lin", vec![x.clone(), t("w")]),
            ("Sigmoid", "sig", vec![t("lin")]),
            ("Mul", "silu", vec![t("lin"), t("sig")]),
            ("Div", "div", vec![t("silu"), "sqrt2".into()]),
            ("Erf", "erf", vec![t("div")]),
            ("Add", "add", vec![t("erf"), "one".into()]),
            ("Mul", "mulx", vec![t("silu"), t("add")]),
            ("Mul", "gelu", vec![t("mulx"), "half".into()]),
            ("Sigmoid", "gsig", vec![t("lin")]),
            ("Mul", "gate", vec![t("gelu"), t("gsig")]),
        ];
        for (op, name, inputs) in steps {
            let inputs: Vec<&str> = inputs.iter().map(String::as_str).collect();
            g.node
                .push(node(op, &t(name), &inputs, &[&t(name)], vec![]));
        }
        x = t("gate");
    }
    g.output
        .push(value(&x, DataType::Float, &[Dim::Size(1), Dim::Size(16)]));
    Model::from_proto(model(g, vec![opset("", 13)], "bench"), ".".into())
}
