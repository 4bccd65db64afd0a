//! Numeric values of TensorProto, in every storage form the standard allows: little-endian
//! `raw_data`, the typed fields (`float_data`, `int32_data` holding 16-bit floats as bits, ...),
//! and external data; and the check that a tensor's stored data agrees with its shape.

use std::path::Path;

use anyhow::{Context, Result, bail};
use bytes::Bytes;

use super::external;
use super::proto::{TensorProto, tensor_proto::DataType};
use crate::text::escape;

/// A tensor's shape and its values widened to f64 (exact for every float type up to f64 and for
/// integers up to 2^53).
#[derive(Debug, Clone, PartialEq)]
pub struct TensorValue {
    pub dims: Vec<usize>,
    pub data: Vec<f64>,
    pub data_type: DataType,
}

impl TensorValue {
    /// Number of elements.
    pub fn len(&self) -> usize {
        self.data.len()
    }

    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }
}

/// The tensor's element type, or an error naming the unknown code.
pub fn data_type(t: &TensorProto) -> Result<DataType> {
    let code = t.data_type.unwrap_or(0);
    DataType::try_from(code)
        .map_err(|_| anyhow::anyhow!("tensor '{}' has unknown data type {code}", escape(t.name())))
}

/// Bytes per element for the fixed-size numeric types, `None` for strings and sub-byte types.
pub fn element_size(dt: DataType) -> Option<usize> {
    use DataType::*;
    Some(match dt {
        Float | Int32 | Uint32 => 4,
        Double | Int64 | Uint64 | Complex64 => 8,
        Complex128 => 16,
        Float16 | Bfloat16 | Int16 | Uint16 => 2,
        Int8 | Uint8 | Bool | Float8e4m3fn | Float8e4m3fnuz | Float8e5m2 | Float8e5m2fnuz
        | Float8e8m0 => 1,
        _ => return None,
    })
}

/// Element count from the dims, refusing negative dims and products beyond `limit`.
pub fn element_count(t: &TensorProto, limit: u64) -> Result<usize> {
    let name = escape(t.name());
    let mut n: u64 = 1;
    for &d in &t.dims {
        if d < 0 {
            bail!("tensor '{name}' has a negative dimension {d}");
        }
        n = n
            .checked_mul(d as u64)
            .filter(|&n| n <= limit)
            .with_context(|| {
                format!(
                    "tensor '{name}' is too large: shape {:?} has more than {limit} elements",
                    t.dims
                )
            })?;
    }
    Ok(n as usize)
}

/// Size in bytes of the tensor's data as stored (in the file or in external data).
pub fn stored_bytes(t: &TensorProto) -> u64 {
    if external::is_external(t) {
        return external::external_ref(t)
            .ok()
            .and_then(|r| r.length)
            .unwrap_or(0);
    }
    if let Some(raw) = &t.raw_data {
        return raw.len() as u64;
    }
    (t.float_data.len() * 4
        + t.int32_data.len() * 4
        + t.int64_data.len() * 8
        + t.double_data.len() * 8
        + t.uint64_data.len() * 8
        + t.string_data.iter().map(|s| s.len()).sum::<usize>()) as u64
}

/// Reads a numeric tensor as f64 values; `model_dir` resolves external data. Refuses tensors of
/// more than `limit` elements.
pub fn read(t: &TensorProto, model_dir: &Path, limit: u64) -> Result<TensorValue> {
    let name = escape(t.name());
    let dt = data_type(t)?;
    let n = element_count(t, limit)?;
    let dims: Vec<usize> = t.dims.iter().map(|&d| d as usize).collect();
    let raw = if external::is_external(t) {
        Some(external::read(model_dir, t)?)
    } else {
        t.raw_data.clone()
    };
    let data = match raw {
        Some(raw) => from_raw(&raw, dt, n).with_context(|| format!("tensor '{name}'"))?,
        None => from_typed(t, dt, n).with_context(|| format!("tensor '{name}'"))?,
    };
    Ok(TensorValue {
        dims,
        data,
        data_type: dt,
    })
}

