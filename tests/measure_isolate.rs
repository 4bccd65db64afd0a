//! Isolated sites against onnxruntime 1.32: every activation site of the torch 2.15 exports
//! (tests/fixtures/torch), cut out of its model, fed the site input onnxruntime computed and
//! recorded in site_values.npz, must yield the site output onnxruntime recorded there.
//! Tolerance 1e-5 absolute plus 1e-5 relative, as in tests/run_exports.rs (two runtimes round
//! float32 differently by a few ulps).

mod measure_support;

use std::collections::HashMap;

use actswap::measure::isolate::{InputDecl, isolate};
use actswap::onnx::ModelIndex;
use actswap::run::{NamedTensor, Tensor, prepare};
use actswap::scan;
use measure_support as fx;
use ndarray::ArrayD;
use ndarray_npy::NpzReader;

#[test]
fn isolated_sites_reproduce_onnxruntime_site_values() {
    let root = fx::fixture_dir("");
    let manifest: serde_json::Value =
        serde_json::from_slice(&std::fs::read(root.join("manifest.json")).unwrap()).unwrap();
    let mut checked = 0;
    for entry in manifest["models"].as_array().unwrap() {
        let Some(keys) = entry["site_value_keys"].as_object() else {
            continue;
        };
        let id = entry["id"].as_str().unwrap();
        let key_of: HashMap<&str, &str> = keys
            .iter()
            .map(|(k, v)| (v.as_str().unwrap(), k.as_str()))
            .collect();
        let mut npz = NpzReader::new(
            std::fs::File::open(fx::fixture_dir(id).join("site_values.npz")).unwrap(),
        )
        .unwrap();
        let model = fx::load(id);
        let index = ModelIndex::build(&model).unwrap();
        for site in scan::scan(&index).sites {
            let (Some(ki), Some(ko)) = (
                key_of.get(site.input.as_str()),
                key_of.get(site.output.as_str()),
            ) else {
                continue;
            };
            let x: ArrayD<f32> = npz.by_name(ki).unwrap();
            let want: ArrayD<f32> = npz.by_name(ko).unwrap();
            let x = Tensor::from(x);
            let iso = isolate(&model, &index, &site, &InputDecl::of([&x]).unwrap())
                .unwrap_or_else(|e| panic!("{id} {}: {e:#}", site.id));
            let tract = prepare(&iso.encode(), Some(iso.dir())).unwrap();
            let out = tract
                .run(&[NamedTensor::new(&site.input, x)], &[])
                .unwrap_or_else(|e| panic!("{id} {}: {e}", site.id));
            assert_eq!(out.len(), 1);
            let got = out[0].to_f64().unwrap();
            assert_eq!(got.shape(), want.shape(), "{id} {}", site.id);
            for (&g, &w) in got.iter().zip(want.iter()) {
                let w = w as f64;
                assert!(
                    (g - w).abs() <= 1e-5 + 1e-5 * w.abs(),
                    "{id} {} ({}): {g} vs onnxruntime {w}",
                    site.id,
                    site.kind.id
                );
            }
            checked += 1;
        }
    }
    assert!(checked >= 150, "only {checked} sites checked");
}
