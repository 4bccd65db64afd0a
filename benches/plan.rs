//! Planning time with fitted forms: 1,000 per-channel swish sites of 64 channels each (betas
//! drawn from [0.5, 2] with a fixed seed, every site its own), planned with `--to swish=fitted:8`
//! and with `--to swish=fitted` (the fewest segments within 0.01), against the same sites
//! planned to their exact primitive form in the same run. Fits are remembered per (kind,
//! parameters, range, segments, element type); the figures are for the first planning, with
//! nothing remembered, then for the same plan again. `cargo bench --bench plan -- SITES`
//! plans another number of sites.
//!
//! Swish channels share fits of SiLU over rescaled ranges; what that costs in bound is the
//! ratio of each channel's bound to that of its own fit, over the channels of the first
//! [`COST_SITES`] sites (own fits are slow: that is what sharing saves).

use std::time::Instant;

use actswap::catalog::fit;
use actswap::catalog::{ParamValue, Params, get};
use actswap::onnx::proto::tensor_proto::DataType;
use actswap::plan::request::Request;
use actswap::plan::{Plan, Policy};
use actswap::scan::{Site, Spelling};
use rand::{Rng, SeedableRng};

const CHANNELS: usize = 64;
/// Sites whose channels are also fitted alone, for the cost of sharing.
const COST_SITES: usize = 4;

fn sites(n: usize) -> Vec<Site> {
    let swish = get("swish").expect("swish is catalogued");
    let mut rng = rand::rngs::StdRng::seed_from_u64(15);
    (0..n)
        .map(|i| {
            let betas: Vec<f64> = (0..CHANNELS)
                .map(|_| rng.random_range(0.5f32..2.0) as f64)
                .collect();
            Site {
                id: format!("s{i}"),
                kind: swish,
                params: Some(Params::new(
                    vec![ParamValue::PerChannel(betas)],
                    Some(vec![1, CHANNELS, 1, 1]),
                )),
                spelling: Spelling::Decomposed,
                domain: None,
                ops: vec!["Mul".into(), "Sigmoid".into(), "Mul".into()],
                nodes: vec![format!("n{i}.a"), format!("n{i}.b"), format!("n{i}.c")],
                constants: vec![format!("beta{i}")],
                input: format!("x{i}"),
                output: format!("y{i}"),
                graph: "main".into(),
                rewritable: true,
                notes: Vec::new(),
                type_readers: Vec::new(),
                elem_type: DataType::Float,
                opset: 17,
                graph_index: 0,
                node_indices: vec![3 * i, 3 * i + 1, 3 * i + 2],
            }
        })
        .collect()
}

fn plan(sites: &[Site], to: &str) -> (f64, usize) {
    let requests = vec![Request::parse(to).expect("a valid request")];
    let start = Instant::now();
    let plan = Plan::build(sites.to_vec(), &Policy::requests(&requests), Some(17));
    let secs = start.elapsed().as_secs_f64();
    (secs, plan.rewrites().count())
}

fn main() {
    let n: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(1000);
    let sites = sites(n);
    let (base, _) = plan(&sites, "swish=primitive");
    println!("{n} sites of {CHANNELS} channels; exact primitive form: {base:.3} s (baseline)");
    for to in ["swish=fitted:8", "swish=fitted"] {
        let (first, rewrites) = plan(&sites, to);
        let (again, _) = plan(&sites, to);
        println!(
            "--to {to}: {first:.3} s ({:.0}x the baseline, {:.1} µs per channel), {rewrites} \
             rewritten; planned again: {again:.3} s ({:.1}x)",
            first / base,
            first * 1e6 / (n * CHANNELS) as f64,
            again / base
        );
    }
    sharing_cost(&sites[..COST_SITES.min(n)]);
}

/// The worst and median ratio of a channel's bound inside the range (shared fit) to that of
/// its own fit, at 8 and 16 segments.
fn sharing_cost(sites: &[Site]) {
    let swish = get("swish").expect("swish is catalogued");
    let range = fit::DEFAULT_RANGE;
    for segments in [8, 16] {
        let mut ratios: Vec<f64> = Vec::new();
        for site in sites {
            for p in site.params.as_ref().expect("swish has beta").per_channel() {
                let elem = DataType::Float;
                let (_, shared) = fit::fit_channel(swish, &p, range, segments, elem).expect("fit");
                let (_, own) =
                    fit::fit_channel_alone(swish, &p, range, segments, elem).expect("fit");
                ratios.push(shared.in_range.value / own.in_range.value);
            }
        }
        ratios.sort_by(f64::total_cmp);
        println!(
            "sharing at {segments} segments, {} channels: bound / own fit's bound: worst {:.4}, \
             median {:.4}, best {:.4}",
            ratios.len(),
            ratios[ratios.len() - 1],
            ratios[ratios.len() / 2],
            ratios[0]
        );
    }
}
