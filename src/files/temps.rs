//! Temporary files of writes in progress, removed when SIGINT or SIGTERM ends the process.
//!
//! Every temporary is created, registered, renamed into place and unregistered under one lock;
//! the signal handler takes the same lock, removes what is registered and ends the process the
//! way the signal would have, so no `.actswap-XXXXXX` file outlives an interrupted write.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::{Mutex, MutexGuard, Once};

use anyhow::{Context, Result};
use tempfile::NamedTempFile;

use crate::text::escape_path;

/// Prefix of every temporary file name.
pub const PREFIX: &str = ".actswap-";

static LIVE: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

fn live() -> MutexGuard<'static, Vec<PathBuf>> {
    LIVE.lock().unwrap_or_else(|e| e.into_inner())
}

/// A registered temporary file; dropping it removes the file and its registration.
pub struct LiveTemp {
    file: Option<NamedTempFile>,
}

impl LiveTemp {
    /// Creates and registers a temporary file in `dir`.
    pub fn new_in(dir: &Path) -> Result<LiveTemp> {
        let mut registry = live();
        let file = tempfile::Builder::new()
            .prefix(PREFIX)
            .tempfile_in(dir)
            .with_context(|| format!("cannot create a temporary file in '{}'", escape_path(dir)))?;
        registry.push(file.path().to_path_buf());
        Ok(LiveTemp { file: Some(file) })
    }

    /// Writes `bytes`, sets ordinary permissions (tempfile makes files private) and flushes to disk.
    pub fn write_all(&mut self, bytes: &[u8]) -> std::io::Result<()> {
        self.write_with(|w| w.write_all(bytes))
    }

    /// Lets `write` fill the file through a buffered writer, sets ordinary permissions
    /// (tempfile makes files private) and flushes to disk.
    pub fn write_with(
        &mut self,
        write: impl FnOnce(&mut dyn Write) -> std::io::Result<()>,
    ) -> std::io::Result<()> {
        let file = self
            .file
            .as_mut()
            .expect("present until persisted or dropped");
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            file.as_file()
                .set_permissions(std::fs::Permissions::from_mode(0o644))?;
        }
        let mut out = std::io::BufWriter::new(file.as_file_mut());
        write(&mut out)?;
        out.flush()?;
        drop(out);
        file.as_file().sync_all()
    }

    /// Renames the temporary to `path`, replacing what was there; on failure it is removed.
    pub fn persist(mut self, path: &Path) -> std::io::Result<()> {
        let file = self
            .file
            .take()
            .expect("present until persisted or dropped");
        let mut registry = live();
        registry.retain(|p| p != file.path());
        // Still under the lock: a failed rename removes the temporary before a sweep could miss it.
        file.persist(path).map(|_| ()).map_err(|e| e.error)
    }
}

impl Drop for LiveTemp {
    fn drop(&mut self) {
        if let Some(file) = self.file.take() {
            let mut registry = live();
            registry.retain(|p| p != file.path());
            drop(file);
        }
    }
}

/// The temporaries registered now (for tests and the fuzz harness).
pub fn registered() -> Vec<PathBuf> {
    live().clone()
}

/// From now on, SIGINT and SIGTERM remove every registered temporary, then end the process as
/// the signal would have (so the shell sees the usual status, 130 or 143). Call once, early.
pub fn remove_on_signals() {
    static INSTALL: Once = Once::new();
    INSTALL.call_once(|| {
        use signal_hook::consts::{SIGINT, SIGTERM};
        let Ok(mut signals) = signal_hook::iterator::Signals::new([SIGINT, SIGTERM]) else {
            return;
        };
        std::thread::spawn(move || {
            if let Some(signal) = signals.forever().next() {
                // Held until the process ends: no new temporary can appear after the sweep.
                let registry = live();
                for path in registry.iter() {
                    let _ = std::fs::remove_file(path);
                }
                let _ = signal_hook::low_level::emulate_default_handler(signal);
                std::process::exit(128 + signal);
            }
        });
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_dropped_temporary_is_removed_and_forgotten() {
        let dir = tempfile::tempdir().unwrap();
        let mut t = LiveTemp::new_in(dir.path()).unwrap();
        t.write_all(b"partial").unwrap();
        let path = registered()
            .into_iter()
            .find(|p| p.starts_with(dir.path()))
            .expect("registered");
        assert!(path.exists());
        drop(t);
        assert!(!path.exists());
        assert!(!registered().contains(&path));
    }

    #[test]
    fn a_persisted_temporary_is_forgotten() {
        let dir = tempfile::tempdir().unwrap();
        let mut t = LiveTemp::new_in(dir.path()).unwrap();
        t.write_all(b"whole").unwrap();
        let out = dir.path().join("out.bin");
        t.persist(&out).unwrap();
        assert_eq!(std::fs::read(&out).unwrap(), b"whole");
        assert!(!registered().iter().any(|p| p.starts_with(dir.path())));
    }
}
