//! What `compare` costs beyond running the two models: its wall time (scan both, capture every
//! site, isolate and run the sites, bounds, metrics; latency off) divided by a bare tract
//! harness that loads, optimizes and runs both models once on the same inputs. Both are timed
//! in the same process, alternately, and the medians compared.
//!
//! `cargo bench --bench drift` (optionally `-- RUNS`, default 15).

#[path = "../tests/measure_support/mod.rs"]
mod measure_support;
mod support;

use std::time::Instant;

use actswap::measure::{CompareOptions, compare_models};
use actswap::onnx::Model;
use measure_support as fx;
use support::{bare, median};

/// A hand-made rewrite of the site writing a tensor.
type Rewrite = fn(&Model, &str) -> Model;

fn main() {
    let runs: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(15);
    let cases: [(&str, &str, Rewrite); 2] = [
        (
            "leaf-spot-ts-op13",
            "/blocks.0/act/Mul_output_0",
            fx::silu_to_hard_swish,
        ),
        (
            "pump-ts-op13",
            "/blocks.0/act/Mul_1_output_0",
            fx::gelu_to_tanh,
        ),
    ];
    let opts = CompareOptions {
        latency: None,
        ..CompareOptions::default()
    };
    println!("model               sites  compare (ms)  bare tract (ms)  ratio");
    for (id, output, rewrite) in cases {
        let original = fx::load(id);
        let rewritten = rewrite(&original, output);
        let samples = fx::samples(id, &original);
        // Warm both paths once.
        let sites = compare_models(&original, &rewritten, &samples, &opts)
            .unwrap()
            .sites
            .len();
        bare(&original, &rewritten, &samples[0]);
        let (mut tc, mut tb) = (Vec::new(), Vec::new());
        for _ in 0..runs {
            let t = Instant::now();
            std::hint::black_box(compare_models(&original, &rewritten, &samples, &opts).unwrap());
            tc.push(t.elapsed().as_secs_f64());
            let t = Instant::now();
            bare(&original, &rewritten, &samples[0]);
            tb.push(t.elapsed().as_secs_f64());
        }
        let (c, b) = (median(tc), median(tb));
        println!(
            "{id:<20}{sites:>5}  {:>12.3}  {:>15.3}  {:>5.2}",
            c * 1e3,
            b * 1e3,
            c / b
        );
    }
}
