//! Fields our schema does not know (a newer IR's additions) survive a rewrite.
//!
//! prost drops unknown fields when it decodes, so a changed model re-encoded from its decoded
//! form would lose them. When the source file holds any, [`encode_keeping`] reads the source at
//! the wire level with the schema (field numbers, and which fields hold which messages), pairs
//! every message of the new model with the source message it comes from, and writes:
//! - a message equal to its source (in the fields we know) as the source's own bytes;
//! - a changed message (a graph whose nodes changed, the node holding that graph, ...) as its new
//!   encoding followed by its source's unknown fields.
//!
//! Messages pair with the source message of the same field whose known content is equal, else
//! with one whose non-message fields (names, op type, inputs, ...) are equal, which is what a
//! rewrite keeps of the messages around the ones it changes. A message the rewrite removes takes
//! its unknown fields with it. The result is decoded again and must equal the new model.

use std::collections::{HashMap, VecDeque};
use std::ops::Range;

use anyhow::{Result, bail};
use bytes::Bytes;
use prost::Message;

use super::proto::ModelProto;
use super::wire::{MAX_DEPTH, WIRE_LEN, end_of, put_varint, skip, varint};

/// One field of a message as the schema declares it.
struct FieldSchema {
    number: u32,
    /// Index in [`SCHEMA`] of the field's message type, for message fields.
    message: Option<usize>,
    repeated: bool,
}

/// One message type of the schema.
struct MessageSchema {
    name: &'static str,
    fields: &'static [FieldSchema],
}

include!(concat!(env!("OUT_DIR"), "/onnx_schema.rs"));

/// True when some message of the serialized model holds a field our schema does not know (or the
/// bytes cannot be walked, which [`encode_keeping`] then reports).
pub fn has_unknown_fields(bytes: &[u8]) -> bool {
    any_unknown(bytes, 0..bytes.len(), MODEL_PROTO, 0).unwrap_or(true)
}

/// Encodes `new`, a changed version of the model serialized in `source`, keeping the bytes of
/// every message it shares with the source and the unknown fields of every message it keeps.
pub fn encode_keeping(source: &Bytes, new: &ModelProto) -> Result<Bytes> {
    let new_bytes = new.encode_to_vec();
    if !any_unknown(source, 0..source.len(), MODEL_PROTO, 0)? {
        return Ok(Bytes::from(new_bytes));
    }
    let old = parse(source, 0..source.len(), MODEL_PROTO, 0)?;
    // The source's known content, canonically encoded: what `new` is compared with.
    let known_bytes = ModelProto::decode(source.clone())?.encode_to_vec();
    let known = parse(&known_bytes, 0..known_bytes.len(), MODEL_PROTO, 0)?;
    let fresh = parse(&new_bytes, 0..new_bytes.len(), MODEL_PROTO, 0)?;
    let bufs = Buffers {
        new: &new_bytes,
        known: &known_bytes,
        source: source.as_ref(),
    };
    let mut chunks = Vec::new();
    let len = bufs.emit(&fresh, Some((&known, &old)), MODEL_PROTO, &mut chunks)?;
    let mut out = Vec::with_capacity(len);
    for c in &chunks {
        out.extend_from_slice(c.bytes());
    }
    if ModelProto::decode(out.as_slice()).ok().as_ref() != Some(new) {
        bail!(
            "the model holds fields this version of actswap does not know, and they could not be kept; it is not written"
        );
    }
    Ok(Bytes::from(out))
}

/// A message read at the wire level.
struct Msg {
    /// Its bytes (without tag and length) in the buffer it was read from.
    payload: Range<usize>,
    fields: Vec<Field>,
}

/// One field occurrence.
struct Field {
    number: u32,
    /// Tag to end of value.
    span: Range<usize>,
    /// The message it holds, for fields the schema declares as messages.
    child: Option<Msg>,
    known: bool,
}

impl Msg {
    /// The messages of field `number`, in order.
    fn children(&self, number: u32) -> Vec<&Msg> {
        self.fields
            .iter()
            .filter(|f| f.number == number)
            .filter_map(|f| f.child.as_ref())
            .collect()
    }

    /// The bytes of its fields that hold no message: what pairs a changed message with its
    /// source.
    fn scalar_key(&self, buf: &[u8]) -> Vec<u8> {
        let mut key = Vec::new();
        for f in self.fields.iter().filter(|f| f.child.is_none() && f.known) {
            key.extend_from_slice(&buf[f.span.clone()]);
        }
        key
    }
}

/// True when the message in `payload`, or one inside it, holds a field its schema lacks.
fn any_unknown(buf: &[u8], payload: Range<usize>, ty: usize, depth: usize) -> Result<bool> {
    if depth > MAX_DEPTH {
        bail!("messages nested deeper than {MAX_DEPTH} levels");
    }
    let schema = &SCHEMA[ty];
    let mut pos = payload.start;
    while pos < payload.end {
        let tag = varint(buf, &mut pos, payload.end)?;
        let (number, wire) = ((tag >> 3) as u32, tag & 7);
        let Some(declared) = schema.fields.iter().find(|f| f.number == number) else {
            return Ok(true);
        };
        match (wire, declared.message) {
            (WIRE_LEN, Some(child_ty)) => {
                let len = varint(buf, &mut pos, payload.end)?;
                let end = end_of(pos, len, payload.end)?;
                if any_unknown(buf, pos..end, child_ty, depth + 1)? {
                    return Ok(true);
                }
                pos = end;
            }
            _ => skip(buf, &mut pos, payload.end, wire, number, depth)?,
        }
    }
    Ok(false)
}

