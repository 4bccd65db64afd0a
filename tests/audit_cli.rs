//! `actswap audit` end to end on a bundled sample model: exit codes (0 within budget, 1 over
//! budget or unserved, 2 error), the JSON it documents, and that it writes a file only with -o.
//! The hard-swish bound is Howard et al. 2019 (hard-swish x*ReLU6(x+3)/6 against SiLU:
//! max |error| = 3 / (1 + e^3) = 0.14227761953270035 at |x| = 3).

mod cli_support;

use std::path::{Path, PathBuf};

use cli_support::{actswap, path, repo, stderr};
use serde_json::Value;

/// Published worst case of hard-swish against SiLU (Howard et al. 2019; see the module doc).
const HARD_SWISH_BOUND: f64 = 0.14227761953270035;

/// A private copy of a sample model, so the test can check nothing else appears beside it.
fn sample_copy(dir: &Path, name: &str) -> PathBuf {
    let src = repo("sample-models").join(name);
    let dst = dir.join(name);
    std::fs::copy(src, &dst).unwrap();
    dst
}

fn files_in(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    names
}

const FAST: [&str; 6] = ["--dim", "batch=2", "--samples", "2", "--runs", "2"];

#[test]
fn audit_reports_plan_and_drift_and_writes_nothing_without_o() {
    let tmp = tempfile::tempdir().unwrap();
    let m = sample_copy(tmp.path(), "orchard-grader.onnx");
    let before = std::fs::read(&m).unwrap();
    let args = [
        &[
            "audit",
            path(&m),
            "--to",
            "silu=hard_swish",
            "--to",
            "relu6=primitive",
        ][..],
        &["--json"],
        &FAST,
    ]
    .concat();
    let out = actswap(&args);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let keys: Vec<&str> = v.as_object().unwrap().keys().map(String::as_str).collect();
    assert_eq!(
        keys,
        [
            "schema_version",
            "actswap",
            "model",
            "converted_for",
            "budget",
            "budget_source",
            "inputs",
            "plan",
            "readiness",
            "drift",
            "verdict",
            "reasons"
        ]
    );
    assert_eq!(v["verdict"], "pass");
    assert_eq!(v["reasons"], serde_json::json!([]));
    // --to alone: the documented default budget, no target to check the whole model against.
    assert_eq!(v["budget_source"], "default");
    assert_eq!(v["budget"]["min_cosine"], 0.999);
    assert!(v["readiness"].is_null());
    assert_eq!(v["drift"]["within_budget"], true);
    assert_eq!(v["drift"]["samples"], 2);
    // The silu site went to hard-swish: its local drift is real and within the published bound.
    let silu = v["drift"]["sites"]
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["kind_a"] == "silu")
        .expect("a silu site");
    assert_eq!(silu["kind_b"], "hard_swish");
    let local = silu["local"]["max_abs"].as_f64().unwrap();
    assert!(local > 0.0 && local <= HARD_SWISH_BOUND, "{local}");
    assert!(
        silu["bound_over_range"].as_f64().unwrap() <= HARD_SWISH_BOUND + 1e-12,
        "{silu}"
    );
    for output in v["drift"]["outputs"].as_array().unwrap() {
        let m = &output["metrics"];
        for k in ["max_abs", "mean_abs", "rms", "max_rel", "cosine"] {
            assert!(m[k].is_number(), "{k}: {output}");
        }
    }
    assert!(
        v["drift"]["caution"]
            .as_str()
            .unwrap()
            .contains("certifies nothing")
    );
    // Nothing written: the folder holds the model alone, unchanged.
    assert_eq!(files_in(tmp.path()), ["orchard-grader.onnx"]);
    assert_eq!(std::fs::read(&m).unwrap(), before);
}

#[test]
fn audit_with_o_writes_what_swap_writes() {
    let tmp = tempfile::tempdir().unwrap();
    let m = sample_copy(tmp.path(), "pump-vibration.onnx");
    let audited = tmp.path().join("audited.onnx");
    let swapped = tmp.path().join("swapped.onnx");
    let conversion = ["--to", "gelu=gelu_tanh", "--to", "mish=primitive"];
    let args = [
        &["audit", path(&m)][..],
        &conversion,
        &["-o", path(&audited)],
        &FAST,
    ]
    .concat();
    let out = actswap(&args);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8_lossy(&out.stdout);
    assert!(
        text.contains(&format!("wrote {}", audited.display())),
        "{text}"
    );
    assert!(text.contains("caution: Drift measured on sample inputs certifies nothing"));
    assert!(text.ends_with("\nverdict: pass\n"), "{text}");
    assert_eq!(
        text.matches("verdict").count() - text.matches("this verdict").count(),
        1
    );

    let out = actswap(
        &[
            &["swap", path(&m)][..],
            &conversion,
            &["-o", path(&swapped)],
        ]
        .concat(),
    );
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert_eq!(
        std::fs::read(&audited).unwrap(),
        std::fs::read(&swapped).unwrap()
    );

    // The written model scans as the conversion asked: no exact gelu is left.
    let out = actswap(&["scan", path(&audited), "--json"]);
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert!(v["counts"].get("gelu").is_none(), "{}", v["counts"]);
    assert!(v["counts"]["gelu_tanh"].as_u64().unwrap() >= 2);
}

