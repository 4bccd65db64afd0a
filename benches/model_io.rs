//! Load and save throughput of the model I/O, as ratios against reading and writing the same
//! bytes with std::fs (the physical floor), all measured in the same run.
//!
//!     cargo bench --bench model_io [-- RUNS]
//!
//! Two files: a generated ~50 MB model (four large float initializers and a small graph, written
//! to a temporary folder) and a sample model. Every timed case runs once per round, rounds
//! interleave the cases, and each figure is the median over the rounds. Files stay in the page
//! cache, so the floors measure memory and file-system overhead rather than the disk. `save`
//! writes atomically (temporary file, fsync, rename), so a durable floor doing the same with
//! std::fs is shown beside the plain one.

use std::fs::File;
use std::hint::black_box;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use anyhow::{Context, Result};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

use actswap::onnx::builder::{Dim, model, node, opset, tensor_f32, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use actswap::onnx::{Model, SaveOptions};

/// Rounds for the large model and the sample model (the first can be set on the command line).
const LARGE_ROUNDS: usize = 15;
const SAMPLE_ROUNDS: usize = 200;
const WARMUP_ROUNDS: usize = 2;

/// One timed case: what it does, given the input file and an output path.
struct Case {
    label: &'static str,
    run: fn(&Path, &Path) -> Result<()>,
}

const FLOOR: usize = 0;
const DURABLE_FLOOR: usize = 1;

const CASES: &[Case] = &[
    Case {
        label: "std::fs read + write (floor)",
        run: |src, dst| {
            let bytes = std::fs::read(src)?;
            std::fs::write(dst, &bytes)?;
            Ok(())
        },
    },
    Case {
        label: "std::fs read + tmp/fsync/rename (durable floor)",
        run: |src, dst| {
            let bytes = std::fs::read(src)?;
            durable_write(dst, &bytes)
        },
    },
    Case {
        label: "Model::load (map + decode)",
        run: |src, _| {
            black_box(Model::load(src)?);
            Ok(())
        },
    },
    Case {
        label: "Model::load + save, unchanged",
        run: |src, dst| Model::load(src)?.save(dst, &SaveOptions::default()),
    },
    Case {
        label: "Model::load + proto_mut + save (re-encode)",
        run: |src, dst| {
            let mut m = Model::load(src)?;
            black_box(m.proto_mut());
            m.save(dst, &SaveOptions::default())
        },
    },
];

/// What std::fs needs to write as `save` does: a temporary file beside `dst`, fsync, rename.
fn durable_write(dst: &Path, bytes: &[u8]) -> Result<()> {
    let tmp = dst.with_extension("tmp");
    let mut f = File::create(&tmp)?;
    f.write_all(bytes)?;
    f.sync_all()?;
    drop(f);
    std::fs::rename(&tmp, dst)?;
    Ok(())
}

/// A model of about 50 MB: four seeded [1024, 3072] / [3072, 1024] weights in a MatMul chain.
fn write_large_model(path: &Path) -> Result<()> {
    let mut rng = StdRng::seed_from_u64(50);
    let mut g = GraphProto {
        name: Some("large".into()),
        input: vec![value(
            "x",
            DataType::Float,
            &[Dim::Size(1), Dim::Size(1024)],
        )],
        output: vec![value(
            "y",
            DataType::Float,
            &[Dim::Size(1), Dim::Size(1024)],
        )],
        ..Default::default()
    };
    let mut x = "x".to_string();
    for i in 0..4 {
        let dims = if i % 2 == 0 {
            [1024, 3072]
        } else {
            [3072, 1024]
        };
        let w: Vec<f32> = (0..dims[0] * dims[1])
            .map(|_| rng.random_range(-0.05..0.05))
            .collect();
        let wname = format!("w{i}");
        g.initializer.push(tensor_f32(&wname, &dims, &w));
        let mm = format!("mm{i}");
        g.node
            .push(node("MatMul", &mm, &[&x, &wname], &[&mm], vec![]));
        let out = if i == 3 {
            "y".to_string()
        } else {
            format!("relu{i}")
        };
        if i < 3 {
            g.node.push(node("Relu", &out, &[&mm], &[&out], vec![]));
        } else {
            g.node.push(node("Identity", &out, &[&mm], &[&out], vec![]));
        }
        x = out;
    }
    let proto = model(g, vec![opset("", 13)], "actswap-bench");
    let dir = path.parent().unwrap_or(Path::new(".")).to_path_buf();
    Model::from_proto(proto, dir).save(path, &SaveOptions::default())
}

fn median(mut v: Vec<Duration>) -> Duration {
    v.sort();
    v[v.len() / 2]
}

/// Runs every case `rounds` times, interleaved, and prints the table.
fn bench(title: &str, src: &Path, dir: &Path, rounds: usize) -> Result<()> {
    let size = std::fs::metadata(src)?.len() as f64;
    let dst = dir.join("out.onnx");
    let mut times: Vec<Vec<Duration>> = vec![Vec::new(); CASES.len()];
    for round in 0..WARMUP_ROUNDS + rounds {
        for (i, case) in CASES.iter().enumerate() {
            let start = Instant::now();
            (case.run)(src, &dst).with_context(|| case.label)?;
            if round >= WARMUP_ROUNDS {
                times[i].push(start.elapsed());
            }
        }
    }
    let medians: Vec<Duration> = times.into_iter().map(median).collect();
    let ms = |d: Duration| d.as_secs_f64() * 1e3;
    println!("\n{title}: {:.2} MB, median of {rounds} rounds", size / 1e6);
    println!(
        "  {:<48} {:>10} {:>9} {:>9} {:>9}",
        "case", "ms", "MB/s", "x floor", "x durable"
    );
    for (case, &m) in CASES.iter().zip(&medians) {
        println!(
            "  {:<48} {:>10.3} {:>9.0} {:>9.2} {:>9.2}",
            case.label,
            ms(m),
            size / 1e6 / m.as_secs_f64(),
            m.as_secs_f64() / medians[FLOOR].as_secs_f64(),
            m.as_secs_f64() / medians[DURABLE_FLOOR].as_secs_f64(),
        );
    }
    Ok(())
}

fn main() -> Result<()> {
    let large_rounds = std::env::args()
        .skip(1)
        .find_map(|a| a.parse().ok())
        .unwrap_or(LARGE_ROUNDS);
    let tmp = tempfile::tempdir()?;
    let large = tmp.path().join("large.onnx");
    write_large_model(&large)?;
    let sample_src: PathBuf =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-models/orchard-grader.onnx");
    let sample = tmp.path().join("orchard-grader.onnx");
    std::fs::copy(&sample_src, &sample)?;
    println!("model I/O against std::fs on the same bytes (files in the system temp folder)");
    bench(
        "generated model (4 float initializers)",
        &large,
        tmp.path(),
        large_rounds,
    )?;
    bench(
        "sample-models/orchard-grader.onnx",
        &sample,
        tmp.path(),
        SAMPLE_ROUNDS,
    )?;
    Ok(())
}
