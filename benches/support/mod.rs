//! Shared by the benchmarks: the bare tract harness they measure against, and medians.

#![allow(dead_code)]

use actswap::onnx::Model;
use actswap::run::{Sample, prepare};

/// Loads, optimizes and runs each model once on `sample`: what running two models costs with
/// nothing else around it.
pub fn bare(a: &Model, b: &Model, sample: &Sample) {
    for m in [a, b] {
        let tract = prepare(&m.encode(), Some(m.dir())).unwrap();
        let out = tract.compile(sample, &[]).unwrap().run(sample).unwrap();
        std::hint::black_box(out);
    }
}

/// The median (the mean of the middle two for an even count).
pub fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    }
}
