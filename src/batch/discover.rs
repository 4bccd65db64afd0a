//! Which models a batch converts, and where each one's result goes: every `.onnx` file below the
//! given folders (in sorted order) and every file given by name, each with its path under the
//! output folder (relative to the folder it was found in; a file given by name keeps its name).

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};

/// One model of a batch.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Job {
    /// The model file as found.
    pub source: PathBuf,
    /// Its path under the output folder.
    pub relative: PathBuf,
}

/// Lists the models below `inputs`, skipping anything inside `out_dir`. Refuses an output path
/// shared by two models, and an output folder that would overwrite an input.
pub fn discover(inputs: &[PathBuf], out_dir: &Path) -> Result<Vec<Job>> {
    let out_abs = absolute(out_dir)?;
    let mut jobs: Vec<Job> = Vec::new();
    for input in inputs {
        let meta = std::fs::metadata(input)
            .with_context(|| format!("cannot read '{}'", input.display()))?;
        if meta.is_file() {
            let name = input
                .file_name()
                .with_context(|| format!("'{}' has no file name", input.display()))?;
            jobs.push(Job {
                source: input.clone(),
                relative: PathBuf::from(name),
            });
            continue;
        }
        if absolute(input)? == out_abs {
            bail!(
                "the output folder '{}' is an input folder; choose another",
                out_dir.display()
            );
        }
        let mut found = Vec::new();
        let walk = walkdir::WalkDir::new(input)
            .sort_by_file_name()
            .into_iter()
            .filter_entry(|e| !absolute(e.path()).is_ok_and(|p| p == out_abs));
        for entry in walk {
            let entry = entry.with_context(|| format!("cannot list '{}'", input.display()))?;
            let path = entry.path();
            if entry.file_type().is_file() && path.extension().is_some_and(|e| e == "onnx") {
                let relative = path.strip_prefix(input).expect("walk stays below its root");
                found.push(Job {
                    source: path.to_path_buf(),
                    relative: relative.to_path_buf(),
                });
            }
        }
        if found.is_empty() {
            bail!("no .onnx file below '{}'", input.display());
        }
        jobs.extend(found);
    }
    for (i, job) in jobs.iter().enumerate() {
        if let Some(other) = jobs[..i].iter().find(|j| j.relative == job.relative) {
            bail!(
                "'{}' and '{}' would both be written to '{}'",
                other.source.display(),
                job.source.display(),
                out_dir.join(&job.relative).display()
            );
        }
        if absolute(&job.source)? == absolute(&out_dir.join(&job.relative))? {
            bail!(
                "the output folder '{}' would overwrite the input '{}'",
                out_dir.display(),
                job.source.display()
            );
        }
    }
    Ok(jobs)
}

/// `p` made absolute without resolving links, so a folder that does not exist yet compares too.
fn absolute(p: &Path) -> Result<PathBuf> {
    let abs = std::path::absolute(p).with_context(|| format!("bad path '{}'", p.display()))?;
    Ok(abs.components().collect())
}
