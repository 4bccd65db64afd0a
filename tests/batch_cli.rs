//! `actswap batch` end to end: a folder of the bundled sample models, a model with external
//! data in a subfolder and a deliberately broken file. The broken one is listed with its error
//! and nothing is written for it; every other model is converted exactly as a single `swap`
//! converts it (byte for byte), and the summary is the same whatever `--jobs` is.
//! Exit codes: 0 all within budget, 1 some over budget or unserved, 2 some model failed.
//!
//! Sources: the reference for each converted model is `swap`'s output, whose rewrites
//! scripts/check_rewrites.py holds against the onnx checker and onnxruntime in CI (on the torch
//! fixtures); the external data layout is the ONNX external-data convention (a `location`
//! relative to the model's folder); the exit codes and refusals are this tool's documented
//! contract (README).

mod cli_support;

use std::path::{Path, PathBuf};
use std::process::Output;

use cli_support::{actswap, path, repo, stderr};
use serde_json::Value;

const SAMPLES: [&str; 5] = [
    "beehive-acoustics.onnx",
    "door-chime-keywords.onnx",
    "greenhouse-climate.onnx",
    "orchard-grader.onnx",
    "pump-vibration.onnx",
];

/// A conversion every sample model can take: approximations for the sigmoid and erf families.
const CONVERSION: [&str; 4] = ["--to", "silu=hard_swish", "--to", "gelu=gelu_tanh"];

/// models/: the five samples, thermal/ (a model with external data) and broken.onnx.
fn model_folder(root: &Path) -> PathBuf {
    let dir = root.join("models");
    std::fs::create_dir_all(dir.join("thermal")).unwrap();
    for name in SAMPLES {
        std::fs::copy(repo("sample-models").join(name), dir.join(name)).unwrap();
    }
    for name in ["model.onnx", "weights.bin"] {
        std::fs::copy(
            repo("tests/corpus/good-external").join(name),
            dir.join("thermal").join(name),
        )
        .unwrap();
    }
    std::fs::write(dir.join("broken.onnx"), b"\x08\x07\x12\x04half a model").unwrap();
    dir
}

/// Runs a batch that writes every converted model, whatever its verdict, to compare with
/// `swap`'s.
fn batch(models: &Path, out: &Path, extra: &[&str]) -> Output {
    let args = [
        &["batch", path(models), "-o", path(out)][..],
        &CONVERSION,
        &["--dim", "batch=1", "--no-latency", "--write-failing"],
        extra,
    ]
    .concat();
    actswap(&args)
}

#[test]
fn a_broken_model_is_listed_and_the_others_are_converted_as_swap_converts_them() {
    let tmp = tempfile::tempdir().unwrap();
    let models = model_folder(tmp.path());
    let out = tmp.path().join("converted");
    let md = tmp.path().join("summary.md");
    let run = batch(
        &models,
        &out,
        &["--jobs", "2", "--json", "--markdown", path(&md)],
    );
    assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
    let v: Value = serde_json::from_slice(&run.stdout).unwrap();
    let rows = v["models"].as_array().unwrap();
    assert_eq!(rows.len(), 7);
    // Discovery order: sorted by file name, folders included.
    let names: Vec<&str> = rows
        .iter()
        .map(|r| r["model"].as_str().unwrap())
        .map(|m| m.strip_prefix(path(&models)).unwrap())
        .collect();
    assert_eq!(
        names,
        [
            "/beehive-acoustics.onnx",
            "/broken.onnx",
            "/door-chime-keywords.onnx",
            "/greenhouse-climate.onnx",
            "/orchard-grader.onnx",
            "/pump-vibration.onnx",
            "/thermal/model.onnx"
        ]
    );
    let broken = &rows[1];
    assert_eq!(broken["verdict"], "error");
    assert!(broken["output"].is_null());
    assert!(broken["error"].as_str().unwrap().contains("broken.onnx"));
    assert!(!out.join("broken.onnx").exists());
    assert_eq!(v["totals"]["errors"], 1);
    assert_eq!(v["totals"]["models"], 7);

    for row in rows.iter().filter(|r| r["verdict"] != "error") {
        let source = PathBuf::from(row["model"].as_str().unwrap());
        let written = PathBuf::from(row["output"].as_str().unwrap());
        assert!(written.starts_with(&out), "{}", written.display());
        let single = tmp.path().join("single.onnx");
        let swap = actswap(
            &[
                &["swap", path(&source), "-o", path(&single)][..],
                &CONVERSION,
            ]
            .concat(),
        );
        assert_eq!(swap.status.code(), Some(0), "{}", stderr(&swap));
        assert_eq!(
            std::fs::read(&written).unwrap(),
            std::fs::read(&single).unwrap(),
            "{}",
            source.display()
        );
        assert!(row["sites"].as_u64().unwrap() > 0);
    }
    // External data stays beside its model.
    assert_eq!(
        std::fs::read(out.join("thermal/weights.bin")).unwrap(),
        std::fs::read(models.join("thermal/weights.bin")).unwrap()
    );
    // The inputs are untouched and nothing else was written there.
    for name in SAMPLES {
        assert_eq!(
            std::fs::read(models.join(name)).unwrap(),
            std::fs::read(repo("sample-models").join(name)).unwrap()
        );
    }

    let md = std::fs::read_to_string(&md).unwrap();
    assert!(md.contains("| model | sites |"), "{md}");
    assert!(md.contains("Failed models:"), "{md}");
    assert!(md.contains("certifies nothing"), "{md}");
}

