//! Real blocks as torch 2.15 exports them, with named dynamic dims (`batch`, `seq`, `tokens`):
//! a conv net with squeeze-excitation, encoder and decoder layers with masks, rotary embeddings,
//! position ids from a cumulative sum of the mask and SwiGLU, windowed attention, MLPs; from the
//! TorchScript exporter (opset 17, `dynamic_axes`) and the dynamo exporter (opsets 18 and 20,
//! `dynamic_shapes`, which writes symbolic `value_info` for intermediate values).
//!
//! Source of the expected values: onnxruntime (a general-purpose reference runtime), as the
//! fixture script wrote them: graph outputs per input set (default session options), and the
//! tensors of `site_value_keys` for the last set (graph optimizations disabled). Fixtures live
//! under `tests/fixtures/torch-blocks/` (override the fixtures root with `ACTSWAP_FIXTURES_DIR`).
//!
//! Tolerance: 1e-5 absolute plus 1e-5 relative, as for the one-op exports of `run_exports.rs`: two
//! runtimes summing matrix products in different orders differ by a few f32 ulps, and these
//! blocks stay within it (the bound asked of them is 1e-4).

use std::path::{Path, PathBuf};

use actswap::run::inputs::{Binding, InputLoader, Source, read_tensor_file};
use actswap::run::{NamedTensor, TractModel, prepare};
use ndarray::ArrayD;
use ndarray_npy::NpzReader;

const ATOL: f64 = 1e-5;
const RTOL: f64 = 1e-5;

fn root() -> PathBuf {
    let fixtures = match std::env::var_os("ACTSWAP_FIXTURES_DIR") {
        Some(dir) => PathBuf::from(dir),
        None => Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures"),
    };
    fixtures.join("torch-blocks")
}

fn manifest() -> serde_json::Value {
    let file = root().join("manifest.json");
    let bytes = std::fs::read(&file).unwrap_or_else(|e| panic!("{}: {e}", file.display()));
    serde_json::from_slice(&bytes).unwrap()
}

/// `Err` with the first element off, or the shape mismatch.
fn compare(got: &NamedTensor, expected: &ArrayD<f64>) -> Result<(), String> {
    let got = got.to_f64().map_err(|e| e.to_string())?;
    if got.shape() != expected.shape() {
        return Err(format!(
            "shape {:?}, expected {:?}",
            got.shape(),
            expected.shape()
        ));
    }
    match got.iter().zip(expected.iter()).find(|(g, e)| {
        let err = (*g - *e).abs();
        err.is_nan() || err > ATOL + RTOL * e.abs()
    }) {
        Some((g, e)) => Err(format!("got {g}, expected {e}")),
        None => Ok(()),
    }
}

fn expected_file(dir: &Path, file: &str) -> ArrayD<f64> {
    let t = read_tensor_file(&dir.join(file), 1 << 26).unwrap();
    NamedTensor::new(file, t).to_f64().unwrap()
}

/// Runs one input set (its files, as `--input NAME=FILE` gives them) and compares the outputs.
fn check_set(
    model: &TractModel,
    dir: &Path,
    inputs: &serde_json::Value,
    outputs: &serde_json::Value,
    failures: &mut Vec<String>,
    what: &str,
) {
    let bindings: Vec<Binding> = inputs
        .as_object()
        .unwrap()
        .iter()
        .map(|(name, i)| Binding {
            input: Some(name.clone()),
            path: dir.join(i["file"].as_str().unwrap()),
        })
        .collect();
    let loaded = InputLoader::new(model.inputs())
        .load(Source::Files(&bindings))
        .unwrap_or_else(|e| panic!("{what}: {e}"));
    let out = match model.run(&loaded.samples[0], &[]) {
        Ok(out) => out,
        Err(e) => return failures.push(format!("{what}: {e}")),
    };
    for (name, o) in outputs.as_object().unwrap() {
        let got = out.iter().find(|t| &t.name == name).unwrap();
        if let Err(e) = compare(got, &expected_file(dir, o["file"].as_str().unwrap())) {
            failures.push(format!("{what} '{name}': {e}"));
        }
    }
}

