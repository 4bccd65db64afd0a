//! A chain of element-wise nodes compiled into a scalar function of its one input, evaluated in
//! f64 with the model's own (usually float32-rounded) constants. Constants of more than one element
//! make the function per-channel: channel `c` reads element `c` of each of them.

use std::collections::HashMap;
use std::hash::{BuildHasher, Hasher};
use std::ops::Deref;
use std::rc::Rc;
use std::sync::Arc;

use smallvec::SmallVec;

use crate::catalog::{self, FusedNode, Kind};
use crate::onnx::attrs;
use crate::onnx::proto::NodeProto;

/// Longest chain the scanner compiles (the longest spelled-out activations take about 15 nodes).
pub const MAX_CHAIN: usize = 24;

/// Where a step reads an operand.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Operand {
    /// The chain's input.
    X,
    /// The result of an earlier step.
    Step(usize),
    /// A constant, by index into [`Expr::consts`].
    Const(usize),
    /// An optional operand that is absent.
    None,
}

/// What a step computes.
#[derive(Debug, Clone)]
pub enum Op {
    Add,
    Sub,
    Mul,
    Div,
    Pow,
    Exp,
    Log,
    Sqrt,
    Neg,
    Abs,
    Reciprocal,
    Erf,
    Max,
    Min,
    Sum,
    Where,
    Greater,
    Less,
    GreaterOrEqual,
    LessOrEqual,
    Equal,
    Sign,
    And,
    Or,
    Xor,
    Not,
    /// Identity, Cast to a float type, CastLike: the value passes through.
    Pass,
    /// Cast to an integer type.
    Truncate,
    /// Clip with bounds from inputs 1 and 2 (absent = unbounded).
    Clip,
    /// Clip with attribute bounds (opset < 11).
    ClipAttr(f64, f64),
    /// PRelu(x, slope).
    PRelu,
    /// A fused activation op, evaluated by its catalogue reference.
    Kind(&'static Kind, Vec<f64>),
}

#[derive(Debug, Clone)]
pub struct Step {
    pub op: Op,
    /// Operands in input order (inline: most ops take one to three).
    pub args: SmallVec<[Operand; 3]>,
}

/// A constant operand.
#[derive(Debug, Clone, PartialEq)]
pub struct Const {
    pub values: Vec<f64>,
    pub dims: Vec<usize>,
    /// The scan's number for these values: equal values, equal number.
    pub key: u32,
}

/// Numbers for the values of constants, shared across a scan's graphs: equal values (bit for
/// bit) get one number ([`Const::key`]), so a chain key names a constant by its number.
#[derive(Default)]
pub struct ConstNumbers {
    /// The constants numbered so far, by a hash of their values.
    by_hash: HashMap<u64, SmallVec<[Rc<Const>; 1]>, foldhash::fast::RandomState>,
    count: u32,
}

impl ConstNumbers {
    /// A constant of these values and dims, with its values' number.
    pub fn constant(&mut self, values: Vec<f64>, dims: Vec<usize>) -> Rc<Const> {
        let same_values = |c: &Rc<Const>| {
            c.values.len() == values.len()
                && c.values
                    .iter()
                    .zip(&values)
                    .all(|(a, b)| a.to_bits() == b.to_bits())
        };
        let mut hasher = self.by_hash.hasher().build_hasher();
        values.iter().for_each(|x| hasher.write_u64(x.to_bits()));
        let known = self.by_hash.entry(hasher.finish()).or_default();
        if let Some(same) = known.iter().find(|c| same_values(c)) {
            let key = same.key;
            return Rc::new(Const { values, dims, key });
        }
        let c = Rc::new(Const {
            values,
            dims,
            key: self.count,
        });
        self.count += 1;
        known.push(c.clone());
        c
    }
}

/// The compiled chain. A scan compiles only the chains whose key it has not met, into one reused
/// `Expr`, so its steps keep their allocation.
/// Its constants are shared with the scan's table of constants (`C`: [`Rc`]), or with the
/// threads identifying its channels ([`Expr::shared`]).
#[derive(Debug, Clone)]
pub struct Expr<C = Rc<Const>> {
    pub steps: Vec<Step>,
    pub consts: SmallVec<[C; 8]>,
    /// 1 for a scalar function, else the element count shared by every multi-element constant.
    pub channels: usize,
}

impl<C> Default for Expr<C> {
    fn default() -> Self {
        Expr {
            steps: Vec::new(),
            consts: SmallVec::new(),
            channels: 0,
        }
    }
}

impl Expr {
    /// A copy whose constants can be read from several threads.
    pub fn shared(&self) -> Expr<Arc<Const>> {
        Expr {
            steps: self.steps.clone(),
            consts: self
                .consts
                .iter()
                .map(|c| Arc::new(Const::clone(c)))
                .collect(),
            channels: self.channels,
        }
    }
}

impl<C: Deref<Target = Const>> Expr<C> {
    /// Evaluates the chain at `x` for channel `c`.
    pub fn eval(&self, x: f64, c: usize) -> f64 {
        let mut vals = [0.0f64; MAX_CHAIN];
        for (i, s) in self.steps.iter().enumerate() {
            let a = |k: usize| match s.args.get(k).copied().unwrap_or(Operand::None) {
                Operand::X => Some(x),
                Operand::Step(j) => Some(vals[j]),
                Operand::Const(j) => {
                    let v = &self.consts[j].values;
                    Some(if v.len() == 1 { v[0] } else { v[c] })
                }
                Operand::None => None,
            };
            let a0 = a(0).unwrap_or(f64::NAN);
            let a1 = || a(1).unwrap_or(f64::NAN);
            let b = |t: bool| if t { 1.0 } else { 0.0 };
            vals[i] = match &s.op {
                Op::Add => a0 + a1(),
                Op::Sub => a0 - a1(),
                Op::Mul => a0 * a1(),
                Op::Div => a0 / a1(),
                Op::Pow => a0.powf(a1()),
                Op::Exp => a0.exp(),
                Op::Log => a0.ln(),
                Op::Sqrt => a0.sqrt(),
                Op::Neg => -a0,
                Op::Abs => a0.abs(),
                Op::Reciprocal => 1.0 / a0,
                Op::Erf => libm::erf(a0),
                Op::Max => (0..s.args.len())
                    .filter_map(a)
                    .fold(f64::NEG_INFINITY, f64::max),
                Op::Min => (0..s.args.len())
                    .filter_map(a)
                    .fold(f64::INFINITY, f64::min),
                Op::Sum => (0..s.args.len()).filter_map(a).sum(),
                Op::Where => {
                    if a0 != 0.0 {
                        a1()
                    } else {
                        a(2).unwrap_or(f64::NAN)
                    }
                }
                Op::Greater => b(a0 > a1()),
                Op::Less => b(a0 < a1()),
                Op::GreaterOrEqual => b(a0 >= a1()),
                Op::LessOrEqual => b(a0 <= a1()),
                Op::Equal => b(a0 == a1()),
                Op::Sign => {
                    if a0 > 0.0 {
                        1.0
                    } else if a0 < 0.0 {
                        -1.0
                    } else {
                        a0
                    }
                }
                Op::And => b(a0 != 0.0 && a1() != 0.0),
                Op::Or => b(a0 != 0.0 || a1() != 0.0),
                Op::Xor => b((a0 != 0.0) != (a1() != 0.0)),
                Op::Not => b(a0 == 0.0),
                Op::Pass => a0,
                Op::Truncate => a0.trunc(),
                Op::Clip => {
                    let lo = a(1).unwrap_or(f64::NEG_INFINITY);
                    let hi = a(2).unwrap_or(f64::INFINITY);
                    // ONNX Clip-13: when min > max every value becomes max.
                    if lo > hi { hi } else { a0.max(lo).min(hi) }
                }
                Op::ClipAttr(lo, hi) => a0.max(*lo).min(*hi),
                Op::PRelu => {
                    if a0 < 0.0 {
                        a0 * a1()
                    } else {
                        a0
                    }
                }
                Op::Kind(k, p) => k.eval(a0, p),
            };
        }
        self.steps.last().map_or(x, |_| vals[self.steps.len() - 1])
    }

