//! Peak memory and wall time of whole commands, each run in a process of its own, against
//! baselines measured in the same run: the file's size, and a bare tract harness (this binary
//! run again with `--bare`) that loads, optimizes and runs the original and the converted model
//! once, one after the other, with tract's own ONNX loader and nothing else.
//!
//! Peak memory is the child's maximum resident set as the kernel accounts it (`wait4`), pages
//! of the memory-mapped model included once touched. Each figure is the median over the runs.
//! The kernel carries the parent's own peak into a child it starts, so the synthetic models are
//! built by a process of their own (this binary run with `--make`) and this one stays small.
//!
//! Cases:
//! - a weight-heavy model (48 blocks of a MatMul by a 1024 x 1024 weight and a SiLU, ~200 MB):
//!   `audit --to silu=hard_swish --no-latency` against the bare harness; `swap`, `info` and
//!   `scan` against the file size;
//! - a 1M-node element-wise graph (the `scan` benchmark's blocks): `scan` (table and JSON) and
//!   `info`, time and peak, against the file size.
//!
//! `cargo bench --bench footprint` (optionally `-- RUNS`, default 3).

mod support;

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::Instant;

use support::{graphs, median};

/// Time and peak memory of one process.
#[derive(Debug, Clone, Copy)]
struct Usage {
    secs: f64,
    peak_bytes: f64,
}

/// Runs `cmd` to its end; exit codes above `max_code` fail the benchmark.
// The child is reaped by `wait4`, which also gives its peak memory; `Child::wait` cannot.
#[allow(clippy::zombie_processes)]
fn run(cmd: &mut Command, max_code: i32) -> Usage {
    let start = Instant::now();
    let child = cmd
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .expect("the command starts");
    let pid = child.id() as libc::pid_t;
    let mut status = 0;
    // SAFETY: an all-zero rusage is a valid value for wait4 to fill.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: `pid` is our own child, not yet reaped; both pointers are valid for the call.
    let reaped = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
    let secs = start.elapsed().as_secs_f64();
    assert_eq!(reaped, pid, "wait4 reaps the child");
    let code = libc::WIFEXITED(status).then(|| libc::WEXITSTATUS(status));
    if code.is_none_or(|c| c > max_code) {
        let mut err = String::new();
        if let Some(mut e) = child.stderr {
            use std::io::Read;
            let _ = e.read_to_string(&mut err);
        }
        panic!("{cmd:?} ended with status {status}: {err}");
    }
    Usage {
        secs,
        // Linux reports ru_maxrss in KiB.
        peak_bytes: usage.ru_maxrss as f64 * 1024.0,
    }
}

/// The median time and peak of `runs` runs of the command `make` builds.
fn measure(runs: usize, max_code: i32, make: &dyn Fn() -> Command) -> Usage {
    let all: Vec<Usage> = (0..runs).map(|_| run(&mut make(), max_code)).collect();
    Usage {
        secs: median(all.iter().map(|u| u.secs).collect()),
        peak_bytes: median(all.iter().map(|u| u.peak_bytes).collect()),
    }
}

fn actswap(args: &[&str]) -> Command {
    let mut cmd = Command::new(support::actswap_bin());
    cmd.args(args);
    cmd
}

fn bare(models: &[&Path]) -> Command {
    let mut cmd = Command::new(std::env::current_exe().expect("own path"));
    cmd.arg("--bare").args(models);
    cmd
}

fn mb(bytes: f64) -> f64 {
    bytes / 1e6
}

fn row(label: &str, u: Usage, base: Usage, base_label: &str) {
    println!(
        "  {label:<40} {:>8.2} s {:>8.0} MB   {:>5.2}x time {:>5.2}x peak  ({base_label})",
        u.secs,
        mb(u.peak_bytes),
        u.secs / base.secs,
        u.peak_bytes / base.peak_bytes,
    );
}

/// Builds a synthetic model in a process of its own: `what` is `weights` or `nodes`.
fn make(what: &str, path: &Path, nodes: usize) {
    let mut cmd = Command::new(std::env::current_exe().expect("own path"));
    cmd.args(["--make", what, path.to_str().unwrap(), &nodes.to_string()]);
    run(&mut cmd, 0);
}

/// The `--make` child: writes the model `what` to `path`.
fn made(what: &str, path: &Path, nodes: usize) {
    match what {
        "weights" => graphs::matmul_silu(path, 48, 1024),
        _ => graphs::elementwise_blocks(nodes)
            .save(path, &Default::default())
            .unwrap(),
    }
}

