//! The activation catalogue: one file per activation kind, one registry line per kind.
//!
//! A kind ([`Kind`], in [`kind`]) is plain data in its own file: its f64 reference formula, its
//! parameters and their ONNX defaults, how to recover them from a black-box scalar function, the
//! fused ops that compute it (op versions, attribute map, hooks for quirks), its primitive form,
//! its sources and notes. Everything else is derived from the registry: the scanner identifies
//! decomposed chains with [`identify`] and fused nodes with [`read_fused`], the planner bounds
//! substitutions with [`substitute`], the forms are written by [`Kind::emit`] with the builder of
//! [`emit`], and the catalogue command prints [`describe`] / [`json`].
//!
//! Adding a kind: write `src/catalog/<id>.rs` with `pub const KIND: Kind` (its fused ops, if
//! ONNX has any, and its primitive form in the same file), then add one line to the
//! [`registry!`] below at its match-priority position.

mod describe;
pub mod emit;
pub mod fit;
mod identify;
pub mod json;
pub mod kind;
mod numeric;
pub mod params;
pub mod substitute;

use std::collections::HashMap;
use std::sync::OnceLock;

pub use describe::{SUMMARY_COLUMNS, describe, summary_row};
pub use emit::Form;
pub use identify::{MATCH_RTOL, fits, identify, identify_channels, matches, probe_points};
pub use json::{KindJson, json};
pub use kind::{ConstInput, FusedNode, FusedOp, Kind, Reading, Scale, normal_domain};
pub use params::{NamedParams, Param, ParamValue, Params};

/// Declares the kinds: one line per kind, `module, // note`, in match-priority order. Each
/// module is `src/catalog/<module>.rs` with its `pub const KIND`.
macro_rules! registry {
    ($($kind:ident),* $(,)?) => {
        $(mod $kind;)*
        /// Every kind in match-priority order: a kind that is a special case of another comes
        /// first (relu before leaky_relu / thresholded_relu / clip, relu6 before clip, silu before
        /// swish, elu before selu and celu), so [`identify`] reports the most specific kind that
        /// fits and [`read_fused`] the most specific reading of a fused node.
        pub const REGISTRY: &[&Kind] = &[$(&$kind::KIND),*];
    };
}

#[rustfmt::skip]
registry![
    relu,             // = leaky_relu(0), thresholded_relu(0), clip(0, max), elu(0)
    relu6,            // = clip(0, 6)
    hard_swish,       // = x * hard_sigmoid(x; 1/6, 1/2)
    clip,             // clip(0, 1) = hard_sigmoid(1, 0)
    leaky_relu,       // = prelu as a scalar function; the graph tells them apart
    prelu,
    thresholded_relu,
    squared_relu,
    shrink,
    elu,              // = selu(alpha, 1); elu(1) = celu(1)
    selu,
    celu,
    sigmoid,
    hard_sigmoid,
    tanh,
    softplus,
    softsign,
    silu,             // = swish(1)
    swish,
    gelu,
    gelu_tanh,
    mish,
    log_sigmoid,
];

/// Every kind, in match-priority order.
pub fn all() -> &'static [&'static Kind] {
    REGISTRY
}

/// The kind with this id.
pub fn get(id: &str) -> Option<&'static Kind> {
    REGISTRY.iter().copied().find(|k| k.id == id)
}

/// The registry position of `kind`.
pub fn position(kind: &Kind) -> usize {
    REGISTRY
        .iter()
        .position(|k| k.id == kind.id)
        .expect("a registered kind")
}

/// Fused ops by (domain, op type), each with its kind, in registry order.
type FusedIndex = HashMap<(&'static str, &'static str), Vec<(&'static Kind, &'static FusedOp)>>;

fn fused_index() -> &'static FusedIndex {
    static INDEX: OnceLock<FusedIndex> = OnceLock::new();
    INDEX.get_or_init(|| {
        let mut index = FusedIndex::new();
        for &kind in REGISTRY {
            for op in kind.fused {
                index
                    .entry((op.domain, op.op.op_type))
                    .or_default()
                    .push((kind, op));
            }
        }
        index
    })
}

/// True when some kind lists `op_type` of `domain` among its fused ops.
pub fn is_fused_op(domain: &str, op_type: &str) -> bool {
    fused_index().contains_key(&(normal_domain(domain), op_type))
}

/// What a fused node computes: the first kind, in registry order, whose fused op reads it.
pub fn read_fused(node: &FusedNode) -> Option<(&'static Kind, Reading)> {
    let key = (normal_domain(node.node.domain()), node.node.op_type());
    fused_index()
        .get(&key)?
        .iter()
        .find_map(|(kind, op)| kind.read_fused(op, node).map(|r| (*kind, r)))
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
            // A kind without an ONNX op (squared ReLU) has no fused op at all; otherwise the
            // standard op comes first, as the fused form writes it.
            if let Some(first) = k.fused.first() {
                assert_eq!(first.domain, "", "{}: standard op first", k.id);
            }
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
