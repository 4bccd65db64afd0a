//! The single-input chains ending at one node. Each chain is the last nodes of the next larger
//! one, so their nodes are held once, and the nodes' operands are read from the graph once for
//! all of them.

use std::rc::Rc;

use smallvec::SmallVec;

use super::expr::{Const, MAX_CHAIN, Operand};
use crate::onnx::index::{ABSENT, TensorId};

/// A chain: its input and its nodes, `Chains::nodes[start..end]`, in topological order.
#[derive(Debug, Clone, Copy)]
pub struct Chain {
    pub input: TensorId,
    pub start: usize,
    pub end: usize,
}

/// An operand of a node of the largest chain: the tensor, and the position in
/// [`Chains::nodes`] of the chain node producing it, if one does.
#[derive(Debug, Clone, Copy)]
struct Read {
    id: TensorId,
    by: Option<u8>,
}

/// The chains ending at one node.
pub struct Chains {
    /// The nodes, in topological order, at `nodes[first..]`.
    pub nodes: [usize; MAX_CHAIN],
    pub first: usize,
    /// Each chain's input and first node, smallest chain first.
    pub ends: SmallVec<[(TensorId, usize); 8]>,
    /// The operands of the largest chain's nodes, in order; those of `nodes[at]` end at
    /// `read_ends[at]`.
    reads: SmallVec<[Read; 64]>,
    read_ends: [u32; MAX_CHAIN],
}

impl Chains {
    /// No chain yet, ending at node `n`.
    pub fn new(n: usize) -> Self {
        let mut nodes = [0; MAX_CHAIN];
        nodes[MAX_CHAIN - 1] = n;
        Chains {
            nodes,
            first: MAX_CHAIN - 1,
            ends: SmallVec::new(),
            reads: SmallVec::new(),
            read_ends: [0; MAX_CHAIN],
        }
    }

    /// Chain `i`, smallest first.
    pub fn get(&self, i: usize) -> Chain {
        let (input, start) = self.ends[i];
        Chain {
            input,
            start,
            end: MAX_CHAIN,
        }
    }

    /// The nodes of chain `c`.
    pub fn nodes(&self, c: Chain) -> &[usize] {
        &self.nodes[c.start..c.end]
    }

    /// Reads the operands of the largest chain's nodes: `inputs(n)` are node `n`'s data inputs,
    /// `output(n)` its one output.
    pub fn read_operands<'g>(
        &mut self,
        inputs: impl Fn(usize) -> &'g [TensorId],
        output: impl Fn(usize) -> TensorId,
    ) {
        let Some(&(_, start)) = self.ends.last() else {
            return;
        };
        let mut outputs = [ABSENT; MAX_CHAIN];
        for at in start..MAX_CHAIN {
            let n = self.nodes[at];
            for &id in inputs(n) {
                // Most operands are made by the node just before.
                let by = (start..at).rev().find(|&b| outputs[b] == id);
                self.reads.push(Read {
                    id,
                    by: by.map(|b| b as u8),
                });
            }
            self.read_ends[at] = self.reads.len() as u32;
            outputs[at] = output(n);
        }
    }

    /// Walks chain `c` in order, passing each node and its operands to `step`; returns the
    /// chain's constants, numbered in order of first use, or `None` when an operand is neither
    /// the chain's input, made in the chain, nor a constant (`constant`).
    pub fn walk(
        &self,
        c: Chain,
        constant: impl Fn(TensorId) -> Option<Rc<Const>>,
        mut step: impl FnMut(usize, &[Operand]),
    ) -> Option<SmallVec<[Rc<Const>; 8]>> {
        let largest = self.ends.last().map_or(MAX_CHAIN, |&(_, start)| start);
        debug_assert!(largest <= c.start && c.end <= MAX_CHAIN);
        let mut consts: SmallVec<[Rc<Const>; 8]> = SmallVec::new();
        // Chains are short: linear lookups beat hashing here.
        let mut const_ids: SmallVec<[TensorId; 8]> = SmallVec::new();
        let mut args: SmallVec<[Operand; 8]> = SmallVec::new();
        for at in c.start..c.end {
            let from = if at == largest {
                0
            } else {
                self.read_ends[at - 1] as usize
            };
            args.clear();
            for r in &self.reads[from..self.read_ends[at] as usize] {
                let a = if r.id == ABSENT {
                    Operand::None
                } else if r.id == c.input {
                    Operand::X
                } else if let Some(by) = r.by.map(usize::from).filter(|&by| by >= c.start) {
                    Operand::Step(by - c.start)
                } else if let Some(k) = const_ids.iter().position(|&t| t == r.id) {
                    Operand::Const(k)
                } else {
                    consts.push(constant(r.id)?);
                    const_ids.push(r.id);
                    Operand::Const(consts.len() - 1)
                };
                args.push(a);
            }
            step(self.nodes[at], &args);
        }
        Some(consts)
    }
}
