//! Pow loader whose output keeps the base's element type.
//!
//! ONNX operator spec, Pow (opset 12 and later): `Z = X ^ Y`, where `Z` has the type of the base
//! `X` and the exponent `Y` may have any numeric type. tract 0.23.9 computes in the common type of
//! both and leaves the result there, so a float32 base raised to a float64 exponent yields
//! float64 and the next op fails to type ("Impossible to unify F64 with F32"). This loader
//! computes as tract does and casts the result back to the base's type.

use tract_onnx::model::ParsingContext;
use tract_onnx::pb::NodeProto;
use tract_onnx::tract_core::ops::cast::{cast, wire_cast};
use tract_onnx::tract_core::ops::change_axes::wire_rank_broadcast;
use tract_onnx::tract_core::ops::math::pow;
use tract_onnx::tract_hir::internal::*;

/// Pow with the spec's output type.
#[derive(Debug, Clone)]
pub(crate) struct Pow;

/// Op-register entry for `Pow`.
pub(crate) fn load(
    _ctx: &ParsingContext,
    _node: &NodeProto,
) -> TractResult<(Box<dyn InferenceOp>, Vec<String>)> {
    Ok((expand(Pow), vec![]))
}

impl Expansion for Pow {
    fn name(&self) -> StaticName {
        "Pow".into()
    }

    fn rules<'r, 'p: 'r, 's: 'r>(
        &'s self,
        s: &mut Solver<'r>,
        inputs: &'p [TensorProxy],
        outputs: &'p [TensorProxy],
    ) -> InferenceResult {
        check_input_arity(inputs, 2)?;
        check_output_arity(outputs, 1)?;
        s.equals(&inputs[0].datum_type, &outputs[0].datum_type)?;
        s.with(&inputs[0].shape, move |s, base| {
            s.with(&inputs[1].shape, move |s, exponent| {
                if let Ok(Some(shape)) =
                    tract_onnx::tract_hir::infer::helpers::infer_shape_broadcasting(&[
                        &base, &exponent,
                    ])
                {
                    s.equals(&outputs[0].shape, shape)?;
                }
                Ok(())
            })
        })
    }

    fn wire(
        &self,
        name: &str,
        model: &mut TypedModel,
        inputs: &[OutletId],
    ) -> TractResult<TVec<OutletId>> {
        let base = model.outlet_fact(inputs[0])?.datum_type;
        let exponent = model.outlet_fact(inputs[1])?.datum_type;
        // tract's own choice of the type to compute in.
        let operating = if base.is_integer() != exponent.is_integer() {
            DatumType::F64
        } else {
            base.common_super_type(exponent)
                .with_context(|| format!("no common type for {base:?} and {exponent:?}"))?
        };
        let wires = wire_rank_broadcast(name, model, inputs)?;
        let wires = wire_cast(name, model, &wires, operating)?;
        if operating == base {
            return model.wire_node(name, pow(), &wires);
        }
        let z = model.wire_node(format!("{name}.pow"), pow(), &wires)?;
        model.wire_node(name, cast(base), &z)
    }
}
