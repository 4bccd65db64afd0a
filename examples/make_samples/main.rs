//! Writes the sample models to `sample-models/`, with `manifest.json` and `README.md` describing
//! every activation site they hold.
//!
//!     cargo run --example make_samples
//!
//! The output is deterministic: seeded weights, calibrated with tract and rounded (see
//! calibrate.rs), encoded with the crate's own protobuf types.

mod acts;
mod calibrate;
mod docs;
mod layers;
mod models;
mod net;

use std::path::Path;

use anyhow::{Context, Result};
use prost::Message;

use actswap::onnx::model::write_atomic;
use actswap::onnx::{Model, SaveOptions};

fn main() -> Result<()> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-models");
    std::fs::create_dir_all(&dir).with_context(|| format!("cannot create {}", dir.display()))?;
    let mut samples = models::all();
    let mut sizes = Vec::new();
    for s in &mut samples {
        calibrate::calibrate(
            &mut s.proto,
            &s.record.calibrations,
            &s.about.input.1,
            s.about.seed + 1000,
        )
        .with_context(|| format!("calibrating {}", s.about.file))?;
        let path = dir.join(s.about.file);
        Model::from_proto(s.proto.clone(), dir.clone()).save(&path, &SaveOptions::default())?;
        let bytes = s.proto.encoded_len();
        println!(
            "{:<28} {:>7} bytes  {:>2} sites",
            s.about.file,
            bytes,
            s.record.sites.len()
        );
        sizes.push(bytes);
    }
    let manifest = serde_json::to_string_pretty(&docs::manifest(&samples, &sizes))? + "\n";
    write_atomic(&dir.join("manifest.json"), manifest.as_bytes())?;
    write_atomic(
        &dir.join("README.md"),
        docs::readme(&samples, &sizes).as_bytes(),
    )?;
    Ok(())
}
