//! Swish loader that honours `alpha`.
//!
//! Formula (ONNX operator spec, Swish, opset 24): `swish(x) = x * sigmoid(alpha * x)`.
//! tract 0.23.9 maps Swish to its SiLU op whatever `alpha` is, i.e. always `alpha = 1`; this loader
//! keeps that op for `alpha == 1` and wires the spec's function body otherwise.

use tract_onnx::model::ParsingContext;
use tract_onnx::pb::NodeProto;
use tract_onnx::tract_core::ops::math::mul;
use tract_onnx::tract_core::ops::nn::{sigmoid, silu::silu};
use tract_onnx::tract_hir::internal::*;
use tract_onnx::tract_hir::ops::activations::broadcast_scalar;

/// Swish expansion `x * sigmoid(alpha * x)`; `alpha` defaults to 1.0 as in the spec.
#[derive(Debug, Clone)]
pub(crate) struct Swish {
    alpha: f32,
}

/// Op-register entry for `Swish`.
pub(crate) fn load(
    _ctx: &ParsingContext,
    node: &NodeProto,
) -> TractResult<(Box<dyn InferenceOp>, Vec<String>)> {
    let alpha: f32 = node.get_attr_opt("alpha")?.unwrap_or(1.0);
    if alpha == 1.0 {
        return Ok((silu().into_hir(), vec![]));
    }
    Ok((expand(Swish { alpha }), vec![]))
}

impl Expansion for Swish {
    fn name(&self) -> StaticName {
        "Swish".into()
    }

    fn rules<'r, 'p: 'r, 's: 'r>(
        &'s self,
        s: &mut Solver<'r>,
        inputs: &'p [TensorProxy],
        outputs: &'p [TensorProxy],
    ) -> InferenceResult {
        super::unary::unary_rules(s, inputs, outputs)
    }

    fn wire(
        &self,
        name: &str,
        model: &mut TypedModel,
        inputs: &[OutletId],
    ) -> TractResult<TVec<OutletId>> {
        let x = inputs[0];
        let alpha = broadcast_scalar(self.alpha, model, inputs)?;
        let alpha = model.add_const(format!("{name}.alpha"), alpha)?;
        // Mul(alpha, x); Sigmoid; Mul(x, s): the order of the spec's function body.
        let ax = model.wire_node(format!("{name}.alpha_x"), mul(), &[alpha, x])?;
        let s = model.wire_node(format!("{name}.sigmoid"), sigmoid(), &ax)?;
        model.wire_node(name, mul(), &[x, s[0]])
    }
}
