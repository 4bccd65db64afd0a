//! Many models at once: which models a batch covers ([`discover`]), auditing them a few at a
//! time in a stable order ([`run_ordered`]), and writing each one's conversion under the output
//! folder ([`convert`]). The summary over all of them is [`crate::audit::BatchReport`].

mod discover;
mod pool;

use std::path::Path;

use anyhow::{Context, Result};

pub use discover::{Job, discover};
pub use pool::run_ordered;

use crate::audit::{self, Audit, Conversion, InputSource};
use crate::measure::CompareOptions;
use crate::onnx::SaveOptions;

/// Audits one model and writes its conversion under `out_dir`; nothing is written when any
/// step fails.
pub fn convert(
    job: &Job,
    out_dir: &Path,
    conversion: &Conversion,
    inputs: &InputSource,
    opts: &CompareOptions,
) -> Result<Audit> {
    let audit = audit::audit(&job.source, conversion, inputs, opts)?;
    let out = out_dir.join(&job.relative);
    if let Some(parent) = out.parent() {
        std::fs::create_dir_all(parent)
            .with_context(|| format!("cannot create '{}'", parent.display()))?;
    }
    audit.rewritten.save(&out, &SaveOptions::default())?;
    Ok(audit)
}
