//! What `actswap audit` costs beyond running the two models: the wall time of the command
//! (process start, scan, plan, rewrite in memory, capture every site, isolate and run the sites,
//! bounds, metrics; latency off) divided by a bare tract harness that loads, optimizes and runs
//! the original and the rewritten model once on the same input, in this process. Both are timed
//! alternately in the same run and the medians compared; the aim is a ratio of at most 1.25.
//!
//! Two cases: a sample model under the piecewise-linear target (the planner weighs every
//! substitution it offers), and a torch export with one `--to` request.
//!
//! `cargo bench --bench audit` (optionally `-- RUNS`, default 15).

mod support;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use actswap::onnx::Model;
use actswap::run::inputs::{Binding, InputLoader};
use actswap::run::prepare;
use ndarray::Array4;
use rand::{Rng, SeedableRng};
use support::{bare, median};

fn actswap(args: &[&str]) {
    let out = Command::new(env!("CARGO_BIN_EXE_actswap"))
        .args(args)
        .output()
        .expect("actswap runs");
    assert!(
        out.status.code().is_some_and(|c| c <= 1),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// One model, a conversion, and the input file both sides are fed.
struct Case {
    label: &'static str,
    model: PathBuf,
    conversion: Vec<&'static str>,
    /// `--input` value for the command and the binding for the bare harness.
    input: (Option<&'static str>, PathBuf),
}

fn measure(case: &Case, tmp: &Path, runs: usize) -> (f64, f64) {
    let m = case.model.to_str().unwrap();
    let stem = case.label.split(',').next().unwrap_or("case");
    let rewritten_path = tmp.join(format!("{stem}.rewritten.onnx"));
    let swap = [
        &["swap", m][..],
        &case.conversion,
        &["-o", rewritten_path.to_str().unwrap()],
    ];
    actswap(&swap.concat());
    let original = Model::load(&case.model).unwrap();
    let rewritten = Model::load(&rewritten_path).unwrap();
    let tract = prepare(&original.encode(), Some(original.dir())).unwrap();
    let binding = Binding {
        input: case.input.0.map(String::from),
        path: case.input.1.clone(),
    };
    let sample = InputLoader::new(tract.inputs())
        .from_bindings(&[binding])
        .unwrap()
        .remove(0);
    let input_arg = match case.input.0 {
        Some(name) => format!("{name}={}", case.input.1.display()),
        None => case.input.1.display().to_string(),
    };
    let audit = [
        &["audit", m][..],
        &case.conversion,
        &["--input", &input_arg, "--no-latency", "--json"],
    ]
    .concat();
    // Warm both paths once.
    actswap(&audit);
    bare(&original, &rewritten, &sample);
    let (mut ta, mut tb) = (Vec::new(), Vec::new());
    for _ in 0..runs {
        let t = Instant::now();
        actswap(&audit);
        ta.push(t.elapsed().as_secs_f64());
        let t = Instant::now();
        bare(&original, &rewritten, &sample);
        tb.push(t.elapsed().as_secs_f64());
    }
    (median(ta), median(tb))
}

fn main() {
    let runs: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(15);
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let tmp = tempfile::tempdir().unwrap();
    let image = tmp.path().join("image.npy");
    let mut rng = rand::rngs::StdRng::seed_from_u64(7);
    let pixels = Array4::<f32>::from_shape_fn((1, 3, 32, 32), |_| rng.random_range(-2.0..2.0));
    ndarray_npy::write_npy(&image, &pixels).unwrap();
    let leaf = root.join("tests/fixtures/torch/leaf-spot-ts-op13");
    let cases = [
        Case {
            label: "orchard-grader, --target piecewise-linear",
            model: root.join("sample-models/orchard-grader.onnx"),
            conversion: vec!["--target", "piecewise-linear"],
            input: (Some("image"), image),
        },
        Case {
            label: "leaf-spot-ts-op13, --to silu=hard_swish",
            model: leaf.join("model.onnx"),
            conversion: vec!["--to", "silu=hard_swish"],
            input: (None, leaf.join("inputs.npz")),
        },
    ];
    println!("{:<44}  audit (ms)  bare tract (ms)  ratio", "case");
    for case in &cases {
        let (a, b) = measure(case, tmp.path(), runs);
        println!(
            "{:<44}  {:>10.1}  {:>15.1}  {:>5.2}",
            case.label,
            a * 1e3,
            b * 1e3,
            a / b
        );
    }
}
