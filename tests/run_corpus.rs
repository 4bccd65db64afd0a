//! Malformed models and a model with external weights.
//!
//! The corpus under `tests/corpus/` is written by the fixture script with, per file, the defect
//! and how onnxruntime (a general-purpose reference runtime) reacts; the expected outputs of the
//! external-weights model come from onnxruntime's CPU provider. Override the corpus root with
//! `ACTSWAP_CORPUS_DIR`.

use std::path::{Path, PathBuf};

use actswap::run::inputs::{
    Binding, DEFAULT_MAX_ELEMENTS, InputLoader, RandomInputs, read_tensor_file,
};
use actswap::run::{NamedTensor, RunError, prepare};

fn corpus_root() -> PathBuf {
    match std::env::var_os("ACTSWAP_CORPUS_DIR") {
        Some(dir) => PathBuf::from(dir),
        None => Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/corpus"),
    }
}

/// Loads, then runs on one random sample: the error of whichever stage refuses.
fn load_and_run(bytes: &[u8], dir: &Path) -> Result<Vec<NamedTensor>, RunError> {
    let model = prepare(bytes, Some(dir))?;
    let samples = InputLoader::new(model.inputs()).random(&RandomInputs::default())?;
    model.run(&samples[0], &[])
}

#[test]
fn every_malformed_model_is_refused_with_one_line() {
    let dir = corpus_root().join("bad");
    let manifest: serde_json::Value =
        serde_json::from_slice(&std::fs::read(dir.join("manifest.json")).expect("corpus manifest"))
            .unwrap();
    let files = manifest["files"].as_array().expect("files");
    assert!(!files.is_empty());
    for entry in files {
        let file = entry["file"].as_str().unwrap();
        let defect = entry["defect"].as_str().unwrap();
        let bytes = std::fs::read(dir.join(file)).unwrap();
        let error = load_and_run(&bytes, &dir).expect_err(file).to_string();
        assert!(
            !error.contains('\n') && !error.is_empty(),
            "{file}: {error}"
        );
        if entry["expect_error"] == "not an ONNX model" {
            assert!(
                error.starts_with("not an ONNX model"),
                "{file} ({defect}): {error}"
            );
        }
    }
}

#[test]
fn external_weights_load_from_the_model_folder() {
    let dir = corpus_root().join("good-external");
    let bytes = std::fs::read(dir.join("model.onnx")).unwrap();
    let error = prepare(&bytes, None).expect_err("external data needs the folder");
    assert!(
        matches!(error, RunError::ExternalDataWithoutFolder { .. }),
        "{error}"
    );
    assert!(error.to_string().contains("weights.bin"), "{error}");

    let model = prepare(&bytes, Some(&dir)).unwrap();
    let binding = Binding::parse(&format!(
        "pixels={}",
        dir.join("input_pixels.npy").display()
    ))
    .unwrap();
    let samples = InputLoader::new(model.inputs())
        .from_bindings(&[binding])
        .unwrap();
    let out = model.run(&samples[0], &[]).unwrap();
    let expected =
        read_tensor_file(&dir.join("output_hot_spot.npy"), DEFAULT_MAX_ELEMENTS).unwrap();
    let expected = NamedTensor::new("hot_spot", expected).to_f64().unwrap();
    let got = out[0].to_f64().unwrap();
    assert_eq!(got.shape(), expected.shape());
    for (g, e) in got.iter().zip(expected.iter()) {
        assert!((g - e).abs() <= 1e-5 + 1e-5 * e.abs(), "{g} vs {e}");
    }
}
