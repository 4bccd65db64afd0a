//! Scan time on generated graphs of 10k, 100k and 1M nodes. Each block is a Mul by a per-block
//! constant (a stand-in for a layer), a SiLU (Sigmoid, Mul), an exact GELU spelled as five ops
//! and a gating Mul(x, Sigmoid(y)). Reports the time per graph (index build and scan; the
//! index alone in brackets) and the time ratio per doubling
//! of the node count (2.00 is linear). `cargo bench --bench scan -- N...` picks other sizes.

use std::time::Instant;

use actswap::onnx::builder::{Dim, model, node, opset, tensor_f32, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use actswap::onnx::{Model, ModelIndex};

/// Nodes per block (see the module doc).
const BLOCK: usize = 10;

fn graph(nodes: usize) -> Model {
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
    for b in 0..nodes / BLOCK {
        let t = |s: &str| format!("b{b}.{s}");
        g.initializer
            .push(tensor_f32(&t("w"), &[], &[1.0 + (b % 7) as f32 * 0.01]));
        let steps: [(&str, &str, Vec<String>); BLOCK] = [
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
    Model::from_proto(
        model(g, vec![opset("", 13)], "bench"),
        std::path::PathBuf::from("."),
    )
}

fn main() {
    // `cargo bench --bench scan -- N...` scans graphs of N nodes instead.
    let mut sizes: Vec<usize> = std::env::args()
        .skip(1)
        .filter_map(|a| a.parse().ok())
        .collect();
    if sizes.is_empty() {
        sizes = vec![10_000, 100_000, 1_000_000];
    }
    let mut times = Vec::new();
    println!(
        "{:>10}  {:>10}  {:>10}  {:>8}  {:>12}",
        "nodes", "seconds", "(index)", "sites", "ns per node"
    );
    for &n in &sizes {
        let model = graph(n);
        let start = Instant::now();
        let index = ModelIndex::build(&model).expect("valid graph");
        let indexed = start.elapsed().as_secs_f64();
        let report = actswap::scan::scan(&index);
        let secs = start.elapsed().as_secs_f64();
        let per_node = secs * 1e9 / n as f64;
        println!(
            "{n:>10}  {secs:>10.3}  {indexed:>10.3}  {:>8}  {per_node:>12.0}",
            report.sites.len()
        );
        times.push(secs);
    }
    for i in 1..sizes.len() {
        let doublings = (sizes[i] as f64 / sizes[i - 1] as f64).log2();
        let per_doubling = (times[i] / times[i - 1]).powf(1.0 / doublings);
        println!(
            "{} -> {} nodes: time ratio per doubling {per_doubling:.2} (2.00 = linear)",
            sizes[i - 1],
            sizes[i]
        );
    }
}
