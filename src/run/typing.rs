//! Typing an analysed model in time linear in its node count.
//!
//! tract 0.23.9 types a model node by node into one growing graph, and every node it adds there
//! is checked against every node already in it (a name search, and a value search for
//! constants), which makes typing grow with the square of the node count: a few seconds at
//! 10,000 nodes, minutes at 100,000. Here each node is typed on its own, into a scratch graph
//! that holds only stand-ins for its inputs (the same facts; a copy of the constant where the
//! input is one), and what it produced is moved into the model with fresh unique names. The
//! ops, their typing code and the resulting facts are tract's own; only where the nodes are
//! assembled differs.

use std::collections::{HashMap, HashSet};

use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::konst::Const;
use tract_onnx::tract_core::ops::source::TypedSource;
use tract_onnx::tract_core::plan::EvalContext;
use tract_onnx::tract_hir::infer::InferenceNode;
use tract_onnx::tract_hir::infer::{Factoid, InferenceOp};
use tract_onnx::tract_hir::internal::TractErrorContext;

/// Constants up to this many elements are shared by value (tract shares every constant; larger
/// ones are weights, which are never repeated in practice and would cost a hash of every byte).
const SHARED_CONSTANT: usize = 64;

/// tract's own analysis and incorporation, then typing one node at a time.
pub(crate) fn into_typed(mut model: InferenceModel) -> TractResult<TypedModel> {
    model.analyse(false)?;
    let source = model.incorporate()?;
    let _proofs = source.symbols.proof_cache_session();
    let mut target = Assembly::new(&source);
    let mut mapping: HashMap<OutletId, OutletId> = HashMap::new();
    let order = source.eval_order()?;
    // Unused inputs are typed too, so the model keeps its interface.
    let unused = source
        .input_outlets()?
        .iter()
        .filter(|i| !order.contains(&i.node))
        .map(|i| i.node)
        .collect::<Vec<_>>();
    for id in order.into_iter().chain(unused) {
        let node = source.node(id);
        let outlets = target
            .translate(&source, node, &mapping)
            .with_context(|| format!("Translating node {node}"))?;
        for (ix, outlet) in outlets.into_iter().enumerate() {
            let from = OutletId::new(node.id, ix);
            mapping.insert(from, outlet);
            if let Some(label) = source.outlet_label(from) {
                target.model.set_outlet_label(outlet, label.to_string())?;
            }
        }
    }
    let mut typed = target.model;
    typed.inputs = source.input_outlets()?.iter().map(|i| mapping[i]).collect();
    typed.outputs = source
        .output_outlets()?
        .iter()
        .map(|o| mapping[o])
        .collect();
    typed.properties.clone_from(&source.properties);
    Ok(typed)
}

/// The typed model being assembled, with the names it holds and its shared small constants.
struct Assembly {
    model: TypedModel,
    names: HashSet<String>,
    constants: HashMap<Const, OutletId>,
}

impl Assembly {
    fn new(source: &InferenceModel) -> Assembly {
        Assembly {
            model: TypedModel {
                symbols: source.symbols.clone(),
                ..TypedModel::default()
            },
            names: HashSet::new(),
            constants: HashMap::new(),
        }
    }

    /// The outlets in the typed model that stand for `node`'s outputs.
    fn translate(
        &mut self,
        source: &InferenceModel,
        node: &InferenceNode,
        mapping: &HashMap<OutletId, OutletId>,
    ) -> TractResult<TVec<OutletId>> {
        // As tract does: a node whose every value analysis knows becomes constants, unless it is
        // an input or keeps state.
        if !InferenceModel::is_source(&node.op)
            && node.op.state(&EvalContext::out_of_plan())?.is_none()
            && source
                .node_output_facts(node.id)?
                .iter()
                .all(|f| f.value.is_concrete())
        {
            return node
                .outputs
                .iter()
                .enumerate()
                .map(|(ix, o)| {
                    let value = o.fact.value.concretize().context("a known value")?;
                    self.constant(format!("{}.{}", node.name, ix), value)
                })
                .collect();
        }
        self.typed_alone(source, node, mapping)
    }

