//! Emitting the graph forms of a kind for one site: `fused` (the one standard op) and
//! `primitive` (a decomposition into basic ops).
//!
//! [`emit`] hands the site ([`EmitCtx`]) to the kind's emitter ([`Kind::fused_form`],
//! [`Kind::primitive_form`]), a plain function in the kind's file that builds with a [`Builder`].
//! The builder checks the site (parameter count and shapes, element type), names everything from
//! the site's prefix (nodes `{prefix}.{role}`, intermediate tensors `{prefix}.t.{role}`,
//! initializers `{prefix}.c.{role}`), refuses any op the graph's opset lacks, and records each
//! op with the opset it needs. [`needs`] tells what a form would emit without a site.
//!
//! Op versions ([`ops`]) come from the ONNX operator schemas as the `onnx` package 1.23.2 carries
//! them (`onnx.defs.get_schema(op, version)`: since_version and type constraints). Each op is
//! used from the first version that has the form written here: Add, Sub, Mul, Div, Less and
//! Greater broadcast a scalar constant from 7, Max and Min from 8; ops whose first version had
//! the legacy `consumed_inputs` attribute are used from 6.

use std::fmt;
use std::str::FromStr;

use super::Kind;
use crate::onnx::builder::{attr_f, node, tensor_float};
use crate::onnx::proto::{AttributeProto, NodeProto, TensorProto, tensor_proto::DataType};

/// Writes one form for one site.
pub type Emitter = fn(&EmitCtx<'_>) -> Result<Emitted, Unavailable>;

/// The newest default-domain opset of the ONNX release [`ops`] was checked against.
pub const NEWEST_OPSET: i64 = 28;

/// A graph form of a kind.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum FormId {
    /// The one standard op that computes the kind.
    Fused,
    /// A decomposition into basic ops.
    Primitive,
}

impl FormId {
    pub const ALL: [FormId; 2] = [FormId::Fused, FormId::Primitive];

    /// The name used on the command line and in JSON.
    pub fn name(self) -> &'static str {
        match self {
            FormId::Fused => "fused",
            FormId::Primitive => "primitive",
        }
    }
}

impl fmt::Display for FormId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A form name that is neither `fused` nor `primitive`.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("unknown form '{0}' (expected fused or primitive)")]
pub struct UnknownForm(pub String);

impl FromStr for FormId {
    type Err = UnknownForm;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        FormId::ALL
            .into_iter()
            .find(|f| f.name() == s)
            .ok_or_else(|| UnknownForm(s.to_string()))
    }
}

/// One parameter value of a site.
#[derive(Debug, Clone, PartialEq)]
pub enum ParamArg {
    Scalar(f64),
    /// One value per channel with the dims it has in the model, e.g. `[1, C, 1, 1]`.
    Tensor {
        values: Vec<f64>,
        dims: Vec<usize>,
    },
}

impl ParamArg {
    /// The values, one for a scalar.
    pub fn values(&self) -> &[f64] {
        match self {
            ParamArg::Scalar(v) => std::slice::from_ref(v),
            ParamArg::Tensor { values, .. } => values,
        }
    }
}

/// The site a form is emitted for.
#[derive(Debug, Clone, Copy)]
pub struct EmitCtx<'a> {
    /// Tensor the activation reads.
    pub input: &'a str,
    /// Name the final node writes (the site's output).
    pub output: &'a str,
    /// Unique prefix of every new node, tensor and initializer name.
    pub prefix: &'a str,
    /// Element type of `input`; constants are emitted in it.
    pub elem_type: DataType,
    /// The graph's default-domain opset; no op or op version above it is emitted.
    pub opset: i64,
    /// One value per entry of the kind's `params`, in order.
    pub params: &'a [ParamArg],
}

/// An op a form emits and the opset it needs for the site's element type.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct OpNeed {
    pub op_type: &'static str,
    pub since: i64,
}

/// A form written for one site: nodes in topological order (the last writes the site's output),
/// their initializers, and every op type used with the opset it needs.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Emitted {
    pub nodes: Vec<NodeProto>,
    pub initializers: Vec<TensorProto>,
    pub ops: Vec<OpNeed>,
}

/// The least opset that has every op of `needs`; `None` for an empty list.
pub fn min_opset(needs: &[OpNeed]) -> Option<i64> {
    needs.iter().map(|n| n.since).max()
}