fn from_raw(raw: &Bytes, dt: DataType, n: usize) -> Result<Vec<f64>> {
    let size = element_size(dt)
        .filter(|_| is_real_number(dt))
        .with_context(|| format!("data type {} is not read as numbers", dt.as_str_name()))?;
    if raw.len() != n * size {
        bail!(
            "raw_data length {} disagrees with its shape ({n} elements of {size} bytes)",
            raw.len()
        );
    }
    use DataType::*;
    let c = raw.chunks_exact(size);
    Ok(match dt {
        Float => c
            .map(|b| f32::from_le_bytes(b.try_into().unwrap()) as f64)
            .collect(),
        Double => c
            .map(|b| f64::from_le_bytes(b.try_into().unwrap()))
            .collect(),
        Float16 => c
            .map(|b| half::f16::from_le_bytes([b[0], b[1]]).to_f64())
            .collect(),
        Bfloat16 => c
            .map(|b| half::bf16::from_le_bytes([b[0], b[1]]).to_f64())
            .collect(),
        Int8 => c.map(|b| b[0] as i8 as f64).collect(),
        Uint8 | Bool => c.map(|b| b[0] as f64).collect(),
        Int16 => c.map(|b| i16::from_le_bytes([b[0], b[1]]) as f64).collect(),
        Uint16 => c.map(|b| u16::from_le_bytes([b[0], b[1]]) as f64).collect(),
        Int32 => c
            .map(|b| i32::from_le_bytes(b.try_into().unwrap()) as f64)
            .collect(),
        Uint32 => c
            .map(|b| u32::from_le_bytes(b.try_into().unwrap()) as f64)
            .collect(),
        Int64 => c
            .map(|b| i64::from_le_bytes(b.try_into().unwrap()) as f64)
            .collect(),
        Uint64 => c
            .map(|b| u64::from_le_bytes(b.try_into().unwrap()) as f64)
            .collect(),
        _ => unreachable!("filtered by is_real_number"),
    })
}

fn from_typed(t: &TensorProto, dt: DataType, n: usize) -> Result<Vec<f64>> {
    use DataType::*;
    let values: Vec<f64> = match dt {
        Float => t.float_data.iter().map(|&v| v as f64).collect(),
        Double => t.double_data.clone(),
        Int64 => t.int64_data.iter().map(|&v| v as f64).collect(),
        Uint32 | Uint64 => t.uint64_data.iter().map(|&v| v as f64).collect(),
        Int32 | Int16 | Int8 | Uint16 | Uint8 | Bool => {
            t.int32_data.iter().map(|&v| v as f64).collect()
        }
        Float16 => t
            .int32_data
            .iter()
            .map(|&v| half::f16::from_bits(v as u16).to_f64())
            .collect(),
        Bfloat16 => t
            .int32_data
            .iter()
            .map(|&v| half::bf16::from_bits(v as u16).to_f64())
            .collect(),
        _ => bail!("data type {} is not read as numbers", dt.as_str_name()),
    };
    if values.len() != n {
        bail!(
            "holds {} values but its shape {:?} needs {n}",
            values.len(),
            t.dims
        );
    }
    Ok(values)
}

/// The element types this module reads as real numbers.
pub fn is_real_number(dt: DataType) -> bool {
    use DataType::*;
    matches!(
        dt,
        Float
            | Double
            | Float16
            | Bfloat16
            | Int8
            | Uint8
            | Bool
            | Int16
            | Uint16
            | Int32
            | Uint32
            | Int64
            | Uint64
    )
}

