//! Batch throughput: `actswap batch` over 20 copies of a sample model with `--jobs 1` and
//! `--jobs 2`, each timed as the whole command, alternately in the same run; reports models per
//! second and the speed-up of two jobs over one (at most the number of free cores).
//!
//! `cargo bench --bench batch` (optionally `-- RUNS`, default 3).

use std::path::Path;
use std::process::Command;
use std::time::Instant;

mod support;
use support::median;

const MODEL: &str = "orchard-grader.onnx";
const COPIES: usize = 20;

fn batch(models: &Path, out: &Path, jobs: &str) -> f64 {
    let start = Instant::now();
    let run = Command::new(env!("CARGO_BIN_EXE_actswap"))
        .args([
            "batch",
            models.to_str().unwrap(),
            "-o",
            out.to_str().unwrap(),
        ])
        .args([
            "--target",
            "piecewise-linear",
            "--dim",
            "batch=1",
            "--samples",
            "2",
        ])
        .args(["--runs", "5", "--warmup", "1", "--jobs", jobs, "--json"])
        .output()
        .expect("actswap runs");
    let secs = start.elapsed().as_secs_f64();
    // The piecewise-linear target leaves one site of this model unserved: exit 1, not 2.
    assert_eq!(
        run.status.code(),
        Some(1),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    secs
}

fn main() {
    let runs: usize = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(3);
    let tmp = tempfile::tempdir().unwrap();
    let models = tmp.path().join("models");
    std::fs::create_dir(&models).unwrap();
    let source = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("sample-models")
        .join(MODEL);
    for i in 0..COPIES {
        std::fs::copy(&source, models.join(format!("grader-{i:02}.onnx"))).unwrap();
    }
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    batch(&models, &tmp.path().join("warm"), "2");
    let (mut one, mut two) = (Vec::new(), Vec::new());
    for r in 0..runs {
        one.push(batch(&models, &tmp.path().join(format!("one{r}")), "1"));
        two.push(batch(&models, &tmp.path().join(format!("two{r}")), "2"));
    }
    let (a, b) = (median(one), median(two));
    println!("{COPIES} copies of {MODEL}, {cores} cores, median of {runs} runs");
    println!("jobs  seconds  models/s");
    println!("   1  {a:>7.2}  {:>8.1}", COPIES as f64 / a);
    println!("   2  {b:>7.2}  {:>8.1}", COPIES as f64 / b);
    println!("speed-up of --jobs 2 over --jobs 1: {:.2}", a / b);
}
