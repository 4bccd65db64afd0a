//! Typing, optimizing and running a loaded model on concrete inputs.

use std::sync::Arc;

use tract_onnx::prelude::*;

use super::error::guarded;
use super::signature::bind;
use super::{NamedTensor, RunError, TractModel};

/// A model typed and optimized for one set of input types and shapes, ready to run many times.
#[derive(Debug, Clone)]
pub struct Plan {
    runnable: Arc<TypedRunnableModel>,
    inputs: Vec<super::InputSpec>,
    input_shapes: Vec<Vec<usize>>,
    outputs: Vec<String>,
}

impl TractModel {
    /// Types and optimizes the model for the element types and shapes of `sample`, with the
    /// graph outputs followed by `extra_outputs` (ONNX tensor names, e.g. intermediate values;
    /// names already among the outputs are not repeated). Requested values are kept through
    /// optimization.
    pub fn compile(
        &self,
        sample: &[NamedTensor],
        extra_outputs: &[String],
    ) -> Result<Plan, RunError> {
        let bound = bind(&self.inputs, sample)?;
        let mut model = self.model.clone();
        for (ix, tensor) in bound.iter().enumerate() {
            let fact = InferenceFact::dt_shape(tensor.datum_type(), tensor.shape());
            guarded("set an input fact", || model.set_input_fact(ix, fact))?;
        }
        let mut outputs = self.outputs.clone();
        for extra in extra_outputs {
            if !outputs.contains(extra) {
                outputs.push(extra.clone());
            }
        }
        let outlets = outputs
            .iter()
            .map(|name| {
                self.outlets
                    .get(name)
                    .copied()
                    .ok_or_else(|| RunError::UnknownTensor(name.clone()))
            })
            .collect::<Result<Vec<_>, _>>()?;
        guarded("select outputs", || model.select_output_outlets(&outlets))?;
        let typed = guarded("type the model", || model.into_typed())?;
        let optimized = guarded("optimize the model", || typed.into_optimized())?;
        let runnable = guarded("plan the model", || optimized.into_runnable())?;
        Ok(Plan {
            runnable,
            inputs: self.inputs.clone(),
            input_shapes: bound.iter().map(|t| t.shape().to_vec()).collect(),
            outputs,
        })
    }

    /// Compiles for `sample` and runs it once; see [`TractModel::compile`] and [`Plan::run`].
    pub fn run(
        &self,
        sample: &[NamedTensor],
        extra_outputs: &[String],
    ) -> Result<Vec<NamedTensor>, RunError> {
        self.compile(sample, extra_outputs)?.run(sample)
    }
}

impl Plan {
    /// The names of the tensors [`Plan::run`] returns, in order.
    pub fn output_names(&self) -> &[String] {
        &self.outputs
    }

    /// Runs on `sample`, which must have the types and shapes the plan was compiled for.
    /// Returns the graph outputs then the extra outputs, in their own element types.
    pub fn run(&self, sample: &[NamedTensor]) -> Result<Vec<NamedTensor>, RunError> {
        let bound = bind(&self.inputs, sample)?;
        let mut values = TVec::with_capacity(bound.len());
        for ((tensor, shape), spec) in bound.iter().zip(&self.input_shapes).zip(&self.inputs) {
            if tensor.shape() != shape.as_slice() {
                return Err(RunError::ShapeMismatch {
                    name: spec.name.clone(),
                    expected: format!("{shape:?} (the shape this plan was compiled for)"),
                    found: tensor.shape().to_vec(),
                });
            }
            values.push((*tensor).clone().into_tvalue());
        }
        let results = guarded("run the model", || self.runnable.run(values))?;
        self.outputs
            .iter()
            .zip(results)
            .map(|(name, value)| {
                Ok(NamedTensor::new(
                    name.clone(),
                    onnx_typed(value.into_tensor())?,
                ))
            })
            .collect()
    }
}

/// tract computes shapes as symbolic dims (TDim); ONNX types them int64.
fn onnx_typed(tensor: Tensor) -> Result<Tensor, RunError> {
    if tensor.datum_type() == DatumType::TDim {
        guarded("convert a shape value to int64", || {
            Ok(tensor.cast_to::<i64>()?.into_owned())
        })
    } else {
        Ok(tensor)
    }
}
