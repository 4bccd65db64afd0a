//! Decoding a model file, the nodes of a large graph on every core.
//!
//! Decoding a graph of a million nodes is mostly allocating their names, and the nodes are
//! independent of each other. When the main graph holds a run of at least
//! [`PARALLEL_MIN_NODES`] consecutive node fields, the run is cut into pieces of
//! [`PIECE_NODES`] nodes, each decoded as a model holding only those nodes (so that protobuf's
//! nesting limit counts the same levels as in the whole file), while the rest of the model is
//! decoded from the same bytes with the run left out. Every piece reads the file's own bytes:
//! nothing is copied, and tensors keep pointing into the mapped file. Anything unexpected (a
//! second graph field, bytes that do not walk, a piece that fails) falls back to decoding the
//! whole model at once, which then gives the error.

use std::ops::Range;

use bytes::{Buf, BufMut, Bytes};
use prost::encoding::{self, DecodeContext, WireType};
use prost::{DecodeError, Message};
use rayon::prelude::*;

use super::proto::{ModelProto, NodeProto};
use super::wire::{WIRE_LEN, end_of, put_varint, skip, varint};

/// `ModelProto.graph`.
const MODEL_GRAPH: u32 = 7;
/// `GraphProto.node`.
const GRAPH_NODE: u32 = 1;
/// `NodeProto.input`, `.output` and `.attribute`.
const NODE_INPUT: u32 = 1;
const NODE_OUTPUT: u32 = 2;
const NODE_ATTRIBUTE: u32 = 5;
/// A run of fewer nodes is decoded with the rest: the parallel pieces would not pay for
/// themselves.
const PARALLEL_MIN_NODES: usize = 8192;
/// Nodes decoded as one piece.
const PIECE_NODES: usize = 4096;

/// Decodes a serialized model: the same result, or the same error, as
/// `ModelProto::decode(bytes)`.
pub fn decode_model(bytes: &Bytes) -> Result<ModelProto, DecodeError> {
    decode_with(bytes, PARALLEL_MIN_NODES)
}

/// [`decode_model`] with nodes decoded in parallel from runs of `min_nodes` nodes.
fn decode_with(bytes: &Bytes, min_nodes: usize) -> Result<ModelProto, DecodeError> {
    match node_run(bytes).filter(|run| run.nodes.len() >= min_nodes.max(1)) {
        Some(run) => in_parallel(bytes, &run).or_else(|_| ModelProto::decode(bytes.clone())),
        None => ModelProto::decode(bytes.clone()),
    }
}

/// The longest run of consecutive node fields of the main graph.
struct NodeRun {
    /// The main graph's field: where its length starts, and its payload.
    graph_len_at: usize,
    graph: Range<usize>,
    /// Each node field of the run, tag and length included.
    nodes: Vec<Range<usize>>,
    /// Node fields of the graph before the run.
    before: usize,
}

/// Finds the run, when the model has exactly one graph field and its bytes walk.
fn node_run(bytes: &[u8]) -> Option<NodeRun> {
    let mut graph = None;
    for field in fields(bytes, 0..bytes.len()) {
        let field = field?;
        if field.number == MODEL_GRAPH {
            if graph.is_some() || field.payload.is_none() {
                return None;
            }
            graph = Some(field);
        }
    }
    let graph = graph?;
    let payload = graph.payload.clone()?;
    // The longest run so far (its first node's position among the graph's nodes, its
    // fields) and the run being read.
    let mut best: (usize, Vec<Range<usize>>) = (0, Vec::new());
    let mut current: Vec<Range<usize>> = Vec::new();
    let mut seen = 0;
    for field in fields(bytes, payload.clone()) {
        let field = field?;
        if field.number == GRAPH_NODE {
            field.payload.as_ref()?;
            current.push(field.span);
            seen += 1;
        } else if current.len() > best.1.len() {
            best = (seen - current.len(), std::mem::take(&mut current));
        } else {
            current.clear();
        }
    }
    if current.len() > best.1.len() {
        best = (seen - current.len(), current);
    }
    let (before, nodes) = best;
    Some(NodeRun {
        graph_len_at: graph.value_at,
        graph: payload,
        nodes,
        before,
    })
}

