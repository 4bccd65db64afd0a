//! The whole job on one model, as a library stage: scan and plan ([`Conversion`]), rewrite in
//! memory, run both models on the samples ([`InputSource`]) and measure the pairs the plan and
//! the rewrite produced, then summarize with one verdict ([`summary`]). `audit` runs it for one
//! model, `batch` for each model of a folder.

mod conversion;
pub mod inputs;
pub mod readiness;
pub mod summary;

use std::path::Path;

use anyhow::{Context, Result, bail};

pub use conversion::Conversion;
pub use inputs::{InputSource, Origin};
pub use readiness::{Readiness, RefusedOp};
pub use summary::{
    BatchContext, BatchReport, Judgement, ModelRow, ModelSummary, Totals, Verdict, summarize,
};

use crate::measure::range::InputRange;
use crate::measure::{self, CompareOptions, DriftReport, SitePair};
use crate::onnx::{Model, ModelIndex};
use crate::plan::ranges::FitRanges;
use crate::plan::{Action, Plan};
use crate::rewrite::{self, Applied};
use crate::run;

/// One model scanned, planned, rewritten in memory, checked against its target and measured.
pub struct Audit {
    pub plan: Plan,
    pub rewritten: Model,
    pub applied: Vec<Applied>,
    /// The converted model against the target; `None` without a target.
    pub readiness: Option<Readiness>,
    pub drift: DriftReport,
    /// What the model was converted for, in words.
    pub conversion: String,
    /// Where the budget applied came from.
    pub budget_source: String,
}

impl Audit {
    /// The audit in a few figures, with its verdict.
    pub fn summary(&self) -> ModelSummary {
        summarize(&self.plan, self.readiness.as_ref(), &self.drift)
    }

    /// The verdict and every failing reason.
    pub fn judgement(&self) -> Judgement {
        Judgement::of(Some(&self.plan), self.readiness.as_ref(), Some(&self.drift))
    }
}

/// The ranges fitted forms are fitted over: the declared ones, and, when a site may get a
/// fitted form, the input ranges `observe` gives (calibration: by site id, as observed on the
/// samples).
pub fn fit_ranges(
    conversion: &Conversion,
    observe: impl FnOnce() -> Result<Vec<(String, InputRange)>>,
) -> Result<FitRanges> {
    let mut ranges = conversion.fit_ranges().clone();
    if conversion.may_fit() {
        for (id, r) in observe()? {
            ranges.observe(&id, r.min, r.max);
        }
    }
    Ok(ranges)
}

/// Audits the model at `path`; the budget of `opts` holds the limits given by flags, the rest
/// come from the conversion ([`Conversion::budget`]).
pub fn audit(
    path: &Path,
    conversion: &Conversion,
    inputs: &InputSource,
    opts: &CompareOptions,
) -> Result<Audit> {
    let model = Model::load(path)?;
    let index = ModelIndex::build(&model).with_context(|| format!("'{}'", path.display()))?;
    let main = index.main();
    if main.nodes.is_empty() || main.outputs.is_empty() {
        bail!(
            "'{}' has {}: there is nothing to convert or compare",
            path.display(),
            if main.outputs.is_empty() {
                "no output"
            } else {
                "no node"
            }
        );
    }
    let specs =
        run::input_specs(&model.encode()).with_context(|| format!("'{}'", path.display()))?;
    let loaded = inputs.load(&specs)?;
    let sites = conversion.sites(&index, path)?;
    // The original model runs once: its values give calibration its ranges and drift its
    // reference. The plan's bounds over the real line are computed meanwhile, on a thread of
    // their own.
    let original = std::thread::scope(|scope| {
        scope.spawn(|| conversion.bounds_ahead(&sites));
        measure::capture_original(&index, &sites, &loaded.samples, opts)
    })?;
    let ranges = fit_ranges(conversion, || {
        measure::calibrate::ranges(&index, &sites, original.main())
    })?;
    let plan = conversion.plan_sites(sites, &index, &ranges);
    let (rewritten, applied) = rewrite::apply(&model, &index, &plan)?;
    let (budgets, budget_source) = conversion.budget(opts.budgets);
    let opts = CompareOptions {
        input_source: loaded.source,
        budgets,
        ..opts.clone()
    };
    let new_index = ModelIndex::build(&rewritten).context("rewritten model")?;
    let counterparts = rewrite::counterparts(&plan, &applied, &index, &new_index)?;
    let readiness = conversion
        .profile()
        .map(|p| readiness::check(&new_index, p, &counterparts));
    let pairs: Vec<SitePair> = counterparts
        .into_iter()
        .zip(&plan.sites)
        .map(|(b, p)| SitePair {
            a: p.site.clone(),
            b,
            fit: match &p.action {
                Action::Rewrite(r) => r.fit.as_deref().map(|(f, _)| f.clone()),
                _ => None,
            },
        })
        .collect();
    let drift = measure::compare(
        &index,
        &new_index,
        &pairs,
        Vec::new(),
        &loaded.samples,
        &opts,
        Some(original),
    )?;
    drop(new_index);
    Ok(Audit {
        plan,
        rewritten,
        applied,
        readiness,
        drift,
        conversion: conversion.describe(),
        budget_source,
    })
}
