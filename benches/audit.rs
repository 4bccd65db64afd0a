//! What `actswap audit` costs beyond running the two models: the wall time of the command
//! (process start, scan, plan, rewrite in memory, capture every site, isolate and run the sites,
//! bounds, metrics; latency off) divided by a bare tract harness that loads, optimizes and runs
//! the original and the rewritten model once on the same input, in this process. Both are timed
//! alternately in the same run and the medians compared.
//!
//! Three parts:
//! - two real models: a sample model under the piecewise-linear target (the planner weighs
//!   every substitution it offers) and a torch export with one `--to` request; aim: 1.25 at most;
//! - a doubling series of the site count: chains of N blocks (MatMul 64x64, SiLU), N = 100 to
//!   6400, `--to silu=hard_swish`; the time ratio per doubling (2.00 is linear) aims at 2.1 at
//!   most;
//! - a 100k-node element-wise graph with 30k sites (a SiLU, a Relu and a Tanh per 10 nodes),
//!   `--to silu=hard_swish`; aim: within 3x the bare harness.
//!
//! `cargo bench --bench audit -- [RUNS] [--sites MAX] [--bare-sites MAX] [--nodes N]`: RUNS for
//! the real models (default 15; the synthetic graphs take 3), the series' largest site count
//! (default 6400), the largest site count the bare harness runs at (default 800: tract's
//! optimizer grows with the square of the node count, so the harness alone takes minutes
//! beyond; the series' ratio per doubling needs only the audit's own times) and the large
//! graph's node count (default 100000).

mod support;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use actswap::onnx::Model;
use actswap::run::inputs::{Binding, InputLoader, RandomInputs};
use actswap::run::{Sample, prepare};
use ndarray::Array4;
use rand::{Rng, SeedableRng};
use support::{bare, graphs, median};

