//! `actswap audit`: the whole job on one model. Scan, plan, rewrite in memory, run both models
//! with tract, and report drift and latency per site and per output; write the rewritten model
//! only with `-o`, and an HTML report only with `--report`.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Result;

use crate::audit::{self, Audit, Verdict};
use crate::onnx::SaveOptions;
use crate::onnx::model::write_atomic;
use crate::report::html::{self, ModelSection};
use crate::report::{drift_table, plan_table};

use super::drift::MeasureArgs;
use super::inputs::InputArgs;
use super::plan_args::PlanArgs;
use super::{EXIT_OVER_BUDGET, output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "Convert a model for a target and prove the swap: drift per site and output, latency",
    after_help = "Examples:\n  actswap audit sample-models/orchard-grader.onnx --target piecewise-linear --dim batch=1\n  actswap audit model.onnx --to silu=hard_swish --input image=batch.npy --max-abs 1e-2 -o model.fast.onnx\n  actswap audit model.onnx --target core-opset13 --dim batch=1 --samples 8 --json > audit.json\n  actswap audit model.onnx --target piecewise-linear --dim batch=1 --report audit.html\n\nExit codes: 0 within budget, 1 over budget or unserved sites, 2 error."
)]
pub struct Args {
    /// The ONNX model file (never modified).
    model: PathBuf,
    #[command(flatten)]
    plan: PlanArgs,
    /// Also write the rewritten model here.
    #[arg(short = 'o', long = "output", value_name = "OUT")]
    output: Option<PathBuf>,
    #[command(flatten)]
    inputs: InputArgs,
    #[command(flatten)]
    measure: MeasureArgs,
    /// Print JSON instead of text: {"plan": ..., "drift": ...}.
    #[arg(long, help_heading = "Output")]
    json: bool,
    /// Also write a self-contained HTML report here (site table, drift and latency charts, a
    /// plot per swapped kind, output metrics), within budget or not.
    #[arg(long, value_name = "FILE.html", help_heading = "Output")]
    report: Option<PathBuf>,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let opts = args.measure.options()?;
    let conversion = args.plan.conversion()?;
    let inputs = args.inputs.source(false)?;
    paths::model_file(&args.model, "audit")?;
    paths::output_files(&[
        ("-o", args.output.as_deref()),
        ("--report", args.report.as_deref()),
    ])?;
    let audit = audit::audit(&args.model, &conversion, &inputs, &opts)?;
    if let Some(out) = &args.output {
        audit.rewritten.save(out, &SaveOptions::default())?;
    }
    if let Some(path) = &args.report {
        let section = ModelSection {
            name: args.model.display().to_string(),
            plan: Some(&audit.plan),
            drift: Some(&audit.drift),
            error: None,
        };
        let title = format!("actswap audit: {}", file_name(&args.model));
        write_atomic(path, html::render(&title, &[section]).as_bytes())?;
    }
    if args.json {
        let mut v =
            serde_json::json!({"plan": audit.plan.to_json(), "drift": audit.drift.to_json()});
        if let Some(out) = &args.output {
            v["written"] = out.display().to_string().into();
        }
        if let Some(path) = &args.report {
            v["report"] = path.display().to_string().into();
        }
        output::print_json(&v)?;
    } else {
        output::print(&plan_table::render(&audit.plan))?;
        output::print(&format!("\n{}", drift_table::render(&audit.drift)))?;
        output::print(&format!("audit: {}\n", verdict_line(&audit)))?;
        if let Some(out) = &args.output {
            output::print(&format!("wrote {}\n", out.display()))?;
        }
        if let Some(path) = &args.report {
            output::print(&format!("wrote report {}\n", path.display()))?;
        }
    }
    Ok(if audit.summary().verdict == Verdict::Pass {
        ExitCode::SUCCESS
    } else {
        ExitCode::from(EXIT_OVER_BUDGET)
    })
}

/// The file name of a path, or the whole path when it has none.
fn file_name(p: &Path) -> String {
    p.file_name().map_or_else(
        || p.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    )
}

/// The audit's verdict in words: the drift verdict and the plan's unserved sites together.
fn verdict_line(audit: &Audit) -> String {
    match audit.summary().verdict {
        Verdict::Pass => "pass".into(),
        Verdict::OverBudget => "over budget (see the offenders above)".into(),
        Verdict::Unserved => format!(
            "unserved: {} site(s) have no form the target accepts (see the plan above)",
            audit.plan.unserved()
        ),
        Verdict::Error => "error".into(),
    }
}
