//! Seed models and the mutations that turn them into fuzz inputs.

use std::path::{Path, PathBuf};

use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};

/// A seed model: its bytes and the folder its external data is resolved in.
pub struct Seed {
    pub path: PathBuf,
    pub bytes: Vec<u8>,
    pub dir: PathBuf,
}

/// Seeds larger than this are left out: small models keep the rate of inputs high.
const MAX_SEED_BYTES: u64 = 256 * 1024;

/// Every `.onnx` file below the repository's fixture, corpus and sample folders, sorted.
pub fn seeds() -> Vec<Seed> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut paths: Vec<PathBuf> = ["tests/fixtures", "tests/corpus", "sample-models"]
        .iter()
        .flat_map(|d| walkdir::WalkDir::new(root.join(d)).into_iter())
        .filter_map(Result::ok)
        .filter(|e| e.file_type().is_file())
        .filter(|e| e.path().extension().is_some_and(|x| x == "onnx"))
        .filter(|e| e.metadata().is_ok_and(|m| m.len() <= MAX_SEED_BYTES))
        .map(|e| e.into_path())
        .collect();
    paths.sort();
    paths
        .into_iter()
        .map(|path| Seed {
            bytes: std::fs::read(&path).expect("seed readable"),
            dir: path.parent().expect("a file has a folder").to_path_buf(),
            path,
        })
        .collect()
}

/// Input `index` of the run seeded with `seed`: which seed model, and its mutated bytes.
pub fn input(seeds: &[Seed], seed: u64, index: u64) -> (usize, Vec<u8>) {
    let mut rng = StdRng::seed_from_u64(seed.wrapping_mul(0x9e37_79b9_7f4a_7c15) ^ index);
    let which = rng.random_range(0..seeds.len());
    let mut bytes = seeds[which].bytes.clone();
    // Mostly one mutation: stacked ones rarely get past the decoder.
    let count = [1, 1, 1, 1, 1, 1, 2, 2, 2, 3][rng.random_range(0..10)];
    for _ in 0..count {
        mutate(&mut bytes, &mut rng);
    }
    (which, bytes)
}

fn mutate(bytes: &mut Vec<u8>, rng: &mut StdRng) {
    if bytes.is_empty() {
        bytes.push(rng.random());
        return;
    }
    match rng.random_range(0..16) {
        0 => {
            let i = rng.random_range(0..bytes.len());
            bytes[i] ^= 1 << rng.random_range(0..8);
        }
        1 => {
            let i = rng.random_range(0..bytes.len());
            bytes[i] = rng.random();
        }
        2 => {
            let at = rng.random_range(0..bytes.len());
            bytes.truncate(at);
        }
        3 => {
            let at = rng.random_range(0..=bytes.len());
            let n = rng.random_range(1..16);
            let extra: Vec<u8> = (0..n).map(|_| rng.random()).collect();
            bytes.splice(at..at, extra);
        }
        4 => {
            let a = rng.random_range(0..bytes.len());
            let b = (a + rng.random_range(1..64)).min(bytes.len());
            let piece = bytes[a..b].to_vec();
            let at = rng.random_range(0..=bytes.len());
            bytes.splice(at..at, piece);
        }
        _ => {
            if let Some(mut tree) = Tree::parse(bytes, 0) {
                tree.mutate(rng);
                *bytes = tree.encode();
            }
        }
    }
}

/// A protobuf message read without a schema: a length-delimited payload counts as a message
/// when it reads as one and is not text.
#[derive(Clone)]
struct Tree {
    fields: Vec<Field>,
}

#[derive(Clone)]
struct Field {
    number: u64,
    value: Value,
}

#[derive(Clone)]
enum Value {
    Varint(u64),
    Fixed64([u8; 8]),
    Fixed32([u8; 4]),
    Bytes(Vec<u8>),
    Message(Tree),
    /// A length prefix that disagrees with the payload (written as is).
    BadLength(u64, Vec<u8>),
}

/// Strings that stress names and external data locations.
const EDGE_STRINGS: &[&[u8]] = &[
    b"",
    b".",
    b"..",
    b"../x",
    b"/etc/hostname",
    b"location",
    b"offset",
    b"length",
    b"weights.bin",
    b"x\x1b[2J\x07\r",
    b"\xff\xfe",
    b"Sigmoid",
    b"Mul",
    b"Gelu",
    b"If",
    b"com.microsoft",
];

/// Varints at the edges: zero, small, sign boundaries, huge dims, negative numbers.
const EDGE_VARINTS: &[u64] = &[
    0,
    1,
    2,
    7,
    16,
    127,
    128,
    255,
    1 << 31,
    (1 << 31) - 1,
    1 << 32,
    1 << 40,
    (1 << 63) - 1,
    1 << 63,
    u64::MAX,
    u64::MAX - 1,
];

