//! Loading and saving ONNX model files without losing a byte.
//!
//! A model loaded and saved without changes is written back from the very bytes it was read from;
//! a changed model is re-encoded (our schema is complete and field-ordered, so every untouched
//! message keeps its bytes). Saving goes through a temporary file in the destination folder and a
//! rename, never overwrites the input unless asked, and brings external data along.

use std::collections::BTreeSet;
use std::fs::File;
use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use bytes::Bytes;
use prost::Message;

use super::external;
use super::proto::{ModelProto, StringStringEntryProto, TensorProto, tensor_proto::DataLocation};
use super::walk;

/// The protobuf limit on one serialized message (2 GiB); larger models need external data.
pub const PROTOBUF_LIMIT: u64 = (1 << 31) - 1;

/// Initializers at least this large move to external data when a model exceeds the limit.
const EXTERNALIZE_MIN_BYTES: usize = 1024;

/// An ONNX model, the file it came from and its original bytes while it is unchanged.
#[derive(Debug, Clone)]
pub struct Model {
    proto: ModelProto,
    original: Option<Bytes>,
    path: PathBuf,
    dir: PathBuf,
}

/// How [`Model::save`] may write.
#[derive(Debug, Clone)]
pub struct SaveOptions {
    /// Allow the output to replace the model's own input file.
    pub overwrite_input: bool,
    /// Serialized size above which initializers move to an external data file.
    pub proto_limit: u64,
}

impl Default for SaveOptions {
    fn default() -> Self {
        SaveOptions {
            overwrite_input: false,
            proto_limit: PROTOBUF_LIMIT,
        }
    }
}

impl Model {
    /// Memory-maps and decodes a model file.
    pub fn load(path: &Path) -> Result<Model> {
        let file = File::open(path).with_context(|| format!("cannot open '{}'", path.display()))?;
        let len = file.metadata()?.len();
        let bytes = if len == 0 {
            Bytes::new()
        } else {
            // SAFETY: read-only map owned by the Bytes; the input file is never written by us.
            let map = unsafe { memmap2::MmapOptions::new().map(&file) }
                .with_context(|| format!("cannot map '{}'", path.display()))?;
            Bytes::from_owner(map)
        };
        let dir = path
            .parent()
            .map(|p| {
                if p.as_os_str().is_empty() {
                    Path::new(".")
                } else {
                    p
                }
            })
            .unwrap_or(Path::new("."))
            .to_path_buf();
        Model::from_bytes(bytes, path.to_path_buf(), dir)
            .with_context(|| format!("'{}'", path.display()))
    }

    /// Decodes a model from bytes; `dir` is where its external data lives.
    pub fn from_bytes(bytes: Bytes, path: PathBuf, dir: PathBuf) -> Result<Model> {
        if bytes.is_empty() {
            bail!("the file is empty, not an ONNX model");
        }
        let proto = ModelProto::decode(bytes.clone())
            .map_err(|e| anyhow::anyhow!("not an ONNX model, or a truncated one ({e})"))?;
        if proto.graph.is_none() || proto.ir_version.is_none() {
            bail!("not an ONNX model (no ir_version or no graph)");
        }
        Ok(Model {
            proto,
            original: Some(bytes),
            path,
            dir,
        })
    }

    /// Wraps a model built in memory; `dir` is where its external data would live.
    pub fn from_proto(proto: ModelProto, dir: PathBuf) -> Model {
        Model {
            proto,
            original: None,
            path: PathBuf::new(),
            dir,
        }
    }

    pub fn proto(&self) -> &ModelProto {
        &self.proto
    }

    /// Mutable access; the model is re-encoded when saved from now on.
    pub fn proto_mut(&mut self) -> &mut ModelProto {
        self.original = None;
        &mut self.proto
    }

    /// The file the model was loaded from (empty for models built in memory).
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The folder external data locations are relative to.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// The serialized model: the original bytes while unchanged, else a fresh encoding.
    pub fn encode(&self) -> Bytes {
        match &self.original {
            Some(b) => b.clone(),
            None => Bytes::from(self.proto.encode_to_vec()),
        }
    }

    /// Every distinct external data location the model refers to.
    pub fn external_locations(&self) -> Result<BTreeSet<String>> {
        let mut out = BTreeSet::new();
        let mut err = None;
        walk::tensors(&self.proto, &mut |t| {
            if external::is_external(t) {
                match external::external_ref(t) {
                    Ok(r) => {
                        out.insert(r.location);
                    }
                    Err(e) => err = err.take().or(Some(e)),
                }
            }
        });
        match err {
            Some(e) => Err(e),
            None => Ok(out),
        }
    }