/// Reads the message in `payload` and every message inside it.
fn parse(buf: &[u8], payload: Range<usize>, ty: usize, depth: usize) -> Result<Msg> {
    if depth > MAX_DEPTH {
        bail!("messages nested deeper than {MAX_DEPTH} levels");
    }
    let schema = &SCHEMA[ty];
    let mut fields = Vec::new();
    let mut pos = payload.start;
    while pos < payload.end {
        let start = pos;
        let tag = varint(buf, &mut pos, payload.end)?;
        let (number, wire) = ((tag >> 3) as u32, tag & 7);
        if number == 0 {
            bail!("field number 0 in {}", schema.name);
        }
        let declared = schema.fields.iter().find(|f| f.number == number);
        let mut child = None;
        match (wire, declared.and_then(|f| f.message)) {
            (WIRE_LEN, Some(child_ty)) => {
                let len = varint(buf, &mut pos, payload.end)?;
                let end = end_of(pos, len, payload.end)?;
                child = Some(parse(buf, pos..end, child_ty, depth + 1)?);
                pos = end;
            }
            _ => skip(buf, &mut pos, payload.end, wire, number, depth)?,
        }
        fields.push(Field {
            number,
            span: start..pos,
            child,
            known: declared.is_some(),
        });
    }
    Ok(Msg { payload, fields })
}

/// A piece of the output: bytes of one of the buffers, or a tag and length written anew.
enum Chunk<'a> {
    Borrowed(&'a [u8]),
    Owned(Vec<u8>),
}

impl Chunk<'_> {
    fn bytes(&self) -> &[u8] {
        match self {
            Chunk::Borrowed(b) => b,
            Chunk::Owned(v) => v,
        }
    }
}

/// The three encodings being merged: the new model, the source's known content, the source.
struct Buffers<'a> {
    new: &'a [u8],
    known: &'a [u8],
    source: &'a [u8],
}

