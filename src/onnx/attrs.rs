//! Reading node attributes by name.

use super::proto::{AttributeProto, NodeProto};

/// The attribute called `name`.
pub fn get<'a>(node: &'a NodeProto, name: &str) -> Option<&'a AttributeProto> {
    node.attribute.iter().find(|a| a.name() == name)
}

/// A float attribute, widened to f64.
pub fn float(node: &NodeProto, name: &str) -> Option<f64> {
    get(node, name).and_then(|a| a.f).map(f64::from)
}

/// An integer attribute.
pub fn int(node: &NodeProto, name: &str) -> Option<i64> {
    get(node, name).and_then(|a| a.i)
}

/// A string attribute, when it is UTF-8.
pub fn string(node: &NodeProto, name: &str) -> Option<String> {
    get(node, name)
        .and_then(|a| a.s.as_ref())
        .and_then(|s| std::str::from_utf8(s).ok())
        .map(str::to_string)
}
