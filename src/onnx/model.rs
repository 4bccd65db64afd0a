//! Loading and saving ONNX model files without losing a byte.
//!
//! A model loaded and saved without changes is written back from the very bytes it was read from.
//! A changed model is re-encoded (our schema is complete and field-ordered), and every message
//! it shares with the file it came from keeps that file's bytes, fields this schema does not know
//! (from a newer IR) included; see [`super::unknown`]. Saving goes through a temporary file in the
//! destination folder and a rename, never overwrites the input unless asked, never writes over
//! anything but a regular file, and brings external data along.

use std::collections::BTreeSet;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use bytes::Bytes;
use prost::Message;

use super::external;
use super::proto::{ModelProto, StringStringEntryProto, TensorProto, tensor_proto::DataLocation};
use super::{decode, stream, unknown, walk};
use crate::files::temps::LiveTemp;
use crate::files::{FileAccess, open::kind_of, open_regular};
use crate::text::escape_path;

/// The protobuf limit on one serialized message (2 GiB); larger models need external data.
pub const PROTOBUF_LIMIT: u64 = (1 << 31) - 1;

/// Initializers at least this large move to external data when a model exceeds the limit.
const EXTERNALIZE_MIN_BYTES: usize = 1024;

/// An ONNX model, the file it came from and its original bytes while it is unchanged.
#[derive(Debug, Clone)]
pub struct Model {
    proto: ModelProto,
    original: Option<Bytes>,
    /// The bytes of the file the model (or the model it derives from) was read from.
    source: Option<Bytes>,
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
        let file = open_regular(path, "model")?;
        let len = file.metadata()?.len();
        let bytes = if len == 0 {
            Bytes::new()
        } else {
            // SAFETY: read-only map owned by the Bytes; the input file is never written by us.
            let map = unsafe { memmap2::MmapOptions::new().map(&file) }
                .with_context(|| format!("cannot map '{}'", escape_path(path)))?;
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
            .with_context(|| format!("'{}'", escape_path(path)))
    }

    /// Decodes a model from bytes; `dir` is where its external data lives.
    pub fn from_bytes(bytes: Bytes, path: PathBuf, dir: PathBuf) -> Result<Model> {
        if bytes.is_empty() {
            bail!("the file is empty, not an ONNX model");
        }
        let proto = decode::decode_model(&bytes).map_err(|e| {
            // prost's message for its nesting limit (the protobuf default of 100 levels).
            if e.to_string().contains("recursion limit") {
                anyhow::anyhow!(
                    "the model nests messages (subgraphs, attributes, types) deeper than the 100 levels protobuf decoding allows"
                )
            } else {
                anyhow::anyhow!("not an ONNX model, or a truncated one ({e})")
            }
        })?;
        if proto.graph.is_none() || proto.ir_version.is_none() {
            bail!("not an ONNX model (no ir_version or no graph)");
        }
        Ok(Model {
            proto,
            original: Some(bytes.clone()),
            source: Some(bytes),
            path,
            dir,
        })
    }

    /// Wraps a model built in memory; `dir` is where its external data would live.
    pub fn from_proto(proto: ModelProto, dir: PathBuf) -> Model {
        Model {
            proto,
            original: None,
            source: None,
            path: PathBuf::new(),
            dir,
        }
    }