/// Decodes the model with the run's nodes decoded in pieces, in parallel.
fn in_parallel(bytes: &Bytes, run: &NodeRun) -> Result<ModelProto, DecodeError> {
    let span = run.nodes[0].start..run.nodes[run.nodes.len() - 1].end;
    // The model without the run: the graph field's new length, then its payload around it.
    let mut graph_len = Vec::new();
    put_varint(&mut graph_len, (run.graph.len() - span.len()) as u64);
    let rest = bytes
        .slice(..run.graph_len_at)
        .chain(Bytes::from(graph_len))
        .chain(bytes.slice(run.graph.start..span.start))
        .chain(bytes.slice(span.end..run.graph.end))
        .chain(bytes.slice(run.graph.end..));
    let (model, pieces) = rayon::join(
        || ModelProto::decode(rest),
        || {
            run.nodes
                .par_chunks(PIECE_NODES)
                .map(|piece| piece_nodes(bytes, piece[0].start..piece[piece.len() - 1].end))
                .collect::<Result<Vec<_>, _>>()
        },
    );
    let mut model = model?;
    let pieces = pieces?;
    let graph = model.graph.get_or_insert_default();
    let after = graph.node.split_off(run.before);
    graph.node.reserve(run.nodes.len() + after.len());
    graph.node.extend(pieces.into_iter().flatten());
    graph.node.extend(after);
    Ok(model)
}

/// The nodes of consecutive node fields at `span`, decoded as a model whose graph holds only
/// them.
fn piece_nodes(bytes: &Bytes, span: Range<usize>) -> Result<Vec<NodeProto>, DecodeError> {
    let mut head = Vec::with_capacity(11);
    put_varint(&mut head, (u64::from(MODEL_GRAPH) << 3) | WIRE_LEN);
    put_varint(&mut head, span.len() as u64);
    Ok(Piece::decode(Bytes::from(head).chain(bytes.slice(span)))?.nodes)
}

/// The nodes of a piece, with each node's repeated fields allocated at their size: prost
/// grows them four at a time, which on a graph of single-output nodes is most of what its
/// names take. The piece's graph field nests the node fields one level down, as in
/// `ModelProto`, so they are decoded at the same depth (the same recursion limit); the bytes
/// hold nothing else.
#[derive(Debug, Default)]
struct Piece {
    nodes: Vec<NodeProto>,
}

impl Message for Piece {
    /// Writes the graph level: the node fields.
    fn encode_raw(&self, buf: &mut impl BufMut) {
        encoding::message::encode_repeated(GRAPH_NODE, &self.nodes, buf);
    }

    fn merge_field(
        &mut self,
        tag: u32,
        wire_type: WireType,
        buf: &mut impl Buf,
        ctx: DecodeContext,
    ) -> Result<(), DecodeError> {
        match tag {
            MODEL_GRAPH => encoding::message::merge(wire_type, self, buf, ctx),
            GRAPH_NODE => {
                let mut node = presized_node(buf.chunk());
                encoding::message::merge(wire_type, &mut node, buf, ctx)?;
                self.nodes.push(node);
                Ok(())
            }
            _ => encoding::skip_field(wire_type, tag, buf, ctx),
        }
    }

    fn encoded_len(&self) -> usize {
        encoding::message::encoded_len_repeated(GRAPH_NODE, &self.nodes)
    }

    fn clear(&mut self) {
        self.nodes.clear();
    }
}

