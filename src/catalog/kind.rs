//! What an activation kind is: data first, functions as plain pointers, so a kind is a `const`
//! in its own file. A kind owns its formula, its parameters and their spec defaults, how to
//! recover them from a scalar function, the fused ops that compute it (op versions, the
//! attribute-to-parameter map, fixed attribute values, and a read or write hook for quirks),
//! its primitive form, and its documentation.

use super::emit::{Builder, EmitCtx, Emitted, Form, NEWEST_OPSET, OpVersion, Unavailable};
use super::numeric::same_f32;
use super::params::{Param, Params};
use crate::onnx::attrs;
use crate::onnx::builder::{attr_f, attr_s};
use crate::onnx::proto::NodeProto;
use crate::onnx::proto::tensor_proto::DataType;

/// Parameter recovery from a black-box scalar function (see [`Kind::recover`]).
pub type Recover = fn(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>>;

/// Writes a form's nodes with the builder and returns the tensor its last node writes.
pub type Writer = fn(&mut Builder) -> Result<String, Unavailable>;

/// Refines what the table reads from a fused node ([`FusedOp::read`]); `None`: the node is not
/// this kind.
pub type ReadHook = fn(&FusedNode, Reading) -> Option<Reading>;

/// An activation kind.
#[derive(Debug)]
pub struct Kind {
    /// Snake-case id used in JSON and on the command line.
    pub id: &'static str,
    pub title: &'static str,
    pub params: &'static [Param],
    /// The formula in f64; `p` holds one value per entry of `params`, in order.
    pub reference: fn(x: f64, p: &[f64]) -> f64,
    /// Estimates this kind's parameters by probing a scalar function; `None` when the function
    /// clearly is not this kind. The estimate still has to pass identification's probes.
    pub recover: Recover,
    /// Points where the formula switches branch (kinks or jumps) for parameters `p`.
    pub breakpoints: fn(p: &[f64]) -> Vec<f64>,
    /// The ops that compute the kind in one node: the standard op that the `fused` form writes
    /// first, then other spellings it is found as (vendor-domain ops, a Clip with fixed bounds).
    /// Empty when ONNX has no op for the kind.
    pub fused: &'static [FusedOp],
    pub formula: &'static str,
    pub source: &'static str,
    /// Graph forms: `fused: ...` and `primitive: ...` are the forms actswap emits; `also seen: ...`
    /// are variants exporters produce.
    pub forms: &'static [&'static str],
    pub example: &'static str,
    pub numeric_notes: &'static str,
    /// True when every branch of the formula is linear in x.
    pub piecewise_linear: bool,
    /// An exact change of scale, when the formula has one: fitted forms of every parameter value
    /// are then rescaled fits of one function, and error bounds against another kind are
    /// rescaled bounds of one pair.
    pub scale: Option<Scale>,
    /// Writes the `primitive` form, a decomposition into basic ops.
    pub primitive: Writer,
}

/// An exact change of scale of the formula.
#[derive(Debug, Clone, Copy)]
pub enum Scale {
    /// `f(x; p) = f(s x; base) / s` for every x, with `s = factor(p)`. A fit `g` of
    /// `f(.; base)` over `[s lo, s hi]` is then a fit of `f(.; p)` over `[lo, hi]`: `g(s x) / s`,
    /// with every error divided by `s`.
    Factor {
        /// `s` for the parameters `p`; a value that is not finite and positive has no
        /// rescaling.
        factor: fn(p: &[f64]) -> f64,
        /// The parameters of the one function every other value is a rescaling of.
        base: &'static [f64],
    },
    /// `f(x; p) = f(s x; p) / s` for every x and every `s > 0` (positively homogeneous: ReLU,
    /// leaky ReLU): any other kind's rescaling applies to it unchanged.
    Any,
}

/// A parameter a fused op carries as a float attribute.
#[derive(Debug, Clone, Copy)]
pub struct AttrParam {
    pub attr: &'static str,
    /// Position in the kind's parameters.
    pub param: usize,
    /// The attribute's spec default (QuickGelu's alpha defaults to 1.702, not swish's 1).
    pub default: f64,
}

/// An attribute value a fused op must hold to compute the kind (absent: its spec default).
#[derive(Debug, Clone, Copy)]
pub enum Fixed {
    Float {
        attr: &'static str,
        value: f64,
        default: f64,
    },
    Str {
        attr: &'static str,
        value: &'static str,
        default: &'static str,
    },
}

impl Fixed {
    fn holds(&self, node: &NodeProto) -> bool {
        match *self {
            Fixed::Float {
                attr,
                value,
                default,
            } => same_f32(attrs::float(node, attr).unwrap_or(default), value),
            Fixed::Str {
                attr,
                value,
                default,
            } => attrs::string(node, attr).as_deref().unwrap_or(default) == value,
        }
    }
}

