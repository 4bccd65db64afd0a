//! Finding samples in a folder: `test_data_set_N` subfolders, `input_K` files, files named after
//! the model's inputs, numbered archives.

use std::path::{Path, PathBuf};

use super::super::RunError;

/// What a folder of samples holds.
pub(super) enum Layout {
    /// `test_data_set_N` subfolders, in order of N.
    DataSets(Vec<PathBuf>),
    /// `input_K.pb` / `input_K.npy` files: the folder is one sample.
    Sample,
    /// `NAME.npy` / `NAME.pb` files named after the model's inputs: the folder is one sample.
    Named(Vec<(String, PathBuf)>),
    /// `N.npz` / `STEM_N.npz` archives, in order of N.
    Archives(Vec<PathBuf>),
}

/// Detects the layout of `dir`; `inputs` are the model's input names.
pub(super) fn layout(dir: &Path, inputs: &[&str]) -> Result<Layout, RunError> {
    let entries = list(dir)?;
    let mut sets: Vec<(u64, PathBuf)> = entries
        .iter()
        .filter(|p| p.is_dir())
        .filter_map(|p| {
            Some((
                file_name(p).strip_prefix("test_data_set_")?.parse().ok()?,
                p.clone(),
            ))
        })
        .collect();
    if !sets.is_empty() {
        sets.sort();
        return Ok(Layout::DataSets(sets.into_iter().map(|(_, p)| p).collect()));
    }
    if entries.iter().any(|p| input_index(p).is_some()) {
        return Ok(Layout::Sample);
    }
    let named: Vec<(String, PathBuf)> = entries
        .iter()
        .filter(|p| p.is_file())
        .filter_map(|p| {
            let name = file_name(p);
            let stem = name
                .strip_suffix(".npy")
                .or_else(|| name.strip_suffix(".pb"))?;
            inputs
                .contains(&stem)
                .then(|| (stem.to_string(), p.clone()))
        })
        .collect();
    if !named.is_empty() {
        return Ok(Layout::Named(named));
    }
    let mut archives: Vec<(u64, PathBuf)> = entries
        .iter()
        .filter(|p| p.is_file() && p.extension().is_some_and(|e| e.eq_ignore_ascii_case("npz")))
        .filter_map(|p| Some((trailing_number(p)?, p.clone())))
        .collect();
    if !archives.is_empty() {
        archives.sort();
        return Ok(Layout::Archives(
            archives.into_iter().map(|(_, p)| p).collect(),
        ));
    }
    Err(RunError::file(
        dir,
        "no samples found (expected test_data_set_N folders, input_K.pb/.npy files, files named after the model's inputs, numbered .npz archives or, in batch, a subfolder per model)",
    ))
}

/// The `input_K.pb` / `input_K.npy` files of a sample folder, with K.
pub(super) fn input_files(dir: &Path) -> Result<Vec<(usize, PathBuf)>, RunError> {
    let mut files: Vec<(usize, PathBuf)> = list(dir)?
        .into_iter()
        .filter_map(|p| Some((input_index(&p)?, p)))
        .collect();
    files.sort();
    if let Some(w) = files.windows(2).find(|w| w[0].0 == w[1].0) {
        return Err(RunError::file(
            &w[1].1,
            format!("input {} is given by two files", w[0].0),
        ));
    }
    Ok(files)
}

fn list(dir: &Path) -> Result<Vec<PathBuf>, RunError> {
    let read = std::fs::read_dir(dir).map_err(|e| RunError::file(dir, e))?;
    read.map(|e| e.map(|e| e.path()).map_err(|e| RunError::file(dir, e)))
        .collect()
}

fn file_name(path: &Path) -> &str {
    path.file_name().and_then(|n| n.to_str()).unwrap_or("")
}

/// K of a file named `input_K.pb` or `input_K.npy`.
fn input_index(path: &Path) -> Option<usize> {
    let name = file_name(path);
    let stem = name
        .strip_suffix(".pb")
        .or_else(|| name.strip_suffix(".npy"))?;
    if !path.is_file() {
        return None;
    }
    stem.strip_prefix("input_")?.parse().ok()
}

/// N of a file stem `N` or `STEM_N`.
fn trailing_number(path: &Path) -> Option<u64> {
    let stem = path.file_stem()?.to_str()?;
    let digits = stem.rsplit(|c: char| !c.is_ascii_digit()).next()?;
    let rest = &stem[..stem.len() - digits.len()];
    if digits.is_empty() || !(rest.is_empty() || rest.ends_with('_')) {
        return None;
    }
    digits.parse().ok()
}