/// Why a form cannot be emitted for a site.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Unavailable {
    #[error("{op} needs opset {needs} for this element type; the graph has opset {have}")]
    NeedsOpset {
        op: &'static str,
        needs: i64,
        have: i64,
    },
    #[error("{kind} has no fused op")]
    NoFusedOp { kind: &'static str },
    #[error("{kind}: the {form} form takes its parameters as scalars, not one value per channel")]
    PerChannel { kind: &'static str, form: FormId },
    #[error(
        "{kind}: element type {} is not FLOAT, FLOAT16, DOUBLE or BFLOAT16",
        elem_type.as_str_name()
    )]
    ElemType {
        kind: &'static str,
        elem_type: DataType,
    },
    #[error("{kind} takes {expected} parameter(s), the site gives {found}")]
    ParamCount {
        kind: &'static str,
        expected: usize,
        found: usize,
    },
    #[error("{kind}: parameter {param} has {values} value(s) but dims {dims:?}")]
    ParamShape {
        kind: &'static str,
        param: &'static str,
        values: usize,
        dims: Vec<usize>,
    },
    #[error("{kind}: parameter {param} = {value} {why}")]
    BadParam {
        kind: &'static str,
        param: &'static str,
        value: f64,
        why: &'static str,
    },
}

/// Emits `kind`'s `form` for the site `ctx`.
pub fn emit(kind: &Kind, form: FormId, ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
    let emitter = match form {
        FormId::Fused => kind
            .fused_form
            .ok_or(Unavailable::NoFusedOp { kind: kind.id })?,
        FormId::Primitive => kind.primitive_form,
    };
    emitter(ctx)
}

/// The ops `kind`'s `form` emits, each with the least opset it needs, for float32 and
/// parameters given as scalars or, with `per_channel`, every per-channel parameter of the kind
/// as a `[1, C, 1, 1]` tensor. This is the form as written at the lowest opset that has it; an
/// op may need a later version at a higher opset (Clip's constant inputs from 11), and float16,
/// double or bfloat16 inputs may need later versions (Celu, and bfloat16 throughout), which
/// [`emit`] reports. Empty when the form cannot be written at any opset.
pub fn needs(kind: &Kind, form: FormId, per_channel: bool) -> Vec<OpNeed> {
    least(kind, form, per_channel)
        .map(|e| e.ops)
        .unwrap_or_default()
}

/// The form written for a stand-in site at the lowest opset that has it, or why it cannot be
/// written at [`NEWEST_OPSET`].
pub(crate) fn least(kind: &Kind, form: FormId, per_channel: bool) -> Result<Emitted, Unavailable> {
    let params: Vec<ParamArg> = kind
        .params
        .iter()
        .map(|p| {
            if per_channel && p.per_channel {
                ParamArg::Tensor {
                    values: vec![p.default; 2],
                    dims: vec![1, 2, 1, 1],
                }
            } else {
                ParamArg::Scalar(p.default)
            }
        })
        .collect();
    let at = |opset| {
        let ctx = EmitCtx {
            input: "x",
            output: "y",
            prefix: "site",
            elem_type: DataType::Float,
            opset,
            params: &params,
        };
        emit(kind, form, &ctx)
    };
    (1..NEWEST_OPSET)
        .find_map(|opset| at(opset).ok())
        .map_or_else(|| at(NEWEST_OPSET), Ok)
}

/// An ONNX op as the emitters write it: the first opset with the form used here, per input
/// element type.
#[derive(Debug, Clone, Copy)]
pub struct Op {
    pub op_type: &'static str,
    /// For float32 inputs.
    pub since: i64,
    /// For float16 and double inputs.
    pub since_f16_f64: i64,
    /// For bfloat16 inputs.
    pub since_bf16: i64,
}

impl Op {
    const fn new(op_type: &'static str, since: i64, since_bf16: i64) -> Op {
        Op {
            op_type,
            since,
            since_f16_f64: since,
            since_bf16,
        }
    }

    /// The first opset that has this op for inputs of `elem_type`.
    pub fn since_for(&self, elem_type: DataType) -> i64 {
        match elem_type {
            DataType::Float16 | DataType::Double => self.since_f16_f64,
            DataType::Bfloat16 => self.since_bf16,
            _ => self.since,
        }
    }
}

/// The ops the emitters write: op type, first opset for float32 / float16 / double, first opset
/// for bfloat16 (ONNX operator schemas, onnx 1.23.2).
#[rustfmt::skip]
pub mod ops {
    use super::Op;

