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
//! A float file for a float input of another width (numpy writes float64 by default) is converted
//! to the input's type, rounding to nearest, with a note; a finite value the input's type cannot
//! hold is an error. Other element types must match.
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
//! With [`InputLoader::with_random`], inputs that files leave out are drawn the same way, sized by
//! the dims the files give and `dims`.
//! Float inputs get draws from the distribution rounded to the input's type; integer inputs get
//! rounded draws clamped to the type (uniform: integers in `[ceil(low), floor(high)]`); booleans
//! are fair coin flips. Symbolic dims take sizes from `dims` (`NAME=SIZE`, see [`parse_dim_size`])
//! and from the tensors given in the same sample, which must agree with `dims`; every named dim of
//! a drawn input must have a size, and every set name must be a dim of some input. The generator
//! is rand's `StdRng`: reproducible for a given build, not promised across rand versions.
//!
//! # Limits
//! The elements of all samples together are bounded ([`DEFAULT_MAX_ELEMENTS`] unless set), checked
//! before data is allocated: from the `.npy` header, the `TensorProto` dims or the resolved random
//! shapes. `.pb` and `.npz` files larger than the remaining budget allows for 8-byte elements are
//! refused before they are read. `.npz` archives must be stored uncompressed (`numpy.savez`).

mod convert;
mod folder;
mod npy;
mod proto;
mod random;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use super::signature::bind;
use super::{InputSpec, NamedTensor, RunError, Sample, Tensor};

pub use random::{Distribution, RandomInputs, symbolic_dims};

/// Default element-count limit of all samples together: 64 Mi elements (256 MiB of f32).
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
        .map_err(|_| bad("SIZE must be a positive integer"))?;
    if size == 0 {
        return Err(bad(
            "SIZE must be at least 1: a dim of 0 leaves nothing to compare",
        ));
    }
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

/// Where the samples come from.
#[derive(Debug, Clone, Copy)]
pub enum Source<'a> {
    /// `NAME=FILE` / `FILE` bindings.
    Files(&'a [Binding]),
    /// A folder of samples.
    Folder(&'a Path),
    /// Random data only, as set by [`InputLoader::with_random`] (default: [`RandomInputs`]'s).
    Random,
}

/// Samples ready to run, and what was done to the given data on the way.
#[derive(Debug, Clone, PartialEq)]
pub struct Loaded {
    /// The samples, each ordered as the model's inputs.
    pub samples: Vec<Sample>,
    /// The inputs drawn at random because no file gave them (every input for [`Source::Random`]).
    pub drawn: Vec<String>,
    /// One line per conversion of given data, for the report.
    pub notes: Vec<String>,
}

/// Builds samples for a model's inputs, checking each tensor against what the model declares.
#[derive(Debug, Clone)]
pub struct InputLoader<'m> {
    inputs: &'m [InputSpec],
    max_elements: usize,
    random: Option<RandomInputs>,
}

impl<'m> InputLoader<'m> {
    /// A loader for `inputs` (see [`super::TractModel::inputs`]) with the default limit, which
    /// refuses samples that miss an input.
    pub fn new(inputs: &'m [InputSpec]) -> Self {
        InputLoader {
            inputs,
            max_elements: DEFAULT_MAX_ELEMENTS,
            random: None,
        }
    }

    /// Sets the element-count limit of all samples together.
    pub fn with_max_elements(self, max_elements: usize) -> Self {
        InputLoader {
            max_elements,
            ..self
        }
    }

    /// Draws the inputs that files leave out as `random` says (its `samples` counts only for
    /// [`Source::Random`]), and checks the files against its `dims`.
    pub fn with_random(self, random: RandomInputs) -> Self {
        InputLoader {
            random: Some(random),
            ..self
        }
    }

