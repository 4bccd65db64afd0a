//! The sample models load, optimise and run in tract with concrete input shapes (batch 1) and
//! give the output shapes that onnxruntime gives for the same files (scripts/check_samples.py
//! runs them there, with the onnx checker) and that sample-models/manifest.json lists.

use std::collections::BTreeSet;
use std::path::PathBuf;

use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use serde_json::Value;
use tract_onnx::prelude::*;

/// File, input shape and output shape with the `batch` dimension set to 1.
const CASES: &[(&str, &[usize], &[usize])] = &[
    ("orchard-grader.onnx", &[1, 3, 32, 32], &[1, 5]),
    ("pump-vibration.onnx", &[1, 64], &[1, 1]),
    ("door-chime-keywords.onnx", &[1, 20, 49], &[1, 4]),
    ("greenhouse-climate.onnx", &[1, 16], &[1, 3]),
    ("beehive-acoustics.onnx", &[1, 1, 256], &[1, 3]),
];

/// Input offsets: as drawn, and shifted so door-chime's If takes each branch
/// (its condition is mean(mfcc) > 0; see sample-models/README.md).
const SHIFTS: [f32; 3] = [0.0, 0.5, -0.5];

fn samples_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("sample-models")
}

fn standard_normal(shape: &[usize], shift: f32) -> Tensor {
    let mut rng = StdRng::seed_from_u64(7);
    let n = shape.iter().product();
    let v: Vec<f32> = (0..n)
        .map(|_| rng.sample::<f32, _>(StandardNormal) + shift)
        .collect();
    Tensor::from_shape(shape, &v).unwrap()
}

#[test]
fn every_sample_runs_optimized_in_tract() -> TractResult<()> {
    for &(file, input_shape, output_shape) in CASES {
        let plan = tract_onnx::onnx()
            .model_for_path(samples_dir().join(file))?
            .with_input_fact(0, f32::fact(input_shape).into())?
            .into_optimized()?
            .into_runnable()?;
        for shift in SHIFTS {
            let out = plan.run(tvec!(standard_normal(input_shape, shift).into_tvalue()))?;
            assert_eq!(out.len(), 1, "{file}");
            assert_eq!(out[0].shape(), output_shape, "{file}");
            let view = out[0].to_plain_array_view::<f32>()?;
            assert!(view.iter().all(|v| v.is_finite()), "{file}: {view:?}");
        }
    }
    Ok(())
}

#[test]
fn cases_match_the_folder_and_the_manifest() {
    let on_disk: BTreeSet<String> = std::fs::read_dir(samples_dir())
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".onnx"))
        .collect();
    let cases: BTreeSet<String> = CASES.iter().map(|c| c.0.to_string()).collect();
    assert_eq!(on_disk, cases);

    let manifest: Value =
        serde_json::from_slice(&std::fs::read(samples_dir().join("manifest.json")).unwrap())
            .unwrap();
    let batch1 = |v: &Value| -> Vec<usize> {
        let shape = v[0]["shape"].as_array().unwrap();
        shape
            .iter()
            .map(|d| d.as_u64().map_or(1, |d| d as usize))
            .collect()
    };
    let models = manifest["models"].as_array().unwrap();
    assert_eq!(models.len(), CASES.len());
    for (m, &(file, input_shape, output_shape)) in models.iter().zip(CASES) {
        assert_eq!(m["file"], file);
        assert_eq!(batch1(&m["inputs"]), input_shape, "{file}");
        assert_eq!(batch1(&m["outputs"]), output_shape, "{file}");
    }
}