    /// Writes into `k` this chain's key (see [`write_step_key`]). The scanner writes the same key
    /// from what it read of a node's chains, and checks it against this one for every chain it
    /// compiles.
    pub fn write_key(&self, k: &mut Vec<u64>) {
        k.clear();
        for s in &self.steps {
            write_step_key(k, &s.op, &s.args, &self.consts);
        }
    }
}

/// Appends a step to a chain key: a key is equal for chains that compute the same function
/// (same ops, wiring and constant values), so identification runs once per distinct spelling.
/// It is every step in order: its op and operand count in one word, the op's payload, then its
/// operands two to a word ([`Codes`]). Every part is length-prefixed, so different chains
/// never share a key.
pub fn write_step_key<C: Deref<Target = Const>>(
    k: &mut Vec<u64>,
    op: &Op,
    args: &[Operand],
    consts: &[C],
) {
    op.encode(args.len(), k);
    let mut codes = Codes::new(k);
    for &a in args {
        codes.push(operand_code(a, consts));
    }
    codes.finish();
}

/// The code of an operand in a chain key, `consts` being the chain's constants.
fn operand_code<C: Deref<Target = Const>>(a: Operand, consts: &[C]) -> u64 {
    match a {
        Operand::None => NONE_CODE,
        Operand::X => X_CODE,
        Operand::Step(j) => step_code(j),
        Operand::Const(j) => const_code(&consts[j]),
    }
}

// Operand codes in a chain key. An index or a constant's number fits in 30 bits: a model
// (under 2 GiB) cannot name 2^30 tensors.
pub const NONE_CODE: u64 = 0;
pub const X_CODE: u64 = 1 << 30;

/// The code of the result of step `j`.
pub fn step_code(j: usize) -> u64 {
    (2 << 30) | j as u64
}

/// The code of a constant: its values' number ([`Const::key`]).
pub fn const_code(c: &Const) -> u64 {
    (3 << 30) | u64::from(c.key)
}

/// A step's operand codes being appended to a chain key, two to a word.
pub struct Codes<'k> {
    key: &'k mut Vec<u64>,
    half: Option<u64>,
}

