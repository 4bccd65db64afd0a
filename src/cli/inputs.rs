//! Input options shared by the commands that run models (`drift`, `audit`, `batch`, and `swap`,
//! which observes the ranges of fitted forms on them): samples from files, a folder, or seeded
//! random data.
//!
//! Files (`--input`) and folders (`--inputs-dir`) follow the layouts of
//! [`crate::run::inputs`]. Without either, samples are random: `--samples` samples from one
//! generator seeded with `--seed`, every element drawn from `--dist`:
//! - `uniform`: uniform on `[LO, HI)` from `--range LO,HI` (default `-1,1`);
//! - `normal`: normal with mean `(LO + HI) / 2` and standard deviation `(HI - LO) / 4`, so
//!   `--range` spans mean +- 2 standard deviations, about 95% of the draws (default: mean 0,
//!   standard deviation 1, i.e. `-2,2`).
//!
//! Files and random data mix: an input no file gives is drawn at random, sized by the dims the files
//! give and `--dim NAME=SIZE`, which also checks the files (a disagreement is an error). An unset
//! dim is an error naming it, and so is a `--dim` no input uses (except in `batch`, whose models
//! share the flags). `batch --inputs-dir DIR` takes each model's samples from its own subfolder
//! when there is one: `DIR/PATH` (PATH: the model's path below the searched folder without
//! `.onnx`), else `DIR/PARENT` (the folder holding it), else `DIR/STEM` (its file stem); without
//! one, from `DIR` itself.

use std::collections::BTreeMap;
use std::path::PathBuf;

use anyhow::{Context, Result, bail};

use crate::audit::{InputSource, Origin};
use crate::run::inputs::{
    Binding, DEFAULT_MAX_ELEMENTS, Distribution, RandomInputs, parse_dim_size,
};

/// Random input distributions.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Dist {
    Normal,
    Uniform,
}

/// Where input samples come from.
#[derive(Debug, Clone, clap::Args)]
#[command(next_help_heading = "Inputs (random where --input or --inputs-dir gives none)")]
pub struct InputArgs {
    /// Feed input NAME from FILE (.npy, .npz or .pb); a bare .npz feeds every input it names.
    /// Repeat an input to give several samples.
    #[arg(long = "input", value_name = "NAME=FILE")]
    pub input: Vec<String>,
    /// Read samples from a folder: test_data_set_N/ subfolders, input_K.pb|.npy files, or
    /// numbered .npz archives. In `batch`, a subfolder named after a model's file stem holds
    /// that model's samples.
    #[arg(long, value_name = "DIR", conflicts_with = "input")]
    pub inputs_dir: Option<PathBuf>,
    /// Seed of the random inputs [default: 0].
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
    /// Distribution of the random inputs [default: normal].
    #[arg(long, value_enum)]
    pub dist: Option<Dist>,
    /// Uniform: the bounds [LO, HI). Normal: mean (LO+HI)/2, standard deviation (HI-LO)/4
    /// [default: -1,1 uniform; -2,2 normal].
    #[arg(long, value_name = "LO,HI", allow_hyphen_values = true)]
    pub range: Option<String>,
    /// Number of random samples [default: 1].
    #[arg(long, value_name = "N", conflicts_with_all = ["input", "inputs_dir"])]
    pub samples: Option<usize>,
    /// Size of a symbolic input dim (repeatable): for inputs drawn at random, and checked against
    /// the files given.
    #[arg(long = "dim", value_name = "NAME=SIZE")]
    pub dim: Vec<String>,
    /// Refuse samples holding more input elements than this, all samples together.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_MAX_ELEMENTS)]
    pub max_elements: usize,
}

impl InputArgs {
    /// Validates the flags into an input source, before any model is read. With
    /// `ignore_unused_dims`, a `--dim` that a model does not use is ignored (a batch shares its
    /// dims across models) instead of refused as a likely typo.
    pub fn source(&self, ignore_unused_dims: bool) -> Result<InputSource> {
        let origin = if let Some(dir) = &self.inputs_dir {
            Origin::Folder(dir.clone())
        } else if !self.input.is_empty() {
            let bindings = self
                .input
                .iter()
                .map(|b| Binding::parse(b))
                .collect::<Result<Vec<_>, _>>()?;
            Origin::Files(bindings)
        } else {
            Origin::Random
        };
        Ok(InputSource {
            origin,
            random: self.random()?,
            max_elements: self.max_elements,
            ignore_unused_dims,
        })
    }