#[test]
fn audit_over_budget_exits_1_with_offenders_first() {
    let tmp = tempfile::tempdir().unwrap();
    let m = sample_copy(tmp.path(), "orchard-grader.onnx");
    let out_file = tmp.path().join("out.onnx");
    let args = [
        &["audit", path(&m), "--to", "silu=hard_swish", "--json"][..],
        &[
            "--site-max-abs",
            "1e-6",
            "--no-latency",
            "-o",
            path(&out_file),
        ],
        &FAST[..4],
    ]
    .concat();
    let out = actswap(&args);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["drift"]["within_budget"], false);
    let offenders = v["drift"]["offenders"].as_array().unwrap();
    assert!(!offenders.is_empty());
    assert_eq!(offenders[0]["scope"], "site");
    // Offending sites come first in the site list.
    assert_eq!(v["drift"]["sites"][0]["output"], offenders[0]["name"]);
    assert!(v["drift"]["latency"].is_null());
    assert_eq!(v["verdict"], "over_budget");
    // Not written: a model that fails is written only when asked.
    assert!(!out_file.exists());
    assert!(v.get("written").is_none());
    let out = actswap(&[args.as_slice(), &["--write-failing"]].concat());
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(out_file.exists());
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["written"], path(&out_file));
}

#[test]
fn audit_with_an_unserved_site_exits_1() {
    let tmp = tempfile::tempdir().unwrap();
    let m = sample_copy(tmp.path(), "orchard-grader.onnx");
    // A target that accepts no op for the sigmoid family: the silu and swish sites are unserved.
    let profile = tmp.path().join("relu-only.toml");
    std::fs::write(
        &profile,
        "name = \"relu-only\"\ndescription = \"test target\"\nprefer = \"primitive\"\n\
         max_approx_error = 0.0\n\n[ops]\nAdd = \"*\"\nMul = \"*\"\nRelu = \"*\"\nClip = \"*\"\n\
         Conv = \"*\"\nGemm = \"*\"\nGlobalAveragePool = \"*\"\nFlatten = \"*\"\n",
    )
    .unwrap();
    let args = [
        &["audit", path(&m), "--target", path(&profile), "--json"][..],
        &["--no-latency"],
        &FAST[..4],
    ]
    .concat();
    let out = actswap(&args);
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["drift"]["within_budget"], true);
    // The converted model runs on the target (the sites it cannot serve stay as they were, and
    // their Sigmoid is refused too), so the one verdict is the first failing reason.
    assert_eq!(v["verdict"], "not_ready");
    let unserved = v["plan"]["sites"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["action"] == "unserved")
        .count();
    assert!(unserved >= 2, "{}", v["plan"]);
}

#[test]
fn audit_errors_exit_2_with_one_line_and_write_nothing() {
    let tmp = tempfile::tempdir().unwrap();
    let junk = tmp.path().join("notes.onnx");
    std::fs::write(&junk, b"greenhouse sensor notes, not a model").unwrap();
    let out_file = tmp.path().join("out.onnx");
    let out = actswap(&[
        "audit",
        path(&junk),
        "--target",
        "core-opset13",
        "-o",
        path(&out_file),
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    assert_eq!(err.trim_end().lines().count(), 1, "{err}");
    assert!(err.starts_with("actswap: error:"), "{err}");
    assert!(!out_file.exists());

    // No conversion given.
    let m = sample_copy(tmp.path(), "orchard-grader.onnx");
    let out = actswap(&["audit", path(&m)]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("say what to convert to"));

    // A symbolic dim left unset.
    let out = actswap(&[
        "audit",
        path(&m),
        "--target",
        "core-opset13",
        "-o",
        path(&out_file),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("'batch'"), "{}", stderr(&out));
    assert!(!out_file.exists());
}

#[test]
fn audit_measures_the_silu_inside_door_chimes_if_branch() {
    let tmp = tempfile::tempdir().unwrap();
    let m = sample_copy(tmp.path(), "door-chime-keywords.onnx");
    // mean(mfcc) > 0 takes the then-branch, which holds the silu (sample-models/README.md).
    let mfcc = ndarray::Array3::<f32>::from_shape_fn((1, 20, 49), |(_, c, t)| {
        0.5 + 3.0 * ((c * 49 + t) as f32 * 0.37).sin()
    });
    let input = tmp.path().join("mfcc.npy");
    ndarray_npy::write_npy(&input, &mfcc).unwrap();
    let binding = format!("mfcc={}", input.display());
    let args = [
        "audit",
        path(&m),
        "--to",
        "silu=hard_swish",
        "--input",
        &binding,
        "--no-latency",
        "--json",
    ];
    let out = actswap(&args);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let v: Value = serde_json::from_slice(&out.stdout).unwrap();
    let sites = v["drift"]["sites"].as_array().unwrap();
    let silu = sites
        .iter()
        .find(|s| s["output"] == "branch.then.act")
        .unwrap();
    assert_eq!(silu["graph"], "main/branch.if.then_branch");
    let local = silu["local"]["max_abs"].as_f64().unwrap();
    let propagated = silu["propagated"]["max_abs"].as_f64().unwrap();
    assert!(local > 0.0 && local <= HARD_SWISH_BOUND, "{local}");
    // Nothing upstream of the branch changed: the propagated drift is the local drift.
    assert!((propagated - local).abs() <= 1e-6, "{propagated} {local}");
    // The else-branch relu is not reached on this input, and says so.
    let relu = sites
        .iter()
        .find(|s| s["output"] == "branch.else.act")
        .unwrap();
    assert!(relu["local"].is_null(), "{relu}");
    let notes = relu["notes"].to_string();
    assert!(notes.contains("not reached on these samples"), "{notes}");
}