    /// Samples from `source` (see the module doc).
    pub fn load(&self, source: Source) -> Result<Loaded, RunError> {
        let mut budget = Budget::new(self.max_elements);
        let random = match (&self.random, source) {
            (Some(random), _) => Some(random.clone()),
            (None, Source::Random) => Some(RandomInputs::default()),
            (None, _) => None,
        };
        let given = match source {
            Source::Files(bindings) => self.read_bindings(bindings, &mut budget)?,
            Source::Folder(dir) => self.read_folder(dir, &mut budget)?,
            Source::Random => {
                let count = random.as_ref().map_or(1, |r| r.samples);
                vec![Vec::new(); count]
            }
        };
        let mut notes = Vec::new();
        let given = given
            .into_iter()
            .map(|sample| convert::to_input_types(self.inputs, sample, &mut notes))
            .collect::<Result<Vec<_>, _>>()?;
        let (samples, drawn) = match &random {
            Some(random) => random::complete(self.inputs, given, random, &mut budget)?,
            None => (given, Vec::new()),
        };
        let samples = samples
            .into_iter()
            .map(|sample| self.checked(sample))
            .collect::<Result<_, _>>()?;
        Ok(Loaded {
            samples,
            drawn,
            notes,
        })
    }

    /// Samples from `NAME=FILE` / `FILE` bindings; see [`InputLoader::load`].
    pub fn from_bindings(&self, bindings: &[Binding]) -> Result<Vec<Sample>, RunError> {
        Ok(self.load(Source::Files(bindings))?.samples)
    }

    /// Samples from a folder; see [`InputLoader::load`].
    pub fn from_folder(&self, dir: &Path) -> Result<Vec<Sample>, RunError> {
        Ok(self.load(Source::Folder(dir))?.samples)
    }

    /// Seeded random samples; see [`InputLoader::load`].
    pub fn random(&self, spec: &RandomInputs) -> Result<Vec<Sample>, RunError> {
        let loader = self.clone().with_random(spec.clone());
        Ok(loader.load(Source::Random)?.samples)
    }

    /// The tensors of each sample the bindings give (see the module doc), inputs possibly missing.
    fn read_bindings(
        &self,
        bindings: &[Binding],
        budget: &mut Budget,
    ) -> Result<Vec<Vec<NamedTensor>>, RunError> {
        let mut given: BTreeMap<String, Vec<Tensor>> = BTreeMap::new();
        for binding in bindings {
            let read = budget.read(
                |limit| self.read_binding(binding, limit),
                |tensors| tensors.iter().map(|t| t.tensor.len() as u128).sum(),
            )?;
            for named in read {
                self.spec(&named.name)?;
                given.entry(named.name).or_default().push(named.tensor);
            }
        }
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
        // A tensor given once is copied into every sample: count the copies before making them.
        let copies: u128 = given
            .values()
            .filter(|list| list.len() == 1)
            .map(|list| list[0].len() as u128 * (count as u128 - 1))
            .sum();
        budget.take(copies)?;
        Ok((0..count)
            .map(|k| {
                self.inputs
                    .iter()
                    .filter_map(|spec| {
                        let list = given.get(&spec.name)?;
                        let tensor = list.get(k).unwrap_or(&list[0]).clone();
                        Some(NamedTensor::new(&spec.name, tensor))
                    })
                    .collect()
            })
            .collect())
    }

