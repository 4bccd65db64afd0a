//! The tract ONNX framework with corrected loaders for ops tract 0.23.9 gets wrong.

use tract_onnx::Onnx;

use super::{celu, cumsum, pow, swish};

/// tract's ONNX framework whose op registry has the loaders of [`celu`], [`cumsum`], [`pow`] and
/// [`swish`] in place of tract's own.
pub(crate) fn corrected_onnx() -> Onnx {
    let mut onnx = tract_onnx::onnx();
    onnx.op_register.insert("Celu", celu::load);
    onnx.op_register.insert("CumSum", cumsum::load);
    onnx.op_register.insert("Pow", pow::load);
    onnx.op_register.insert("Swish", swish::load);
    onnx
}
