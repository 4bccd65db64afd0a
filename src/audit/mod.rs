//! The whole job on one model, as a library stage: scan and plan ([`Conversion`]), rewrite in
//! memory, run both models on the samples ([`InputSource`]) and measure the pairs the plan and
//! the rewrite produced, then summarize with one verdict ([`summary`]). `audit` runs it for one
//! model, `batch` for each model of a folder.

mod conversion;
pub mod inputs;
pub mod summary;

use std::path::Path;

use anyhow::{Context, Result};

pub use conversion::Conversion;
pub use inputs::{InputSource, Origin};
pub use summary::{BatchReport, ModelRow, ModelSummary, Totals, Verdict, summarize};

use crate::measure::{self, CompareOptions, DriftReport, SitePair};
use crate::onnx::{Model, ModelIndex};
use crate::plan::Plan;
use crate::rewrite::{self, Applied};
use crate::run;

/// One model scanned, planned, rewritten in memory and measured.
pub struct Audit {
    pub plan: Plan,
    pub rewritten: Model,
    pub applied: Vec<Applied>,
    pub drift: DriftReport,
}

impl Audit {
    /// The audit in a few figures, with its verdict.
    pub fn summary(&self) -> ModelSummary {
        summarize(&self.plan, &self.drift)
    }
}

/// Audits the model at `path`.
pub fn audit(
    path: &Path,
    conversion: &Conversion,
    inputs: &InputSource,
    opts: &CompareOptions,
) -> Result<Audit> {
    let model = Model::load(path)?;
    let index = ModelIndex::build(&model).with_context(|| format!("'{}'", path.display()))?;
    let plan = conversion.plan(&index, path)?;
    let (rewritten, applied) = rewrite::apply(&model, &index, &plan)?;
    let specs =
        run::input_specs(&model.encode()).with_context(|| format!("'{}'", path.display()))?;
    let loaded = inputs.load(&specs)?;
    let opts = CompareOptions {
        input_source: loaded.source,
        ..opts.clone()
    };
    let new_index = ModelIndex::build(&rewritten).context("rewritten model")?;
    let pairs: Vec<SitePair> = rewrite::counterparts(&plan, &applied, &index, &new_index)?
        .into_iter()
        .zip(&plan.sites)
        .map(|(b, p)| SitePair {
            a: p.site.clone(),
            b,
        })
        .collect();
    let drift = measure::compare(
        &index,
        &new_index,
        &pairs,
        Vec::new(),
        &loaded.samples,
        &opts,
    )?;
    drop(new_index);
    Ok(Audit {
        plan,
        rewritten,
        applied,
        drift,
    })
}
