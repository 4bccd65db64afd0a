//! Fitted forms from the command line: `--to KIND=fitted[:N]`, `--fit-range`, the planner's
//! fallback to a fitted form under a target, ranges observed by `audit`, the catalogue's bounds,
//! and the errors of bad flags (exit 2, one line).
//!
//! Sources: the SiLU/hard-swish bound 3 / (1 + e^3) = 0.1423 (Howard et al. 2019 against Elfwing
//! et al. 2017) is the figure to beat; bounds are checked against dense evaluation of the
//! catalogue's reference in tests/fitted_forms.rs and against onnxruntime in
//! scripts/check_fitted_models.py.

mod cli_support;

use cli_support::{actswap, path, repo, stderr};
use serde_json::Value;

const HARD_SWISH_BOUND: f64 = 0.14227761953270035;
const FAST: [&str; 6] = ["--dim", "batch=2", "--samples", "2", "--runs", "2"];

fn orchard() -> String {
    repo("sample-models/orchard-grader.onnx")
        .display()
        .to_string()
}

fn json(out: &std::process::Output) -> Value {
    assert!(out.status.code().is_some_and(|c| c <= 1), "{}", stderr(out));
    serde_json::from_slice(&out.stdout).unwrap()
}

fn sites_of<'a>(plan: &'a Value, kind: &str) -> Vec<&'a Value> {
    plan["sites"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["kind"] == kind)
        .collect()
}

#[test]
fn swap_writes_a_fitted_form_with_the_declared_range() {
    let out = actswap(&[
        "swap",
        &orchard(),
        "--dry-run",
        "--json",
        "--to",
        "silu=fitted:8",
        "--fit-range=silu=-8,8",
    ]);
    let v = json(&out);
    let silu = sites_of(&v, "silu");
    assert!(!silu.is_empty());
    for s in silu {
        assert_eq!(s["action"], "rewrite");
        assert_eq!(s["to"]["form"], "fitted");
        let fit = &s["fit"];
        assert_eq!(fit["segments"], 8);
        assert_eq!(fit["range"], serde_json::json!([-8.0, 8.0]));
        assert_eq!(fit["range_source"], "declared");
        let inside = fit["in_range"]["max_abs"].as_f64().unwrap();
        assert!(inside < HARD_SWISH_BOUND / 10.0, "{inside}");
        let reals = fit["over_reals"]["max_abs"].as_f64().unwrap();
        assert!(reals >= inside);
        assert_eq!(s["error_bound"]["max_abs"].as_f64().unwrap(), reals);
        let ops: Vec<&str> = s["to"]["ops"]
            .as_array()
            .unwrap()
            .iter()
            .map(|o| o.as_str().unwrap())
            .collect();
        assert!(
            ops.iter()
                .all(|o| ["Max", "Min", "Sub", "Mul", "Add"].contains(o))
        );
    }
}

#[test]
fn without_a_count_the_fewest_segments_within_the_allowance() {
    // No target: the allowance is 0.01; the default range is [-8, 8].
    let v = json(&actswap(&[
        "swap",
        &orchard(),
        "--dry-run",
        "--json",
        "--to",
        "silu=fitted",
    ]));
    let s = sites_of(&v, "silu")[0];
    let fit = &s["fit"];
    assert_eq!(fit["range_source"], "default");
    assert!(fit["in_range"]["max_abs"].as_f64().unwrap() <= 0.01);
    let k = fit["segments"].as_u64().unwrap();
    let fewer = format!("silu=fitted:{}", k - 1);
    let v = json(&actswap(&[
        "swap",
        &orchard(),
        "--dry-run",
        "--json",
        "--to",
        &fewer,
    ]));
    let s = sites_of(&v, "silu")[0];
    assert!(s["fit"]["in_range"]["max_abs"].as_f64().unwrap() > 0.01);
}

#[test]
fn swap_given_inputs_fits_over_the_ranges_audit_observes_on_them() {
    let samples = ["--dim", "batch=1", "--samples", "2", "--seed", "3"];
    let swap = json(&actswap(
        &[
            &[
                "swap",
                &orchard(),
                "--dry-run",
                "--json",
                "--to",
                "silu=fitted:8",
            ][..],
            &samples,
        ]
        .concat(),
    ));
    let audit = json(&actswap(
        &[
            &[
                "audit",
                &orchard(),
                "--json",
                "--no-latency",
                "--to",
                "silu=fitted:8",
            ][..],
            &samples,
        ]
        .concat(),
    ));
    let (s, a) = (
        sites_of(&swap, "silu")[0],
        sites_of(&audit["plan"], "silu")[0],
    );
    assert_eq!(s["fit"]["range_source"], "observed");
    assert_eq!(s["fit"], a["fit"], "the same samples give the same fit");
    // The range is the observed one widened by a quarter of its width on each side.
    let r = &audit["drift"]["sites"]
        .as_array()
        .unwrap()
        .iter()
        .find(|d| d["id_a"] == s["site"])
        .unwrap()["input_range"];
    let (lo, hi) = (r["min"].as_f64().unwrap(), r["max"].as_f64().unwrap());
    let pad = 0.25 * (hi - lo);
    assert_eq!(s["fit"]["range"], serde_json::json!([lo - pad, hi + pad]));
    // Without an input option, the default range.
    let plain = json(&actswap(&[
        "swap",
        &orchard(),
        "--dry-run",
        "--json",
        "--to",
        "silu=fitted:8",
    ]));
    assert_eq!(
        sites_of(&plain, "silu")[0]["fit"]["range_source"],
        "default"
    );
}

