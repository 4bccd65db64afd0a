//! The tract ONNX framework with corrected loaders for ops tract 0.23.9 gets wrong.

use tract_onnx::Onnx;
use tract_onnx::tract_hir::internal::*;

use super::{celu, swish};

/// tract's ONNX framework whose op registry has the loaders of [`celu`] and [`swish`] in place of
/// tract's own.
pub(crate) fn corrected_onnx() -> Onnx {
    let mut onnx = tract_onnx::onnx();
    onnx.op_register.insert("Celu", celu::load);
    onnx.op_register.insert("Swish", swish::load);
    onnx
}

/// Inference rules of a one-input, one-output element-wise op: same type and shape.
pub(crate) fn unary_rules<'r, 'p: 'r>(
    s: &mut Solver<'r>,
    inputs: &'p [TensorProxy],
    outputs: &'p [TensorProxy],
) -> InferenceResult {
    check_input_arity(inputs, 1)?;
    check_output_arity(outputs, 1)?;
    s.equals(&inputs[0].datum_type, &outputs[0].datum_type)?;
    s.equals(&inputs[0].shape, &outputs[0].shape)?;
    Ok(())
}