fn weight_heavy(dir: &Path, runs: usize) {
    let model = dir.join("weights.onnx");
    make("weights", &model, 0);
    let converted = dir.join("weights.converted.onnx");
    run(
        &mut actswap(&[
            "swap",
            model.to_str().unwrap(),
            "--to",
            "silu=hard_swish",
            "-o",
            converted.to_str().unwrap(),
        ]),
        0,
    );
    let size = std::fs::metadata(&model).unwrap().len() as f64;
    let file = Usage {
        secs: f64::NAN,
        peak_bytes: size,
    };
    println!(
        "\nweight-heavy model: 48 x (MatMul 1024x1024, SiLU), {:.0} MB",
        mb(size)
    );
    let m = model.to_str().unwrap();
    let bare_run = measure(runs, 0, &|| bare(&[&model, &converted]));
    println!(
        "  {:<40} {:>8.2} s {:>8.0} MB",
        "bare tract harness (both models)",
        bare_run.secs,
        mb(bare_run.peak_bytes)
    );
    let audit = measure(runs, 1, &|| {
        actswap(&["audit", m, "--to", "silu=hard_swish", "--no-latency"])
    });
    row("audit --no-latency", audit, bare_run, "x bare harness");
    let out = dir.join("swapped.onnx");
    let o = out.to_str().unwrap();
    for (label, args) in [
        (
            "swap -o",
            &["swap", m, "--to", "silu=hard_swish", "-o", o][..],
        ),
        ("info", &["info", m][..]),
        ("scan", &["scan", m][..]),
    ] {
        let u = measure(runs, 0, &|| actswap(args));
        println!(
            "  {label:<40} {:>8.2} s {:>8.0} MB   {:>5.2}x file size",
            u.secs,
            mb(u.peak_bytes),
            u.peak_bytes / file.peak_bytes
        );
    }
}

fn many_nodes(dir: &Path, runs: usize, nodes: usize) {
    let model = dir.join("nodes.onnx");
    make("nodes", &model, nodes);
    let size = std::fs::metadata(&model).unwrap().len() as f64;
    println!("\nelement-wise graph: {nodes} nodes, {:.0} MB", mb(size));
    let m = model.to_str().unwrap();
    for (label, args) in [
        ("scan", &["scan", m][..]),
        ("scan --json", &["scan", m, "--json"][..]),
        ("info", &["info", m][..]),
    ] {
        let u = measure(runs, 0, &|| actswap(args));
        println!(
            "  {label:<40} {:>8.2} s {:>8.0} MB   {:>5.2}x file size",
            u.secs,
            mb(u.peak_bytes),
            u.peak_bytes / size
        );
    }
}

/// The bare harness: each model loaded by tract's ONNX loader, optimized and run once on
/// seeded random input, then dropped.
fn bare_harness(models: &[PathBuf]) {
    use rand::{Rng, SeedableRng};
    use tract_onnx::prelude::*;
    let mut rng = rand::rngs::StdRng::seed_from_u64(7);
    for path in models {
        let model = tract_onnx::onnx()
            .model_for_path(path)
            .and_then(|m| m.into_optimized())
            .and_then(|m| m.into_runnable())
            .expect("tract loads the model");
        let fact = model.model().input_fact(0).expect("one input").clone();
        let shape: Vec<usize> = fact.shape.as_concrete().expect("a concrete input").to_vec();
        let input =
            tract_ndarray::ArrayD::<f32>::from_shape_fn(shape, |_| rng.random_range(-2.0..2.0));
        let out = model
            .run(tvec!(Tensor::from(input).into()))
            .expect("tract runs the model");
        std::hint::black_box(out);
    }
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.first().map(String::as_str) == Some("--bare") {
        bare_harness(&args[1..].iter().map(PathBuf::from).collect::<Vec<_>>());
        return;
    }
    if let [flag, what, path, nodes] = &args[..]
        && flag == "--make"
    {
        made(what, Path::new(path), nodes.parse().expect("a node count"));
        return;
    }
    let runs: usize = args.iter().find_map(|a| a.parse().ok()).unwrap_or(3);
    let tmp = tempfile::tempdir().unwrap();
    println!("median of {runs} runs; each command in a process of its own");
    weight_heavy(tmp.path(), runs);
    many_nodes(tmp.path(), runs, 1_000_000);
}
