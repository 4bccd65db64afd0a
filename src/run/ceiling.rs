//! A memory ceiling checked before tract allocates anything for a run.
//!
//! tract aborts the whole process when an allocation fails (a Conv padded by 2^32, a pooling
//! window of 10^10 elements), which no error handling can catch. Typed with concrete input
//! shapes, every value of the model has a concrete size, so a model is refused beforehand when one
//! value, or all of them together, would exceed the ceiling. So is a convolution or pooling whose
//! window tract would lay out as a table of offsets larger than the ceiling (one row of `rank + 1`
//! words per window element; tract 0.23.9's `Patch`, `core/src/ops/cnn/patches.rs`).

use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::cnn::{Conv, Deconv, MaxPool, PoolSpec, SumPool};

use super::RunError;
use super::names::NodeOrigins;

/// The default ceiling: 8 GiB for one value and for all values of a run together.
pub const DEFAULT_MEMORY_CEILING: u64 = 8 << 30;

/// Refuses `model` when a value it computes, or all of them together, would take more than
/// `ceiling` bytes. Constants are not counted: they are already held.
pub(crate) fn check(
    model: &TypedModel,
    ceiling: u64,
    origins: &NodeOrigins,
) -> Result<(), RunError> {
    let mut total: u128 = 0;
    for node in model.nodes() {
        if let Some(window) = window(node) {
            let elements: u128 = window.kernel_shape.iter().map(|&d| d as u128).product();
            let bytes = elements * (window.kernel_shape.len() as u128 + 1) * 8;
            if bytes > ceiling as u128 {
                return Err(RunError::OverMemory {
                    what: format!(
                        "the window {:?} of {}",
                        window.kernel_shape.as_slice(),
                        origins.describe(&node.name)
                    ),
                    bytes,
                    ceiling,
                });
            }
        }
        for output in &node.outputs {
            let fact = &output.fact;
            if fact.konst.is_some() {
                continue;
            }
            let Some(shape) = fact.shape.as_concrete() else {
                continue;
            };
            let elements: u128 = shape.iter().map(|&d| d as u128).product();
            let bytes = elements * fact.datum_type.size_of() as u128;
            if bytes > ceiling as u128 {
                return Err(RunError::OverMemory {
                    what: format!("the output of {}", origins.describe(&node.name)),
                    bytes,
                    ceiling,
                });
            }
            total += bytes;
        }
    }
    if total > ceiling as u128 {
        return Err(RunError::OverMemory {
            what: "the values of one run together".into(),
            bytes: total,
            ceiling,
        });
    }
    Ok(())
}

/// The window of a convolution or pooling node.
fn window(node: &TypedNode) -> Option<&PoolSpec> {
    node.op_as::<Conv>()
        .map(|op| &op.pool_spec)
        .or_else(|| node.op_as::<Deconv>().map(|op| &op.pool_spec))
        .or_else(|| node.op_as::<MaxPool>().map(|op| &op.pool_spec))
        .or_else(|| node.op_as::<SumPool>().map(|op| &op.pool_spec))
}
