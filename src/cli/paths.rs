//! The paths a command is given, checked before any model is read: a folder where a model file
//! is expected is refused, and the missing folders above every file a command will write are
//! created, as `batch` creates its output folder.

use std::path::Path;

use anyhow::{Context, Result, bail};

/// Refuses a folder given to `command` where it expects a model file.
pub fn model_file(path: &Path, command: &str) -> Result<()> {
    if path.is_dir() {
        let hint = match command {
            "audit" | "swap" | "scan" => " (batch takes folders)",
            _ => "",
        };
        bail!(
            "'{}' is a folder; {command} takes a model file{hint}",
            path.display()
        );
    }
    Ok(())
}

/// Prepares the files a command will write, each with the flag that named it: a path that names
/// a folder is refused, and the missing folders above the others are created.
pub fn output_files(outputs: &[(&str, Option<&Path>)]) -> Result<()> {
    for (flag, path) in outputs {
        let Some(path) = path else { continue };
        let ends_in_separator = path.as_os_str().to_string_lossy().ends_with(['/', '\\']);
        if ends_in_separator || path.is_dir() {
            bail!(
                "{flag} '{}' is a folder; give a file name in it",
                path.display()
            );
        }
        if let Some(parent) = path.parent().filter(|p| !p.as_os_str().is_empty()) {
            std::fs::create_dir_all(parent)
                .with_context(|| format!("cannot create the folder '{}'", parent.display()))?;
        }
    }
    Ok(())
}
