//! The single-input chains ending at one node. Each chain is the last nodes of the next larger
//! one, so their nodes are held once, and the nodes' operands, op codes and constants are read
//! from the graph once for all of them.

use std::rc::Rc;

use smallvec::SmallVec;

use super::expr::{self, Const, MAX_CHAIN, Op, Operand};
use crate::onnx::index::{ABSENT, TensorId};

/// A chain: its input and its nodes, `Chains::nodes[start..end]`, in topological order.
#[derive(Debug, Clone, Copy)]
pub struct Chain {
    pub input: TensorId,
    pub start: usize,
    pub end: usize,
}

/// An operand of a node of the largest chain: the tensor, the position in [`Chains::nodes`] of
/// the chain node making it, if one does, and else its value when it is a constant (an index
/// into [`Chains::consts`]).
#[derive(Debug, Clone, Copy)]
struct Read {
    id: TensorId,
    by: Option<u8>,
    constant: Option<u32>,
}

/// What a chain's key says besides the key itself.
pub struct Keyed {
    /// The chain's constants, in order of first use.
    pub consts: SmallVec<[Rc<Const>; 8]>,
    /// Some step is not linear in its one computed operand.
    pub nonlinear: bool,
    /// Some step casts to an integer type.
    pub integer: bool,
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
    /// The key words of the largest chain's ops ([`Op::encode`]); those of `nodes[at]` end at
    /// `word_ends[at]`.
    words: SmallVec<[u64; 32]>,
    word_ends: [u32; MAX_CHAIN],
    /// Whether `nodes[at]` is nonlinear ([`expr::is_nonlinear_step`]), and whether it casts to
    /// an integer type.
    nonlinear: [bool; MAX_CHAIN],
    integer: [bool; MAX_CHAIN],
    /// The distinct constants the largest chain reads.
    consts: SmallVec<[Rc<Const>; 8]>,
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
            words: SmallVec::new(),
            word_ends: [0; MAX_CHAIN],
            nonlinear: [false; MAX_CHAIN],
            integer: [false; MAX_CHAIN],
            consts: SmallVec::new(),
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

    /// Where the largest chain starts.
    fn largest(&self) -> usize {
        self.ends.last().map_or(MAX_CHAIN, |&(_, start)| start)
    }

    /// The operands of `nodes[at]` (the ends before the largest chain are 0).
    fn reads_of(&self, at: usize) -> &[Read] {
        let from = at.checked_sub(1).map_or(0, |p| self.read_ends[p]);
        &self.reads[from as usize..self.read_ends[at] as usize]
    }

    /// The key words of `nodes[at]`'s op.
    fn words_of(&self, at: usize) -> &[u64] {
        let from = at.checked_sub(1).map_or(0, |p| self.word_ends[p]);
        &self.words[from as usize..self.word_ends[at] as usize]
    }

    /// Reads the largest chain's nodes once: `inputs(n)` are node `n`'s data inputs, `output(n)`
    /// its one output, `op(n)` its step, and `constant(t)` the value of tensor `t` when it is a
    /// constant.
    pub fn read_operands<'g>(
        &mut self,
        inputs: impl Fn(usize) -> &'g [TensorId],
        output: impl Fn(usize) -> TensorId,
        op: impl Fn(usize) -> &'g Op,
        constant: impl Fn(TensorId) -> Option<Rc<Const>>,
    ) {
        let start = self.largest();
        let mut outputs = [ABSENT; MAX_CHAIN];
        let mut const_ids: SmallVec<[TensorId; 8]> = SmallVec::new();
        for at in start..MAX_CHAIN {
            let n = self.nodes[at];
            let ids = inputs(n);
            let mut dynamic = 0;
            for &id in ids {
                // Most operands are made by the node just before.
                let by = (start..at).rev().find(|&b| outputs[b] == id);
                let value = if by.is_some() || id == ABSENT {
                    None
                } else if let Some(k) = const_ids.iter().position(|&t| t == id) {
                    Some(k)
                } else {
                    constant(id).map(|c| {
                        self.consts.push(c);
                        const_ids.push(id);
                        self.consts.len() - 1
                    })
                };
                dynamic += usize::from(id != ABSENT && value.is_none());
                self.reads.push(Read {
                    id,
                    by: by.map(|b| b as u8),
                    constant: value.map(|k| k as u32),
                });
            }
            self.read_ends[at] = self.reads.len() as u32;
            let op = op(n);
            op.encode(ids.len(), &mut self.words);
            self.word_ends[at] = self.words.len() as u32;
            self.nonlinear[at] = expr::is_nonlinear_step(op, dynamic);
            self.integer[at] = matches!(op, Op::Truncate);
            outputs[at] = output(n);
        }
    }

    /// Writes chain `c`'s key ([`expr::write_step_key`]) into `key`, from what was read; `None`
    /// when an operand is neither the chain's input, made in the chain, nor a constant.
    pub fn write_key(&self, c: Chain, key: &mut Vec<u64>) -> Option<Keyed> {
        debug_assert!(self.largest() <= c.start && c.end <= MAX_CHAIN);
        key.clear();
        let mut keyed = Keyed {
            consts: SmallVec::new(),
            nonlinear: false,
            integer: false,
        };
        let mut used: SmallVec<[u32; 8]> = SmallVec::new();
        for at in c.start..c.end {
            key.extend_from_slice(self.words_of(at));
            let mut codes = expr::Codes::new(key);
            for r in self.reads_of(at) {
                codes.push(if r.id == ABSENT {
                    expr::NONE_CODE
                } else if r.id == c.input {
                    expr::X_CODE
                } else if let Some(by) = r.by.map(usize::from).filter(|&by| by >= c.start) {
                    expr::step_code(by - c.start)
                } else {
                    let k = r.constant?;
                    let value = &self.consts[k as usize];
                    if !used.contains(&k) {
                        used.push(k);
                        keyed.consts.push(value.clone());
                    }
                    expr::const_code(value)
                });
            }
            codes.finish();
            keyed.nonlinear |= self.nonlinear[at];
            keyed.integer |= self.integer[at];
        }
        Some(keyed)
    }

    /// Walks chain `c` in order, passing each node and its operands to `step`, constants
    /// numbered in order of first use (as in [`Keyed::consts`]); `None` when an operand is
    /// neither the chain's input, made in the chain, nor a constant. This is the reference the
    /// scanner compiles from, kept apart from [`Self::write_key`], which resolves operands
    /// straight into codes on the hot path: a compiled chain's own key is checked against the
    /// written one in debug builds.
    pub fn walk(&self, c: Chain, mut step: impl FnMut(usize, &[Operand])) -> Option<()> {
        let mut used: SmallVec<[u32; 8]> = SmallVec::new();
        let mut args: SmallVec<[Operand; 8]> = SmallVec::new();
        for at in c.start..c.end {
            args.clear();
            for r in self.reads_of(at) {
                let a = match (r.id, r.by.map(usize::from)) {
                    (ABSENT, _) => Operand::None,
                    (id, _) if id == c.input => Operand::X,
                    (_, Some(by)) if by >= c.start => Operand::Step(by - c.start),
                    _ => {
                        let k = r.constant?;
                        let j = used.iter().position(|&u| u == k);
                        Operand::Const(j.unwrap_or_else(|| {
                            used.push(k);
                            used.len() - 1
                        }))
                    }
                };
                args.push(a);
            }
            step(self.nodes[at], &args);
        }
        Some(())
    }
}
