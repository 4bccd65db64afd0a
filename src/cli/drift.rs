//! `actswap drift`: the numeric drift and latency of a rewrite, per site and at every output,
//! with both models run by tract on the same samples.
//!
//! Exit codes: 0 pass, 1 over budget, nothing compared or a changed site unmeasured, 2 error. Without budget flags the
//! default budget applies ([`crate::measure::DEFAULT_BUDGET`]). The JSON schema (`--json`) is
//! printed by `actswap schema drift`.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, Result, bail};

use crate::audit::Judgement;
use crate::measure::{self, Budgets, CompareOptions, DEFAULT_BUDGET, LatencyOptions, Tolerance};
use crate::onnx::{Model, ModelIndex};
use crate::report::drift_table;
use crate::report::footer::{self, Judged};
use crate::report::json::DriftJson;
use crate::run;
use crate::schema_version::SchemaVersion;
use crate::text::escape_path;

use super::inputs::InputArgs;
use super::{exit_code, output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "Measure the drift and latency of a rewritten model against its original",
    long_about = "Run both models on the same samples and report, per activation site, the \
local drift (the new form isolated, fed the tensor the original site received) and the \
propagated drift (the site's tensor in the rewritten model), the observed input range and the \
catalogue's worst-case error over it, and per graph output max abs, mean abs, RMS, max rel, \
cosine, the share beyond tolerance and top-1 agreement; then end-to-end and per-site latency. \
Drift on sample inputs certifies nothing for safety-relevant uses: validate as your domain \
requires.",
    after_help = "Examples:\n  actswap drift model.onnx model.fast.onnx --dim batch=1\n  actswap drift model.onnx model.fast.onnx --input image=batch.npy --max-abs 1e-3 --min-cosine 0.9999\n  actswap drift model.onnx model.fast.onnx --dim batch=1 --samples 8 --dist uniform --range=-4,4 --json\n\nWithout budget flags the default budget applies (output cosine at least 0.999).\nExit codes: 0 pass, 1 over budget, nothing compared or a changed site unmeasured, 2 error."
)]
pub struct Args {
    /// The original ONNX model.
    original: PathBuf,
    /// The rewritten ONNX model.
    rewritten: PathBuf,
    #[command(flatten)]
    inputs: InputArgs,
    #[command(flatten)]
    measure: MeasureArgs,
    /// Print JSON instead of text (its schema: `actswap schema drift`).
    #[arg(long, help_heading = "Output")]
    json: bool,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let opts = args.measure.options()?;
    let inputs = args.inputs.source(false)?;
    paths::model_file(&args.original, "drift")?;
    paths::model_file(&args.rewritten, "drift")?;
    let original = Model::load(&args.original)?;
    let rewritten = Model::load(&args.rewritten)?;
    // Validation before tract reads anything (external data that is a FIFO would block it).
    for (model, path) in [(&original, &args.original), (&rewritten, &args.rewritten)] {
        ModelIndex::build(model).with_context(|| format!("'{}'", escape_path(path)))?;
    }
    let specs = run::input_specs(&original.encode())
        .with_context(|| format!("'{}'", args.original.display()))?;
    let loaded = inputs.load(&specs)?;
    let source = if opts.budgets.is_empty() {
        "default"
    } else {
        "flags, then default"
    };
    let opts = CompareOptions {
        input_source: loaded.source,
        budgets: opts.budgets.or(DEFAULT_BUDGET),
        ..opts
    };
    let report = measure::compare_models(&original, &rewritten, &loaded.samples, &opts)?;
    let judgement = Judgement::of(None, None, Some(&report));
    if args.json {
        output::print_json(&DriftJson {
            schema_version: SchemaVersion,
            report: &report,
            budget_source: source,
            verdict: judgement.verdict,
            reasons: &judgement.reasons,
        })?;
    } else {
        output::print(&drift_table::render(&report))?;
        let context = Judged {
            conversion: None,
            budget: Some((&report.budgets, source)),
            readiness: None,
        };
        output::print(&footer::render(&context, &judgement))?;
    }
    Ok(exit_code(judgement.verdict))
}