    pub const ABS:              Op = Op::new("Abs",              6, 13);
    pub const ADD:              Op = Op::new("Add",              7, 13);
    /// Celu accepts only float32 until version 28.
    pub const CELU:             Op = Op { op_type: "Celu", since: 12, since_f16_f64: 28, since_bf16: 28 };
    /// Clip with `min` / `max` attributes (versions 6 to 10; no bfloat16 in that form).
    pub const CLIP_ATTRS:       Op = Op::new("Clip",             6, 13);
    /// Clip with `min` / `max` as optional scalar inputs (from version 11).
    pub const CLIP_INPUTS:      Op = Op::new("Clip",            11, 13);
    pub const DIV:              Op = Op::new("Div",              7, 13);
    pub const ELU:              Op = Op::new("Elu",              6, 22);
    pub const ERF:              Op = Op::new("Erf",              9, 13);
    pub const EXP:              Op = Op::new("Exp",              6, 13);
    pub const GELU:             Op = Op::new("Gelu",            20, 20);
    pub const GREATER:          Op = Op::new("Greater",          7, 13);
    pub const HARD_SIGMOID:     Op = Op::new("HardSigmoid",      6, 22);
    pub const HARD_SWISH:       Op = Op::new("HardSwish",       14, 22);
    pub const LEAKY_RELU:       Op = Op::new("LeakyRelu",        6, 16);
    pub const LOG:              Op = Op::new("Log",              6, 13);
    pub const MAX:              Op = Op::new("Max",              8, 13);
    pub const MIN:              Op = Op::new("Min",              8, 13);
    pub const MISH:             Op = Op::new("Mish",            18, 22);
    pub const MUL:              Op = Op::new("Mul",              7, 13);
    pub const NEG:              Op = Op::new("Neg",              6, 13);
    /// Unidirectional broadcast of the slope exists from version 7; 9 is the version the
    /// catalogue lists (and the one the type list of today's PRelu starts from).
    pub const PRELU:            Op = Op::new("PRelu",            9, 16);
    pub const RELU:             Op = Op::new("Relu",             6, 13);
    pub const SELU:             Op = Op::new("Selu",             6, 22);
    pub const SIGMOID:          Op = Op::new("Sigmoid",          6, 13);
    pub const SOFTPLUS:         Op = Op::new("Softplus",         1, 22);
    pub const SOFTSIGN:         Op = Op::new("Softsign",         1, 22);
    pub const SUB:              Op = Op::new("Sub",              7, 13);
    pub const SWISH:            Op = Op::new("Swish",           24, 24);
    pub const TANH:             Op = Op::new("Tanh",             6, 13);
    pub const THRESHOLDED_RELU: Op = Op::new("ThresholdedRelu", 10, 22);
    pub const WHERE:            Op = Op::new("Where",            9, 16);
}

/// Builds one form for one site; see the module doc for the names it gives.
#[derive(Debug)]
pub struct Builder<'c> {
    ctx: &'c EmitCtx<'c>,
    kind: &'static Kind,
    form: FormId,
    out: Emitted,
}

