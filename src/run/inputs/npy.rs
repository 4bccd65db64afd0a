//! NumPy `.npy` and `.npz` files as tensors, in the file's own element type.
//!
//! Read with ndarray-npy, except float16 `.npy` data, which that crate has no element type for:
//! its header is read with ndarray-npy and its little- or big-endian payload decoded here.

use std::fs::File;
use std::io::{BufReader, Read};
use std::path::Path;

use ndarray::{ArrayD, IxDyn, ShapeBuilder};
use ndarray_npy::npy::header::{Header, Layout};
use ndarray_npy::{NpzReader, ReadNpyError, ReadNpyExt, ReadNpzError, ReadableElement};
use tract_onnx::prelude::{Datum, Tensor, f16};

use super::super::{NamedTensor, RunError};
use super::proto::check_file_size;

/// Reads a `.npy` file, checking the element count in its header before reading the data.
pub(super) fn read_npy(path: &Path, max_elements: usize) -> Result<Tensor, RunError> {
    let fail = |m: &dyn std::fmt::Display| RunError::file(path, m);
    let mut reader = BufReader::new(File::open(path).map_err(|e| fail(&e))?);
    let header = Header::from_reader(&mut reader).map_err(|e| fail(&e))?;
    let elements: u128 = header.shape.iter().map(|&d| d as u128).product();
    if elements > max_elements as u128 {
        return Err(RunError::OverLimit {
            name: path.display().to_string(),
            elements,
            limit: max_elements,
        });
    }
    let descr = descriptor(&header.type_descriptor.to_string());
    if descr.ends_with("f2") {
        return read_f16_payload(reader, &header, &descr).map_err(|e| fail(&e));
    }
    let mut from_npy = NpyFile { path };
    read_as(&descr, &mut from_npy)?
        .ok_or_else(|| fail(&format!("unsupported element type '{descr}'")))
}

/// Reads every array of an uncompressed `.npz` archive, named as in the archive.
pub(super) fn read_npz(path: &Path, max_elements: usize) -> Result<Vec<NamedTensor>, RunError> {
    let fail = |m: &dyn std::fmt::Display| RunError::file(path, m);
    check_file_size(path, max_elements)?;
    let mut npz = NpzReader::new(File::open(path).map_err(|e| fail(&e))?)
        .map_err(|e| fail(&npz_message(&e)))?;
    let names = npz.names().map_err(|e| fail(&npz_message(&e)))?;
    let mut tensors = Vec::with_capacity(names.len());
    for name in names {
        let mut entry = NpzEntry {
            npz: &mut npz,
            name: &name,
            path,
        };
        // Try f32 first; a wrong guess reports the actual descriptor.
        let tensor = match entry.read::<f32>() {
            Ok(t) => t,
            Err(EntryError::WrongType(descr)) => {
                let descr = descriptor(&descr);
                read_as(&descr, &mut entry)?.ok_or_else(|| {
                    fail(&format!("array '{name}': unsupported element type '{descr}' (float16 needs a .npy or .pb file)"))
                })?
            }
            Err(EntryError::Run(e)) => return Err(e),
        };
        let elements = tensor.len();
        if elements > max_elements {
            return Err(RunError::OverLimit {
                name: name.clone(),
                elements: elements as u128,
                limit: max_elements,
            });
        }
        tensors.push(NamedTensor::new(name, tensor));
    }
    Ok(tensors)
}

/// A source that can read its array as a given element type.
trait TypedSource {
    fn read<T: ReadableElement + Datum>(&mut self) -> Result<Tensor, EntryError>;
}

enum EntryError {
    WrongType(String),
    Run(RunError),
}

impl From<EntryError> for RunError {
    fn from(e: EntryError) -> RunError {
        match e {
            EntryError::WrongType(d) => RunError::BadArgument {
                text: d,
                reason: "unexpected element type".into(),
            },
            EntryError::Run(e) => e,
        }
    }
}

