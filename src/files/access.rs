//! The files one command reads and writes, checked together before it does any work: every path
//! it writes must differ from every path it reads and from every other path it writes (the same
//! file counts as the same path through links, `..` and hard links), and must be a regular file
//! or not exist yet.

use std::path::{Component, Path, PathBuf};

use anyhow::{Context, Result, bail};

use super::open::kind_of;
use crate::text::escape_path;

/// A path and what it is to the command ("the input model", "the report", ...).
#[derive(Debug, Clone)]
struct Entry {
    what: String,
    path: PathBuf,
}

/// The reads and writes of one command; [`FileAccess::check`] refuses any clash.
#[derive(Debug, Clone, Default)]
pub struct FileAccess {
    reads: Vec<Entry>,
    writes: Vec<Entry>,
    /// Reads a write may replace (asked for explicitly, as `swap --overwrite` does).
    replaceable: Vec<PathBuf>,
}

/// How a path is compared: the file it names when it exists, else where it would be created.
#[derive(Debug, Clone, PartialEq, Eq)]
enum Identity {
    Existing { dev: u64, ino: u64 },
    Absent(PathBuf),
}

impl FileAccess {
    /// Records a file the command reads; `what` names it in messages.
    pub fn read(&mut self, what: impl Into<String>, path: impl Into<PathBuf>) -> &mut Self {
        self.reads.push(Entry {
            what: what.into(),
            path: path.into(),
        });
        self
    }

    /// Records a file the command writes; `what` names it in messages.
    pub fn write(&mut self, what: impl Into<String>, path: impl Into<PathBuf>) -> &mut Self {
        self.writes.push(Entry {
            what: what.into(),
            path: path.into(),
        });
        self
    }

    /// Lets a write replace the file `path` although it is read (the write renames a new file
    /// into place, so the reader's open copy stays intact).
    pub fn allow_replacing(&mut self, path: impl Into<PathBuf>) -> &mut Self {
        self.replaceable.push(path.into());
        self
    }

    /// Refuses a write that is not a regular file, that is a file read, or that another write
    /// also names.
    pub fn check(&self) -> Result<()> {
        let replaceable = self
            .replaceable
            .iter()
            .map(|p| identity(p))
            .collect::<Result<Vec<_>>>()?;
        let mut reads = Vec::with_capacity(self.reads.len());
        for r in &self.reads {
            let id = identity(&r.path)?;
            if !replaceable.contains(&id) {
                reads.push((id, r));
            }
        }
        let mut writes: Vec<(Identity, &Entry)> = Vec::with_capacity(self.writes.len());
        for w in &self.writes {
            let id = identity(&w.path)?;
            if let Ok(meta) = std::fs::metadata(&w.path)
                && !meta.is_file()
            {
                bail!(
                    "refusing to write {} to '{}': it is {}, not a regular file",
                    w.what,
                    escape_path(&w.path),
                    kind_of(&meta)
                );
            }
            if let Some((_, r)) = reads.iter().find(|(rid, _)| *rid == id) {
                bail!(
                    "refusing to overwrite {} '{}' with {}",
                    r.what,
                    escape_path(&r.path),
                    w.what
                );
            }
            if let Some((_, other)) = writes.iter().find(|(oid, _)| *oid == id) {
                bail!(
                    "{} and {} would both be written to '{}'",
                    other.what,
                    w.what,
                    escape_path(&w.path)
                );
            }
            writes.push((id, w));
        }
        Ok(())
    }
}

/// The file `p` names (device and inode, through links) or, when nothing is there yet, the
/// absolute path it would be created at, with links in its existing folders resolved.
fn identity(p: &Path) -> Result<Identity> {
    match std::fs::metadata(p) {
        Ok(meta) => Ok(file_id(&meta)),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(Identity::Absent(resolved(p)?)),
        Err(e) => Err(e).with_context(|| format!("cannot inspect '{}'", escape_path(p))),
    }
}

fn file_id(meta: &std::fs::Metadata) -> Identity {
    use std::os::unix::fs::MetadataExt;
    Identity::Existing {
        dev: meta.dev(),
        ino: meta.ino(),
    }
}

/// `p` made absolute: its longest existing ancestor canonicalized, the rest appended with `.`
/// dropped and `..` applied.
fn resolved(p: &Path) -> Result<PathBuf> {
    let abs = std::path::absolute(p).with_context(|| format!("bad path '{}'", escape_path(p)))?;
    let parts: Vec<Component> = abs.components().collect();
    let (mut out, cut) = (0..=parts.len())
        .rev()
        .find_map(|cut| {
            let prefix: PathBuf = parts[..cut].iter().collect();
            prefix.canonicalize().ok().map(|c| (c, cut))
        })
        .unwrap_or_default();
    for part in &parts[cut..] {
        match part {
            Component::ParentDir => {
                out.pop();
            }
            Component::CurDir => {}
            other => out.push(other),
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn clash(access: &FileAccess) -> String {
        format!("{:#}", access.check().unwrap_err())
    }

    #[test]
    fn distinct_files_pass() {
        let dir = tempfile::tempdir().unwrap();
        let model = dir.path().join("m.onnx");
        std::fs::write(&model, b"m").unwrap();
        let mut a = FileAccess::default();
        a.read("the input model", &model)
            .write("the converted model", dir.path().join("out/m.onnx"))
            .write("the report", dir.path().join("report.html"));
        a.check().unwrap();
    }

    #[test]
    fn a_write_over_a_read_is_refused_through_links_and_dots() {
        let dir = tempfile::tempdir().unwrap();
        let model = dir.path().join("m.onnx");
        std::fs::write(&model, b"m").unwrap();
        std::fs::create_dir(dir.path().join("sub")).unwrap();
        std::os::unix::fs::symlink(&model, dir.path().join("link.onnx")).unwrap();
        std::fs::hard_link(&model, dir.path().join("hard.onnx")).unwrap();
        for write in ["m.onnx", "sub/../m.onnx", "./link.onnx", "hard.onnx"] {
            let mut a = FileAccess::default();
            a.read("the input model", &model)
                .write("the report", dir.path().join(write));
            let e = clash(&a);
            assert!(
                e.contains("refusing to overwrite the input model")
                    && e.contains("with the report"),
                "{write}: {e}"
            );
        }
    }

    #[test]
    fn two_writes_to_one_new_file_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        let mut a = FileAccess::default();
        a.write("the converted model", dir.path().join("new/x.onnx"))
            .write("the report", dir.path().join("new/./y/../x.onnx"));
        let e = clash(&a);
        assert!(
            e.contains("the converted model and the report would both be written"),
            "{e}"
        );
    }

    #[test]
    fn a_write_to_a_fifo_a_device_or_a_folder_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let fifo = dir.path().join("pipe");
        let c = std::ffi::CString::new(fifo.to_str().unwrap()).unwrap();
        assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0);
        for (path, kind) in [
            (fifo.as_path(), "a FIFO"),
            (Path::new("/dev/null"), "a device"),
            (dir.path(), "a folder"),
        ] {
            let mut a = FileAccess::default();
            a.write("the converted model", path);
            let e = clash(&a);
            assert!(e.contains(kind), "{e}");
        }
    }
}