    /// Writes the model to `out` atomically, with its external data beside it.
    pub fn save(&self, out: &Path, opts: &SaveOptions) -> Result<()> {
        let out_dir = match out.parent() {
            Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
            _ => PathBuf::from("."),
        };
        if !self.path.as_os_str().is_empty() && same_file(&self.path, out) && !opts.overwrite_input
        {
            bail!(
                "output '{}' is the input model; refusing to overwrite it",
                out.display()
            );
        }
        let mut encoded_model = None;
        if self.proto.encoded_len() as u64 > opts.proto_limit {
            let data_name = external_data_name(out);
            encoded_model = Some(self.save_externalized(&out_dir, &data_name, opts)?);
        } else {
            self.copy_external_data(&out_dir)?;
        }
        let bytes = encoded_model.unwrap_or_else(|| self.encode());
        write_atomic(out, &bytes)
    }

    /// Copies every external data file to `out_dir` unless it already is the model's folder.
    fn copy_external_data(&self, out_dir: &Path) -> Result<()> {
        let locations = self.external_locations()?;
        if locations.is_empty() || same_file(&self.dir, out_dir) {
            return Ok(());
        }
        for location in locations {
            let src = external::resolve(&self.dir, &location)?;
            let dst = out_dir.join(&location);
            if let Some(parent) = dst.parent() {
                std::fs::create_dir_all(parent)
                    .with_context(|| format!("cannot create '{}'", parent.display()))?;
            }
            let data = std::fs::read(&src)
                .with_context(|| format!("cannot read external data '{location}'"))?;
            write_atomic(&dst, &data)?;
        }
        Ok(())
    }

    /// Moves large in-file initializers into one data file so the model fits the protobuf limit;
    /// returns the encoded model that refers to it.
    fn save_externalized(
        &self,
        out_dir: &Path,
        data_name: &str,
        opts: &SaveOptions,
    ) -> Result<Bytes> {
        self.copy_external_data(out_dir)?;
        let mut proto = self.proto.clone();
        let mut data: Vec<u8> = Vec::new();
        walk::tensors_mut(&mut proto, &mut |t: &mut TensorProto| {
            let Some(raw) = t.raw_data.clone() else {
                return;
            };
            if external::is_external(t) || raw.len() < EXTERNALIZE_MIN_BYTES {
                return;
            }
            let offset = data.len().next_multiple_of(4096);
            data.resize(offset, 0);
            data.extend_from_slice(&raw);
            t.raw_data = None;
            t.data_location = Some(DataLocation::External as i32);
            t.external_data = [
                ("location", data_name.to_string()),
                ("offset", offset.to_string()),
                ("length", raw.len().to_string()),
            ]
            .into_iter()
            .map(|(k, v)| StringStringEntryProto {
                key: Some(k.into()),
                value: Some(v),
            })
            .collect();
        });
        if proto.encoded_len() as u64 > opts.proto_limit {
            bail!(
                "the model stays above the protobuf size limit even with its initializers in external data"
            );
        }
        write_atomic(&out_dir.join(data_name), &data)?;
        Ok(Bytes::from(proto.encode_to_vec()))
    }
}

/// `model.onnx` -> `model.onnx.data`.
fn external_data_name(out: &Path) -> String {
    let name = out
        .file_name()
        .map_or("model.onnx".into(), |n| n.to_string_lossy().into_owned());
    format!("{name}.data")
}

/// True when both paths name the same existing file or folder.
fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(a), Ok(b)) => a == b,
        _ => false,
    }
}

/// Writes `bytes` to a temporary file beside `path`, flushes it, then renames it into place.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let dir = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let mut tmp = tempfile::Builder::new()
        .prefix(".actswap-")
        .tempfile_in(dir)
        .with_context(|| format!("cannot create a temporary file in '{}'", dir.display()))?;
    // tempfile creates files readable by their owner only; a model is an ordinary file.
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        tmp.as_file()
            .set_permissions(std::fs::Permissions::from_mode(0o644))
            .with_context(|| format!("cannot write '{}'", path.display()))?;
    }
    tmp.write_all(bytes)
        .and_then(|_| tmp.as_file().sync_all())
        .with_context(|| format!("cannot write '{}'", path.display()))?;
    tmp.persist(path)
        .map_err(|e| e.error)
        .with_context(|| format!("cannot write '{}'", path.display()))?;
    Ok(())
}