/// An empty node whose inputs, outputs and attributes have room for those of the node whose
/// length and payload start `bytes` (none where the bytes do not walk: decoding tells why).
fn presized_node(bytes: &[u8]) -> NodeProto {
    let mut node = NodeProto::default();
    let mut pos = 0;
    let Some(payload) = varint(bytes, &mut pos, bytes.len())
        .and_then(|len| end_of(pos, len, bytes.len()))
        .ok()
        .map(|end| pos..end)
    else {
        return node;
    };
    let mut counts = [0usize; 3];
    for field in fields(bytes, payload) {
        let Some(field) = field else {
            return node;
        };
        if let Some(k) = [NODE_INPUT, NODE_OUTPUT, NODE_ATTRIBUTE]
            .iter()
            .position(|&n| n == field.number)
        {
            counts[k] += 1;
        }
    }
    node.input.reserve_exact(counts[0]);
    node.output.reserve_exact(counts[1]);
    node.attribute.reserve_exact(counts[2]);
    node
}

/// One field of a message at the wire level.
struct Field {
    number: u32,
    /// The whole field: tag, length and value.
    span: Range<usize>,
    /// Where the value (a length, for a length-delimited field) starts.
    value_at: usize,
    /// The payload of a length-delimited field.
    payload: Option<Range<usize>>,
}

