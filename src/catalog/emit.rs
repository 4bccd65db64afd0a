//! Writing a form for one site: the [`Builder`] the kinds' form writers use, what they produce
//! ([`Emitted`]) and why they may refuse ([`Unavailable`]).
//!
//! The builder checks the site (parameter count and shapes, element type), names everything from
//! the site's prefix (nodes `{prefix}.{role}`, intermediate tensors `{prefix}.t.{role}`,
//! initializers `{prefix}.c.{role}`), refuses any op the graph's opset lacks, and records each
//! op with the opset it needs.
//!
//! Op versions ([`ops`], and each kind's fused ops) come from the ONNX operator schemas as the
//! `onnx` package 1.23.2 carries them (`onnx.defs.get_schema(op, version)`: since_version and
//! type constraints). Each op is used from the first version that has the form written here:
//! Add, Sub, Mul, Div, Less and Greater broadcast a scalar constant from 7, Max and Min from 8;
//! ops whose first version had the legacy `consumed_inputs` attribute are used from 6.

use std::fmt;
use std::str::FromStr;

use super::params::{Param, ParamValue, Params};
use crate::onnx::builder::{attr_f, node, tensor_float};
use crate::onnx::proto::{AttributeProto, NodeProto, TensorProto, tensor_proto::DataType};

/// The newest default-domain opset of the ONNX release the op versions were checked against.
pub const NEWEST_OPSET: i64 = 28;

/// A graph form of a kind.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Form {
    /// The one standard op that computes the kind.
    Fused,
    /// A decomposition into basic ops.
    Primitive,
    /// A piecewise-linear function fitted to the kind over a range (see [`super::fit`]).
    Fitted,
}

impl Form {
    /// The exact forms.
    pub const ALL: [Form; 2] = [Form::Fused, Form::Primitive];

    /// The name used on the command line and in JSON.
    pub fn name(self) -> &'static str {
        match self {
            Form::Fused => "fused",
            Form::Primitive => "primitive",
            Form::Fitted => "fitted",
        }
    }
}

impl fmt::Display for Form {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A form name that is neither `fused` nor `primitive`.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("unknown form '{0}' (expected fused or primitive)")]
pub struct UnknownForm(pub String);

impl FromStr for Form {
    type Err = UnknownForm;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Form::ALL
            .into_iter()
            .find(|f| f.name() == s)
            .ok_or_else(|| UnknownForm(s.to_string()))
    }
}

/// The site a form is written for.
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
    /// One value per parameter of the kind, in order.
    pub params: &'a Params,
}

/// An op a form emits and the opset it needs for the site's element type.
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, schemars::JsonSchema)]
pub struct OpNeed {
    pub op_type: &'static str,
    pub since: i64,
}

/// A form written for one site: nodes in topological order (the last writes the site's output),
/// their initializers, and every op type used with the opset it needs. Every new name starts
/// with `prefix`.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Emitted {
    pub prefix: String,
    pub nodes: Vec<NodeProto>,
    pub initializers: Vec<TensorProto>,
    pub ops: Vec<OpNeed>,
}

impl Emitted {
    /// The op types of the nodes, in order.
    pub fn op_types(&self) -> Vec<String> {
        self.nodes.iter().map(|n| n.op_type().to_string()).collect()
    }

    /// Every name the form introduces (nodes, intermediate tensors, initializers); the site's
    /// output, which the last node writes, is not new.
    pub fn new_names(&self, output: &str) -> Vec<String> {
        let mut v: Vec<String> = self.nodes.iter().map(|n| n.name().to_string()).collect();
        v.extend(
            self.nodes
                .iter()
                .flat_map(|n| n.output.iter())
                .filter(|o| o.as_str() != output)
                .cloned(),
        );
        v.extend(self.initializers.iter().map(|t| t.name().to_string()));
        v
    }

    /// The same form with every name it introduces under `prefix` instead (for a name already
    /// taken); the tensors it reads from the graph and the site's output keep their names.
    pub fn renamed(&self, prefix: &str, output: &str) -> Emitted {
        let introduced: std::collections::HashSet<String> =
            self.new_names(output).into_iter().collect();
        let swap = |name: &mut String| {
            if introduced.contains(name.as_str())
                && let Some(rest) = name.strip_prefix(self.prefix.as_str())
            {
                *name = format!("{prefix}{rest}");
            }
        };
        let mut out = self.clone();
        out.prefix = prefix.to_string();
        for n in &mut out.nodes {
            let mut name = n.name().to_string();
            swap(&mut name);
            n.name = Some(name);
            n.input.iter_mut().chain(n.output.iter_mut()).for_each(swap);
        }
        for t in &mut out.initializers {
            let mut name = t.name().to_string();
            swap(&mut name);
            t.name = Some(name);
        }
        out
    }
}

