//! What `actswap audit` costs beyond running the two models: the wall time of the command
//! (process start, scan, plan, rewrite in memory, capture every site, isolate and run the sites,
//! bounds, metrics; latency off) divided by a bare tract harness that loads, optimizes and runs
//! the original and the rewritten model once on the same input, in this process. Both are timed
//! alternately in the same run and the medians compared; the aim is a ratio of at most 1.25.
//!
//! `cargo bench --bench audit` (optionally `-- RUNS`, default 15).

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use actswap::onnx::Model;
use actswap::run::inputs::{Binding, InputLoader};
use actswap::run::{Sample, prepare};
use ndarray::Array4;
use rand::{Rng, SeedableRng};

const MODEL: &str = "orchard-grader.onnx";
const TARGET: &str = "piecewise-linear";

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

fn bare(a: &Model, b: &Model, sample: &Sample) {
    for m in [a, b] {
        let tract = prepare(&m.encode(), Some(m.dir())).unwrap();
        let out = tract.compile(sample, &[]).unwrap().run(sample).unwrap();
        std::hint::black_box(out);
    }
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    }
}

fn main() {
    let runs: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(15);
    let model_path: PathBuf = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("sample-models")
        .join(MODEL);
    let tmp = tempfile::tempdir().unwrap();
    let rewritten_path = tmp.path().join("rewritten.onnx");
    let input_path = tmp.path().join("image.npy");
    let mut rng = rand::rngs::StdRng::seed_from_u64(7);
    let image = Array4::<f32>::from_shape_fn((1, 3, 32, 32), |_| rng.random_range(-2.0..2.0));
    ndarray_npy::write_npy(&input_path, &image).unwrap();
    let m = model_path.to_str().unwrap();
    actswap(&[
        "swap",
        m,
        "--target",
        TARGET,
        "-o",
        rewritten_path.to_str().unwrap(),
    ]);

    let original = Model::load(&model_path).unwrap();
    let rewritten = Model::load(&rewritten_path).unwrap();
    let tract = prepare(&original.encode(), Some(original.dir())).unwrap();
    let binding = Binding {
        input: Some("image".into()),
        path: input_path.clone(),
    };
    let sample = InputLoader::new(tract.inputs())
        .from_bindings(&[binding])
        .unwrap()
        .remove(0);
    let input_arg = format!("image={}", input_path.display());
    let audit = [
        "audit",
        m,
        "--target",
        TARGET,
        "--input",
        &input_arg,
        "--no-latency",
        "--json",
    ];
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
    let (a, b) = (median(ta), median(tb));
    println!("model                 audit (ms)  bare tract (ms)  ratio");
    println!(
        "{MODEL:<20}  {:>10.1}  {:>15.1}  {:>5.2}",
        a * 1e3,
        b * 1e3,
        a / b
    );
}