/// An op that computes a kind in one node.
#[derive(Debug, Clone, Copy)]
pub struct FusedOp {
    /// Operator domain; "" is the default ONNX domain (ai.onnx).
    pub domain: &'static str,
    /// First opset version of `domain` that has the op (the form actswap writes may need a
    /// later one, see `op`).
    pub introduced: i64,
    /// The op as actswap writes it, with the first opset per element type of that form.
    pub op: OpVersion,
    /// Parameters read from (and written as) float attributes.
    pub attrs: &'static [AttrParam],
    /// Attribute values the op must hold to be this kind (written when not the default).
    pub fixed: &'static [Fixed],
    /// Quirks the table cannot say (constant inputs, bias inputs, bounds).
    pub read: Option<ReadHook>,
    /// Writes the op when the attribute table cannot (inputs instead of attributes).
    pub write: Option<Writer>,
    pub note: &'static str,
}

impl FusedOp {
    /// A default-domain op, introduced at opset `introduced`; its parameters, if any, are given
    /// with [`FusedOp::attrs`].
    pub const fn standard(introduced: i64, op: OpVersion, note: &'static str) -> FusedOp {
        FusedOp::vendor("", introduced, op, note)
    }

    /// An op of another domain (`com.microsoft`, ...).
    pub const fn vendor(
        domain: &'static str,
        introduced: i64,
        op: OpVersion,
        note: &'static str,
    ) -> FusedOp {
        FusedOp {
            domain,
            introduced,
            op,
            attrs: &[],
            fixed: &[],
            read: None,
            write: None,
            note,
        }
    }

    pub const fn attrs(mut self, attrs: &'static [AttrParam]) -> FusedOp {
        self.attrs = attrs;
        self
    }

    pub const fn fixed(mut self, fixed: &'static [Fixed]) -> FusedOp {
        self.fixed = fixed;
        self
    }

    pub const fn read(mut self, hook: ReadHook) -> FusedOp {
        self.read = Some(hook);
        self
    }

    pub const fn write(mut self, writer: Writer) -> FusedOp {
        self.write = Some(writer);
        self
    }

    /// True when `node` is this op (the domain "ai.onnx" is the default domain).
    pub fn is(&self, node: &NodeProto) -> bool {
        node.op_type() == self.op.op_type && normal_domain(node.domain()) == self.domain
    }

    /// Writes the op from the tables: the site's input, the parameters as float attributes and
    /// the fixed values that differ from their defaults.
    pub fn write_from_table(&self, b: &mut Builder) -> Result<String, Unavailable> {
        let mut attributes = Vec::new();
        for f in self.fixed {
            match *f {
                Fixed::Float {
                    attr,
                    value,
                    default,
                } if !same_f32(value, default) => attributes.push(attr_f(attr, value as f32)),
                Fixed::Str {
                    attr,
                    value,
                    default,
                } if value != default => attributes.push(attr_s(attr, value)),
                _ => {}
            }
        }
        for a in self.attrs {
            attributes.push(attr_f(a.attr, b.scalar(a.param)? as f32));
        }
        let input = b.input();
        b.node(self.op, &snake_case(self.op.op_type), &[input], attributes)
    }
}

/// The domain, with `ai.onnx` (the default domain's other name) as "".
pub fn normal_domain(domain: &str) -> &str {
    if domain == "ai.onnx" { "" } else { domain }
}

/// `HardSwish` -> `hard_swish`.
fn snake_case(op_type: &str) -> String {
    let mut out = String::new();
    for (i, c) in op_type.chars().enumerate() {
        if c.is_ascii_uppercase() && i > 0 {
            out.push('_');
        }
        out.push(c.to_ascii_lowercase());
    }
    out
}

/// A constant input's value, as the scanner sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct ConstInput {
    pub values: Vec<f64>,
    pub dims: Vec<usize>,
}

/// A fused node as the scanner sees it.
pub struct FusedNode<'a> {
    pub node: &'a NodeProto,
    /// The opset of the node's domain.
    pub opset: i64,
    /// Input `i`'s value when it is a constant.
    pub constant: &'a dyn Fn(usize) -> Option<ConstInput>,
}

/// What a fused node computes.
#[derive(Debug, Clone, PartialEq)]
pub struct Reading {
    /// `None` when a parameter is only known at run time.
    pub params: Option<Params>,
    pub notes: Vec<String>,
    /// False when the node cannot be replaced by the kind's forms alone.
    pub rewritable: bool,
}

