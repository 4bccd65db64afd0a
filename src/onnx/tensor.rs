//! Numeric values of TensorProto, in every storage form the standard allows: little-endian
//! `raw_data`, the typed fields (`float_data`, `int32_data` holding 16-bit floats as bits, ...),
//! and external data.

use std::path::Path;

use anyhow::{Context, Result, bail};
use bytes::Bytes;

use super::external;
use super::proto::{TensorProto, tensor_proto::DataType};

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
    DataType::try_from(code).map_err(|_| {
        anyhow::anyhow!(
            "tensor '{}' has unknown data type {code}",
            t.name.as_deref().unwrap_or("")
        )
    })
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
    let name = t.name.as_deref().unwrap_or("");
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
    let name = t.name.as_deref().unwrap_or("");
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
