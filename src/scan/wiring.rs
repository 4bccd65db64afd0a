//! One graph's wiring with its tensors numbered, so the chain finder compares and looks up
//! integers instead of hashing and comparing names: each node's data inputs and single output
//! as tensor ids, and the node producing each tensor.

use crate::onnx::index::GraphIndex;

use super::expr;

/// Tensor id of an absent optional input.
pub const ABSENT: u32 = u32::MAX;

pub struct Wiring<'m> {
    /// Tensor names by id.
    names: Vec<&'m str>,
    /// Data inputs of all nodes, node after node; node `n`'s are `inputs[starts[n]..starts[n + 1]]`.
    inputs: Vec<u32>,
    starts: Vec<usize>,
    /// Each node's output when it has exactly one.
    output: Vec<Option<u32>>,
    /// The node of this graph producing each tensor (none: a graph input, an initializer or an
    /// outer-scope tensor).
    producer: Vec<Option<usize>>,
}

impl<'m> Wiring<'m> {
    pub fn new(graph: &GraphIndex<'m>) -> Self {
        let mut ids: foldhash::HashMap<&'m str, u32> = Default::default();
        let mut names: Vec<&'m str> = Vec::new();
        let mut id = |name: &'m str, names: &mut Vec<&'m str>| -> u32 {
            if name.is_empty() {
                return ABSENT;
            }
            *ids.entry(name).or_insert_with(|| {
                names.push(name);
                (names.len() - 1) as u32
            })
        };
        let nodes = graph.nodes;
        let mut inputs = Vec::new();
        let mut starts = Vec::with_capacity(nodes.len() + 1);
        let mut output = Vec::with_capacity(nodes.len());
        let mut outputs_of = Vec::with_capacity(nodes.len());
        for node in nodes {
            starts.push(inputs.len());
            for name in node.input.iter().take(expr::data_inputs(node)) {
                inputs.push(id(name, &mut names));
            }
            let outs: Vec<u32> = node.output.iter().map(|o| id(o, &mut names)).collect();
            output.push(match outs.as_slice() {
                [o] if *o != ABSENT => Some(*o),
                _ => None,
            });
            outputs_of.push(outs);
        }
        starts.push(inputs.len());
        let mut producer = vec![None; names.len()];
        for (n, outs) in outputs_of.iter().enumerate() {
            for &o in outs.iter().filter(|&&o| o != ABSENT) {
                if graph.producer(names[o as usize]) == Some(n) {
                    producer[o as usize] = Some(n);
                }
            }
        }
        Wiring {
            names,
            inputs,
            starts,
            output,
            producer,
        }
    }

    /// How many distinct tensors the graph's nodes name.
    pub fn tensor_count(&self) -> usize {
        self.names.len()
    }

    pub fn name(&self, id: u32) -> &'m str {
        self.names[id as usize]
    }

    /// Node `n`'s data inputs (CastLike's type-giving input excluded), [`ABSENT`] for a missing
    /// optional one.
    pub fn inputs(&self, n: usize) -> &[u32] {
        &self.inputs[self.starts[n]..self.starts[n + 1]]
    }

    /// Node `n`'s output, when it has exactly one.
    pub fn output(&self, n: usize) -> Option<u32> {
        self.output[n]
    }

    pub fn producer(&self, id: u32) -> Option<usize> {
        self.producer[id as usize]
    }
}
