//! Which models a batch converts, and where each one's result goes: every `.onnx` file below the
//! given folders (in sorted order) and every file given by name, each with its path under the
//! output folder (relative to the folder it was found in; a file given by name keeps its name).
//! A `.onnx` entry that is not a regular file (a folder, a FIFO, a device, a broken link or a
//! link loop) is listed as skipped, with the reason.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};

use crate::files::open::kind_of;
use crate::text::escape_path;

/// One model of a batch.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Job {
    /// The model file as found.
    pub source: PathBuf,
    /// Its path under the output folder.
    pub relative: PathBuf,
}

/// A `.onnx` entry the batch does not convert.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Skipped {
    pub path: PathBuf,
    /// Why, in a few words ("a FIFO", "a folder", "a broken link or a link loop").
    pub reason: String,
}

/// What a batch covers.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Discovery {
    pub jobs: Vec<Job>,
    pub skipped: Vec<Skipped>,
}

/// Lists the models below `inputs`, skipping anything inside `out_dir`. Refuses an output path
/// shared by two models, an output folder that would overwrite an input, and a path given by
/// name that is neither a regular file nor a folder.
pub fn discover(inputs: &[PathBuf], out_dir: &Path) -> Result<Discovery> {
    let out_abs = absolute(out_dir)?;
    let mut found = Discovery::default();
    for input in inputs {
        let meta = std::fs::metadata(input)
            .with_context(|| format!("cannot read '{}'", escape_path(input)))?;
        if meta.is_file() {
            let name = input
                .file_name()
                .with_context(|| format!("'{}' has no file name", escape_path(input)))?;
            found.jobs.push(Job {
                source: input.clone(),
                relative: PathBuf::from(name),
            });
            continue;
        }
        if !meta.is_dir() {
            bail!(
                "'{}' is {}, neither a model file nor a folder",
                escape_path(input),
                kind_of(&meta)
            );
        }
        if absolute(input)? == out_abs {
            bail!(
                "the output folder '{}' is an input folder; choose another",
                escape_path(out_dir)
            );
        }
        let before = found.jobs.len() + found.skipped.len();
        let walk = walkdir::WalkDir::new(input)
            .sort_by_file_name()
            .into_iter()
            .filter_entry(|e| !absolute(e.path()).is_ok_and(|p| p == out_abs));
        for entry in walk {
            let entry = entry.with_context(|| format!("cannot list '{}'", escape_path(input)))?;
            let path = entry.path();
            if entry.depth() == 0 || path.extension().is_none_or(|e| e != "onnx") {
                continue;
            }
            match std::fs::metadata(path) {
                Ok(meta) if meta.is_file() => {
                    let relative = path.strip_prefix(input).expect("walk stays below its root");
                    found.jobs.push(Job {
                        source: path.to_path_buf(),
                        relative: relative.to_path_buf(),
                    });
                }
                Ok(meta) => found.skipped.push(Skipped {
                    path: path.to_path_buf(),
                    reason: kind_of(&meta).into(),
                }),
                Err(_) => found.skipped.push(Skipped {
                    path: path.to_path_buf(),
                    reason: "a broken link or a link loop".into(),
                }),
            }
        }
        if found.jobs.len() + found.skipped.len() == before {
            bail!("no .onnx file below '{}'", escape_path(input));
        }
    }
    let jobs = &found.jobs;
    for (i, job) in jobs.iter().enumerate() {
        if let Some(other) = jobs[..i].iter().find(|j| j.relative == job.relative) {
            bail!(
                "'{}' and '{}' would both be written to '{}'",
                escape_path(&other.source),
                escape_path(&job.source),
                escape_path(&out_dir.join(&job.relative))
            );
        }
        if absolute(&job.source)? == absolute(&out_dir.join(&job.relative))? {
            bail!(
                "the output folder '{}' would overwrite the input '{}'",
                escape_path(out_dir),
                escape_path(&job.source)
            );
        }
    }
    Ok(found)
}

/// `p` made absolute without resolving links, so a folder that does not exist yet compares too.
fn absolute(p: &Path) -> Result<PathBuf> {
    let abs = std::path::absolute(p).with_context(|| format!("bad path '{}'", p.display()))?;
    Ok(abs.components().collect())
}
