//! Visits every tensor a model carries: initializers, sparse initializers and tensor-valued
//! attributes, in the main graph, every subgraph to any depth, local functions and training graphs.

use super::proto::{
    AttributeProto, GraphProto, ModelProto, NodeProto, SparseTensorProto, TensorProto,
};

/// Calls `f` on every tensor of the model.
pub fn tensors(model: &ModelProto, f: &mut dyn FnMut(&TensorProto)) {
    if let Some(g) = &model.graph {
        graph_tensors(g, f);
    }
    for func in &model.functions {
        nodes_tensors(&func.node, f);
    }
    for t in &model.training_info {
        for g in [&t.initialization, &t.algorithm].into_iter().flatten() {
            graph_tensors(g, f);
        }
    }
}

/// Calls `f` on every tensor of the model, mutably.
pub fn tensors_mut(model: &mut ModelProto, f: &mut dyn FnMut(&mut TensorProto)) {
    if let Some(g) = &mut model.graph {
        graph_tensors_mut(g, f);
    }
    for func in &mut model.functions {
        for n in &mut func.node {
            node_tensors_mut(n, f);
        }
    }
    for t in &mut model.training_info {
        for g in [&mut t.initialization, &mut t.algorithm]
            .into_iter()
            .flatten()
        {
            graph_tensors_mut(g, f);
        }
    }
}

fn graph_tensors(g: &GraphProto, f: &mut dyn FnMut(&TensorProto)) {
    g.initializer.iter().for_each(&mut *f);
    g.sparse_initializer.iter().for_each(|s| sparse(s, f));
    nodes_tensors(&g.node, f);
}

fn nodes_tensors(nodes: &[NodeProto], f: &mut dyn FnMut(&TensorProto)) {
    for n in nodes {
        for a in &n.attribute {
            attribute_tensors(a, f);
        }
    }
}

fn attribute_tensors(a: &AttributeProto, f: &mut dyn FnMut(&TensorProto)) {
    a.t.iter().chain(&a.tensors).for_each(&mut *f);
    a.sparse_tensor
        .iter()
        .chain(&a.sparse_tensors)
        .for_each(|s| sparse(s, f));
    a.g.iter()
        .chain(&a.graphs)
        .for_each(|g| graph_tensors(g, f));
}

fn sparse(s: &SparseTensorProto, f: &mut dyn FnMut(&TensorProto)) {
    s.values.iter().chain(&s.indices).for_each(f);
}

fn graph_tensors_mut(g: &mut GraphProto, f: &mut dyn FnMut(&mut TensorProto)) {
    g.initializer.iter_mut().for_each(&mut *f);
    for s in &mut g.sparse_initializer {
        sparse_mut(s, f);
    }
    for n in &mut g.node {
        node_tensors_mut(n, f);
    }
}

fn node_tensors_mut(n: &mut NodeProto, f: &mut dyn FnMut(&mut TensorProto)) {
    for a in &mut n.attribute {
        a.t.iter_mut().chain(&mut a.tensors).for_each(&mut *f);
        for s in a.sparse_tensor.iter_mut().chain(&mut a.sparse_tensors) {
            sparse_mut(s, f);
        }
        for g in a.g.iter_mut().chain(&mut a.graphs) {
            graph_tensors_mut(g, f);
        }
    }
}

fn sparse_mut(s: &mut SparseTensorProto, f: &mut dyn FnMut(&mut TensorProto)) {
    s.values.iter_mut().chain(&mut s.indices).for_each(f);
}