    /// A constant node for `value`, or the one already holding it when it is small.
    fn constant(&mut self, name: String, value: Arc<Tensor>) -> TractResult<OutletId> {
        let fact = TypedFact::try_from(value.clone())?;
        let op = Const::new_with_opt_exotic_fact(value, fact.exotic_fact.clone())?;
        let shared = op.val().len() <= SHARED_CONSTANT;
        if shared && let Some(&outlet) = self.constants.get(&op) {
            return Ok(outlet);
        }
        let name = self.unique(name);
        let outlet = OutletId::new(self.model.add_node(name, op.clone(), tvec!(fact))?, 0);
        if shared {
            self.constants.insert(op, outlet);
        }
        Ok(outlet)
    }

    /// Types `node` into a scratch graph of stand-ins for its inputs, then moves the nodes it
    /// made into the model.
    fn typed_alone(
        &mut self,
        source: &InferenceModel,
        node: &InferenceNode,
        mapping: &HashMap<OutletId, OutletId>,
    ) -> TractResult<TVec<OutletId>> {
        let mut scratch = TypedModel {
            symbols: self.model.symbols.clone(),
            ..TypedModel::default()
        };
        // Stand-in node in the scratch graph -> the outlet it stands for.
        let mut stand_ins: HashMap<usize, OutletId> = HashMap::new();
        let mut local: HashMap<OutletId, OutletId> = HashMap::new();
        for input in &node.inputs {
            if local.contains_key(input) {
                continue;
            }
            let outlet = *mapping
                .get(input)
                .context("an input typed before its reader")?;
            let producer = self.model.node(outlet.node);
            let fact = self.model.outlet_fact(outlet)?.clone();
            let name = format!("{}#{}", producer.name, outlet.slot);
            let id = match producer.op_as::<Const>() {
                Some(c) => scratch.add_node(name, c.clone(), tvec!(fact))?,
                None => scratch.add_node(name, TypedSource::new(fact.clone()), tvec!(fact))?,
            };
            stand_ins.insert(id, outlet);
            local.insert(*input, OutletId::new(id, 0));
        }
        let op: &dyn InferenceOp = &*node.op;
        let outputs = op.to_typed(source, node, &mut scratch, &local)?;
        // Scratch node -> the outlet in the model it became, for stand-ins and shared constants.
        let mut known = stand_ins;
        let mut moved: HashMap<usize, usize> = HashMap::new();
        let mut edges = Vec::new();
        for made in std::mem::take(&mut scratch.nodes) {
            if known.contains_key(&made.id) {
                continue;
            }
            if let Some(c) = made
                .op_as::<Const>()
                .filter(|c| c.val().len() <= SHARED_CONSTANT)
            {
                let outlet = match self.constants.get(c) {
                    Some(&outlet) => outlet,
                    None => self.constant(made.name.clone(), c.val().clone())?,
                };
                known.insert(made.id, outlet);
                continue;
            }
            let facts = made.outputs.into_iter().map(|o| o.fact).collect();
            let name = self.unique(made.name);
            let id = self.model.add_node(name, made.op, facts)?;
            moved.insert(made.id, id);
            edges.push((id, made.inputs));
        }
        let place = |o: OutletId| match known.get(&o.node) {
            Some(&outer) => outer,
            None => OutletId::new(moved[&o.node], o.slot),
        };
        for (id, inputs) in edges {
            for (slot, input) in inputs.into_iter().enumerate() {
                self.model.add_edge(place(input), InletId::new(id, slot))?;
            }
        }
        Ok(outputs.into_iter().map(place).collect())
    }

