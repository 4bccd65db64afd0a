//! Where a model's input samples come from: files, a folder, or seeded random data. Built and
//! checked from the command line's flags before any model is read; loaded per model, since
//! each model says which inputs it takes.

use std::path::PathBuf;

use anyhow::Result;

use crate::run::inputs::{Binding, Distribution, InputLoader, RandomInputs, symbolic_dims};
use crate::run::{InputSpec, Sample};

/// The samples' origin.
#[derive(Debug, Clone)]
pub enum Origin {
    /// `--input NAME=FILE` bindings.
    Files(Vec<Binding>),
    /// A folder of samples.
    Folder(PathBuf),
    /// Seeded random data.
    Random(RandomInputs),
}

/// Where samples come from, and the limits that apply to them.
#[derive(Debug, Clone)]
pub struct InputSource {
    pub origin: Origin,
    /// Largest input tensor accepted, in elements.
    pub max_elements: usize,
    /// Ignore a `--dim` the model does not use (a batch shares its dims across models) instead
    /// of refusing it as a likely typo.
    pub ignore_unused_dims: bool,
}

/// Samples and a description of where they came from.
#[derive(Debug, Clone)]
pub struct LoadedSamples {
    pub samples: Vec<Sample>,
    pub source: String,
}

impl InputSource {
    /// Builds the samples for a model with these inputs.
    pub fn load(&self, inputs: &[InputSpec]) -> Result<LoadedSamples> {
        let loader = InputLoader::new(inputs).with_max_elements(self.max_elements);
        Ok(match &self.origin {
            Origin::Folder(dir) => LoadedSamples {
                samples: loader.from_folder(dir)?,
                source: format!("folder {}", dir.display()),
            },
            Origin::Files(bindings) => LoadedSamples {
                samples: loader.from_bindings(bindings)?,
                source: format!(
                    "files {}",
                    bindings
                        .iter()
                        .map(as_written)
                        .collect::<Vec<_>>()
                        .join(", ")
                ),
            },
            Origin::Random(spec) => {
                let mut spec = spec.clone();
                if self.ignore_unused_dims {
                    let used = symbolic_dims(inputs);
                    spec.dims.retain(|name, _| used.contains(&name.as_str()));
                }
                LoadedSamples {
                    samples: loader.random(&spec)?,
                    source: describe_random(&spec),
                }
            }
        })
    }
}

/// A binding as it was written: `NAME=FILE` or `FILE`.
fn as_written(b: &Binding) -> String {
    match &b.input {
        Some(name) => format!("{name}={}", b.path.display()),
        None => b.path.display().to_string(),
    }
}

fn describe_random(spec: &RandomInputs) -> String {
    let dist = match spec.distribution {
        Distribution::Normal { mean, std_dev } => {
            format!("normal (mean {mean}, standard deviation {std_dev})")
        }
        Distribution::Uniform { low, high } => format!("uniform on [{low}, {high})"),
    };
    let dims: Vec<String> = spec.dims.iter().map(|(k, v)| format!("{k}={v}")).collect();
    let dims = if dims.is_empty() {
        String::new()
    } else {
        format!(", dims {}", dims.join(" "))
    };
    format!("random {dist}, seed {}{dims}", spec.seed)
}