    /// A changed copy of this model: `proto` replaces its content, and saving it keeps the bytes
    /// of every message it shares with the file this model was read from.
    pub fn with_proto(&self, proto: ModelProto) -> Model {
        Model {
            proto,
            original: None,
            source: self.source.clone(),
            path: PathBuf::new(),
            dir: self.dir.clone(),
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

    /// The serialized model: the original bytes while unchanged, else a fresh encoding of the
    /// fields our schema knows (what a runtime needs).
    pub fn encode(&self) -> Bytes {
        match &self.original {
            Some(b) => b.clone(),
            None => Bytes::from(self.proto.encode_to_vec()),
        }
    }

    /// The model as [`Model::save`] writes it: the original bytes while unchanged, else a fresh
    /// encoding in which every message shared with the source file keeps its bytes, fields
    /// unknown to our schema included. Fails rather than drop an unknown field.
    pub fn encode_lossless(&self) -> Result<Bytes> {
        Ok(self
            .lossless_bytes()?
            .unwrap_or_else(|| Bytes::from(self.proto.encode_to_vec())))
    }

    /// Adds the files this model was read from to `access`: the model file and every external
    /// data file (refusing a location that is not a regular file inside the model's folder).
    pub fn record_reads(&self, access: &mut FileAccess) -> Result<()> {
        if !self.path.as_os_str().is_empty() {
            access.read("the input model", &self.path);
        }
        for location in self.external_locations()? {
            let path = external::resolve(&self.dir, &location)
                .with_context(|| format!("'{}'", escape_path(&self.path)))?;
            access.read("external data of the input model", path);
        }
        Ok(())
    }

    /// Adds the files [`Model::save`] to `out` may write to `access`: `out`, the external data
    /// file of an oversized model (`<out>.data`) and the copies of external data beside `out`.
    pub fn record_writes(&self, out: &Path, access: &mut FileAccess) -> Result<()> {
        access.write("the converted model", out);
        let out_dir = parent_dir(out);
        access.write(
            "the external data of the converted model",
            out_dir.join(external_data_name(out)),
        );
        if !same_file(&self.dir, &out_dir) {
            for location in self.external_locations()? {
                access.write(
                    "the copy of the input's external data",
                    out_dir.join(&location),
                );
            }
        }
        Ok(())
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
        let out_dir = parent_dir(out);
        if !self.path.as_os_str().is_empty() && same_file(&self.path, out) && !opts.overwrite_input
        {
            bail!(
                "output '{}' is the input model; refusing to overwrite it",
                escape_path(out)
            );
        }
        if self.proto.encoded_len() as u64 > opts.proto_limit {
            let data_name = external_data_name(out);
            let bytes = self.save_externalized(&out_dir, &data_name, opts)?;
            return write_atomic(out, &bytes);
        }
        let kept = self.lossless_bytes()?;
        self.copy_external_data(&out_dir)?;
        match kept {
            Some(bytes) => write_atomic(out, &bytes),
            // Nothing to keep beyond what the schema knows: encoded straight into the file.
            None => write_atomic_with(out, |w| stream::encode_into(&self.proto, w)),
        }
    }

    /// The bytes [`Model::encode_lossless`] gives when they differ from a plain encoding of the
    /// model (the original bytes, or a source's unknown fields kept); `None` otherwise.
    fn lossless_bytes(&self) -> Result<Option<Bytes>> {
        match (&self.original, &self.source) {
            (Some(b), _) => Ok(Some(b.clone())),
            (None, Some(source)) if unknown::has_unknown_fields(source) => {
                unknown::encode_keeping(source, &self.proto).map(Some)
            }
            _ => Ok(None),
        }
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
            let mut data = Vec::new();
            open_regular(&src, "external data file")?
                .read_to_end(&mut data)
                .with_context(|| {
                    format!(
                        "cannot read external data '{}'",
                        crate::text::escape(&location)
                    )
                })?;
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
        if self
            .source
            .as_ref()
            .is_some_and(|s| unknown::has_unknown_fields(s))
        {
            bail!(
                "the converted model needs its initializers in external data, and its source holds fields this version of actswap does not know; they would be lost, so it is not written"
            );
        }
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

/// The folder a file path lies in (`.` for a bare name).
fn parent_dir(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// Writes `bytes` to a temporary file beside `path`, flushes it, then renames it into place.
/// Refuses to replace anything but a regular file (a FIFO, a device node or a folder stays).
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    write_atomic_with(path, |w| w.write_all(bytes))
}

/// [`write_atomic`] of what `write` writes through a buffered writer.
fn write_atomic_with(
    path: &Path,
    write: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
) -> Result<()> {
    if let Ok(meta) = std::fs::metadata(path)
        && !meta.is_file()
    {
        bail!(
            "refusing to write '{}': it is {}, not a regular file",
            escape_path(path),
            kind_of(&meta)
        );
    }
    let mut tmp = LiveTemp::new_in(&parent_dir(path))?;
    tmp.write_with(write)
        .with_context(|| format!("cannot write '{}'", escape_path(path)))?;
    tmp.persist(path)
        .with_context(|| format!("cannot write '{}'", escape_path(path)))
}