impl<'k> Codes<'k> {
    pub fn new(key: &'k mut Vec<u64>) -> Self {
        Codes { key, half: None }
    }

    pub fn push(&mut self, code: u64) {
        match self.half.take() {
            Some(first) => self.key.push(first << 32 | code),
            None => self.half = Some(code),
        }
    }

    /// Ends the step: an odd last code takes a word of its own.
    pub fn finish(self) {
        if let Some(first) = self.half {
            self.key.push(first << 32);
        }
    }
}

/// The channel count of a chain's constants and the shape of its multi-element ones (`None`
/// when all are scalars): `None` when one is empty or the multi-element ones disagree in count
/// or in shape (1s aside).
pub fn channels_of<C: Deref<Target = Const>>(consts: &[C]) -> Option<(usize, Option<&[usize]>)> {
    if consts.iter().any(|c| c.values.is_empty()) {
        return None;
    }
    let mut multi = consts.iter().filter(|c| c.values.len() > 1);
    let Some(first) = multi.next() else {
        return Some((1, None));
    };
    let channels = first.values.len();
    if multi.any(|c| c.values.len() != channels || !same_squeezed(&c.dims, &first.dims)) {
        return None;
    }
    Some((channels, Some(&first.dims)))
}

/// Whether two shapes are equal without their 1s, as `[1, C, 1, 1]` and `[C, 1, 1]` are.
fn same_squeezed(a: &[usize], b: &[usize]) -> bool {
    a.iter()
        .filter(|&&d| d != 1)
        .eq(b.iter().filter(|&&d| d != 1))
}

