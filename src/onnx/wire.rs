//! The protobuf wire format, read field by field: what the lossless writer and the parallel
//! decoder need to find a message's fields without decoding them.

use anyhow::{Result, bail};

/// Deeper than prost's decoding limit (100): bytes prost decoded never reach it.
pub const MAX_DEPTH: usize = 128;

const WIRE_VARINT: u64 = 0;
const WIRE_FIXED64: u64 = 1;
pub const WIRE_LEN: u64 = 2;
const WIRE_START_GROUP: u64 = 3;
const WIRE_END_GROUP: u64 = 4;
const WIRE_FIXED32: u64 = 5;

/// Reads the varint at `pos` (before `end`) and moves past it.
pub fn varint(buf: &[u8], pos: &mut usize, end: usize) -> Result<u64> {
    let mut value = 0u64;
    for shift in (0..64).step_by(7) {
        if *pos >= end {
            bail!("truncated varint");
        }
        let b = buf[*pos];
        *pos += 1;
        value |= u64::from(b & 0x7f) << shift;
        if b < 0x80 {
            return Ok(value);
        }
    }
    bail!("varint longer than 10 bytes")
}

/// The end of a length-delimited value of `len` bytes at `pos`, which must not pass `limit`.
pub fn end_of(pos: usize, len: u64, limit: usize) -> Result<usize> {
    match usize::try_from(len).ok().and_then(|l| pos.checked_add(l)) {
        Some(end) if end <= limit => Ok(end),
        _ => bail!("length runs past the end of its message"),
    }
}

/// Moves `pos` past a field value of wire type `wire` (groups to their end tag).
pub fn skip(
    buf: &[u8],
    pos: &mut usize,
    end: usize,
    wire: u64,
    number: u32,
    depth: usize,
) -> Result<()> {
    match wire {
        WIRE_VARINT => {
            varint(buf, pos, end)?;
        }
        WIRE_FIXED64 => *pos = end_of(*pos, 8, end)?,
        WIRE_FIXED32 => *pos = end_of(*pos, 4, end)?,
        WIRE_LEN => {
            let len = varint(buf, pos, end)?;
            *pos = end_of(*pos, len, end)?;
        }
        WIRE_START_GROUP => {
            if depth > MAX_DEPTH {
                bail!("groups nested deeper than {MAX_DEPTH} levels");
            }
            loop {
                let tag = varint(buf, pos, end)?;
                let (inner, inner_wire) = ((tag >> 3) as u32, tag & 7);
                if inner_wire == WIRE_END_GROUP {
                    if inner != number {
                        bail!("group {number} ends with the tag of group {inner}");
                    }
                    break;
                }
                skip(buf, pos, end, inner_wire, inner, depth + 1)?;
            }
        }
        _ => bail!("wire type {wire} of field {number} is not valid here"),
    }
    Ok(())
}

/// Appends `v` as a varint.
pub fn put_varint(out: &mut Vec<u8>, mut v: u64) {
    while v >= 0x80 {
        out.push((v as u8) | 0x80);
        v >>= 7;
    }
    out.push(v as u8);
}