/// The fields of the message in `payload`, in order; `None` where the bytes do not walk.
fn fields(buf: &[u8], payload: Range<usize>) -> impl Iterator<Item = Option<Field>> + '_ {
    let mut pos = payload.start;
    let end = payload.end;
    std::iter::from_fn(move || {
        if pos >= end {
            return None;
        }
        let start = pos;
        let field = (|| {
            let tag = varint(buf, &mut pos, end).ok()?;
            let (number, wire) = (u32::try_from(tag >> 3).ok()?, tag & 7);
            let value_at = pos;
            let payload = if wire == WIRE_LEN {
                let len = varint(buf, &mut pos, end).ok()?;
                let payload_end = end_of(pos, len, end).ok()?;
                let payload = pos..payload_end;
                pos = payload_end;
                Some(payload)
            } else {
                skip(buf, &mut pos, end, wire, number, 0).ok()?;
                None
            };
            Some(Field {
                number,
                span: start..pos,
                value_at,
                payload,
            })
        })();
        if field.is_none() {
            pos = end;
        }
        Some(field)
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::onnx::proto::{GraphProto, TensorProto};

    fn node(i: usize) -> NodeProto {
        NodeProto {
            name: Some(format!("n{i}")),
            op_type: Some("Relu".into()),
            input: vec![format!("t{i}")],
            output: vec![format!("t{}", i + 1)],
            ..Default::default()
        }
    }

    /// A model whose graph holds `n` nodes.
    fn model_with(n: usize) -> ModelProto {
        let mut model = ModelProto {
            ir_version: Some(9),
            producer_name: Some("test".into()),
            ..Default::default()
        };
        let graph = model.graph.get_or_insert_with(GraphProto::default);
        graph.name = Some("g".into());
        graph.node = (0..n).map(node).collect();
        model
    }

    /// The encoding of `model` with its graph's nodes in runs of the given sizes, an
    /// initializer between runs.
    fn encoded_in_runs(model: &ModelProto, runs: &[usize]) -> Bytes {
        let graph = model.graph.as_ref().unwrap();
        let mut payload = Vec::new();
        let mut nodes = graph.node.iter();
        for (k, &n) in runs.iter().enumerate() {
            for node in nodes.by_ref().take(n) {
                put_varint(&mut payload, (u64::from(GRAPH_NODE) << 3) | WIRE_LEN);
                put_varint(&mut payload, node.encoded_len() as u64);
                node.encode(&mut payload).unwrap();
            }
            let w = TensorProto {
                name: Some(format!("w{k}")),
                raw_data: Some(Bytes::from(vec![k as u8; 16])),
                ..Default::default()
            };
            put_varint(&mut payload, (5 << 3) | WIRE_LEN);
            put_varint(&mut payload, w.encoded_len() as u64);
            w.encode(&mut payload).unwrap();
        }
        let mut out = Vec::new();
        let rest = ModelProto {
            graph: None,
            ..model.clone()
        };
        rest.encode(&mut out).unwrap();
        put_varint(&mut out, (u64::from(MODEL_GRAPH) << 3) | WIRE_LEN);
        put_varint(&mut out, payload.len() as u64);
        out.extend(payload);
        Bytes::from(out)
    }

    #[test]
    fn nodes_decoded_in_pieces_equal_the_whole_decoding() {
        // Runs interrupted by initializers, the longest in the middle; pieces of 4096 nodes.
        let runs = [3, 9000, 5];
        let model = model_with(runs.iter().sum());
        let bytes = encoded_in_runs(&model, &runs);
        let whole = ModelProto::decode(bytes.clone()).unwrap();
        let run = node_run(&bytes).unwrap();
        assert_eq!((run.nodes.len(), run.before), (9000, 3));
        assert_eq!(decode_with(&bytes, 1).unwrap(), whole);
        assert_eq!(whole.graph.as_ref().unwrap().node.len(), 9008);
        assert_eq!(whole.graph.as_ref().unwrap().initializer.len(), 3);
    }

    #[test]
    fn fixture_models_decode_the_same_in_pieces() {
        // Every committed model file, its nodes decoded in parallel from runs of one node.
        let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
        let mut checked = 0;
        for dir in ["sample-models", "tests/fixtures"] {
            for entry in walkdir::WalkDir::new(root.join(dir)) {
                let entry = entry.unwrap();
                if entry.path().extension().is_none_or(|e| e != "onnx") {
                    continue;
                }
                let bytes = Bytes::from(std::fs::read(entry.path()).unwrap());
                let whole = ModelProto::decode(bytes.clone());
                let pieces = decode_with(&bytes, 1);
                match (whole, pieces) {
                    (Ok(a), Ok(b)) => assert_eq!(a, b, "{}", entry.path().display()),
                    (Err(a), Err(b)) => assert_eq!(a.to_string(), b.to_string()),
                    (a, b) => panic!("{}: {a:?} against {b:?}", entry.path().display()),
                }
                checked += 1;
            }
        }
        assert!(checked >= 100, "only {checked} models");
    }

    /// The nodes equal prost's own decoding of the same bytes (the protobuf wire format's
    /// reference implementation for Rust); the room is this decoder's own promise.
    #[test]
    fn nodes_decoded_in_pieces_hold_no_spare_room() {
        let mut model = model_with(9000);
        let node = &mut model.graph.as_mut().unwrap().node[4000];
        node.input.push("t0".into());
        node.attribute.push(crate::onnx::proto::AttributeProto {
            name: Some("alpha".into()),
            f: Some(0.5),
            ..Default::default()
        });
        let bytes = encoded_in_runs(&model, &[9000]);
        let graph = decode_with(&bytes, 1).unwrap().graph.unwrap();
        assert_eq!(
            graph.node,
            ModelProto::decode(bytes).unwrap().graph.unwrap().node
        );
        assert_eq!(graph.node, model.graph.unwrap().node);
        for n in &graph.node {
            assert_eq!(n.input.capacity(), n.input.len());
            assert_eq!(n.output.capacity(), n.output.len());
            assert_eq!(n.attribute.capacity(), n.attribute.len());
        }
    }

    #[test]
    fn bytes_that_do_not_walk_decode_as_a_whole() {
        let runs = [20];
        let bytes = encoded_in_runs(&model_with(20), &runs);
        let truncated = bytes.slice(..bytes.len() - 3);
        assert!(node_run(&truncated).is_none());
        assert_eq!(
            decode_with(&truncated, 1).unwrap_err().to_string(),
            ModelProto::decode(truncated.clone())
                .unwrap_err()
                .to_string()
        );
    }
}
