//! The scanner against outside references: the ONNX conformance cases (onnx 1.23.2's case
//! generator: each fused op and the standard's own function-body expansion of it) and models
//! exported by torch 2.15 with both exporters, whose true sites the fixture script recorded by
//! walking the exported graph and checking each against the f64 formula on onnxruntime values.

mod ladder;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use actswap::catalog::ParamValue;
use actswap::onnx::{Model, ModelIndex};
use actswap::scan::{self, ScanReport};
use ladder::Tol;
use serde_json::Value;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn json(path: &Path) -> Value {
    serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap()
}

fn scan_file(path: &Path) -> ScanReport {
    let model = Model::load(path).unwrap();
    let index = ModelIndex::build(&model).unwrap();
    scan::scan(&index)
}

fn close(got: f64, want: f64, tol: Tol) -> bool {
    got == want || tol.holds(got, want)
}

/// The catalogue kind and parameters an ONNX op computes with the given attributes (ONNX
/// operator schemas: defaults LeakyRelu 0.01, Elu 1, Selu's constants as float32 (1.6732632,
/// 1.050701), HardSigmoid
/// 0.2 / 0.5, ThresholdedRelu 1, Celu 1; Swish alpha 1 is SiLU).
fn spec_kind(op: &str, attrs: &Value) -> (&'static str, Vec<(&'static str, f64)>) {
    let a = |name: &str, default: f64| attrs.get(name).and_then(Value::as_f64).unwrap_or(default);
    match op {
        "Relu" => ("relu", vec![]),
        "LeakyRelu" => ("leaky_relu", vec![("alpha", a("alpha", 0.01_f32 as f64))]),
        "Elu" => ("elu", vec![("alpha", a("alpha", 1.0))]),
        "Selu" => (
            "selu",
            vec![
                ("alpha", a("alpha", 1.673_263_2_f32 as f64)),
                ("gamma", a("gamma", 1.050_701_f32 as f64)),
            ],
        ),
        "Celu" => ("celu", vec![("alpha", a("alpha", 1.0))]),
        "ThresholdedRelu" => ("thresholded_relu", vec![("alpha", a("alpha", 1.0))]),
        "HardSigmoid" => (
            "hard_sigmoid",
            vec![
                ("alpha", a("alpha", 0.2_f32 as f64)),
                ("beta", a("beta", 0.5)),
            ],
        ),
        "Sigmoid" => ("sigmoid", vec![]),
        "Tanh" => ("tanh", vec![]),
        "Softplus" => ("softplus", vec![]),
        "Softsign" => ("softsign", vec![]),
        "HardSwish" => ("hard_swish", vec![]),
        "Mish" => ("mish", vec![]),
        "Gelu" if attrs.get("approximate").and_then(Value::as_str) == Some("tanh") => {
            ("gelu_tanh", vec![])
        }
        "Gelu" => ("gelu", vec![]),
        "Swish" if a("alpha", 1.0) == 1.0 => ("silu", vec![]),
        "Swish" => ("swish", vec![("beta", a("alpha", 1.0))]),
        other => panic!("no spec kind for {other}"),
    }
}

/// Source: onnx 1.23.2 conformance cases. A fused case is one fused site of its op's kind with
/// the case's attributes; an `_expanded` case (the standard's function body) is one decomposed
/// site of the same kind and parameters. PRelu and Clip cases feed the slope and bounds as graph
/// inputs, so their bodies are functions of several tensors: the fused node is still reported
/// (flagged not rewritable) and the expansion is not an activation of one tensor.
#[test]
fn conformance_cases_are_identified() {
    let dir = root().join("tests/fixtures/conformance");
    let manifest = json(&dir.join("manifest.json"));
    let cases = manifest["cases"].as_array().unwrap();
    let attrs_of: BTreeMap<&str, &Value> = cases
        .iter()
        .filter(|c| !c["expanded"].as_bool().unwrap())
        .map(|c| (c["name"].as_str().unwrap(), &c["attributes"]))
        .collect();
    let mut checked = 0;
    for case in cases {
        let name = case["name"].as_str().unwrap();
        let op = case["op_type"].as_str().unwrap();
        let expanded = case["expanded"].as_bool().unwrap();
        let report = scan_file(&dir.join(case["dir"].as_str().unwrap()).join("model.onnx"));
        let multi_input = case["info"]["inputs"].as_array().unwrap().len() > 1;
        let elem = case["info"]["inputs"][0]["elem_type"].as_str().unwrap();
        if !matches!(elem, "FLOAT" | "FLOAT16" | "DOUBLE" | "BFLOAT16") {
            // Activation sites are float computations: an integer Clip (the int8 cases of the
            // ONNX Clip schema's tests) is index or quantized arithmetic, never a site.
            assert!(report.sites.is_empty(), "{name}: {:?}", report.sites);
            continue;
        }
        if op == "PRelu" || op == "Clip" {
            if !expanded {
                assert_eq!(report.sites.len(), 1, "{name}: {:?}", report.sites);
                let s = &report.sites[0];
                assert_eq!(s.spelling, scan::Spelling::Fused, "{name}");
                assert_eq!(s.rewritable, !multi_input, "{name}: {s:?}");
            }
            continue;
        }
        let attrs = attrs_of[case["fused_case"].as_str().unwrap()];
        let (kind, params) = spec_kind(op, attrs);
        // A scalar function cannot tell celu(alpha = 1) from elu(1); none of these cases uses it.
        assert_eq!(report.sites.len(), 1, "{name}: {:?}", report.sites);
        let s = &report.sites[0];
        assert_eq!(s.kind.id, kind, "{name}");
        let want_form = if expanded {
            scan::Spelling::Decomposed
        } else {
            scan::Spelling::Fused
        };
        assert_eq!(s.spelling, want_form, "{name}");
        assert_eq!(
            s.input,
            case["info"]["inputs"][0]["name"].as_str().unwrap(),
            "{name}"
        );
        assert_eq!(
            s.output,
            case["info"]["outputs"][0]["name"].as_str().unwrap(),
            "{name}"
        );
        assert!(s.rewritable, "{name}: {:?}", s.notes);
        for (p, want) in params {
            let got = match s.param(p).unwrap_or_else(|| panic!("{name}: no param {p}")) {
                ParamValue::Scalar(v) => *v,
                other => panic!("{name}: {p} is {other:?}"),
            };
            // Fused attributes are read exactly; expanded bodies hold the same float32 (or
            // float16) constants, recovered numerically.
            assert!(
                close(got, want, Tol::Attribute),
                "{name}: {p} = {got}, want {want}"
            );
        }
        checked += 1;
    }
    assert!(checked >= 60, "{checked}");
}