    /// The tensors of one binding, holding at most `limit` elements each.
    fn read_binding(&self, binding: &Binding, limit: usize) -> Result<Vec<NamedTensor>, RunError> {
        let path = &binding.path;
        Ok(match (extension(path).as_str(), &binding.input) {
            ("npy", Some(name)) => vec![NamedTensor::new(name, npy::read_npy(path, limit)?)],
            ("npy", None) => {
                return Err(RunError::file(
                    path,
                    "a .npy file needs an input name: NAME=FILE",
                ));
            }
            ("pb", Some(name)) => vec![NamedTensor::new(name, proto::read_pb(path, limit)?.tensor)],
            ("pb", None) => {
                let named = proto::read_pb(path, limit)?;
                if named.name.is_empty() {
                    return Err(RunError::file(
                        path,
                        "the tensor has no name; use NAME=FILE",
                    ));
                }
                vec![named]
            }
            ("npz", None) => npy::read_npz(path, limit)?,
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
                vec![NamedTensor::new(name, found.tensor)]
            }
            _ => return Err(RunError::file(path, "expected a .npy, .npz or .pb file")),
        })
    }

    /// The tensors of each sample of a folder (see the module doc), inputs possibly missing.
    fn read_folder(
        &self,
        dir: &Path,
        budget: &mut Budget,
    ) -> Result<Vec<Vec<NamedTensor>>, RunError> {
        let names: Vec<&str> = self.inputs.iter().map(|i| i.name.as_str()).collect();
        match folder::layout(dir, &names)? {
            folder::Layout::DataSets(sets) => sets
                .iter()
                .map(|set| self.sample_folder(set, budget))
                .collect(),
            folder::Layout::Sample => Ok(vec![self.sample_folder(dir, budget)?]),
            folder::Layout::Named(files) => {
                let sample = files
                    .iter()
                    .map(|(name, path)| {
                        let tensor = budget.read(
                            |limit| read_tensor_file(path, limit),
                            |tensor| tensor.len() as u128,
                        )?;
                        Ok(NamedTensor::new(name, tensor))
                    })
                    .collect::<Result<_, RunError>>()?;
                Ok(vec![sample])
            }
            folder::Layout::Archives(archives) => archives
                .iter()
                .map(|path| {
                    budget.read(
                        |limit| npy::read_npz(path, limit),
                        |tensors| tensors.iter().map(|t| t.tensor.len() as u128).sum(),
                    )
                })
                .collect(),
        }
    }

    /// The tensors of a folder of `input_K.pb` / `input_K.npy` files.
    fn sample_folder(&self, dir: &Path, budget: &mut Budget) -> Result<Vec<NamedTensor>, RunError> {
        folder::input_files(dir)?
            .into_iter()
            .map(|(k, path)| {
                let spec = self.inputs.get(k).ok_or_else(|| {
                    RunError::file(
                        &path,
                        format!("the model has only {} inputs", self.inputs.len()),
                    )
                })?;
                let tensor = budget.read(
                    |limit| read_tensor_file(&path, limit),
                    |tensor| tensor.len() as u128,
                )?;
                Ok(NamedTensor::new(&spec.name, tensor))
            })
            .collect()
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

    /// Checks a sample against the model and orders it as the model's inputs.
    fn checked(&self, sample: Vec<NamedTensor>) -> Result<Sample, RunError> {
        bind(self.inputs, &sample)?;
        let mut sample = sample;
        sample.sort_by_key(|t| self.inputs.iter().position(|i| i.name == t.name));
        Ok(sample)
    }
}

/// The elements all samples may still take.
#[derive(Debug)]
struct Budget {
    limit: usize,
    used: u128,
}

impl Budget {
    fn new(limit: usize) -> Self {
        Budget { limit, used: 0 }
    }

    /// What one more tensor may hold.
    fn remaining(&self) -> usize {
        (self.limit as u128).saturating_sub(self.used) as usize
    }

    /// Reads with what is left as the limit, then counts what was read (`size`). A tensor that
    /// would fit alone but not beside the others is reported as the samples' excess.
    fn read<T>(
        &mut self,
        read: impl FnOnce(usize) -> Result<T, RunError>,
        size: impl FnOnce(&T) -> u128,
    ) -> Result<T, RunError> {
        match read(self.remaining()) {
            Ok(value) => {
                self.take(size(&value))?;
                Ok(value)
            }
            Err(RunError::OverLimit { elements, .. }) if elements <= self.limit as u128 => {
                Err(RunError::SamplesOverLimit {
                    elements: self.used + elements,
                    limit: self.limit,
                })
            }
            Err(e) => Err(e),
        }
    }

    /// Counts `elements` more, refusing to pass the limit.
    fn take(&mut self, elements: u128) -> Result<(), RunError> {
        let used = self.used + elements;
        if used > self.limit as u128 {
            return Err(RunError::SamplesOverLimit {
                elements: used,
                limit: self.limit,
            });
        }
        self.used = used;
        Ok(())
    }
}

/// The lower-cased file extension, or "".
fn extension(path: &Path) -> String {
    path.extension()
        .and_then(|e| e.to_str())
        .unwrap_or("")
        .to_ascii_lowercase()
}
