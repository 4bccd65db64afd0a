//! External tensor data (`data_location = EXTERNAL`): safe resolution of `location` against the
//! model's folder, and reading the referenced bytes.

use std::fs::File;
use std::path::{Component, Path, PathBuf};

use anyhow::{Context, Result, bail};
use bytes::Bytes;

use super::proto::{TensorProto, tensor_proto::DataLocation};

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
    let name = t.name.as_deref().unwrap_or("");
    let mut location = None;
    let mut offset = 0;
    let mut length = None;
    for entry in &t.external_data {
        let value = entry.value.as_deref().unwrap_or("");
        match entry.key.as_deref().unwrap_or("") {
            "location" => location = Some(value.to_string()),
            "offset" => {
                offset = value.parse().with_context(|| {
                    format!("tensor '{name}': external data offset '{value}' is not a number")
                })?
            }
            "length" => {
                length = Some(value.parse().with_context(|| {
                    format!("tensor '{name}': external data length '{value}' is not a number")
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

/// Resolves `location` inside `model_dir`, refusing absolute paths, locations that climb out of
/// the folder with `..`, and symbolic links that lead outside it.
pub fn resolve(model_dir: &Path, location: &str) -> Result<PathBuf> {
    let rel = Path::new(location);
    if rel.is_absolute() || location.starts_with('/') || location.starts_with('\\') {
        bail!(
            "external data location '{location}' is an absolute path; it must be relative to the model's folder"
        );
    }
    let mut depth = 0usize;
    for c in rel.components() {
        match c {
            Component::Normal(_) => depth += 1,
            Component::CurDir => {}
            Component::ParentDir if depth > 0 => depth -= 1,
            _ => bail!("external data location '{location}' escapes the model's folder"),
        }
    }
    let joined = model_dir.join(rel);
    let real = joined.canonicalize().with_context(|| {
        format!("external data file '{location}' (next to the model) cannot be opened")
    })?;
    let root = model_dir
        .canonicalize()
        .with_context(|| format!("model folder '{}' cannot be opened", model_dir.display()))?;
    if !real.starts_with(&root) {
        bail!(
            "external data location '{location}' escapes the model's folder through a symbolic link"
        );
    }
    Ok(real)
}

/// Reads the bytes an external tensor refers to, checking offset and length against the file.
pub fn read(model_dir: &Path, t: &TensorProto) -> Result<Bytes> {
    let r = external_ref(t)?;
    let path = resolve(model_dir, &r.location)?;
    let file = File::open(&path)
        .with_context(|| format!("external data file '{}' cannot be opened", r.location))?;
    let size = file.metadata()?.len();
    let end = match r.length {
        Some(len) => r.offset.checked_add(len),
        None => Some(size),
    };
    match end {
        Some(end) if end <= size && r.offset <= end => {
            if end == r.offset {
                return Ok(Bytes::new());
            }
            // SAFETY: the map is read-only and owned by the returned Bytes; a file truncated by
            // another process while mapped is outside what this tool defends against.
            let map = unsafe { memmap2::MmapOptions::new().map(&file) }
                .with_context(|| format!("external data file '{}' cannot be mapped", r.location))?;
            Ok(Bytes::from_owner(map).slice(r.offset as usize..end as usize))
        }
        _ => bail!(
            "tensor '{}': external data [{}, +{}) lies outside '{}' ({size} bytes)",
            t.name.as_deref().unwrap_or(""),
            r.offset,
            r.length.map_or("end".to_string(), |l| l.to_string()),
            r.location
        ),
    }
}