impl<'c> Builder<'c> {
    /// Starts `kind`'s `form` for `ctx`, refusing a site whose element type is not a float type
    /// or whose parameters do not fit the kind.
    pub fn new(
        ctx: &'c EmitCtx<'c>,
        kind: &'static Kind,
        form: FormId,
    ) -> Result<Builder<'c>, Unavailable> {
        use DataType::*;
        if !matches!(ctx.elem_type, Float | Float16 | Double | Bfloat16) {
            return Err(Unavailable::ElemType {
                kind: kind.id,
                elem_type: ctx.elem_type,
            });
        }
        if ctx.params.len() != kind.params.len() {
            return Err(Unavailable::ParamCount {
                kind: kind.id,
                expected: kind.params.len(),
                found: ctx.params.len(),
            });
        }
        for (arg, p) in ctx.params.iter().zip(kind.params) {
            if let ParamArg::Tensor { values, dims } = arg
                && (values.len() != dims.iter().product::<usize>() || values.is_empty())
            {
                return Err(Unavailable::ParamShape {
                    kind: kind.id,
                    param: p.name,
                    values: values.len(),
                    dims: dims.clone(),
                });
            }
        }
        Ok(Builder {
            ctx,
            kind,
            form,
            out: Emitted::default(),
        })
    }

    /// Parameter `index` as a scalar; a per-channel value is refused (the op takes an attribute).
    pub fn scalar(&self, index: usize) -> Result<f64, Unavailable> {
        match &self.ctx.params[index] {
            ParamArg::Scalar(v) => Ok(*v),
            ParamArg::Tensor { .. } => Err(Unavailable::PerChannel {
                kind: self.kind.id,
                form: self.form,
            }),
        }
    }

    /// Refuses the site unless every value of parameter `index` passes `ok`; `why` says what a
    /// value must be.
    pub fn require(
        &self,
        index: usize,
        ok: fn(f64) -> bool,
        why: &'static str,
    ) -> Result<(), Unavailable> {
        match self.ctx.params[index].values().iter().find(|&&v| !ok(v)) {
            Some(&value) => Err(Unavailable::BadParam {
                kind: self.kind.id,
                param: self.kind.params[index].name,
                value,
                why,
            }),
            None => Ok(()),
        }
    }

    /// A scalar initializer `{prefix}.c.{role}` of the site's element type; returns its name.
    pub fn constant(&mut self, role: &str, value: f64) -> String {
        self.initializer(role, &[], &[value])
    }

    /// Parameter `index` as an initializer `{prefix}.c.{role}`: shape `[]` for a scalar, the
    /// site's dims for a per-channel value; returns its name.
    pub fn param(&mut self, index: usize, role: &str) -> String {
        match &self.ctx.params[index] {
            ParamArg::Scalar(v) => self.initializer(role, &[], &[*v]),
            ParamArg::Tensor { values, dims } => {
                let dims: Vec<i64> = dims.iter().map(|&d| d as i64).collect();
                self.initializer(role, &dims, values)
            }
        }
    }

    fn initializer(&mut self, role: &str, dims: &[i64], values: &[f64]) -> String {
        let name = format!("{}.c.{role}", self.ctx.prefix);
        debug_assert!(
            !self.out.initializers.iter().any(|t| t.name() == name),
            "initializer role {role} used twice"
        );
        let tensor = tensor_float(&name, self.ctx.elem_type, dims, values)
            .expect("element type checked in Builder::new");
        self.out.initializers.push(tensor);
        name
    }

    /// Appends node `{prefix}.{role}` of `op` writing `{prefix}.t.{role}`, and returns that
    /// tensor's name; refuses an op the site's opset lacks for its element type.
    pub fn node(
        &mut self,
        op: Op,
        role: &str,
        inputs: &[&str],
        attrs: Vec<AttributeProto>,
    ) -> Result<String, Unavailable> {
        let needs = op.since_for(self.ctx.elem_type);
        if needs > self.ctx.opset {
            return Err(Unavailable::NeedsOpset {
                op: op.op_type,
                needs,
                have: self.ctx.opset,
            });
        }
        let name = format!("{}.{role}", self.ctx.prefix);
        let output = format!("{}.t.{role}", self.ctx.prefix);
        debug_assert!(
            !self.out.nodes.iter().any(|n| n.name() == name),
            "node role {role} used twice"
        );
        self.out
            .nodes
            .push(node(op.op_type, &name, inputs, &[&output], attrs));
        match self.out.ops.iter_mut().find(|n| n.op_type == op.op_type) {
            Some(need) => need.since = need.since.max(needs),
            None => self.out.ops.push(OpNeed {
                op_type: op.op_type,
                since: needs,
            }),
        }
        Ok(output)
    }

    /// Clip of `input` to [min, max]: attributes below opset 11, scalar constant inputs from 11.
    pub fn clip(
        &mut self,
        role: &str,
        input: &str,
        min: f64,
        max: f64,
    ) -> Result<String, Unavailable> {
        if self.ctx.opset >= ops::CLIP_INPUTS.since {
            let lo = self.constant(&format!("{role}.min"), min);
            let hi = self.constant(&format!("{role}.max"), max);
            self.node(ops::CLIP_INPUTS, role, &[input, &lo, &hi], vec![])
        } else {
            let attrs = vec![attr_f("min", min as f32), attr_f("max", max as f32)];
            self.node(ops::CLIP_ATTRS, role, &[input], attrs)
        }
    }

    /// Ends the form: the node that wrote `last` writes the site's output instead.
    pub fn finish(mut self, last: &str) -> Result<Emitted, Unavailable> {
        let output = self.ctx.output;
        for n in &mut self.out.nodes {
            for name in n.output.iter_mut().chain(n.input.iter_mut()) {
                if name == last {
                    *name = output.to_string();
                }
            }
        }
        debug_assert!(
            self.out.nodes.last().is_some_and(|n| n.output == [output]),
            "the last node writes the site's output"
        );
        Ok(self.out)
    }
}
