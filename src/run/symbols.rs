//! Symbolic dims: their sizes learned from the tensors fed, handed to tract before analysis.
//!
//! Exporters name dynamic dims (`batch`, `seq`, `s0`) in the graph inputs and again in the
//! `value_info` of intermediate tensors; torch's dynamo exporter writes one for nearly every value.
//! tract reads both as symbols. Fixing the inputs to concrete sizes while a `value_info` still says
//! `batch` makes its analysis fail ("Impossible to unify Sym(batch) with Val(2)"), so every fact
//! of the model is made concrete first: a dim whose symbols are all known takes its size; a dim
//! with a symbol no input defines (a data-dependent size) is left for tract to infer.

use tract_onnx::prelude::*;
use tract_onnx::tract_hir::infer::{DimFact, GenericFactoid, ShapeFactoid};

use super::RunError;

/// The size of every symbol that stands alone on an axis of a graph input, read from the tensors
/// fed (`bound`, in input order, already checked to agree on every named dim).
pub(crate) fn learn(model: &InferenceModel, bound: &[&Tensor]) -> Result<SymbolValues, RunError> {
    let mut values = SymbolValues::default();
    let outlets = model
        .input_outlets()
        .map_err(|e| RunError::tract("list the inputs", &e))?;
    for (outlet, tensor) in outlets.iter().zip(bound) {
        let fact = model
            .outlet_fact(*outlet)
            .map_err(|e| RunError::tract("read an input fact", &e))?;
        for (dim, &size) in fact.shape.dims().zip(tensor.shape()) {
            if let GenericFactoid::Only(TDim::Sym(symbol)) = dim {
                values.set(symbol, size as i64);
            }
        }
    }
    Ok(values)
}

/// Replaces every symbolic dim of every fact of `model` by its size under `values`; a dim that
/// stays symbolic becomes unknown.
pub(crate) fn concretise(model: &mut InferenceModel, values: &SymbolValues) {
    for node in model.nodes_mut() {
        for output in &mut node.outputs {
            let shape = &output.fact.shape;
            let dims = shape.dims().map(|dim| concrete(dim, values)).collect();
            output.fact.shape = if shape.is_open() {
                ShapeFactoid::open(dims)
            } else {
                ShapeFactoid::closed(dims)
            };
        }
    }
}

fn concrete(dim: &DimFact, values: &SymbolValues) -> DimFact {
    match dim {
        GenericFactoid::Only(d) => match d.eval(values) {
            TDim::Val(v) => GenericFactoid::Only(TDim::Val(v)),
            _ => GenericFactoid::Any,
        },
        GenericFactoid::Any => GenericFactoid::Any,
    }
}
