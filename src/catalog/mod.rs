//! The activation catalogue: one file per activation kind, one registry line per kind.
//!
//! Each kind is plain data ([`Kind`]): its f64 reference formula, its parameters and their ONNX
//! defaults, the fused ops that compute it (with the opset that introduced each), its sources, the
//! forms it takes in exported graphs, and how to recover its parameters from a black-box scalar
//! function. The scanner identifies decomposed chains with [`identify`], the planner bounds
//! substitutions with [`substitute`], and the catalogue command prints [`describe`] / [`to_json`].
//!
//! Each kind also writes its two graph forms for a site ([`emit`]): `fused`, the one standard op,
//! and `primitive`, a decomposition into basic ops.
//!
//! Adding a kind: write `src/catalog/<id>.rs` with `pub const KIND: Kind` and its emitters, then
//! add one line to [`REGISTRY`] at its match-priority position.

mod describe;
pub mod emit;
mod identify;
mod numeric;
pub mod substitute;

mod celu;
mod clip;
mod elu;
mod gelu;
mod gelu_tanh;
mod hard_sigmoid;
mod hard_swish;
mod leaky_relu;
mod mish;
mod prelu;
mod relu;
mod relu6;
mod selu;
mod sigmoid;
mod silu;
mod softplus;
mod softsign;
mod swish;
mod tanh;
mod thresholded_relu;

pub use describe::{describe, to_json};
use emit::Emitter;
pub use identify::{MATCH_RTOL, fits, identify, matches, probe_points};

/// Parameter recovery from a black-box scalar function (see [`Kind::recover`]).
pub type Recover = fn(f: &dyn Fn(f64) -> f64) -> Option<Vec<f64>>;

/// One parameter of a kind, in the order the kind's functions take it.
#[derive(Debug, Clone, Copy)]
pub struct Param {
    pub name: &'static str,
    /// The ONNX spec default as the spec writes it (a model stores it as float32).
    pub default: f64,
    /// True when a site may carry one value per channel (a tensor instead of a scalar).
    pub per_channel: bool,
    pub doc: &'static str,
}

/// An op that computes a kind in one node.
#[derive(Debug, Clone, Copy)]
pub struct FusedOp {
    /// Operator domain; "" is the default ONNX domain (ai.onnx).
    pub domain: &'static str,
    pub op_type: &'static str,
    /// First opset version of `domain` in which the op has the form described in `note`.
    pub since: i64,
    pub note: &'static str,
}

/// An activation kind: data first, functions as plain pointers, so a kind is a `const`.
#[derive(Debug)]
pub struct Kind {
    /// Snake-case id used in JSON and on the command line.
    pub id: &'static str,
    pub title: &'static str,
    pub params: &'static [Param],
    /// The formula in f64; `p` holds one value per entry of `params`, in order.
    pub reference: fn(x: f64, p: &[f64]) -> f64,
    /// Estimates this kind's parameters by probing a scalar function; `None` when the function
    /// clearly is not this kind. The estimate still has to pass [`matches()`].
    pub recover: Recover,
    /// Points where the formula switches branch (kinks or jumps) for parameters `p`.
    pub breakpoints: fn(p: &[f64]) -> Vec<f64>,
    /// The standard op(s) first, then vendor-domain ops.
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
    /// Writes the `fused` form, the one standard op; `None` when ONNX has no op for the kind.
    pub fused_form: Option<Emitter>,
    /// Writes the `primitive` form, a decomposition into basic ops.
    pub primitive_form: Emitter,
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
}

/// Every kind in match-priority order: a kind that is a special case of another comes first
/// (relu before leaky_relu / thresholded_relu / clip, relu6 before clip, silu before swish,
/// elu before selu and celu), so [`identify`] reports the most specific kind that fits.
#[rustfmt::skip]
pub const REGISTRY: &[&Kind] = &[
    &relu::KIND,             // = leaky_relu(0), thresholded_relu(0), clip(0, max), elu(0)
    &relu6::KIND,            // = clip(0, 6)
    &hard_swish::KIND,       // = x * hard_sigmoid(x; 1/6, 1/2)
    &clip::KIND,             // clip(0, 1) = hard_sigmoid(1, 0)
    &leaky_relu::KIND,       // = prelu as a scalar function; the graph tells them apart
    &prelu::KIND,
    &thresholded_relu::KIND,
    &elu::KIND,              // = selu(alpha, 1); elu(1) = celu(1)
    &selu::KIND,
    &celu::KIND,
    &sigmoid::KIND,
    &hard_sigmoid::KIND,
    &tanh::KIND,
    &softplus::KIND,
    &softsign::KIND,
    &silu::KIND,             // = swish(1)
    &swish::KIND,
    &gelu::KIND,
    &gelu_tanh::KIND,
    &mish::KIND,
];

/// Every kind, in match-priority order.
pub fn all() -> &'static [&'static Kind] {
    REGISTRY
}

/// The kind with this id.
pub fn get(id: &str) -> Option<&'static Kind> {
    REGISTRY.iter().copied().find(|k| k.id == id)
}

/// The registry position of the kind called `id`.
pub fn position(id: &str) -> Option<usize> {
    REGISTRY.iter().position(|k| k.id == id)
}

/// Breakpoints of a kind with no branches.
fn smooth(_: &[f64]) -> Vec<f64> {
    Vec::new()
}

/// Recovery for a kind without parameters: there is nothing to estimate, verification decides.
fn nothing_to_recover(_: &dyn Fn(f64) -> f64) -> Option<Vec<f64>> {
    Some(Vec::new())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_are_unique_snake_case_and_found() {
        for (i, k) in all().iter().enumerate() {
            assert!(
                k.id.chars()
                    .all(|c| c.is_ascii_lowercase() || c.is_ascii_digit() || c == '_'),
                "{}",
                k.id
            );
            assert_eq!(all().iter().position(|o| o.id == k.id), Some(i), "{}", k.id);
            assert_eq!(get(k.id).map(|g| g.id), Some(k.id));
        }
        assert!(get("swish_beta").is_none());
    }

    #[test]
    fn every_kind_is_documented_and_lists_a_standard_form() {
        for k in all() {
            for (section, text) in [
                ("title", k.title),
                ("formula", k.formula),
                ("source", k.source),
                ("example", k.example),
                ("numeric_notes", k.numeric_notes),
            ] {
                assert!(!text.trim().is_empty(), "{} has no {section}", k.id);
            }
            assert!(!k.fused.is_empty(), "{} has no fused op", k.id);
            assert_eq!(k.fused[0].domain, "", "{}: standard op first", k.id);
            assert!(
                k.forms.iter().any(|f| f.starts_with("primitive: ")),
                "{}",
                k.id
            );
            assert!(k.forms.iter().any(|f| f.starts_with("fused: ")), "{}", k.id);
        }
    }

    #[test]
    fn priority_puts_special_cases_first() {
        let pos = |id: &str| all().iter().position(|k| k.id == id).unwrap();
        for (special, general) in [
            ("relu", "leaky_relu"),
            ("relu", "prelu"),
            ("relu", "thresholded_relu"),
            ("relu", "clip"),
            ("relu", "elu"),
            ("relu6", "clip"),
            ("clip", "hard_sigmoid"),
            ("hard_swish", "swish"),
            ("silu", "swish"),
            ("leaky_relu", "prelu"),
            ("elu", "selu"),
            ("elu", "celu"),
        ] {
            assert!(pos(special) < pos(general), "{special} before {general}");
        }
    }
}