impl<'a> Buffers<'a> {
    /// Writes message `n` of the new model; `pair` is its source message (known content, source
    /// bytes). Returns the number of bytes written.
    fn emit<'t>(
        &self,
        n: &Msg,
        pair: Option<(&'t Msg, &'t Msg)>,
        ty: usize,
        out: &mut Vec<Chunk<'a>>,
    ) -> Result<usize> {
        let (new, source): (&'a [u8], &'a [u8]) = (self.new, self.source);
        if let Some((k, o)) = pair
            && self.known[k.payload.clone()] == new[n.payload.clone()]
        {
            out.push(Chunk::Borrowed(&source[o.payload.clone()]));
            return Ok(o.payload.len());
        }
        let schema = &SCHEMA[ty];
        let mut pairs: HashMap<u32, Vec<Option<(&'t Msg, &'t Msg)>>> = HashMap::new();
        let mut seen: HashMap<u32, usize> = HashMap::new();
        let mut len = 0;
        for f in &n.fields {
            let Some(child) = &f.child else {
                out.push(Chunk::Borrowed(&new[f.span.clone()]));
                len += f.span.len();
                continue;
            };
            let declared = schema
                .fields
                .iter()
                .find(|d| d.number == f.number)
                .expect("message fields are declared");
            if let std::collections::hash_map::Entry::Vacant(slot) = pairs.entry(f.number) {
                slot.insert(match pair {
                    Some((k, o)) => self.pair_children(n, k, o, f.number, declared.repeated)?,
                    None => Vec::new(),
                });
            }
            let i = seen.entry(f.number).or_default();
            let child_pair = pairs[&f.number].get(*i).copied().flatten();
            *i += 1;
            let mut sub = Vec::new();
            let sub_len = self.emit(
                child,
                child_pair,
                declared.message.expect("a message field"),
                &mut sub,
            )?;
            let mut head = Vec::with_capacity(12);
            put_varint(&mut head, (u64::from(f.number) << 3) | WIRE_LEN);
            put_varint(&mut head, sub_len as u64);
            len += head.len() + sub_len;
            out.push(Chunk::Owned(head));
            out.extend(sub);
        }
        if let Some((_, o)) = pair {
            for f in o.fields.iter().filter(|f| !f.known) {
                out.push(Chunk::Borrowed(&source[f.span.clone()]));
                len += f.span.len();
            }
        }
        Ok(len)
    }

    /// For each message of field `number` in `n`, its source message, if any: first one with
    /// equal known content, else one with equal non-message fields, else (a single field) the
    /// one there was.
    fn pair_children<'t>(
        &self,
        n: &Msg,
        k: &'t Msg,
        o: &'t Msg,
        number: u32,
        repeated: bool,
    ) -> Result<Vec<Option<(&'t Msg, &'t Msg)>>> {
        let new = n.children(number);
        let known = k.children(number);
        let source = o.children(number);
        if known.len() != source.len() {
            bail!(
                "field {number} holds {} messages in the source but {} once decoded; its unknown fields cannot be matched",
                source.len(),
                known.len()
            );
        }
        let mut taken = vec![false; known.len()];
        let mut result: Vec<Option<usize>> = vec![None; new.len()];
        let mut by_content: HashMap<&[u8], VecDeque<usize>> = HashMap::new();
        for (j, m) in known.iter().enumerate() {
            by_content
                .entry(&self.known[m.payload.clone()])
                .or_default()
                .push_back(j);
        }
        for (i, m) in new.iter().enumerate() {
            if let Some(j) = by_content
                .get_mut(&self.new[m.payload.clone()])
                .and_then(VecDeque::pop_front)
            {
                taken[j] = true;
                result[i] = Some(j);
            }
        }
        let mut by_key: HashMap<Vec<u8>, VecDeque<usize>> = HashMap::new();
        for (j, m) in known.iter().enumerate().filter(|(j, _)| !taken[*j]) {
            by_key
                .entry(m.scalar_key(self.known))
                .or_default()
                .push_back(j);
        }
        for (i, m) in new.iter().enumerate() {
            if result[i].is_none()
                && let Some(j) = by_key
                    .get_mut(&m.scalar_key(self.new))
                    .and_then(VecDeque::pop_front)
            {
                taken[j] = true;
                result[i] = Some(j);
            }
        }
        if !repeated && new.len() == 1 && known.len() == 1 && result[0].is_none() {
            result[0] = Some(0);
        }
        Ok(result
            .into_iter()
            .map(|j| j.map(|j| (known[j], source[j])))
            .collect())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::onnx::proto::{GraphProto, NodeProto};

    /// Appends field `number` (length-delimited, `payload`) to `bytes`: what a newer writer adds.
    fn with_extra(mut bytes: Vec<u8>, number: u32, payload: &[u8]) -> Vec<u8> {
        put_varint(&mut bytes, (u64::from(number) << 3) | WIRE_LEN);
        put_varint(&mut bytes, payload.len() as u64);
        bytes.extend_from_slice(payload);
        bytes
    }

    fn node(name: &str, op: &str, input: &str, output: &str) -> NodeProto {
        NodeProto {
            name: Some(name.into()),
            op_type: Some(op.into()),
            input: vec![input.into()],
            output: vec![output.into()],
            ..Default::default()
        }
    }

    /// A model whose second node and whose graph carry a field number our schema lacks.
    fn source() -> (Bytes, Vec<u8>) {
        let kept = with_extra(
            node("keep", "Relu", "x", "y").encode_to_vec(),
            999,
            b"node-extra",
        );
        let gone = node("gone", "Sigmoid", "y", "z").encode_to_vec();
        let mut graph = Vec::new();
        for n in [&kept, &gone] {
            put_varint(&mut graph, (1 << 3) | WIRE_LEN);
            put_varint(&mut graph, n.len() as u64);
            graph.extend_from_slice(n);
        }
        let graph = with_extra(graph, 998, b"graph-extra");
        let mut model = ModelProto {
            ir_version: Some(10),
            ..Default::default()
        }
        .encode_to_vec();
        put_varint(&mut model, (7 << 3) | WIRE_LEN);
        put_varint(&mut model, graph.len() as u64);
        model.extend_from_slice(&graph);
        (Bytes::from(model), kept)
    }

    #[test]
    fn unknown_fields_are_found() {
        let (bytes, _) = source();
        assert!(has_unknown_fields(&bytes));
        let plain = ModelProto::decode(bytes.clone()).unwrap().encode_to_vec();
        assert!(!has_unknown_fields(&plain));
    }

    /// protobuf encoding (protobuf.dev, "Encoding"; common practice): unknown fields are kept
    /// by a parser that re-serializes a message, so a rewrite must keep them too.
    #[test]
    fn kept_and_changed_messages_keep_their_unknown_fields() {
        let (bytes, kept) = source();
        let mut model = ModelProto::decode(bytes.clone()).unwrap();
        let graph: &mut GraphProto = model.graph.as_mut().unwrap();
        graph.node[1] = node("new", "Tanh", "y", "z");
        let out = encode_keeping(&bytes, &model).unwrap();
        let find = |needle: &[u8]| out.windows(needle.len()).any(|w| w == needle);
        assert!(find(&kept), "the kept node keeps its bytes");
        assert!(
            find(b"graph-extra"),
            "the changed graph keeps its unknown field"
        );
        assert_eq!(ModelProto::decode(out.clone()).unwrap(), model);
    }

    #[test]
    fn without_unknown_fields_the_plain_encoding_is_written() {
        let model = ModelProto {
            ir_version: Some(10),
            graph: Some(GraphProto::default()),
            ..Default::default()
        };
        let bytes = Bytes::from(model.encode_to_vec());
        assert!(!has_unknown_fields(&bytes));
        let out = encode_keeping(&bytes, &model).unwrap();
        assert_eq!(out, bytes);
    }
}