#[test]
fn one_job_and_two_jobs_give_the_same_summary_and_report() {
    let tmp = tempfile::tempdir().unwrap();
    let models = model_folder(tmp.path());
    let mut outputs = Vec::new();
    for jobs in ["1", "2"] {
        let out = tmp.path().join(format!("out{jobs}"));
        let md = tmp.path().join(format!("summary{jobs}.md"));
        let html = tmp.path().join(format!("report{jobs}.html"));
        let run = batch(
            &models,
            &out,
            &[
                "--jobs",
                jobs,
                "--json",
                "--markdown",
                path(&md),
                "--report",
                path(&html),
            ],
        );
        assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
        // Output folders differ by name only: compare the summaries with it taken out.
        let json = String::from_utf8(run.stdout)
            .unwrap()
            .replace(path(&out), "OUT");
        let md = std::fs::read_to_string(&md)
            .unwrap()
            .replace(path(&out), "OUT");
        let html = std::fs::read_to_string(&html)
            .unwrap()
            .replace(path(&out), "OUT");
        outputs.push((json, md, html));
    }
    assert_eq!(outputs[0].0, outputs[1].0, "JSON differs");
    assert_eq!(outputs[0].1, outputs[1].1, "Markdown differs");
    assert_eq!(outputs[0].2, outputs[1].2, "HTML differs");
    for name in SAMPLES {
        assert_eq!(
            std::fs::read(tmp.path().join("out1").join(name)).unwrap(),
            std::fs::read(tmp.path().join("out2").join(name)).unwrap()
        );
    }
}

#[test]
fn exit_codes_follow_the_worst_model() {
    let tmp = tempfile::tempdir().unwrap();
    let a = tmp.path().join("a.onnx");
    let b = tmp.path().join("b.onnx");
    std::fs::copy(repo("sample-models/orchard-grader.onnx"), &a).unwrap();
    std::fs::copy(repo("sample-models/pump-vibration.onnx"), &b).unwrap();
    let base = [
        &["batch", path(&a), path(&b)][..],
        &CONVERSION,
        &["--dim", "batch=1", "--no-latency"],
    ]
    .concat();

    let out = tmp.path().join("ok");
    let run = actswap(&[&base[..], &["-o", path(&out)]].concat());
    assert_eq!(run.status.code(), Some(0), "{}", stderr(&run));
    let text = String::from_utf8_lossy(&run.stdout);
    assert!(text.contains("2 models: 2 pass"), "{text}");
    assert!(text.contains("caution: Drift measured on sample inputs certifies nothing"));
    assert!(out.join("a.onnx").exists() && out.join("b.onnx").exists());

    // A site budget tighter than hard-swish's drift: over budget, exit 1.
    let out = tmp.path().join("tight");
    let run = actswap(&[&base[..], &["-o", path(&out), "--site-max-abs", "1e-7"]].concat());
    assert_eq!(run.status.code(), Some(1), "{}", stderr(&run));
    assert!(String::from_utf8_lossy(&run.stdout).contains("over_budget"));
    // A model that does not pass is not written unless asked.
    assert!(!out.join("a.onnx").exists() && !out.join("b.onnx").exists());

    // Batch-level errors: no model found, two models written to one place, the output folder
    // being the input folder.
    let empty = tmp.path().join("empty");
    std::fs::create_dir(&empty).unwrap();
    let refused = |inputs: &[&str], out: &Path, message: &str| {
        let run = actswap(&[&["batch"][..], inputs, &["-o", path(out)], &CONVERSION].concat());
        assert_eq!(run.status.code(), Some(2), "{}", stderr(&run));
        assert!(stderr(&run).contains(message), "{}", stderr(&run));
    };
    refused(&[path(&empty)], &out, "no .onnx file below");
    refused(&[path(&a), path(&a)], &out, "would both be written");
    refused(&[path(tmp.path())], tmp.path(), "is an input folder");
}
