//! Celu loader that honours `alpha`.
//!
//! Formula (ONNX operator spec, Celu): `celu(x) = max(0, x) + min(0, alpha * (exp(x / alpha) - 1))`.
//! tract 0.23.9's own expansion drops the `* alpha` factor, so any `alpha != 1` gives wrong values;
//! this loader replaces it.

use tract_onnx::model::ParsingContext;
use tract_onnx::pb::NodeProto;
use tract_onnx::tract_core::ops::math::{add, div, exp, max, min, mul, sub};
use tract_onnx::tract_hir::internal::*;
use tract_onnx::tract_hir::ops::activations::broadcast_scalar;

/// Celu expansion with the spec's formula; `alpha` defaults to 1.0 as in the spec.
#[derive(Debug, Clone)]
pub(crate) struct Celu {
    alpha: f32,
}

/// Op-register entry for `Celu`.
pub(crate) fn load(
    _ctx: &ParsingContext,
    node: &NodeProto,
) -> TractResult<(Box<dyn InferenceOp>, Vec<String>)> {
    let alpha = node.get_attr_opt("alpha")?.unwrap_or(1.0);
    Ok((expand(Celu { alpha }), vec![]))
}

impl Expansion for Celu {
    fn name(&self) -> StaticName {
        "Celu".into()
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
        let constant = |model: &mut TypedModel, suffix: &str, value: f32| {
            let t = broadcast_scalar(value, model, inputs)?;
            model.add_const(format!("{name}.{suffix}"), t)
        };
        let zero = constant(model, "zero", 0.0)?;
        let one = constant(model, "one", 1.0)?;
        let alpha = constant(model, "alpha", self.alpha)?;
        // alpha * (exp(x / alpha) - 1)
        let scaled = model.wire_node(format!("{name}.x_over_alpha"), div(), &[x, alpha])?;
        let e = model.wire_node(format!("{name}.exp"), exp(), &scaled)?;
        let em1 = model.wire_node(format!("{name}.minus_one"), sub(), &[e[0], one])?;
        let neg = model.wire_node(format!("{name}.times_alpha"), mul(), &[em1[0], alpha])?;
        // max(0, x) + min(0, ...)
        let neg = model.wire_node(format!("{name}.negative_part"), min(), &[zero, neg[0]])?;
        let pos = model.wire_node(format!("{name}.positive_part"), max(), &[zero, x])?;
        model.wire_node(name, add(), &[pos[0], neg[0]])
    }
}