    /// True when any option says where samples come from or how they are drawn (every one
    /// but `--max-elements`, which has a default).
    pub fn given(&self) -> bool {
        !self.input.is_empty()
            || self.inputs_dir.is_some()
            || self.seed.is_some()
            || self.dist.is_some()
            || self.range.is_some()
            || self.samples.is_some()
            || !self.dim.is_empty()
    }

    /// The options in words, for reports.
    pub fn describe(&self) -> String {
        let mut parts = Vec::new();
        if let Some(dir) = &self.inputs_dir {
            parts.push(format!("folder {}", dir.display()));
        }
        if !self.input.is_empty() {
            parts.push(format!("files {}", self.input.join(", ")));
        }
        match self.random() {
            Ok(r) if parts.is_empty() || !r.dims.is_empty() => {
                let dims: Vec<String> = r.dims.iter().map(|(k, v)| format!("{k}={v}")).collect();
                parts.push(format!(
                    "seeded random data (seed {}, {} sample(s)){}",
                    r.seed,
                    r.samples,
                    if dims.is_empty() {
                        String::new()
                    } else {
                        format!(", dims {}", dims.join(" "))
                    }
                ));
            }
            _ => {}
        }
        parts.join("; ")
    }

    /// The files these options read: `--input` files and every file below `--inputs-dir`.
    pub fn files(&self) -> Vec<PathBuf> {
        let mut files: Vec<PathBuf> = self
            .input
            .iter()
            .map(|b| match b.split_once('=') {
                Some((_, file)) if !std::path::Path::new(b).is_file() => PathBuf::from(file),
                _ => PathBuf::from(b),
            })
            .filter(|p| p.is_file())
            .collect();
        if let Some(dir) = &self.inputs_dir {
            files.extend(
                walkdir::WalkDir::new(dir)
                    .into_iter()
                    .filter_map(Result::ok)
                    .filter(|e| e.file_type().is_file())
                    .map(|e| e.into_path()),
            );
        }
        files
    }

    /// The random-input settings, validated.
    fn random(&self) -> Result<RandomInputs> {
        let dist = self.dist.unwrap_or(Dist::Normal);
        let (lo, hi) = match &self.range {
            Some(text) => parse_range(text)?,
            None if dist == Dist::Uniform => (-1.0, 1.0),
            None => (-2.0, 2.0),
        };
        let distribution = match dist {
            Dist::Uniform => Distribution::Uniform { low: lo, high: hi },
            Dist::Normal => Distribution::Normal {
                mean: (lo + hi) / 2.0,
                std_dev: (hi - lo) / 4.0,
            },
        };
        let samples = self.samples.unwrap_or(1);
        if samples == 0 {
            bail!("--samples must be at least 1");
        }
        let dims: BTreeMap<String, usize> = self
            .dim
            .iter()
            .map(|d| parse_dim_size(d))
            .collect::<Result<_, _>>()?;
        Ok(RandomInputs {
            seed: self.seed.unwrap_or(0),
            distribution,
            samples,
            dims,
        })
    }
}

/// Parses `LO,HI` with finite LO < HI.
fn parse_range(text: &str) -> Result<(f64, f64)> {
    let bad = || format!("bad --range '{text}': expected LO,HI with LO < HI");
    let (lo, hi) = text.split_once(',').with_context(bad)?;
    let lo: f64 = lo.trim().parse().ok().with_context(bad)?;
    let hi: f64 = hi.trim().parse().ok().with_context(bad)?;
    if !(lo.is_finite() && hi.is_finite() && lo < hi) {
        bail!(bad());
    }
    Ok((lo, hi))
}

#[cfg(test)]
mod tests {
    use super::parse_range;

    #[test]
    fn ranges_need_two_ordered_finite_bounds() {
        assert_eq!(parse_range("-3,3").unwrap(), (-3.0, 3.0));
        assert_eq!(parse_range(" 0.5 , 2 ").unwrap(), (0.5, 2.0));
        for bad in ["3", "3,-3", "1,1", "a,b", "0,inf", ","] {
            assert!(parse_range(bad).is_err(), "{bad}");
        }
    }
}
