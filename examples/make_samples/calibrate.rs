//! Layer-by-layer weight scaling, in the manner of layer-sequential unit-variance init (Mishkin &
//! Matas 2015, arXiv:1511.06422) but aiming at a percentile instead of a variance: each layer's
//! weight and bias are scaled, in graph order, until 99% of the tensor it feeds lies within
//! -4..4 on a seeded standard-normal batch, run with tract.

use anyhow::{Context, Result};
use bytes::Bytes;
use prost::Message;
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use tract_onnx::prelude::*;

use actswap::onnx::proto::ModelProto;

use crate::net::Calibration;

/// The share of a calibrated tensor's values that must lie within +-[`TARGET_BOUND`].
pub const TARGET_SHARE: f64 = 0.99;
pub const TARGET_BOUND: f64 = 4.0;

/// Calibration batch size.
pub const BATCH: usize = 64;

/// Scale factors within this of 1 end a layer's calibration.
const TOLERANCE: f64 = 0.02;

/// Rescales the weights of every step, in order. `dims` is the input shape with batch first.
pub fn calibrate(
    proto: &mut ModelProto,
    steps: &[Calibration],
    dims: &[i64],
    seed: u64,
) -> Result<()> {
    let mut shape: Vec<usize> = dims.iter().map(|&d| d as usize).collect();
    shape[0] = BATCH;
    let mut rng = StdRng::seed_from_u64(seed);
    let n = shape.iter().product();
    let values: Vec<f32> = (0..n).map(|_| rng.sample(StandardNormal)).collect();
    let input = Tensor::from_shape(&shape, &values)?;
    for step in steps {
        for _ in 0..6 {
            let bound = percentile_abs(proto, &step.tensor, &input, TARGET_SHARE)
                .with_context(|| format!("measuring '{}'", step.tensor))?;
            let k = round_to_3_digits(TARGET_BOUND / bound);
            if (k - 1.0).abs() <= TOLERANCE {
                break;
            }
            for p in &step.params {
                scale_initializer(proto, p, k)?;
            }
        }
    }
    Ok(())
}

/// The `share` percentile of |`tensor`| when the model runs on `input`.
fn percentile_abs(proto: &ModelProto, tensor: &str, input: &Tensor, share: f64) -> Result<f64> {
    let bytes = proto.encode_to_vec();
    let mut model = tract_onnx::onnx().model_for_read(&mut &bytes[..])?;
    model.set_input_fact(0, f32::fact(input.shape()).into())?;
    model.select_outputs_by_name([tensor])?;
    let plan = model.into_typed()?.into_runnable()?;
    let out = plan.run(tvec!(input.clone().into_tvalue()))?;
    let view = out[0].to_plain_array_view::<f32>()?;
    let mut abs: Vec<f64> = view.iter().map(|&v| v.abs() as f64).collect();
    abs.sort_by(f64::total_cmp);
    let rank = ((share * abs.len() as f64).ceil() as usize).clamp(1, abs.len());
    Ok(abs[rank - 1])
}

/// Rounds to three significant digits, so that last-bit differences between machines in the
/// measured percentile almost never change the weights written.
fn round_to_3_digits(k: f64) -> f64 {
    let unit = 10f64.powi(k.log10().floor() as i32 - 2);
    (k / unit).round() * unit
}

/// Multiplies a float32 initializer of the main graph by `k`.
fn scale_initializer(proto: &mut ModelProto, name: &str, k: f64) -> Result<()> {
    let graph = proto.graph.as_mut().context("no graph")?;
    let t = graph
        .initializer
        .iter_mut()
        .find(|t| t.name() == name)
        .with_context(|| format!("no initializer '{name}'"))?;
    let raw = t.raw_data.as_ref().context("no raw data")?;
    let scaled: Vec<u8> = raw
        .chunks_exact(4)
        .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]]))
        .flat_map(|v| ((v as f64 * k) as f32).to_le_bytes())
        .collect();
    t.raw_data = Some(Bytes::from(scaled));
    Ok(())
}