/// Read hook of vendor ops that add an optional bias input before the activation.
pub fn bias_input(node: &FusedNode, mut r: Reading) -> Option<Reading> {
    if node.node.input.iter().skip(1).any(|i| !i.is_empty()) {
        r.notes
            .push("adds its bias input before the activation".into());
        r.rewritable = false;
    }
    Some(r)
}

impl Kind {
    /// The kind's value at `x` for parameters `p` (one per entry of `params`); NaN when `p` has
    /// the wrong length.
    pub fn eval(&self, x: f64, p: &[f64]) -> f64 {
        if p.len() == self.params.len() {
            (self.reference)(x, p)
        } else {
            f64::NAN
        }
    }

    /// The spec default of every parameter, in order.
    pub fn defaults(&self) -> Vec<f64> {
        self.params.iter().map(|p| p.default).collect()
    }

    /// Position of the parameter called `name`.
    pub fn param_index(&self, name: &str) -> Option<usize> {
        self.params.iter().position(|p| p.name == name)
    }

    /// The standard op the `fused` form writes; `None` when ONNX has none for the kind.
    pub fn standard_op(&self) -> Option<&'static FusedOp> {
        self.fused.iter().find(|f| f.domain.is_empty())
    }

    /// What `node` computes when it is read as `op`, one of this kind's fused ops; `None` when
    /// the node is not this kind (a fixed attribute differs, or the read hook says so).
    pub fn read_fused(&self, op: &FusedOp, node: &FusedNode) -> Option<Reading> {
        if !op.fixed.iter().all(|f| f.holds(node.node)) {
            return None;
        }
        let mut values = self.defaults();
        for a in op.attrs {
            values[a.param] = attrs::float(node.node, a.attr).unwrap_or(a.default);
        }
        let mut reading = Reading {
            params: Some(Params::scalars(&values)),
            notes: Vec::new(),
            rewritable: true,
        };
        if node
            .node
            .attribute
            .iter()
            .any(|a| a.ref_attr_name.is_some())
        {
            reading
                .notes
                .push("an attribute refers to the enclosing function's attributes".into());
            reading.rewritable = false;
        }
        match op.read {
            Some(hook) => hook(node, reading),
            None => Some(reading),
        }
    }

    /// Writes `form` for the site `ctx`.
    pub fn emit(&self, form: Form, ctx: &EmitCtx) -> Result<Emitted, Unavailable> {
        let mut b = Builder::new(ctx, self.id, self.params, form)?;
        let last = match form {
            Form::Fused => {
                let op = self
                    .standard_op()
                    .ok_or(Unavailable::NoFusedOp { kind: self.id })?;
                match op.write {
                    Some(write) => write(&mut b)?,
                    None => op.write_from_table(&mut b)?,
                }
            }
            Form::Primitive => (self.primitive)(&mut b)?,
            Form::Fitted => return Err(Unavailable::NeedsFit { kind: self.id }),
        };
        Ok(b.finish(&last))
    }

    /// The ops `form` emits, each with the least opset it needs, for the stand-in site of
    /// [`Kind::least`]; empty when the form cannot be written at any opset.
    pub fn needs(&self, form: Form, per_channel: bool) -> Vec<super::emit::OpNeed> {
        self.least(form, per_channel)
            .map(|e| e.ops)
            .unwrap_or_default()
    }

    /// The form written for a stand-in site (float32; parameters at their defaults, and with
    /// `per_channel` every per-channel parameter as a `[1, 2, 1, 1]` tensor) at the lowest
    /// opset that has it, or why it cannot be written at [`NEWEST_OPSET`]. An op may need a
    /// later version at a higher opset (Clip's constant inputs from 11), and float16, double or
    /// bfloat16 inputs may need later versions (Celu, and bfloat16 throughout), which
    /// [`Kind::emit`] reports.
    pub fn least(&self, form: Form, per_channel: bool) -> Result<Emitted, Unavailable> {
        let values = self
            .params
            .iter()
            .map(|p| {
                if per_channel && p.per_channel {
                    super::params::ParamValue::PerChannel(vec![p.default; 2])
                } else {
                    super::params::ParamValue::Scalar(p.default)
                }
            })
            .collect();
        let params = Params::new(values, Some(vec![1, 2, 1, 1]));
        let at = |opset| {
            let ctx = EmitCtx {
                input: "x",
                output: "y",
                prefix: "site",
                elem_type: DataType::Float,
                opset,
                params: &params,
            };
            self.emit(form, &ctx)
        };
        (1..NEWEST_OPSET)
            .find_map(|opset| at(opset).ok())
            .map_or_else(|| at(NEWEST_OPSET), Ok)
    }
}