/// Budgets, tolerances and latency settings, shared by `drift` and `audit`.
#[derive(Debug, clap::Args)]
pub struct MeasureArgs {
    /// Budget: largest max abs allowed at any output.
    #[arg(long, value_name = "X", help_heading = "Budgets")]
    max_abs: Option<f64>,
    /// Budget: largest max rel allowed at any output.
    #[arg(long, value_name = "X", help_heading = "Budgets")]
    max_rel: Option<f64>,
    /// Budget: smallest cosine similarity allowed at any output.
    #[arg(long, value_name = "X", help_heading = "Budgets")]
    min_cosine: Option<f64>,
    /// Budget: smallest share of rows with the same top-1 class, at any output where top-1
    /// applies (0 to 1).
    #[arg(long, value_name = "X", help_heading = "Budgets")]
    min_top1: Option<f64>,
    /// Budget: largest local max abs allowed at any site.
    #[arg(long, value_name = "X", help_heading = "Budgets")]
    site_max_abs: Option<f64>,
    /// Absolute tolerance of the beyond-tolerance share.
    #[arg(
        long,
        value_name = "X",
        default_value_t = 1e-5,
        help_heading = "Tolerance"
    )]
    atol: f64,
    /// Relative tolerance of the beyond-tolerance share.
    #[arg(
        long,
        value_name = "X",
        default_value_t = 1e-4,
        help_heading = "Tolerance"
    )]
    rtol: f64,
    /// Floor of the max rel denominator: |b - a| / max(|a|, floor).
    #[arg(
        long,
        value_name = "X",
        default_value_t = 1e-6,
        help_heading = "Tolerance"
    )]
    rel_floor: f64,
    /// Timed runs of each model (interleaved).
    #[arg(long, value_name = "N", default_value_t = 20, help_heading = "Latency")]
    runs: usize,
    /// Untimed runs of each model first.
    #[arg(long, value_name = "N", default_value_t = 3, help_heading = "Latency")]
    warmup: usize,
    /// Skip latency measurement.
    #[arg(long, help_heading = "Latency", conflicts_with_all = ["runs", "warmup"])]
    no_latency: bool,
    /// Memory ceiling in GiB: a model whose values would take more, one of them or all
    /// together, is refused (exit 2) before tract allocates them.
    #[arg(
        long,
        value_name = "GIB",
        default_value_t = 8.0,
        help_heading = "Limits"
    )]
    max_memory: f64,
}

impl MeasureArgs {
    /// Validates the flags into comparison options.
    pub fn options(&self) -> Result<CompareOptions> {
        let args = self;
        for (flag, value) in [
            ("--max-abs", args.max_abs),
            ("--max-rel", args.max_rel),
            ("--site-max-abs", args.site_max_abs),
            ("--atol", Some(args.atol)),
            ("--rtol", Some(args.rtol)),
            ("--rel-floor", Some(args.rel_floor)),
        ] {
            if let Some(v) = value
                && !(v.is_finite() && v >= 0.0)
            {
                bail!("{flag} must be a finite number >= 0 (got {v})");
            }
        }
        if args.rel_floor == 0.0 {
            bail!("--rel-floor must be > 0");
        }
        if let Some(c) = args.min_cosine
            && !(-1.0..=1.0).contains(&c)
        {
            bail!("--min-cosine must lie in [-1, 1] (got {c})");
        }
        if let Some(t) = args.min_top1
            && !(0.0..=1.0).contains(&t)
        {
            bail!("--min-top1 must lie in [0, 1] (got {t})");
        }
        if !(args.max_memory.is_finite() && args.max_memory > 0.0) {
            bail!(
                "--max-memory must be a positive number of GiB (got {})",
                args.max_memory
            );
        }
        if args.runs == 0 {
            bail!("--runs must be at least 1");
        }
        Ok(CompareOptions {
            tolerance: Tolerance {
                atol: args.atol,
                rtol: args.rtol,
                rel_floor: args.rel_floor,
            },
            budgets: Budgets {
                max_abs: args.max_abs,
                max_rel: args.max_rel,
                min_cosine: args.min_cosine,
                min_top1: args.min_top1,
                site_max_abs: args.site_max_abs,
            },
            latency: (!args.no_latency).then_some(LatencyOptions {
                runs: args.runs,
                warmup: args.warmup,
            }),
            input_source: String::new(),
            memory_ceiling: (args.max_memory * (1u64 << 30) as f64) as u64,
        })
    }
}