/// Refuses a tensor whose stored data disagrees with its shape, `n` elements of its type:
/// external data of the wrong byte length (`external_bytes`, what the file holds for it),
/// `raw_data` of the wrong length, typed values of the wrong count or in another type's field,
/// or data in two places.
///
/// Source: the onnx checker's `check_tensor` (one value field, in the field of the data type;
/// none beside external data; no STRING in `raw_data`) and onnx.proto's storage rules (one
/// element per typed value, two 4-bit or four 2-bit elements per `int32_data` value or byte,
/// complex numbers as two values), from memory.
pub fn check_data(t: &TensorProto, n: u64, external_bytes: Option<u64>) -> Result<()> {
    let dt = data_type(t)?;
    if dt == DataType::Undefined {
        bail!("data type UNDEFINED is not allowed");
    }
    let typed = [
        ("float_data", t.float_data.len()),
        ("int32_data", t.int32_data.len()),
        ("string_data", t.string_data.len()),
        ("int64_data", t.int64_data.len()),
        ("double_data", t.double_data.len()),
        ("uint64_data", t.uint64_data.len()),
    ];
    let mut present = typed.iter().filter(|(_, len)| *len > 0);
    if external::is_external(t) {
        if let Some((field, _)) = present.next() {
            bail!("data is stored externally but {field} holds values too");
        }
        if t.raw_data.is_some() {
            bail!("data is stored externally but raw_data is set too");
        }
        if let (Some(have), Some(need)) = (external_bytes, stored_len(dt, n).raw_bytes) {
            ensure_len("external data", have, need, "bytes", t)?;
        }
        return Ok(());
    }
    if let Some(raw) = &t.raw_data {
        if dt == DataType::String {
            bail!("STRING data cannot be stored in raw_data");
        }
        if let Some((field, _)) = present.next() {
            bail!("holds values in both raw_data and {field}");
        }
        if let Some(need) = stored_len(dt, n).raw_bytes
            && raw.len() as u64 != need
        {
            bail!(
                "raw_data length {} disagrees with its shape {:?} ({n} elements need {need} bytes)",
                raw.len(),
                t.dims
            );
        }
        return Ok(());
    }
    let Some((field, need)) = stored_len(dt, n).typed else {
        return Ok(());
    };
    if let Some((other, _)) = present.find(|(f, _)| *f != field) {
        bail!(
            "{} values belong in {field}, but {other} holds values",
            dt.as_str_name()
        );
    }
    let have = typed
        .iter()
        .find(|(f, _)| *f == field)
        .map_or(0, |(_, l)| *l);
    ensure_len(field, have as u64, need, "values", t)
}

fn ensure_len(what: &str, have: u64, need: u64, unit: &str, t: &TensorProto) -> Result<()> {
    if have != need {
        bail!(
            "{what} holds {have} {unit} but its shape {:?} needs {need}",
            t.dims
        );
    }
    Ok(())
}

/// How `n` elements of a type are stored: bytes in `raw_data` (or external data) and the typed
/// field with its value count; `None` where the layout is not checked (6-bit floats, strings in
/// raw form).
struct StoredLen {
    raw_bytes: Option<u64>,
    typed: Option<(&'static str, u64)>,
}

fn stored_len(dt: DataType, n: u64) -> StoredLen {
    use DataType::*;
    let per_value = |field, count| StoredLen {
        raw_bytes: element_size(dt).map(|s| n * s as u64),
        typed: Some((field, count)),
    };
    match dt {
        Float => per_value("float_data", n),
        Complex64 => per_value("float_data", 2 * n),
        Double => per_value("double_data", n),
        Complex128 => per_value("double_data", 2 * n),
        Int64 => per_value("int64_data", n),
        Uint32 | Uint64 => per_value("uint64_data", n),
        String => StoredLen {
            raw_bytes: None,
            typed: Some(("string_data", n)),
        },
        Uint4 | Int4 | Float4e2m1 => StoredLen {
            raw_bytes: Some(n.div_ceil(2)),
            typed: Some(("int32_data", n.div_ceil(2))),
        },
        Uint2 | Int2 => StoredLen {
            raw_bytes: Some(n.div_ceil(4)),
            typed: Some(("int32_data", n.div_ceil(4))),
        },
        Float6e2m3 | Float6e3m2 | Undefined => StoredLen {
            raw_bytes: None,
            typed: None,
        },
        _ => per_value("int32_data", n),
    }
}
