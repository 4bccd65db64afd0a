//! Input samples for a model run, from files or seeded random data.
//!
//! A *sample* is one tensor per model input; a run audits one or more samples.
//!
//! # Files: `NAME=FILE` bindings
//! - `NAME=a.npy`: a NumPy array for input `NAME`.
//! - `NAME=a.pb`: a serialized ONNX `TensorProto` for input `NAME`.
//! - `NAME=a.npz`: the archive's array named `NAME`, or its only array.
//! - `a.npz` (no name): every array of the archive, each for the input it is named after.
//! - `a.pb` (no name): the tensor for the input named by the proto's own `name` field.
//!
//! Several samples: bind an input again. The k-th tensor given for each input forms sample k; an
//! input given once is shared by every sample; any other count is an error.
//!
//! # Folders
//! - A folder of `test_data_set_N` subfolders (the ONNX conformance layout) gives one sample per
//!   subfolder, in order of N.
//! - A folder holding `input_K.pb` / `input_K.npy` files is one sample: file K feeds the K-th
//!   model input (graph inputs that are not initializers, in graph order).
//! - A folder of numbered archives (`N.npz`, `STEM_N.npz`) gives one sample per archive, in order
//!   of N.
//!
//! # Random
//! [`RandomInputs`]: `samples` samples drawn from one generator seeded with `seed`, filling the
//! inputs in model order, sample after sample (so sample 0 is the same whatever `samples` is).
//! Float inputs get draws from the distribution rounded to the input's type; integer inputs get
//! rounded draws clamped to the type (uniform: integers in `[ceil(low), floor(high)]`); booleans
//! are fair coin flips. Symbolic dims take sizes from `dims` (`NAME=SIZE`, see [`parse_dim_size`]);
//! every named dim must be set, and every set name must be a dim of some input. The generator is
//! rand's `StdRng`: reproducible for a given build, not promised across rand versions.
//!
//! # Limits
//! Every tensor is checked against an element-count limit ([`DEFAULT_MAX_ELEMENTS`] unless set)
//! before its data is allocated: from the `.npy` header, the `TensorProto` dims or the resolved
//! random shape. `.pb` and `.npz` files larger than the limit allows for 8-byte elements are
//! refused before they are read. `.npz` archives must be stored uncompressed (`numpy.savez`).

mod folder;
mod npy;
mod proto;
mod random;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::signature::bind;
use super::{InputSpec, NamedTensor, RunError, Sample, Tensor};

pub use random::{Distribution, RandomInputs, symbolic_dims};

/// Default element-count limit per tensor: 64 Mi elements (256 MiB of f32).
pub const DEFAULT_MAX_ELEMENTS: usize = 64 << 20;

/// One `NAME=FILE` or bare `FILE` argument.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Binding {
    /// The input name, if given.
    pub input: Option<String>,
    /// The file.
    pub path: PathBuf,
}

impl Binding {
    /// Parses `NAME=FILE` or `FILE`. The name is everything before the first `=` when the part
    /// after it is non-empty and the whole text is not itself an existing file.
    pub fn parse(text: &str) -> Result<Binding, RunError> {
        let bad = |reason: &str| RunError::BadArgument {
            text: text.to_string(),
            reason: reason.to_string(),
        };
        if text.is_empty() {
            return Err(bad("empty"));
        }
        match text.split_once('=') {
            Some((name, file)) if !Path::new(text).exists() => {
                if name.is_empty() || file.is_empty() {
                    return Err(bad("expected NAME=FILE"));
                }
                Ok(Binding {
                    input: Some(name.to_string()),
                    path: PathBuf::from(file),
                })
            }
            _ => Ok(Binding {
                input: None,
                path: PathBuf::from(text),
            }),
        }
    }
}

/// Parses `NAME=SIZE` for a symbolic dim.
pub fn parse_dim_size(text: &str) -> Result<(String, usize), RunError> {
    let bad = |reason: &str| RunError::BadArgument {
        text: text.to_string(),
        reason: reason.to_string(),
    };
    let (name, size) = text
        .split_once('=')
        .ok_or_else(|| bad("expected NAME=SIZE"))?;
    if name.is_empty() {
        return Err(bad("empty dimension name"));
    }
    let size = size
        .trim()
        .parse::<usize>()
        .map_err(|_| bad("SIZE must be a non-negative integer"))?;
    Ok((name.to_string(), size))
}

/// Reads one tensor from a `.npy` or `.pb` (ONNX `TensorProto`) file, refusing more than
/// `max_elements` elements. Also reads expected outputs of conformance cases.
pub fn read_tensor_file(path: &Path, max_elements: usize) -> Result<Tensor, RunError> {
    match extension(path).as_str() {
        "npy" => npy::read_npy(path, max_elements),
        "pb" => proto::read_pb(path, max_elements).map(|t| t.tensor),
        _ => Err(RunError::file(path, "expected a .npy or .pb file")),
    }
}

/// Builds samples for a model's inputs, checking each tensor against what the model declares.
#[derive(Debug, Clone)]
pub struct InputLoader<'m> {
    inputs: &'m [InputSpec],
    max_elements: usize,
}

impl<'m> InputLoader<'m> {
    /// A loader for `inputs` (see [`super::TractModel::inputs`]) with the default limit.
    pub fn new(inputs: &'m [InputSpec]) -> Self {
        InputLoader {
            inputs,
            max_elements: DEFAULT_MAX_ELEMENTS,
        }
    }

    /// Sets the per-tensor element-count limit.
    pub fn with_max_elements(self, max_elements: usize) -> Self {
        InputLoader {
            max_elements,
            ..self
        }
    }

