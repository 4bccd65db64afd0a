//! Running a model over samples and keeping requested tensors by name: one run per sample, one
//! compiled plan per distinct set of input shapes.

use std::collections::HashMap;

use anyhow::{Context, Result};
use ndarray::ArrayD;

use prost::Message;

use crate::onnx::Model;
use crate::run::{
    self, Compiled, DatumType, NamedTensor, Sample, Tensor, TractModel, to_f64_array,
};

/// The tensors of one run by ONNX name: the sample's inputs, the graph outputs and every
/// requested intermediate.
pub type Values = HashMap<String, NamedTensor>;

/// The element types and shapes of a sample's tensors: one compiled plan per distinct key.
type ShapeKey = Vec<(DatumType, Vec<usize>)>;

/// `model` loaded into tract in parts ([`run::prepare_parts`]): a model rewritten in memory is
/// never encoded whole, so its weights are not held a third time while it loads.
pub fn load(model: &Model) -> Result<TractModel> {
    let mut head = model.proto().clone();
    let initializers = head
        .graph
        .as_mut()
        .map(|g| std::mem::take(&mut g.initializer))
        .unwrap_or_default();
    let parts = initializers.into_iter().map(|t| t.encode_to_vec());
    Ok(run::prepare_parts(
        &head.encode_to_vec(),
        parts,
        Some(model.dir()),
    )?)
}

/// Runs `model` on every sample with `extra` tensors requested; `what` names the model in errors.
pub fn run_samples(
    model: &TractModel,
    samples: &[Sample],
    extra: &[String],
    what: &str,
) -> Result<Vec<Values>> {
    let mut plans: Vec<(ShapeKey, Compiled)> = Vec::new();
    let mut out = Vec::with_capacity(samples.len());
    for (k, sample) in samples.iter().enumerate() {
        let key: ShapeKey = sample
            .iter()
            .map(|t| (t.tensor.datum_type(), t.tensor.shape().to_vec()))
            .collect();
        let plan = match plans.iter().position(|(k, _)| *k == key) {
            Some(i) => &plans[i].1,
            None => {
                let plan = model
                    .compile(sample, extra)
                    .with_context(|| format!("{what}: sample {k}"))?;
                plans.push((key, plan));
                &plans.last().expect("just pushed").1
            }
        };
        let results = plan
            .run(sample)
            .with_context(|| format!("{what}: sample {k}"))?;
        let mut values: Values = sample.iter().map(|t| (t.name.clone(), t.clone())).collect();
        values.extend(results.into_iter().map(|t| (t.name.clone(), t)));
        out.push(values);
    }
    Ok(out)
}

/// A tensor's values widened to f64 (booleans as 0 and 1).
pub fn widen(t: &NamedTensor) -> Result<ArrayD<f64>> {
    if t.tensor.datum_type() == DatumType::Bool {
        let as_f64: Tensor = t
            .tensor
            .cast_to::<f64>()
            .with_context(|| format!("tensor '{}'", t.name))?
            .into_owned();
        return Ok(to_f64_array(&t.name, &as_f64)?);
    }
    Ok(t.to_f64()?)
}