/// The least opset that has every op of `needs`; `None` for an empty list.
pub fn min_opset(needs: &[OpNeed]) -> Option<i64> {
    needs.iter().map(|n| n.since).max()
}

/// Why a form cannot be emitted for a site.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum Unavailable {
    #[error("{op} takes no {} inputs at any opset", elem_type.as_str_name())]
    NoVersion {
        op: &'static str,
        elem_type: DataType,
    },
    #[error("{op} needs opset {needs} for this element type; the graph has opset {have}")]
    NeedsOpset {
        op: &'static str,
        needs: i64,
        have: i64,
    },
    #[error("{kind} has no fused op")]
    NoFusedOp { kind: &'static str },
    #[error("{kind}: the fitted form is written from a fit over a range, not from the kind alone")]
    NeedsFit { kind: &'static str },
    #[error("{kind}: the {form} form takes its parameters as scalars, not one value per channel")]
    PerChannel { kind: &'static str, form: Form },
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

/// An ONNX op as the forms write it: the first opset with the form used here, per input
/// element type.
#[derive(Debug, Clone, Copy)]
pub struct OpVersion {
    pub op_type: &'static str,
    /// For float32 inputs.
    pub since: i64,
    /// For float16 and double inputs.
    pub since_f16_f64: i64,
    /// For bfloat16 inputs.
    pub since_bf16: i64,
}

impl OpVersion {
    /// The "since" of an element type no version of the op takes.
    pub const NEVER: i64 = i64::MAX;

    /// An op whose float16 and double versions arrived with its float32 one.
    pub const fn new(op_type: &'static str, since: i64, since_bf16: i64) -> OpVersion {
        OpVersion {
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

/// The basic ops the primitive forms are written with: op type, first opset for float32 /
/// float16 / double, first opset for bfloat16 (ONNX operator schemas, onnx 1.23.2). A kind's
/// own fused op is declared in the kind's file.
#[rustfmt::skip]
pub mod ops {
    use super::OpVersion;

    pub const ABS:          OpVersion = OpVersion::new("Abs",      6, 13);
    pub const ADD:          OpVersion = OpVersion::new("Add",      7, 13);
    /// Clip with `min` / `max` attributes (versions 6 to 10; no bfloat16 in that form).
    pub const CLIP_ATTRS:   OpVersion = OpVersion::new("Clip",     6, 13);
    /// Clip with `min` / `max` as optional scalar inputs (from version 11).
    pub const CLIP_INPUTS:  OpVersion = OpVersion::new("Clip",    11, 13);
    pub const DIV:          OpVersion = OpVersion::new("Div",      7, 13);
    pub const ERF:          OpVersion = OpVersion::new("Erf",      9, 13);
    pub const EXP:          OpVersion = OpVersion::new("Exp",      6, 13);
    pub const GREATER:      OpVersion = OpVersion::new("Greater",  7, 13);
    pub const LESS:         OpVersion = OpVersion::new("Less",     7, 13);
    pub const LOG:          OpVersion = OpVersion::new("Log",      6, 13);
    pub const MAX:          OpVersion = OpVersion::new("Max",      8, 13);
    pub const MIN:          OpVersion = OpVersion::new("Min",      8, 13);
    pub const MUL:          OpVersion = OpVersion::new("Mul",      7, 13);
    pub const NEG:          OpVersion = OpVersion::new("Neg",      6, 13);
    pub const RELU:         OpVersion = OpVersion::new("Relu",     6, 13);
    pub const SIGMOID:      OpVersion = OpVersion::new("Sigmoid",  6, 13);
    pub const SOFTPLUS:     OpVersion = OpVersion::new("Softplus", 1, 22);
    pub const SUB:          OpVersion = OpVersion::new("Sub",      7, 13);
    pub const TANH:         OpVersion = OpVersion::new("Tanh",     6, 13);
    pub const WHERE:        OpVersion = OpVersion::new("Where",    9, 16);
}

/// Builds one form for one site; see the module doc for the names it gives.
#[derive(Debug)]
pub struct Builder<'c> {
    ctx: &'c EmitCtx<'c>,
    kind: &'static str,
    params: &'static [Param],
    form: Form,
    out: Emitted,
}

impl<'c> Builder<'c> {
    /// Starts `form` of the kind `kind` (whose parameters are `params`) for `ctx`, refusing a
    /// site whose element type is not a float type or whose parameters do not fit the kind.
    pub fn new(
        ctx: &'c EmitCtx<'c>,
        kind: &'static str,
        params: &'static [Param],
        form: Form,
    ) -> Result<Builder<'c>, Unavailable> {
        use DataType::*;
        if !matches!(ctx.elem_type, Float | Float16 | Double | Bfloat16) {
            return Err(Unavailable::ElemType {
                kind,
                elem_type: ctx.elem_type,
            });
        }
        if ctx.params.len() != params.len() {
            return Err(Unavailable::ParamCount {
                kind,
                expected: params.len(),
                found: ctx.params.len(),
            });
        }
        for (value, p) in ctx.params.values().iter().zip(params) {
            if let ParamValue::PerChannel(values) = value {
                let dims = ctx
                    .params
                    .shape()
                    .map_or_else(|| vec![values.len()], <[_]>::to_vec);
                if values.len() != dims.iter().product::<usize>() || values.is_empty() {
                    return Err(Unavailable::ParamShape {
                        kind,
                        param: p.name,
                        values: values.len(),
                        dims,
                    });
                }
            }
        }
        Ok(Builder {
            ctx,
            kind,
            params,
            form,
            out: Emitted {
                prefix: ctx.prefix.to_string(),
                ..Emitted::default()
            },
        })
    }

    /// The tensor the activation reads.
    pub fn input(&self) -> &'c str {
        self.ctx.input
    }

    /// The graph's default-domain opset.
    pub fn opset(&self) -> i64 {
        self.ctx.opset
    }

    /// Parameter `index` as a scalar; a per-channel value is refused (the op takes an attribute).
    pub fn scalar(&self, index: usize) -> Result<f64, Unavailable> {
        match &self.ctx.params.values()[index] {
            ParamValue::Scalar(v) => Ok(*v),
            ParamValue::PerChannel(_) => Err(Unavailable::PerChannel {
                kind: self.kind,
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
        let values = match &self.ctx.params.values()[index] {
            ParamValue::Scalar(v) => std::slice::from_ref(v),
            ParamValue::PerChannel(v) => v.as_slice(),
        };
        match values.iter().find(|&&v| !ok(v)) {
            Some(&value) => Err(Unavailable::BadParam {
                kind: self.kind,
                param: self.params[index].name,
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
        self.param_map(index, role, |v| v)
    }

    /// Parameter `index` mapped value by value through `f`, as an initializer like
    /// [`Builder::param`]'s.
    pub fn param_map(&mut self, index: usize, role: &str, f: fn(f64) -> f64) -> String {
        match &self.ctx.params.values()[index] {
            ParamValue::Scalar(v) => self.initializer(role, &[], &[f(*v)]),
            ParamValue::PerChannel(values) => {
                let dims: Vec<i64> = match self.ctx.params.shape() {
                    Some(d) => d.iter().map(|&d| d as i64).collect(),
                    None => vec![values.len() as i64],
                };
                let mapped: Vec<f64> = values.iter().map(|&v| f(v)).collect();
                self.initializer(role, &dims, &mapped)
            }
        }
    }

    /// One value per channel of the site's parameters, as an initializer `{prefix}.c.{role}`:
    /// shape `[]` when every channel has the same value, else the per-channel dims.
    pub fn channel_values(&mut self, role: &str, values: &[f64]) -> String {
        if values.iter().all(|v| v.to_bits() == values[0].to_bits()) {
            return self.initializer(role, &[], &values[..1]);
        }
        let dims: Vec<i64> = match self.ctx.params.shape() {
            Some(d) => d.iter().map(|&d| d as i64).collect(),
            None => vec![values.len() as i64],
        };
        self.initializer(role, &dims, values)
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
        op: OpVersion,
        role: &str,
        inputs: &[&str],
        attrs: Vec<AttributeProto>,
    ) -> Result<String, Unavailable> {
        let needs = op.since_for(self.ctx.elem_type);
        if needs == OpVersion::NEVER {
            return Err(Unavailable::NoVersion {
                op: op.op_type,
                elem_type: self.ctx.elem_type,
            });
        }
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
    pub fn finish(mut self, last: &str) -> Emitted {
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
        self.out
    }
}
