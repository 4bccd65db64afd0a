//! Models exported by torch's exporters (TorchScript and dynamo, several opsets), run through
//! the runner with every activation site captured in the same run.
//!
//! Source of the expected values: onnxruntime (a general-purpose reference runtime), as written
//! by the fixture script to `outputs.npz` (graph outputs, default session options) and
//! `site_values.npz` (the tensors named in the manifest's `site_value_keys`, graph optimizations
//! disabled), from the inputs in `inputs.npz`. Fixtures live under `tests/fixtures/torch/`
//! (override the fixtures root with `ACTSWAP_FIXTURES_DIR`).
//!
//! Tolerance: the ladder's `Runtimes` rung (1e-5 absolute plus 1e-5 relative), as for the
//! conformance cases; two runtimes summing convolutions and matrix products in different orders
//! differ by a few f32 ulps.

mod ladder;

use std::path::{Path, PathBuf};

use actswap::run::inputs::{Binding, InputLoader};
use actswap::run::{NamedTensor, prepare};
use ndarray::ArrayD;
use ndarray_npy::NpzReader;

use ladder::Tol;

fn fixtures_root() -> PathBuf {
    match std::env::var_os("ACTSWAP_FIXTURES_DIR") {
        Some(dir) => PathBuf::from(dir),
        None => Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures"),
    }
}

fn read_npz_f32(path: &Path) -> Vec<(String, ArrayD<f64>)> {
    let mut npz = NpzReader::new(std::fs::File::open(path).unwrap()).unwrap();
    let names = npz.names().unwrap();
    names
        .into_iter()
        .map(|n| {
            let a: ArrayD<f32> = npz.by_name(&n).unwrap();
            (n, a.mapv(f64::from))
        })
        .collect()
}

/// The largest error over `got` vs `expected`, or a description of a shape mismatch.
fn worst_error(got: &NamedTensor, expected: &ArrayD<f64>) -> Result<f64, String> {
    let got = got.to_f64().map_err(|e| e.to_string())?;
    if got.shape() != expected.shape() {
        return Err(format!(
            "shape {:?}, expected {:?}",
            got.shape(),
            expected.shape()
        ));
    }
    let mut worst = 0.0f64;
    for (&g, &e) in got.iter().zip(expected.iter()) {
        let err = (g - e).abs();
        if err.is_nan() || err > Tol::Runtimes.bound(0.0, e) {
            return Err(format!("got {g}, expected {e}"));
        }
        worst = worst.max(err);
    }
    Ok(worst)
}

#[test]
fn exported_models_match_onnxruntime_at_outputs_and_every_site() {
    let root = fixtures_root().join("torch");
    let manifest: serde_json::Value = serde_json::from_slice(
        &std::fs::read(root.join("manifest.json"))
            .unwrap_or_else(|e| panic!("{}: {e}", root.join("manifest.json").display())),
    )
    .unwrap();
    let mut failures = Vec::new();
    let mut checked = 0;
    for entry in manifest["models"].as_array().expect("models") {
        let Some(keys) = entry["site_value_keys"].as_object() else {
            continue;
        };
        let id = entry["id"].as_str().unwrap();
        let dir = root.join(id);
        let model = prepare(&std::fs::read(dir.join("model.onnx")).unwrap(), Some(&dir))
            .unwrap_or_else(|e| panic!("{id}: {e}"));
        let binding = Binding {
            input: None,
            path: dir.join("inputs.npz"),
        };
        let samples = InputLoader::new(model.inputs())
            .from_bindings(&[binding])
            .unwrap();
        let sites: Vec<String> = keys
            .values()
            .map(|v| v.as_str().unwrap().to_string())
            .collect();
        let out = model
            .run(&samples[0], &sites)
            .unwrap_or_else(|e| panic!("{id}: {e}"));
        let find = |name: &str| out.iter().find(|t| t.name == name).unwrap();
        let mut expected = read_npz_f32(&dir.join("outputs.npz"));
        for (key, values) in read_npz_f32(&dir.join("site_values.npz")) {
            expected.push((keys[&key].as_str().unwrap().to_string(), values));
        }
        for (name, values) in &expected {
            checked += 1;
            if let Err(e) = worst_error(find(name), values) {
                failures.push(format!("{id} '{name}': {e}"));
            }
        }
    }
    assert!(checked > 0, "no exported models under {}", root.display());
    assert!(
        failures.is_empty(),
        "{} of {checked} tensors off:\n{}",
        failures.len(),
        failures.join("\n")
    );
}