impl Tree {
    fn parse(buf: &[u8], depth: usize) -> Option<Tree> {
        let mut fields = Vec::new();
        let mut pos = 0;
        while pos < buf.len() {
            let tag = varint(buf, &mut pos)?;
            let (number, wire) = (tag >> 3, tag & 7);
            if number == 0 {
                return None;
            }
            let value = match wire {
                0 => Value::Varint(varint(buf, &mut pos)?),
                1 => {
                    let v = buf.get(pos..pos + 8)?.try_into().ok()?;
                    pos += 8;
                    Value::Fixed64(v)
                }
                5 => {
                    let v = buf.get(pos..pos + 4)?.try_into().ok()?;
                    pos += 4;
                    Value::Fixed32(v)
                }
                2 => {
                    let len = usize::try_from(varint(buf, &mut pos)?).ok()?;
                    let payload = buf.get(pos..pos.checked_add(len)?)?;
                    pos += len;
                    let text = std::str::from_utf8(payload)
                        .is_ok_and(|t| !t.chars().any(char::is_control));
                    match (depth < 48 && !text)
                        .then(|| Tree::parse(payload, depth + 1))
                        .flatten()
                    {
                        Some(t) if !t.fields.is_empty() => Value::Message(t),
                        _ => Value::Bytes(payload.to_vec()),
                    }
                }
                _ => return None,
            };
            fields.push(Field { number, value });
        }
        Some(Tree { fields })
    }

    /// Every field, depth first, as a path of indices.
    fn paths(&self, prefix: &mut Vec<usize>, out: &mut Vec<Vec<usize>>) {
        for (i, f) in self.fields.iter().enumerate() {
            prefix.push(i);
            out.push(prefix.clone());
            if let Value::Message(t) = &f.value {
                t.paths(prefix, out);
            }
            prefix.pop();
        }
    }

    fn parent_mut(&mut self, path: &[usize]) -> &mut Tree {
        let mut t = self;
        for &i in &path[..path.len() - 1] {
            t = match &mut t.fields[i].value {
                Value::Message(m) => m,
                _ => unreachable!("paths only descend into messages"),
            };
        }
        t
    }

    fn mutate(&mut self, rng: &mut StdRng) {
        let mut paths = Vec::new();
        self.paths(&mut Vec::new(), &mut paths);
        if paths.is_empty() {
            return;
        }
        let path = paths[rng.random_range(0..paths.len())].clone();
        let i = *path.last().expect("non-empty path");
        let siblings = self.parent_mut(&path);
        let action = rng.random_range(0..8);
        match action {
            0 => {
                siblings.fields.remove(i);
            }
            1 => {
                let copy = siblings.fields[i].clone();
                let at = rng.random_range(0..=siblings.fields.len());
                siblings.fields.insert(at, copy);
            }
            _ => {
                let f = &mut siblings.fields[i];
                f.value = match std::mem::replace(&mut f.value, Value::Varint(0)) {
                    Value::Varint(v) => Value::Varint(match rng.random_range(0..3) {
                        0 => EDGE_VARINTS[rng.random_range(0..EDGE_VARINTS.len())],
                        1 => v.wrapping_add(rng.random_range(1..4)),
                        _ => v.wrapping_sub(rng.random_range(1..4)),
                    }),
                    Value::Fixed32(_) => Value::Fixed32(
                        [f32::NAN, f32::INFINITY, -0.0, 1e38, 1e-45, -3.5][rng.random_range(0..6)]
                            .to_le_bytes(),
                    ),
                    Value::Fixed64(_) => Value::Fixed64(
                        [f64::NAN, f64::NEG_INFINITY, 0.0, 1e308][rng.random_range(0..4)]
                            .to_le_bytes(),
                    ),
                    Value::Bytes(b) | Value::BadLength(_, b) => match rng.random_range(0..4) {
                        0 => Value::BadLength(
                            (b.len() as u64).wrapping_add(rng.random_range(1..9)),
                            b,
                        ),
                        1 => Value::Bytes(b[..rng.random_range(0..=b.len())].to_vec()),
                        _ => Value::Bytes(
                            EDGE_STRINGS[rng.random_range(0..EDGE_STRINGS.len())].to_vec(),
                        ),
                    },
                    Value::Message(t) => {
                        let mut b = t.encode();
                        let cut = rng.random_range(0..=b.len());
                        b.truncate(cut);
                        Value::Bytes(b)
                    }
                };
            }
        }
    }

    fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        for f in &self.fields {
            let wire = match f.value {
                Value::Varint(_) => 0,
                Value::Fixed64(_) => 1,
                Value::Fixed32(_) => 5,
                _ => 2,
            };
            put_varint(&mut out, (f.number << 3) | wire);
            match &f.value {
                Value::Varint(v) => put_varint(&mut out, *v),
                Value::Fixed64(b) => out.extend_from_slice(b),
                Value::Fixed32(b) => out.extend_from_slice(b),
                Value::Bytes(b) => {
                    put_varint(&mut out, b.len() as u64);
                    out.extend_from_slice(b);
                }
                Value::BadLength(len, b) => {
                    put_varint(&mut out, *len);
                    out.extend_from_slice(b);
                }
                Value::Message(t) => {
                    let b = t.encode();
                    put_varint(&mut out, b.len() as u64);
                    out.extend_from_slice(&b);
                }
            }
        }
        out
    }
}

fn varint(buf: &[u8], pos: &mut usize) -> Option<u64> {
    let mut v = 0u64;
    for shift in (0..64).step_by(7) {
        let b = *buf.get(*pos)?;
        *pos += 1;
        v |= u64::from(b & 0x7f) << shift;
        if b < 0x80 {
            return Some(v);
        }
    }
    None
}

fn put_varint(out: &mut Vec<u8>, mut v: u64) {
    while v >= 0x80 {
        out.push((v as u8) | 0x80);
        v >>= 7;
    }
    out.push(v as u8);
}
