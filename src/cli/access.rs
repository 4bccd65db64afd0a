//! The files a command reads and writes, gathered from its options and checked together before
//! it does any work (see [`crate::files::access`]).

use std::path::{Path, PathBuf};

use anyhow::Result;

use crate::batch::Job;
use crate::files::FileAccess;
use crate::onnx::Model;

/// What a command reads besides its models, and the files it writes besides converted models.
#[derive(Default)]
pub struct Extras<'a> {
    /// Input samples and profiles.
    pub reads: Vec<PathBuf>,
    /// Reports: what each is ("the report", "the Markdown summary") and where it goes.
    pub writes: Vec<(&'static str, Option<&'a Path>)>,
}

impl Extras<'_> {
    fn record(&self, access: &mut FileAccess) {
        for p in &self.reads {
            access.read("an input file", p);
        }
        for (what, path) in &self.writes {
            if let Some(path) = path {
                access.write(*what, *path);
            }
        }
    }
}

/// Checks a one-model command: `model` read, converted to `out` when given. With
/// `replace_input`, `out` may be the model file itself (never its external data).
pub fn check_model(
    model: &Model,
    out: Option<&Path>,
    extras: &Extras,
    replace_input: bool,
) -> Result<()> {
    let mut access = FileAccess::default();
    model.record_reads(&mut access)?;
    if replace_input {
        access.allow_replacing(model.path());
    }
    if let Some(out) = out {
        model.record_writes(out, &mut access)?;
    }
    extras.record(&mut access);
    access.check()
}

/// Checks a batch: every model is read with its external data, and the conversion of each one
/// that loads is written under `out_dir` (a model that does not load, or whose external data is
/// refused, fails on its own later and writes nothing).
pub fn check_batch(jobs: &[Job], out_dir: &Path, extras: &Extras) -> Result<()> {
    let mut access = FileAccess::default();
    for job in jobs {
        access.read("an input model", &job.source);
        if let Ok(model) = Model::load(&job.source)
            && model.record_reads(&mut access).is_ok()
        {
            model.record_writes(&out_dir.join(&job.relative), &mut access)?;
        }
    }
    extras.record(&mut access);
    access.check()
}