    /// Samples from `NAME=FILE` / `FILE` bindings (see the module doc).
    pub fn from_bindings(&self, bindings: &[Binding]) -> Result<Vec<Sample>, RunError> {
        let mut given: BTreeMap<String, Vec<Tensor>> = BTreeMap::new();
        for binding in bindings {
            for named in self.read_binding(binding)? {
                self.spec(&named.name)?;
                given.entry(named.name).or_default().push(named.tensor);
            }
        }
        self.assemble(given)
    }

    /// Samples from a folder (see the module doc).
    pub fn from_folder(&self, dir: &Path) -> Result<Vec<Sample>, RunError> {
        match folder::layout(dir)? {
            folder::Layout::DataSets(sets) => {
                sets.iter().map(|set| self.sample_folder(set)).collect()
            }
            folder::Layout::Sample => Ok(vec![self.sample_folder(dir)?]),
            folder::Layout::Archives(archives) => archives
                .iter()
                .map(|path| {
                    let tensors = npy::read_npz(path, self.max_elements)?;
                    self.checked(tensors)
                })
                .collect(),
        }
    }

    /// Seeded random samples (see the module doc).
    pub fn random(&self, spec: &RandomInputs) -> Result<Vec<Sample>, RunError> {
        random::generate(self.inputs, spec, self.max_elements)
    }

    fn read_binding(&self, binding: &Binding) -> Result<Vec<NamedTensor>, RunError> {
        let path = &binding.path;
        let limit = self.max_elements;
        match (extension(path).as_str(), &binding.input) {
            ("npy", Some(name)) => Ok(vec![NamedTensor::new(name, npy::read_npy(path, limit)?)]),
            ("npy", None) => Err(RunError::file(
                path,
                "a .npy file needs an input name: NAME=FILE",
            )),
            ("pb", Some(name)) => Ok(vec![NamedTensor::new(
                name,
                proto::read_pb(path, limit)?.tensor,
            )]),
            ("pb", None) => {
                let named = proto::read_pb(path, limit)?;
                if named.name.is_empty() {
                    return Err(RunError::file(
                        path,
                        "the tensor has no name; use NAME=FILE",
                    ));
                }
                Ok(vec![named])
            }
            ("npz", None) => npy::read_npz(path, limit),
            ("npz", Some(name)) => {
                let mut arrays = npy::read_npz(path, limit)?;
                let found = match arrays.iter().position(|a| &a.name == name) {
                    Some(ix) => arrays.swap_remove(ix),
                    None if arrays.len() == 1 => arrays.remove(0),
                    None => {
                        return Err(RunError::file(
                            path,
                            format!("no array named '{name}' in the archive"),
                        ));
                    }
                };
                Ok(vec![NamedTensor::new(name, found.tensor)])
            }
            _ => Err(RunError::file(path, "expected a .npy, .npz or .pb file")),
        }
    }

    /// One sample from a folder of `input_K.pb` / `input_K.npy` files.
    fn sample_folder(&self, dir: &Path) -> Result<Sample, RunError> {
        let files = folder::input_files(dir)?;
        let tensors = files
            .into_iter()
            .map(|(k, path)| {
                let spec = self.inputs.get(k).ok_or_else(|| {
                    RunError::file(
                        &path,
                        format!("the model has only {} inputs", self.inputs.len()),
                    )
                })?;
                Ok(NamedTensor::new(
                    &spec.name,
                    read_tensor_file(&path, self.max_elements)?,
                ))
            })
            .collect::<Result<Vec<_>, RunError>>()?;
        self.checked(tensors)
    }

    fn spec(&self, name: &str) -> Result<&InputSpec, RunError> {
        self.inputs
            .iter()
            .find(|i| i.name == name)
            .ok_or_else(|| RunError::UnknownInput {
                name: name.to_string(),
                known: self
                    .inputs
                    .iter()
                    .map(|i| i.name.as_str())
                    .collect::<Vec<_>>()
                    .join(", "),
            })
    }

    /// Splits the tensors given per input into samples (see the module doc).
    fn assemble(&self, given: BTreeMap<String, Vec<Tensor>>) -> Result<Vec<Sample>, RunError> {
        // No bindings at all still make one sample: empty, which only a model without inputs takes.
        let count = given.values().map(Vec::len).max().unwrap_or(1);
        if let Some((name, list)) = given.iter().find(|(_, l)| l.len() != 1 && l.len() != count) {
            return Err(RunError::BadArgument {
                text: name.clone(),
                reason: format!(
                    "given {} times while another input is given {count} times",
                    list.len()
                ),
            });
        }
        let mut samples = Vec::with_capacity(count);
        for k in 0..count {
            let sample = self
                .inputs
                .iter()
                .filter_map(|spec| {
                    let list = given.get(&spec.name)?;
                    let tensor = if list.len() == 1 {
                        list[0].clone()
                    } else {
                        list[k].clone()
                    };
                    Some(NamedTensor::new(&spec.name, tensor))
                })
                .collect();
            samples.push(self.checked(sample)?);
        }
        Ok(samples)
    }

    /// Checks a sample against the model and orders it as the model's inputs.
    fn checked(&self, sample: Vec<NamedTensor>) -> Result<Sample, RunError> {
        bind(self.inputs, &sample)?;
        let mut sample = sample;
        sample.sort_by_key(|t| self.inputs.iter().position(|i| i.name == t.name));
        Ok(sample)
    }
}

/// The lower-cased file extension, or "".
fn extension(path: &Path) -> String {
    path.extension()
        .and_then(|e| e.to_str())
        .unwrap_or("")
        .to_ascii_lowercase()
}
