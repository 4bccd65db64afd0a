//! `actswap audit`: the whole job on one model. Scan, plan, rewrite in memory, run both models
//! with tract, and report drift and latency per site and per output; write the rewritten model
//! only with `-o`, and an HTML report only with `--report`.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Result;

use crate::audit;
use crate::onnx::model::write_atomic;
use crate::onnx::{Model, SaveOptions};
use crate::report::footer::{self, Judged};
use crate::report::html::{self, ModelSection};
use crate::report::json::AuditJson;
use crate::report::{drift_table, plan_table};

use super::access::{self, Extras};
use super::drift::MeasureArgs;
use super::inputs::InputArgs;
use super::plan_args::PlanArgs;
use super::{exit_code, output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "Convert a model for a target and prove the swap: drift per site and output, latency",
    long_about = "Scan, plan and convert the model in memory, check that the target runs every node \
of the converted model, run both models with tract and report drift and latency per site and per \
output, against the target's budget (or the flags'). The last line is the one verdict: pass, or \
the first failing reason among error, ops the target does not run (not_ready), unserved sites, \
over budget, nothing compared, and rewritten sites without a drift figure (unmeasured). Drift on sample inputs certifies nothing for safety-relevant \
uses: validate as your domain requires.",
    after_help = "Examples:\n  actswap audit sample-models/orchard-grader.onnx --target piecewise-linear --dim batch=1\n  actswap audit model.onnx --to silu=hard_swish --input image=batch.npy --max-abs 1e-2 -o model.fast.onnx\n  actswap audit model.onnx --target core-opset13 --dim batch=1 --samples 8 --json > audit.json\n  actswap audit model.onnx --target piecewise-linear --dim batch=1 --report audit.html\n\nExit codes: 0 pass, 1 any other verdict, 2 error."
)]
pub struct Args {
    /// The ONNX model file (never modified).
    model: PathBuf,
    #[command(flatten)]
    plan: PlanArgs,
    /// Also write the converted model here, when the verdict is pass.
    #[arg(short = 'o', long = "output", value_name = "OUT")]
    output: Option<PathBuf>,
    /// Write the converted model with -o whatever the verdict.
    #[arg(long, requires = "output")]
    write_failing: bool,
    #[command(flatten)]
    inputs: InputArgs,
    #[command(flatten)]
    measure: MeasureArgs,
    /// Print JSON instead of text (plan, readiness, drift, verdict and reasons).
    #[arg(long, help_heading = "Output")]
    json: bool,
    /// Also write a self-contained HTML report here (site table, drift and latency charts, a
    /// plot per swapped kind, output metrics), whatever the verdict.
    #[arg(long, value_name = "FILE.html", help_heading = "Output")]
    report: Option<PathBuf>,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let opts = args.measure.options()?;
    let conversion = args.plan.conversion()?;
    let extras = Extras {
        reads: [args.plan.files(), args.inputs.files()].concat(),
        writes: vec![("the report", args.report.as_deref())],
    };
    paths::model_file(&args.model, "audit")?;
    paths::output_files(&[
        ("-o", args.output.as_deref()),
        ("--report", args.report.as_deref()),
    ])?;
    access::check_model(
        &Model::load(&args.model)?,
        args.output.as_deref(),
        &extras,
        false,
    )?;
    let inputs = args.inputs.source(false)?;
    let audit = audit::audit(&args.model, &conversion, &inputs, &opts)?;
    let judgement = audit.judgement();
    let passed = judgement.verdict == audit::Verdict::Pass;
    let written = match &args.output {
        Some(out) if passed || args.write_failing => {
            audit.rewritten.save(out, &SaveOptions::default())?;
            Some(out)
        }
        _ => None,
    };
    if let Some(path) = &args.report {
        let section = ModelSection {
            name: args.model.display().to_string(),
            audit: Some(&audit),
            error: None,
        };
        let title = format!("actswap audit: {}", file_name(&args.model));
        write_atomic(path, html::render(&title, &[section]).as_bytes())?;
    }
    if args.json {
        let doc = AuditJson {
            written: written.map(|out| out.display().to_string()),
            report: args.report.as_ref().map(|p| p.display().to_string()),
            ..AuditJson::new(args.model.display().to_string(), &audit, &judgement)
        };
        output::print_json(&doc)?;
    } else {
        output::print(&plan_table::render(&audit.plan))?;
        output::print(&format!("\n{}", drift_table::render(&audit.drift)))?;
        if let Some(out) = &args.output {
            match written {
                Some(_) => output::print(&format!("wrote {}\n", out.display()))?,
                None => output::print(&format!(
                    "not written: {} (the verdict is not pass; --write-failing writes it anyway)\n",
                    out.display()
                ))?,
            }
        }
        if let Some(path) = &args.report {
            output::print(&format!("wrote report {}\n", path.display()))?;
        }
        let context = Judged {
            conversion: Some(&audit.conversion),
            budget: Some((&audit.drift.budgets, &audit.budget_source)),
            readiness: audit.readiness.as_ref(),
        };
        output::print(&footer::render(&context, &judgement))?;
    }
    Ok(exit_code(judgement.verdict))
}

/// The file name of a path, or the whole path when it has none.
fn file_name(p: &Path) -> String {
    p.file_name().map_or_else(
        || p.display().to_string(),
        |n| n.to_string_lossy().into_owned(),
    )
}
