//! External tensor data (`data_location = EXTERNAL`): safe resolution of `location` against the
//! model's folder, and reading the referenced bytes.
//!
//! A location must name a regular file inside the model's folder. Source: the onnx checker's
//! `resolve_external_data_location` refuses an empty, absolute or `..` location and one that is
//! not a regular file (from memory); we also refuse a symbolic link that leads outside.

use std::path::{Component, Path, PathBuf};

use anyhow::{Context, Result, bail};
use bytes::Bytes;

use super::proto::{TensorProto, tensor_proto::DataLocation};
use crate::files::{open::kind_of, open_regular};
use crate::text::escape;

/// Where a tensor's bytes live when they are outside the model file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ExternalRef {
    /// `location` exactly as written in the model.
    pub location: String,
    pub offset: u64,
    /// `None` means "to the end of the file".
    pub length: Option<u64>,
}

/// True when the tensor stores its data in an external file.
pub fn is_external(t: &TensorProto) -> bool {
    t.data_location == Some(DataLocation::External as i32)
}

/// Reads the `external_data` key/value entries of a tensor.
pub fn external_ref(t: &TensorProto) -> Result<ExternalRef> {
    let name = escape(t.name());
    let mut location = None;
    let mut offset = 0;
    let mut length = None;
    for entry in &t.external_data {
        let value = entry.value.as_deref().unwrap_or("");
        let shown = escape(value);
        match entry.key.as_deref().unwrap_or("") {
            "location" => location = Some(value.to_string()),
            "offset" => {
                offset = value.parse().with_context(|| {
                    format!("tensor '{name}': external data offset '{shown}' is not a number")
                })?
            }
            "length" => {
                length = Some(value.parse().with_context(|| {
                    format!("tensor '{name}': external data length '{shown}' is not a number")
                })?)
            }
            _ => {}
        }
    }
    let Some(location) = location else {
        bail!("tensor '{name}': external data has no location");
    };
    Ok(ExternalRef {
        location,
        offset,
        length,
    })
}

/// Resolves `location` inside `model_dir`, refusing an empty location, absolute paths, locations
/// that climb out of the folder with `..`, symbolic links that lead outside it, and anything but
/// a regular file (a folder, a FIFO, a device).
pub fn resolve(model_dir: &Path, location: &str) -> Result<PathBuf> {
    let shown = escape(location);
    let rel = Path::new(location);
    if rel.is_absolute() || location.starts_with('/') || location.starts_with('\\') {
        bail!(
            "external data location '{shown}' is an absolute path; it must be relative to the model's folder"
        );
    }
    let mut depth = 0usize;
    for c in rel.components() {
        match c {
            Component::Normal(_) => depth += 1,
            Component::CurDir => {}
            Component::ParentDir if depth > 0 => depth -= 1,
            _ => bail!("external data location '{shown}' escapes the model's folder"),
        }
    }
    if depth == 0 {
        bail!(
            "external data location '{shown}' names no file; it must be a file in the model's folder"
        );
    }
    let joined = model_dir.join(rel);
    let real = joined.canonicalize().with_context(|| {
        format!("external data file '{shown}' (next to the model) cannot be opened")
    })?;
    let root = model_dir.canonicalize().with_context(|| {
        format!(
            "model folder '{}' cannot be opened",
            crate::text::escape_path(model_dir)
        )
    })?;
    if !real.starts_with(&root) {
        bail!(
            "external data location '{shown}' escapes the model's folder through a symbolic link"
        );
    }
    let meta = std::fs::metadata(&real)
        .with_context(|| format!("external data file '{shown}' cannot be opened"))?;
    if !meta.is_file() {
        bail!(
            "external data location '{shown}' is {}, not a regular file",
            kind_of(&meta)
        );
    }
    Ok(real)
}

/// The size of an external tensor's data as its entries and the file say, checked against the
/// file: its `length`, or what lies from `offset` to the end of the file.
pub fn stored_len(model_dir: &Path, t: &TensorProto) -> Result<u64> {
    let r = external_ref(t)?;
    let path = resolve(model_dir, &r.location)?;
    let size = std::fs::metadata(&path)
        .with_context(|| {
            format!(
                "external data file '{}' cannot be opened",
                escape(&r.location)
            )
        })?
        .len();
    range(t, &r, size).map(|(start, end)| end - start)
}

/// Reads the bytes an external tensor refers to, checking offset and length against the file.
pub fn read(model_dir: &Path, t: &TensorProto) -> Result<Bytes> {
    let r = external_ref(t)?;
    let path = resolve(model_dir, &r.location)?;
    let file = open_regular(&path, "external data file")?;
    let size = file.metadata()?.len();
    let (start, end) = range(t, &r, size)?;
    if end == start {
        return Ok(Bytes::new());
    }
    // SAFETY: the map is read-only and owned by the returned Bytes; a file truncated by
    // another process while mapped is outside what this tool defends against.
    let map = unsafe { memmap2::MmapOptions::new().map(&file) }.with_context(|| {
        format!(
            "external data file '{}' cannot be mapped",
            escape(&r.location)
        )
    })?;
    Ok(Bytes::from_owner(map).slice(start as usize..end as usize))
}

/// The byte range `[offset, offset + length)` of a file of `size` bytes, refused when it does
/// not fit.
fn range(t: &TensorProto, r: &ExternalRef, size: u64) -> Result<(u64, u64)> {
    let end = match r.length {
        Some(len) => r.offset.checked_add(len),
        None => Some(size),
    };
    match end {
        Some(end) if end <= size && r.offset <= end => Ok((r.offset, end)),
        _ => bail!(
            "tensor '{}': external data [{}, +{}) lies outside '{}' ({size} bytes)",
            escape(t.name()),
            r.offset,
            r.length.map_or("end".to_string(), |l| l.to_string()),
            escape(&r.location)
        ),
    }
}