#[test]
fn exported_blocks_match_onnxruntime_on_every_input_set() {
    let manifest = manifest();
    let mut failures = Vec::new();
    let mut sets = 0;
    for entry in manifest["models"].as_array().expect("models") {
        let id = entry["id"].as_str().unwrap();
        let dir = root().join(id);
        let model = match prepare(&std::fs::read(dir.join("model.onnx")).unwrap(), Some(&dir)) {
            Ok(m) => m,
            Err(e) => {
                failures.push(format!("{id}: {e}"));
                continue;
            }
        };
        let input_sets = entry["input_sets"].as_array().unwrap();
        for set in input_sets {
            sets += 1;
            let what = format!("{id} {}", set["name"].as_str().unwrap());
            check_set(
                &model,
                &dir,
                &set["inputs"],
                &set["outputs"],
                &mut failures,
                &what,
            );
        }
        // numpy's default float64 for one float32 input: converted, same outputs.
        if let Some(copy) = entry["float64_copy"].as_object() {
            let set = input_sets
                .iter()
                .find(|s| s["name"] == copy["set"])
                .unwrap();
            let mut inputs = set["inputs"].clone();
            inputs[copy["input"].as_str().unwrap()]["file"] = copy["file"].clone();
            let what = format!("{id} {} (float64 file)", set["name"].as_str().unwrap());
            check_set(&model, &dir, &inputs, &set["outputs"], &mut failures, &what);
        }
    }
    assert!(sets > 0, "no models under {}", root().display());
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn every_site_tensor_matches_onnxruntime() {
    let manifest = manifest();
    let mut failures = Vec::new();
    let mut checked = 0;
    for entry in manifest["models"].as_array().expect("models") {
        let id = entry["id"].as_str().unwrap();
        let dir = root().join(id);
        let Some(set) = entry["input_sets"]
            .as_array()
            .unwrap()
            .iter()
            .find(|s| s["site_values"].is_string())
        else {
            continue;
        };
        let keys = entry["site_value_keys"].as_object().unwrap();
        let model = prepare(&std::fs::read(dir.join("model.onnx")).unwrap(), Some(&dir)).unwrap();
        let bindings: Vec<Binding> = set["inputs"]
            .as_object()
            .unwrap()
            .iter()
            .map(|(name, i)| Binding {
                input: Some(name.clone()),
                path: dir.join(i["file"].as_str().unwrap()),
            })
            .collect();
        let samples = InputLoader::new(model.inputs())
            .from_bindings(&bindings)
            .unwrap();
        let names: Vec<String> = keys.values().map(|v| v.as_str().unwrap().into()).collect();
        let out = match model.run(&samples[0], &names) {
            Ok(out) => out,
            Err(e) => {
                failures.push(format!("{id}: {e}"));
                continue;
            }
        };
        let file = dir.join(set["site_values"].as_str().unwrap());
        let mut npz = NpzReader::new(std::fs::File::open(&file).unwrap()).unwrap();
        for key in npz.names().unwrap() {
            let name = keys[&key].as_str().unwrap();
            let expected: ArrayD<f64> = match npz.by_name::<ndarray::OwnedRepr<f32>, _>(&key) {
                Ok(a) => a.mapv(f64::from),
                Err(_) => npz
                    .by_name::<ndarray::OwnedRepr<i32>, _>(&key)
                    .unwrap()
                    .mapv(f64::from),
            };
            checked += 1;
            let got = out.iter().find(|t| t.name == name).unwrap();
            if let Err(e) = compare(got, &expected) {
                failures.push(format!("{id} '{name}': {e}"));
            }
        }
    }
    assert!(checked > 0, "no site values under {}", root().display());
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}