fn actswap(args: &[&str]) {
    let out = Command::new(support::actswap_bin())
        .args(args)
        .output()
        .expect("actswap runs");
    assert!(
        out.status.code().is_some_and(|c| c <= 1),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// One model, a conversion, and the input file both sides are fed (random data when none).
struct Case {
    label: String,
    model: PathBuf,
    conversion: Vec<&'static str>,
    /// `--input` value for the command and the binding for the bare harness.
    input: Option<(Option<&'static str>, PathBuf)>,
}

/// The medians of the audit command and of the bare harness (`None`: not run), in seconds.
fn measure(case: &Case, tmp: &Path, runs: usize, with_bare: bool) -> (f64, Option<f64>) {
    let m = case.model.to_str().unwrap();
    let rewritten_path = tmp.join("rewritten.onnx");
    let swap = [
        &["swap", m][..],
        &case.conversion,
        &["-o", rewritten_path.to_str().unwrap()],
    ];
    actswap(&swap.concat());
    let original = Model::load(&case.model).unwrap();
    let rewritten = Model::load(&rewritten_path).unwrap();
    let tract = prepare(&original.encode(), Some(original.dir())).unwrap();
    let loader = InputLoader::new(tract.inputs());
    let (sample, input_arg): (Sample, Option<String>) = match &case.input {
        Some((name, path)) => {
            let binding = Binding {
                input: name.map(String::from),
                path: path.clone(),
            };
            let arg = match name {
                Some(name) => format!("{name}={}", path.display()),
                None => path.display().to_string(),
            };
            (
                loader.from_bindings(&[binding]).unwrap().remove(0),
                Some(arg),
            )
        }
        None => (
            loader.random(&RandomInputs::default()).unwrap().remove(0),
            None,
        ),
    };
    let mut audit: Vec<&str> = [&["audit", m][..], &case.conversion].concat();
    if let Some(arg) = &input_arg {
        audit.extend(["--input", arg]);
    }
    audit.extend(["--no-latency", "--json"]);
    // Warm both paths once.
    actswap(&audit);
    if with_bare {
        bare(&original, &rewritten, &sample);
    }
    let (mut ta, mut tb) = (Vec::new(), Vec::new());
    for _ in 0..runs {
        let t = Instant::now();
        actswap(&audit);
        ta.push(t.elapsed().as_secs_f64());
        if with_bare {
            let t = Instant::now();
            bare(&original, &rewritten, &sample);
            tb.push(t.elapsed().as_secs_f64());
        }
    }
    (median(ta), with_bare.then(|| median(tb)))
}

fn header() {
    println!(
        "{:<48}  {:>10}  {:>15}  {:>5}",
        "case", "audit (ms)", "bare tract (ms)", "ratio"
    );
}

fn print(label: &str, (a, b): (f64, Option<f64>)) {
    match b {
        Some(b) => println!(
            "{label:<48}  {:>10.1}  {:>15.1}  {:>5.2}",
            a * 1e3,
            b * 1e3,
            a / b
        ),
        None => println!("{label:<48}  {:>10.1}  {:>15}  {:>5}", a * 1e3, "-", "-"),
    }
}

/// The value after `flag` on the command line.
fn option(args: &[String], flag: &str) -> Option<usize> {
    let i = args.iter().position(|a| a == flag)?;
    args.get(i + 1)?.parse().ok()
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let runs: usize = args.first().and_then(|a| a.parse().ok()).unwrap_or(15);
    let max_sites = option(&args, "--sites").unwrap_or(6400);
    let nodes = option(&args, "--nodes").unwrap_or(100_000);
    let bare_sites = option(&args, "--bare-sites").unwrap_or(800);
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let tmp = tempfile::tempdir().unwrap();
    let image = tmp.path().join("image.npy");
    let mut rng = rand::rngs::StdRng::seed_from_u64(7);
    let pixels = Array4::<f32>::from_shape_fn((1, 3, 32, 32), |_| rng.random_range(-2.0..2.0));
    ndarray_npy::write_npy(&image, &pixels).unwrap();
    let leaf = root.join("tests/fixtures/torch/leaf-spot-ts-op13");
    let cases = [
        Case {
            label: "orchard-grader, --target piecewise-linear".into(),
            model: root.join("sample-models/orchard-grader.onnx"),
            conversion: vec!["--target", "piecewise-linear"],
            input: Some((Some("image"), image)),
        },
        Case {
            label: "leaf-spot-ts-op13, --to silu=hard_swish".into(),
            model: leaf.join("model.onnx"),
            conversion: vec!["--to", "silu=hard_swish"],
            input: Some((None, leaf.join("inputs.npz"))),
        },
    ];
    println!("real models, median of {runs} runs");
    header();
    for case in &cases {
        print(&case.label, measure(case, tmp.path(), runs, true));
    }

    const SYNTHETIC_RUNS: usize = 3;
    println!(
        "\nsite-count series: N x (MatMul 64x64, SiLU), --to silu=hard_swish, median of {SYNTHETIC_RUNS} runs"
    );
    header();
    let mut series: Vec<(usize, f64)> = Vec::new();
    let mut n = 100;
    while n <= max_sites {
        let model = tmp.path().join(format!("series-{n}.onnx"));
        graphs::matmul_silu(&model, n, 64);
        let case = Case {
            label: format!("{n} sites"),
            model,
            conversion: vec!["--to", "silu=hard_swish"],
            input: None,
        };
        let times = measure(&case, tmp.path(), SYNTHETIC_RUNS, n <= bare_sites);
        print(&case.label, times);
        series.push((n, times.0));
        n *= 2;
    }
    for w in series.windows(2) {
        println!(
            "{} -> {} sites: audit time ratio {:.2} (2.00 = linear)",
            w[0].0,
            w[1].0,
            w[1].1 / w[0].1
        );
    }

    let model = tmp.path().join("three-sites.onnx");
    graphs::three_sites(&model, nodes);
    let case = Case {
        label: format!(
            "{nodes} nodes, {} sites (SiLU, Relu, Tanh)",
            nodes / graphs::THREE_SITES_BLOCK * 3
        ),
        model,
        conversion: vec!["--to", "silu=hard_swish"],
        input: None,
    };
    println!("\nlarge element-wise graph, median of {SYNTHETIC_RUNS} runs");
    header();
    print(
        &case.label,
        measure(&case, tmp.path(), SYNTHETIC_RUNS, true),
    );
}
