//! Opening a file for reading only when it is a regular file.

use std::fs::File;
use std::path::Path;

use anyhow::{Context, Result, bail};

use crate::text::escape_path;

/// Opens `path` for reading, refusing anything but a regular file (after links).
///
/// The file is opened without blocking and checked on the open handle, so a FIFO put in place
/// between a check and the open still cannot hang the read.
pub fn open_regular(path: &Path, what: &str) -> Result<File> {
    let mut options = std::fs::OpenOptions::new();
    options.read(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.custom_flags(libc::O_NONBLOCK | libc::O_NOCTTY);
    }
    let file = options
        .open(path)
        .with_context(|| format!("cannot open {what} '{}'", escape_path(path)))?;
    let meta = file
        .metadata()
        .with_context(|| format!("cannot read {what} '{}'", escape_path(path)))?;
    if !meta.is_file() {
        bail!(
            "{what} '{}' is {}, not a regular file",
            escape_path(path),
            kind_of(&meta)
        );
    }
    Ok(file)
}

/// What a file system entry is, in words ("a folder", "a FIFO", ...).
pub fn kind_of(meta: &std::fs::Metadata) -> &'static str {
    let t = meta.file_type();
    #[cfg(unix)]
    {
        use std::os::unix::fs::FileTypeExt;
        if t.is_fifo() {
            return "a FIFO";
        }
        if t.is_char_device() || t.is_block_device() {
            return "a device";
        }
        if t.is_socket() {
            return "a socket";
        }
    }
    if t.is_dir() {
        "a folder"
    } else if t.is_symlink() {
        "a symbolic link"
    } else if t.is_file() {
        "a regular file"
    } else {
        "not a regular file"
    }
}
