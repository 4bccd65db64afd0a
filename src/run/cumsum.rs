//! CumSum loader that sums shape-derived integers.
//!
//! ONNX operator spec, CumSum (opset 11 and later): the cumulative sum of `x` along `axis`, with
//! `x`'s type. tract 0.23.9 holds integers derived from a shape (a mask made by ConstantOfShape
//! of a Shape, position ids counted from it) as symbolic dims (TDim); its CumSum kernel sums only
//! plain numbers, so evaluating such a tensor while typing the model fails ("CumSum: TDim is not
//! a number"). This loader sums those values as int64 and hands them back as TDim.

use tract_onnx::model::ParsingContext;
use tract_onnx::pb::NodeProto;
use tract_onnx::tract_core::ops::array::CumSum as CoreCumSum;
use tract_onnx::tract_core::ops::cast::cast;
use tract_onnx::tract_hir::internal::*;

/// CumSum whose TDim inputs are summed as int64.
#[derive(Debug, Clone)]
pub(crate) struct CumSum {
    reverse: bool,
    exclusive: bool,
}

/// Op-register entry for `CumSum`.
pub(crate) fn load(
    _ctx: &ParsingContext,
    node: &NodeProto,
) -> TractResult<(Box<dyn InferenceOp>, Vec<String>)> {
    let reverse = node.get_attr_opt::<i64>("reverse")? == Some(1);
    let exclusive = node.get_attr_opt::<i64>("exclusive")? == Some(1);
    Ok((expand(CumSum { reverse, exclusive }), vec![]))
}

impl Expansion for CumSum {
    fn name(&self) -> StaticName {
        "CumSum".into()
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
        s.equals(&inputs[0].shape, &outputs[0].shape)?;
        s.equals(&inputs[1].rank, 0)?;
        Ok(())
    }

    fn wire(
        &self,
        name: &str,
        model: &mut TypedModel,
        inputs: &[OutletId],
    ) -> TractResult<TVec<OutletId>> {
        let axis = model
            .outlet_fact(inputs[1])?
            .konst
            .as_ref()
            .context("CumSum's axis must be a constant")?
            .cast_to_scalar::<i64>()?;
        let fact = model.outlet_fact(inputs[0])?.clone();
        let rank = fact.rank() as i64;
        let axis = if axis < 0 { axis + rank } else { axis } as usize;
        let op = CoreCumSum {
            axis,
            exclusive: self.exclusive,
            reverse: self.reverse,
        };
        if fact.datum_type != DatumType::TDim {
            return model.wire_node(name, op, &[inputs[0]]);
        }
        let x = model.wire_node(format!("{name}.as_i64"), cast(DatumType::I64), &[inputs[0]])?;
        let sum = model.wire_node(format!("{name}.sum"), op, &x)?;
        model.wire_node(name, cast(DatumType::TDim), &sum)
    }
}
