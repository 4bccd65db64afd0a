//! Scan time on generated graphs of 10k, 100k and 1M nodes. Each block is a Mul by a per-block
//! constant (a stand-in for a layer), a SiLU (Sigmoid, Mul), an exact GELU spelled as five ops
//! and a gating Mul(x, Sigmoid(y)). Reports the time per graph (index build and scan; the
//! index alone in brackets), against a baseline measured in the same run: decoding the same
//! graph from its serialized bytes, as every command does first. Then the time ratio per doubling
//! of the node count (2.00 is linear). `cargo bench --bench scan -- N...` picks other sizes.

mod support;

use std::time::Instant;

use actswap::onnx::{Model, ModelIndex};
use prost::Message;
use support::graphs::elementwise_blocks;

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
        "{:>10}  {:>10}  {:>10}  {:>10}  {:>9}  {:>8}  {:>12}",
        "nodes", "seconds", "(index)", "decode", "x decode", "sites", "ns per node"
    );
    for &n in &sizes {
        let bytes = bytes::Bytes::from(elementwise_blocks(n).proto().encode_to_vec());
        let start = Instant::now();
        let model = Model::from_bytes(bytes, "bench.onnx".into(), ".".into()).expect("decodes");
        let decode = start.elapsed().as_secs_f64();
        let start = Instant::now();
        let index = ModelIndex::build(&model).expect("valid graph");
        let indexed = start.elapsed().as_secs_f64();
        let report = actswap::scan::scan(&index);
        let secs = start.elapsed().as_secs_f64();
        let per_node = secs * 1e9 / n as f64;
        println!(
            "{n:>10}  {secs:>10.3}  {indexed:>10.3}  {decode:>10.3}  {:>9.2}  {:>8}  {per_node:>12.0}",
            secs / decode,
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