fn param_matches(got: &ParamValue, want: &Value) -> bool {
    match (got, want) {
        (ParamValue::Scalar(g), Value::Number(w)) => close(*g, w.as_f64().unwrap(), Tol::Recovered),
        (ParamValue::PerChannel(g), Value::Array(w)) => {
            g.len() == w.len()
                && g.iter()
                    .zip(w)
                    .all(|(g, w)| close(*g, w.as_f64().unwrap(), Tol::Recovered))
        }
        (ParamValue::Scalar(g), Value::Array(w)) => w
            .iter()
            .all(|w| close(*g, w.as_f64().unwrap(), Tol::Recovered)),
        _ => false,
    }
}

/// Source: torch 2.15 exports (TorchScript exporter at opsets 11/13/17, dynamo exporter at 18/20,
/// optimised and not), true sites recorded in tests/fixtures/torch/manifest.json. Every true site
/// is found with its kind and parameters (to 1e-5 relative), no other site is reported, and no
/// near miss (x*sigmoid(y), x*sigmoid(b*y), 0.5x(1+erf(x/1.3)), x*HardSigmoid(x) with ONNX's
/// default alpha) is reported as the kind it imitates.
#[test]
fn torch_exports_give_exactly_the_true_sites() {
    let dir = root().join("tests/fixtures/torch");
    let manifest = json(&dir.join("manifest.json"));
    let mut models = 0;
    let mut sites = 0;
    for m in manifest["models"].as_array().unwrap() {
        if m.get("skipped").is_some_and(|s| !s.is_null()) {
            continue;
        }
        let id = m["id"].as_str().unwrap();
        let report = scan_file(&dir.join(id).join("model.onnx"));
        let truth = m["sites"].as_array().unwrap();
        for t in truth {
            let out = t["output"].as_str().unwrap();
            let found = report
                .sites
                .iter()
                .find(|s| s.output == out)
                .unwrap_or_else(|| panic!("{id}: true site {} ({}) not found", t["id"], t["kind"]));
            assert_eq!(found.kind.id, t["kind"].as_str().unwrap(), "{id}: {out}");
            assert_eq!(found.input, t["input"].as_str().unwrap(), "{id}: {out}");
            for (p, want) in t["params"].as_object().unwrap() {
                if found.kind.id == "relu6" {
                    // relu6 is clip(0, 6) by definition; the manifest spells out the bounds.
                    let bound = if p == "min" { 0.0 } else { 6.0 };
                    assert_eq!(want.as_f64(), Some(bound), "{id}: {out}: {p}");
                    continue;
                }
                let kind = found.kind;
                if kind.param_index(p).is_none() {
                    // torch's Softplus(beta = 1, threshold = 20) is the standard softplus: beta 1
                    // is the formula, and the threshold switches to x where the two agree to
                    // float precision (PyTorch docs).
                    assert!(
                        found.kind.id == "softplus" && (p != "beta" || want == 1.0),
                        "{id}: {out}: {p}"
                    );
                    continue;
                }
                let got = found
                    .param(p)
                    .unwrap_or_else(|| panic!("{id}: {out}: no param {p}"));
                assert!(
                    param_matches(got, want),
                    "{id}: {out}: {p} = {got:?}, want {want}"
                );
            }
            sites += 1;
        }
        for s in &report.sites {
            assert!(
                truth.iter().any(|t| t["output"] == s.output.as_str()),
                "{id}: extra site {} {} -> {}",
                s.kind.id,
                s.input,
                s.output
            );
        }
        for nm in m["near_misses"].as_array().unwrap() {
            let out = nm["output"].as_str().unwrap();
            for s in report.sites.iter().filter(|s| s.output == out) {
                assert!(
                    !nm["not_kinds"]
                        .as_array()
                        .unwrap()
                        .iter()
                        .any(|k| k == s.kind.id),
                    "{id}: near miss {out} reported as {}",
                    s.kind.id
                );
            }
        }
        models += 1;
    }
    assert!(
        models >= 15 && sites >= 150,
        "{models} models, {sites} sites"
    );
}