impl Op {
    /// Appends to a chain key a word for the op and its operand count (`args`), then the op's
    /// payload.
    pub fn encode(&self, args: usize, k: &mut impl Extend<u64>) {
        let word = |tag: u64| tag | (args as u64) << 8;
        let tag = match self {
            Op::Add => 0,
            Op::Sub => 1,
            Op::Mul => 2,
            Op::Div => 3,
            Op::Pow => 4,
            Op::Exp => 5,
            Op::Log => 6,
            Op::Sqrt => 7,
            Op::Neg => 8,
            Op::Abs => 9,
            Op::Reciprocal => 10,
            Op::Erf => 11,
            Op::Max => 12,
            Op::Min => 13,
            Op::Sum => 14,
            Op::Where => 15,
            Op::Greater => 16,
            Op::Less => 17,
            Op::GreaterOrEqual => 18,
            Op::LessOrEqual => 19,
            Op::Equal => 20,
            Op::Pass => 21,
            Op::Truncate => 22,
            Op::Clip => 23,
            Op::PRelu => 24,
            Op::Sign => 27,
            Op::And => 28,
            Op::Or => 29,
            Op::Xor => 30,
            Op::Not => 31,
            Op::ClipAttr(lo, hi) => {
                k.extend([word(25), lo.to_bits(), hi.to_bits()]);
                return;
            }
            Op::Kind(kind, p) => {
                let at = catalog::position(kind);
                k.extend([word(26), at as u64, p.len() as u64]);
                k.extend(p.iter().map(|v| v.to_bits()));
                return;
            }
        };
        k.extend([word(tag)]);
    }
}

/// The step for `node`, or `None` when the op is not element-wise (or not understood).
/// `opset` is the default-domain opset.
pub fn op_of(node: &NodeProto, opset: i64) -> Option<Op> {
    if !matches!(node.domain(), "" | "ai.onnx") {
        return None;
    }
    let f = |name: &str, default: f64| attrs::float(node, name).unwrap_or(default);
    Some(match node.op_type() {
        "Add" => Op::Add,
        "Sub" => Op::Sub,
        "Mul" => Op::Mul,
        "Div" => Op::Div,
        "Pow" => Op::Pow,
        "Exp" => Op::Exp,
        "Log" => Op::Log,
        "Sqrt" => Op::Sqrt,
        "Neg" => Op::Neg,
        "Abs" => Op::Abs,
        "Reciprocal" => Op::Reciprocal,
        "Erf" => Op::Erf,
        "Max" => Op::Max,
        "Min" => Op::Min,
        "Sum" => Op::Sum,
        "Where" => Op::Where,
        "Greater" => Op::Greater,
        "Less" => Op::Less,
        "GreaterOrEqual" => Op::GreaterOrEqual,
        "LessOrEqual" => Op::LessOrEqual,
        "Equal" => Op::Equal,
        "Sign" => Op::Sign,
        "And" => Op::And,
        "Or" => Op::Or,
        "Xor" => Op::Xor,
        "Not" => Op::Not,
        "Identity" | "CastLike" => Op::Pass,
        "Cast" => {
            use crate::onnx::proto::tensor_proto::DataType::*;
            let to = attrs::int(node, "to")?;
            match crate::onnx::proto::tensor_proto::DataType::try_from(to as i32).ok()? {
                Float | Double | Float16 | Bfloat16 => Op::Pass,
                Bool | String => return None,
                _ => Op::Truncate,
            }
        }
        "Clip" if opset < 11 => Op::ClipAttr(f("min", f32::MIN as f64), f("max", f32::MAX as f64)),
        "Clip" => Op::Clip,
        "PRelu" => Op::PRelu,
        _ => {
            // A fused activation op with its parameters in attributes, evaluated by its
            // catalogue reference.
            let fused = FusedNode {
                node,
                opset,
                constant: &|_| None,
            };
            let (kind, reading) = catalog::read_fused(&fused)?;
            Op::Kind(kind, reading.params?.scalar_values()?)
        }
    })
}

/// True unless a step with `dynamic` computed (not constant) operands is linear in its one
/// computed operand; a chain without such a step is never an activation.
pub fn is_nonlinear_step(op: &Op, dynamic: usize) -> bool {
    let linear = matches!(
        op,
        Op::Add | Op::Sub | Op::Mul | Op::Div | Op::Neg | Op::Pass | Op::Sum
    );
    !linear || (matches!(op, Op::Mul | Op::Div | Op::Pow) && dynamic > 1)
}

/// Input positions that carry data (CastLike's second input only gives a type).
pub fn data_inputs(node: &NodeProto) -> usize {
    match node.op_type() {
        "CastLike" => 1,
        _ => node.input.len(),
    }
}
