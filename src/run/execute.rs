//! Typing, optimizing and running a loaded model on concrete inputs.
//!
//! Compiling fixes every symbolic dim to the size the sample gives it ([`super::symbols`]), types
//! the model, checks the memory ceiling ([`super::ceiling`]), then optimizes it, unless the model
//! is to run as typed ([`Compilation`]).

use std::collections::HashSet;
use std::sync::Arc;

use tract_onnx::prelude::*;
use tract_onnx::tract_core::optim::Optimizer;

use super::blame::panicking_node;
use super::guard::{Failure, catch, guarded};
use super::names::NodeOrigins;
use super::signature::bind;
use super::{NamedTensor, RunError, TractModel, ceiling, symbols, typing};

/// The stage of typing, as errors name it.
const TYPE: &str = "type the model";

/// How far a model is taken before it runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Compilation {
    /// Through tract's optimizer (declutter, then codegen): the plan a deployment runs, the one
    /// latency is measured on.
    #[default]
    Optimized,
    /// The typed graph as the file states it, each op evaluated on its own in the model's
    /// element types, with nothing fused or folded. For values only: compiling costs time linear
    /// in the node count, where tract 0.23.9's optimizer compares every node a patch adds with
    /// every node of the graph and applies about one patch per node.
    Typed,
}

/// A model typed and optimized for one set of input types and shapes, ready to run many times.
#[derive(Debug, Clone)]
pub struct Compiled {
    runnable: Arc<TypedRunnableModel>,
    inputs: Vec<super::InputSpec>,
    input_shapes: Vec<Vec<usize>>,
    outputs: Vec<String>,
    origins: Arc<NodeOrigins>,
}

/// tract's own optimizer (declutter, then codegen) without its pass that merges identical
/// sibling nodes: that pass walks the whole graph again after every merge, which makes
/// optimizing grow with the square of the node count on graphs with many outputs (every site's
/// tensors are outputs when drift is captured). It saves work only where an exporter duplicated
/// a computation; it changes no value.
fn optimize(mut model: TypedModel) -> TractResult<TypedModel> {
    for mut optimizer in [Optimizer::declutter(), Optimizer::codegen()] {
        optimizer
            .passes
            .retain(|pass| !format!("{pass:?}").starts_with("PushSplitDown"));
        model.optimize_with_session(&mut optimizer.session())?;
    }
    Ok(model)
}

impl TractModel {
    /// Types the model for the element types and shapes of `sample`, and optimizes it unless it
    /// runs as typed ([`TractModel::with_compilation`]), with the graph outputs followed by
    /// `extra_outputs` (ONNX tensor names, e.g. intermediate values; names already among the
    /// outputs are not repeated). Requested values are kept through optimization.
    pub fn compile(
        &self,
        sample: &[NamedTensor],
        extra_outputs: &[String],
    ) -> Result<Compiled, RunError> {
        let bound = bind(&self.inputs, sample)?;
        let mut outputs = self.outputs.clone();
        let mut listed: HashSet<String> = outputs.iter().cloned().collect();
        for extra in extra_outputs {
            if listed.insert(extra.clone()) {
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
        let model = self.fixed(&bound, &outlets)?;
        let typed = match catch(|| typing::into_typed(model)) {
            Ok(typed) => typed,
            Err(Failure::Panic(message)) => return Err(self.blame(&bound, &outlets, message)),
            Err(failure) => return Err(self.origins.attribute(failure.at(TYPE))),
        };
        ceiling::check(&typed, self.memory_ceiling, &self.origins)?;
        let attribute = |e| self.origins.attribute(e);
        let runnable = match self.compilation {
            Compilation::Optimized => {
                let optimized =
                    guarded("optimize the model", || optimize(typed)).map_err(attribute)?;
                guarded("plan the model", || optimized.into_runnable())
            }
            // tract's memory-friendly ordering grows with the square of the node count; the
            // plain topological order computes the same values.
            Compilation::Typed => guarded("plan the model", || {
                let options = RunOptions {
                    skip_order_opt_ram: true,
                    ..RunOptions::default()
                };
                typed.into_runnable_with_options(&options)
            }),
        }
        .map_err(attribute)?;
        Ok(Compiled {
            runnable,
            inputs: self.inputs.clone(),
            input_shapes: bound.iter().map(|t| t.shape().to_vec()).collect(),
            outputs,
            origins: self.origins.clone(),
        })
    }

    /// The model with every dim fixed by the tensors `bound` to its inputs and `outlets` as its
    /// outputs, ready to type.
    pub(super) fn fixed(
        &self,
        bound: &[&Tensor],
        outlets: &[OutletId],
    ) -> Result<InferenceModel, RunError> {
        let mut model = self.model.clone();
        let sizes = symbols::learn(&model, bound)?;
        symbols::concretise(&mut model, &sizes);
        for (ix, tensor) in bound.iter().enumerate() {
            let fact = InferenceFact::dt_shape(tensor.datum_type(), tensor.shape());
            guarded("set an input fact", || model.set_input_fact(ix, fact))?;
        }
        guarded("select outputs", || model.select_output_outlets(outlets))?;
        Ok(model)
    }

    /// The error for a panic while typing, naming the node it came from when one is found.
    fn blame(&self, bound: &[&Tensor], outlets: &[OutletId], message: String) -> RunError {
        let message = format!("tract panicked: {message}");
        match self.fixed(bound, outlets).ok().and_then(panicking_node) {
            Some(node) => RunError::NodeFailed {
                stage: TYPE,
                node: self.origins.describe(&node),
                message,
            },
            None => RunError::Tract {
                stage: TYPE,
                message,
            },
        }
    }

    /// Compiles for `sample` and runs it once; see [`TractModel::compile`] and [`Compiled::run`].
    pub fn run(
        &self,
        sample: &[NamedTensor],
        extra_outputs: &[String],
    ) -> Result<Vec<NamedTensor>, RunError> {
        self.compile(sample, extra_outputs)?.run(sample)
    }
}

impl Compiled {
    /// The names of the tensors [`Compiled::run`] returns, in order.
    pub fn output_names(&self) -> &[String] {
        &self.outputs
    }

    /// Runs on `sample`, which must have the types and shapes it was compiled for.
    /// Returns the graph outputs then the extra outputs, in their own element types.
    pub fn run(&self, sample: &[NamedTensor]) -> Result<Vec<NamedTensor>, RunError> {
        let bound = bind(&self.inputs, sample)?;
        let mut values = TVec::with_capacity(bound.len());
        for ((tensor, shape), spec) in bound.iter().zip(&self.input_shapes).zip(&self.inputs) {
            if tensor.shape() != shape.as_slice() {
                return Err(RunError::ShapeMismatch {
                    name: spec.name.clone(),
                    expected: format!("{shape:?} (the shape the model was compiled for)"),
                    found: tensor.shape().to_vec(),
                });
            }
            values.push((*tensor).clone().into_tvalue());
        }
        let results = guarded("run the model", || self.runnable.run(values))
            .map_err(|e| self.origins.attribute(e))?;
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
