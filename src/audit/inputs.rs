//! Where a model's input samples come from: files, a folder, seeded random data, or files with
//! the inputs they do not give drawn at random. Built and checked from the command line's flags
//! before any model is read; loaded per model, since each model says which inputs it takes.

use std::path::{Path, PathBuf};

use anyhow::Result;

use crate::run::inputs::symbolic_dims;
use crate::run::inputs::{Binding, Distribution, InputLoader, Loaded, RandomInputs, Source};
use crate::run::{InputSpec, Sample};

/// The samples' origin.
#[derive(Debug, Clone)]
pub enum Origin {
    /// `--input NAME=FILE` bindings.
    Files(Vec<Binding>),
    /// A folder of samples.
    Folder(PathBuf),
    /// Seeded random data only.
    Random,
}

/// Where samples come from, and the settings that apply to them.
#[derive(Debug, Clone)]
pub struct InputSource {
    pub origin: Origin,
    /// How inputs no file gives are drawn (all of them for [`Origin::Random`]), and the sizes of
    /// symbolic dims, which also check the files.
    pub random: RandomInputs,
    /// Largest number of input elements accepted, all samples together.
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
        let mut random = self.random.clone();
        if self.ignore_unused_dims {
            let used = symbolic_dims(inputs);
            random.dims.retain(|name, _| used.contains(&name.as_str()));
        }
        let loader = InputLoader::new(inputs)
            .with_max_elements(self.max_elements)
            .with_random(random.clone());
        let (loaded, files) = match &self.origin {
            Origin::Folder(dir) => (
                loader.load(Source::Folder(dir))?,
                Some(format!("folder {}", dir.display())),
            ),
            Origin::Files(bindings) => (
                loader.load(Source::Files(bindings))?,
                Some(format!(
                    "files {}",
                    bindings
                        .iter()
                        .map(as_written)
                        .collect::<Vec<_>>()
                        .join(", ")
                )),
            ),
            Origin::Random => (loader.load(Source::Random)?, None),
        };
        let source = describe(files, &loaded, &random);
        Ok(LoadedSamples {
            samples: loaded.samples,
            source,
        })
    }

    /// This source for the model at `relative` below a searched folder: a folder of samples
    /// gives each model its own subfolder when there is one, `DIR/PATH` (the model's path
    /// without `.onnx`), else `DIR/PARENT` (the folder holding it), else `DIR/STEM` (its file
    /// stem); without one, `DIR` itself.
    pub fn for_model(&self, relative: &Path) -> InputSource {
        let Origin::Folder(dir) = &self.origin else {
            return self.clone();
        };
        let by_path = Some(dir.join(relative.with_extension("")));
        let by_parent = relative
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .map(|p| dir.join(p));
        let by_stem = relative.file_stem().map(|stem| dir.join(stem));
        let own = [by_path, by_parent, by_stem]
            .into_iter()
            .flatten()
            .find(|d| d.is_dir());
        InputSource {
            origin: Origin::Folder(own.unwrap_or_else(|| dir.clone())),
            ..self.clone()
        }
    }
}

/// A binding as it was written: `NAME=FILE` or `FILE`.
fn as_written(b: &Binding) -> String {
    match &b.input {
        Some(name) => format!("{name}={}", b.path.display()),
        None => b.path.display().to_string(),
    }
}

/// Where the samples came from: the files, the random draws and the inputs they fed, the notes.
fn describe(files: Option<String>, loaded: &Loaded, spec: &RandomInputs) -> String {
    let mut parts: Vec<String> = files.into_iter().collect();
    if !loaded.drawn.is_empty() {
        let random = describe_random(spec);
        parts.push(if parts.is_empty() {
            random
        } else {
            format!("{random} for {}", loaded.drawn.join(", "))
        });
    }
    parts.extend(loaded.notes.iter().cloned());
    parts.join("; ")
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
