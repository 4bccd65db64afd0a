//! Finding the node a panic of tract's analysis came from.
//!
//! tract's analysis panics on some malformed attributes (a Conv `pads` of 3 values, a Flatten
//! `axis` beyond the rank, a Slice step of 0) without saying where. After such a panic, the
//! analysis is replayed one node at a time in evaluation order, inputs before outputs, until a
//! node panics again.

use tract_onnx::prelude::*;
use tract_onnx::tract_hir::infer::Factoid;

use super::guard::{Failure, catch};

/// The name of the first node, in evaluation order, whose inference panics on the facts its
/// inputs get from the nodes before it; `None` when no node panics alone.
pub(crate) fn panicking_node(mut model: InferenceModel) -> Option<String> {
    for id in model.eval_order().ok()? {
        let (inputs, outputs) = model.node_facts(id).ok()?;
        let inputs: TVec<InferenceFact> = inputs.into_iter().cloned().collect();
        let outputs: TVec<InferenceFact> = outputs.into_iter().cloned().collect();
        let node = model.node(id);
        let observed: TVec<InferenceFact> = node
            .op
            .observe_outlets(&model, node)
            .ok()?
            .iter()
            .map(|o| model.outlet_fact(*o).cloned())
            .collect::<TractResult<_>>()
            .ok()?;
        let inferred = catch(|| {
            model.node_mut(id).op.infer(
                inputs.iter().collect(),
                outputs.iter().collect(),
                observed.iter().collect(),
            )
        });
        match inferred {
            Ok((_, facts, _)) => {
                for (slot, fact) in facts.iter().enumerate() {
                    let outlet = OutletId::new(id, slot);
                    let known = model.outlet_fact(outlet).ok()?;
                    if let Ok(unified) = known.unify(fact) {
                        model.set_outlet_fact(outlet, unified).ok()?;
                    }
                }
            }
            Err(Failure::Panic(_)) => return Some(model.node(id).name.clone()),
            Err(Failure::Error(_)) => {}
        }
    }
    None
}
