//! Shared by the benchmarks: the bare tract harness they measure against, medians, and the
//! synthetic graphs ([`graphs`]).

#![allow(dead_code)]

pub mod graphs;

use std::path::PathBuf;

use actswap::onnx::Model;
use actswap::run::{Sample, prepare};

/// The `actswap` binary the benchmarks run: this build's, or the one the `ACTSWAP` environment
/// variable names (to measure another build with the same benchmark).
pub fn actswap_bin() -> PathBuf {
    std::env::var_os("ACTSWAP")
        .map(PathBuf::from)
        .unwrap_or_else(|| env!("CARGO_BIN_EXE_actswap").into())
}

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