    /// `name`, or `name.1`, `name.2`... when it is taken, as tract names its nodes.
    fn unique(&mut self, name: String) -> String {
        let name = if self.names.contains(&name) {
            (1..)
                .map(|i| format!("{name}.{i}"))
                .find(|n| !self.names.contains(n))
                .expect("an unused name")
        } else {
            name
        };
        self.names.insert(name.clone());
        name
    }
}

#[cfg(test)]
mod tests {
    use std::path::{Path, PathBuf};

    use tract_onnx::prelude::*;

    use super::into_typed;
    use crate::run::inputs::read_tensor_file;
    use crate::run::prepare;

    fn fixtures() -> PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures")
    }

    /// The input tensors of a fixture, in the model's input order: the ONNX conformance data's
    /// `test_data_set_0/input_K.pb`, or a torch export's first input set (`NAME.npy`).
    fn inputs(dir: &Path, names: &[String]) -> Vec<Tensor> {
        let conformance = dir.join("test_data_set_0");
        let file = |k: usize, name: &str| {
            if conformance.is_dir() {
                conformance.join(format!("input_{k}.pb"))
            } else {
                let sets = dir.join("inputs");
                let mut sets: Vec<PathBuf> = std::fs::read_dir(&sets)
                    .unwrap()
                    .map(|e| e.unwrap().path())
                    .collect();
                sets.sort();
                sets[0].join(format!("{name}.npy"))
            }
        };
        names
            .iter()
            .enumerate()
            .map(|(k, name)| read_tensor_file(&file(k, name), 1 << 24).unwrap())
            .collect()
    }

    /// Typed one node at a time, each model of the ONNX conformance data and each torch export
    /// of the fixtures gets what tract 0.23.9's own typing gives it (the reference): the same
    /// output types and shapes, and the same values when both run on the fixture's inputs.
    #[test]
    fn types_as_tract_does() {
        let mut dirs = Vec::new();
        for set in ["conformance", "torch-blocks", "torch-subgraphs"] {
            for entry in std::fs::read_dir(fixtures().join(set)).unwrap() {
                let dir = entry.unwrap().path();
                if dir.join("model.onnx").is_file() {
                    dirs.push(dir);
                }
            }
        }
        dirs.sort();
        let mut compared = 0;
        for dir in &dirs {
            let bytes = std::fs::read(dir.join("model.onnx")).unwrap();
            let Ok(tract) = prepare(&bytes, Some(dir)) else {
                continue;
            };
            let names: Vec<String> = tract.inputs().iter().map(|i| i.name.clone()).collect();
            let tensors = inputs(dir, &names);
            let bound: Vec<&Tensor> = tensors.iter().collect();
            let outlets: Vec<OutletId> = tract
                .output_names()
                .iter()
                .map(|n| tract.outlets[n])
                .collect();
            let model = tract.fixed(&bound, &outlets).unwrap();
            let theirs = model.clone().into_typed();
            let ours = into_typed(model);
            let (theirs, ours) = match (theirs, ours) {
                (Ok(t), Ok(o)) => (t, o),
                (Err(_), Err(_)) => continue,
                (t, o) => panic!("{}: tract {:?}, ours {:?}", dir.display(), t.err(), o.err()),
            };
            let facts = |m: &TypedModel| -> Vec<TypedFact> {
                let outputs = m.output_outlets().unwrap();
                outputs
                    .iter()
                    .map(|o| m.outlet_fact(*o).unwrap().without_value())
                    .collect()
            };
            assert_eq!(facts(&theirs), facts(&ours), "{}", dir.display());
            let run = |m: TypedModel| {
                let values: TVec<TValue> = tensors.iter().map(|t| t.clone().into()).collect();
                m.into_runnable().unwrap().run(values).unwrap()
            };
            let (a, b) = (run(theirs), run(ours));
            for (a, b) in a.iter().zip(b.iter()) {
                assert!(
                    a.close_enough(b, false).is_ok(),
                    "{}: {a:?} vs {b:?}",
                    dir.display()
                );
            }
            compared += 1;
        }
        assert!(compared >= 100, "only {compared} models compared");
    }
}