/// Reads with the element type named by the descriptor `descr` (byte order stripped), or `None`
/// for a type without a reader.
fn read_as(descr: &str, source: &mut impl TypedSource) -> Result<Option<Tensor>, RunError> {
    let kind = descr.trim_start_matches(['<', '>', '|', '=']);
    Ok(Some(match kind {
        "f4" => source.read::<f32>()?,
        "f8" => source.read::<f64>()?,
        "i1" => source.read::<i8>()?,
        "i2" => source.read::<i16>()?,
        "i4" => source.read::<i32>()?,
        "i8" => source.read::<i64>()?,
        "u1" => source.read::<u8>()?,
        "u2" => source.read::<u16>()?,
        "u4" => source.read::<u32>()?,
        "u8" => source.read::<u64>()?,
        "b1" => source.read::<bool>()?,
        _ => return Ok(None),
    }))
}

struct NpyFile<'a> {
    path: &'a Path,
}

impl TypedSource for NpyFile<'_> {
    fn read<T: ReadableElement + Datum>(&mut self) -> Result<Tensor, EntryError> {
        let fail = |m: &dyn std::fmt::Display| EntryError::Run(RunError::file(self.path, m));
        let file = File::open(self.path).map_err(|e| fail(&e))?;
        let array = ArrayD::<T>::read_npy(BufReader::new(file)).map_err(|e| match e {
            ReadNpyError::WrongDescriptor(d) => EntryError::WrongType(d.to_string()),
            e => fail(&e),
        })?;
        Ok(standard(array))
    }
}

struct NpzEntry<'a, 'b> {
    npz: &'b mut NpzReader<File>,
    name: &'a str,
    path: &'a Path,
}

impl TypedSource for NpzEntry<'_, '_> {
    fn read<T: ReadableElement + Datum>(&mut self) -> Result<Tensor, EntryError> {
        match self.npz.by_name::<ndarray::OwnedRepr<T>, IxDyn>(self.name) {
            Ok(array) => Ok(standard(array)),
            Err(ReadNpzError::Npy(ReadNpyError::WrongDescriptor(d))) => {
                Err(EntryError::WrongType(d.to_string()))
            }
            Err(e) => Err(EntryError::Run(RunError::file(
                self.path,
                format!("array '{}': {}", self.name, npz_message(&e)),
            ))),
        }
    }
}

/// A tensor from an array in any memory order.
fn standard<T: Datum>(array: ArrayD<T>) -> Tensor {
    if array.is_standard_layout() {
        Tensor::from(array)
    } else {
        Tensor::from(array.as_standard_layout().into_owned())
    }
}

/// A float16 payload following an already-read header.
fn read_f16_payload(mut reader: impl Read, header: &Header, descr: &str) -> Result<Tensor, String> {
    let count: usize = header.shape.iter().product();
    let mut bytes = Vec::new();
    reader.read_to_end(&mut bytes).map_err(|e| e.to_string())?;
    if bytes.len() != count * 2 {
        return Err(format!(
            "float16 data holds {} bytes, the header needs {}",
            bytes.len(),
            count * 2
        ));
    }
    let big_endian = descr.starts_with('>');
    let values: Vec<f16> = bytes
        .chunks_exact(2)
        .map(|b| {
            let pair = [b[0], b[1]];
            f16::from_bits(if big_endian {
                u16::from_be_bytes(pair)
            } else {
                u16::from_le_bytes(pair)
            })
        })
        .collect();
    let shape = header.shape.clone();
    let array = match header.layout {
        Layout::Standard => ArrayD::from_shape_vec(IxDyn(&shape), values),
        Layout::Fortran => ArrayD::from_shape_vec(IxDyn(&shape).f(), values),
    }
    .map_err(|e| e.to_string())?;
    Ok(standard(array))
}

/// The descriptor text without the quotes of its Python literal form.
fn descriptor(literal: &str) -> String {
    literal.trim_matches(|c| c == '\'' || c == '"').to_string()
}

/// An npz error, with a hint for compressed archives.
fn npz_message(e: &ReadNpzError) -> String {
    let text = e.to_string();
    if text.to_ascii_lowercase().contains("compression method") {
        format!("{text} (compressed archives are not supported: write them with numpy.savez)")
    } else {
        text
    }
}
