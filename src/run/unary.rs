//! Inference rules shared by the element-wise loaders that replace tract's own.

use tract_onnx::tract_hir::internal::*;

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
