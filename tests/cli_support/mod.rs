//! Shared by the command-line tests: running the built `actswap` binary.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// Runs `actswap` with `args` and collects its output.
pub fn actswap(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_actswap"))
        .args(args)
        .output()
        .unwrap()
}

pub fn path(p: &Path) -> &str {
    p.to_str().unwrap()
}

pub fn stderr(out: &Output) -> String {
    String::from_utf8_lossy(&out.stderr).into_owned()
}

/// A file or folder of the repository.
pub fn repo(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}