#[test]
fn a_tight_target_falls_back_to_fitted_forms_over_observed_ranges() {
    let tmp = tempfile::tempdir().unwrap();
    let profile = tmp.path().join("tight.toml");
    let text = std::fs::read_to_string(repo("profiles/piecewise-linear.toml"))
        .unwrap()
        .replace("name = \"piecewise-linear\"", "name = \"tight\"")
        .replace("max_approx_error = 0.3", "max_approx_error = 0.05");
    std::fs::write(&profile, text).unwrap();
    let out = actswap(
        &[
            &["audit", &orchard(), "--target", path(&profile), "--json"][..],
            &FAST,
        ]
        .concat(),
    );
    let v = json(&out);
    let plan = &v["plan"];
    let silu = sites_of(plan, "silu")[0];
    assert_eq!(silu["action"], "rewrite", "{silu}");
    assert_eq!(silu["to"]["form"], "fitted");
    assert_eq!(silu["fit"]["range_source"], "observed");
    assert!(silu["fit"]["in_range"]["max_abs"].as_f64().unwrap() <= 0.05);
    let passed: Vec<&str> = silu["alternatives"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| a.as_str().unwrap())
        .collect();
    assert!(
        passed.iter().any(|a| a.contains("hard_swish")),
        "hard-swish (0.1423) was weighed and passed over: {passed:?}"
    );
    // The observed range, widened by a quarter of its width on each side, holds the drift
    // report's observed input range.
    let range = &silu["fit"]["range"];
    let drift_site = v["drift"]["sites"]
        .as_array()
        .unwrap()
        .iter()
        .find(|d| d["id_a"] == silu["site"])
        .unwrap();
    let (min, max) = (
        drift_site["input_range"]["min"].as_f64().unwrap(),
        drift_site["input_range"]["max"].as_f64().unwrap(),
    );
    let pad = 0.25 * (max - min);
    assert!((range[0].as_f64().unwrap() - (min - pad)).abs() < 1e-9);
    assert!((range[1].as_f64().unwrap() - (max + pad)).abs() < 1e-9);
    // The bound over the observed range is the fit's, not 0, and the measured local drift stays
    // within it (plus float32 rounding).
    let bound = drift_site["bound_over_range"].as_f64().unwrap();
    assert!(bound > 0.0 && bound <= silu["fit"]["in_range"]["max_abs"].as_f64().unwrap());
    let local = drift_site["local"]["max_abs"].as_f64().unwrap();
    assert!(local <= bound + 1e-5, "{local} > {bound}");

    // A cap of 1 segment is not enough: unserved, saying why.
    let capped = tmp.path().join("capped.toml");
    let text = std::fs::read_to_string(&profile).unwrap().replace(
        "max_approx_error = 0.05",
        "max_approx_error = 0.05\nmax_fit_segments = 1",
    );
    std::fs::write(&capped, text).unwrap();
    let out = actswap(&[
        "swap",
        &orchard(),
        "--dry-run",
        "--json",
        "--target",
        path(&capped),
    ]);
    let v = json(&out);
    let silu = sites_of(&v, "silu")[0];
    assert_eq!(silu["action"], "unserved");
    let reason = silu["reason"].as_str().unwrap();
    assert!(
        reason.contains("silu:fitted: 1 segment(s) reach"),
        "{reason}"
    );
}

#[test]
fn catalog_prints_fitted_bounds() {
    let out = actswap(&["catalog", "silu"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("Fitted forms"), "{text}");
    for k in [4, 8, 16, 32] {
        assert!(
            text.contains(&format!("  {k} segments: max |error| ")),
            "{text}"
        );
    }
    let out = actswap(&["catalog", "squared_relu"]);
    let text = String::from_utf8(out.stdout).unwrap();
    assert!(text.contains("no linear asymptote"), "{text}");
}

#[test]
fn bad_fitted_flags_are_one_line_errors() {
    for args in [
        vec!["--to", "silu=fitted:0"],
        vec!["--to", "silu=fitted:many"],
        vec!["--to", "silu=hard_swish:fitted"],
        vec!["--to", "silu=fitted", "--fit-range", "3,1"],
        vec!["--to", "silu=fitted", "--fit-range", "sillu=-1,1"],
        vec!["--to", "silu=fitted", "--fit-range", "-1"],
    ] {
        let out = actswap(&[&["swap", &orchard(), "--dry-run"][..], &args].concat());
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", stderr(&out));
        let err = stderr(&out);
        assert_eq!(err.trim().lines().count(), 1, "{args:?}: {err}");
    }
}
