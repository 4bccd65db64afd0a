//! Many models at once: which models a batch covers ([`discover`]), auditing them a few at a
//! time in a stable order ([`run_ordered`]), and writing each one's conversion under the output
//! folder ([`convert`]). The summary over all of them is [`crate::audit::BatchReport`].

mod discover;
mod pool;

use std::path::{Path, PathBuf};

use anyhow::{Context, Result};

pub use discover::{Discovery, Job, Skipped, discover};
pub use pool::run_ordered;

use crate::audit::{self, Audit, Conversion, InputSource, Verdict};
use crate::measure::CompareOptions;
use crate::onnx::SaveOptions;

/// One model of a batch, audited.
pub struct Converted {
    pub audit: Audit,
    /// Where its conversion was written; `None` when it was not (its verdict is not pass).
    pub written: Option<PathBuf>,
}

/// Audits one model and writes its conversion under `out_dir` when its verdict is pass (or
/// whatever it is, with `write_failing`); nothing is written when any step fails.
pub fn convert(
    job: &Job,
    out_dir: &Path,
    conversion: &Conversion,
    inputs: &InputSource,
    opts: &CompareOptions,
    write_failing: bool,
) -> Result<Converted> {
    let audit = audit::audit(&job.source, conversion, inputs, opts)?;
    if audit.judgement().verdict != Verdict::Pass && !write_failing {
        return Ok(Converted {
            audit,
            written: None,
        });
    }
    let out = out_dir.join(&job.relative);
    if let Some(parent) = out.parent() {
        std::fs::create_dir_all(parent)
            .with_context(|| format!("cannot create '{}'", parent.display()))?;
    }
    audit.rewritten.save(&out, &SaveOptions::default())?;
    Ok(Converted {
        audit,
        written: Some(out),
    })
}
