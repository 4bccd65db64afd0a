//! Runs a model with actswap's tract runner on the arrays of an .npz file and writes its outputs
//! to another .npz, so a script can compare them with another runtime.
//!
//!     cargo run --example tract_outputs -- MODEL.onnx INPUTS.npz OUTPUTS.npz

use std::fs::File;
use std::path::PathBuf;

use actswap::run::inputs::{Binding, InputLoader};
use anyhow::{Context, Result, bail};
use ndarray_npy::NpzWriter;

fn main() -> Result<()> {
    let args: Vec<PathBuf> = std::env::args_os().skip(1).map(PathBuf::from).collect();
    let [model, inputs, outputs] = args.as_slice() else {
        bail!("usage: tract_outputs MODEL.onnx INPUTS.npz OUTPUTS.npz");
    };
    let bytes = std::fs::read(model).with_context(|| format!("cannot read {}", model.display()))?;
    let tm = actswap::run::prepare(&bytes, model.parent())?;
    let binding = Binding::parse(&inputs.display().to_string())?;
    let samples = InputLoader::new(tm.inputs()).from_bindings(&[binding])?;
    let sample = samples.first().context("no input sample")?;
    let mut npz = NpzWriter::new(File::create(outputs)?);
    for out in tm.run(sample, &[])? {
        let arr = out.to_f64()?.mapv(|v| v as f32);
        npz.add_array(out.name.as_str(), &arr)?;
    }
    npz.finish()?;
    Ok(())
}
