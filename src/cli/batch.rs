//! `actswap batch`: `audit` over many models, several at a time, writing each converted model
//! under the output folder and summarizing them all. A model that fails is listed with its error
//! and nothing is written for it; the others go on.
//!
//! Exit codes: 0 every model passes, 1 some model has another verdict (ops the target does not
//! run, unserved sites, over budget, nothing compared, a rewritten site unmeasured), 2 some model
//! failed (or the batch itself could not start).

use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;
use std::time::Instant;

use anyhow::Result;

use crate::audit::{BatchContext, BatchReport, ModelRow};
use crate::batch::{self, Converted, Job};
use crate::onnx::model::write_atomic;
use crate::report::batch_table;
use crate::report::html::{self, ModelSection};
use crate::text::escape_path;

use super::access::{self, Extras};
use super::drift::MeasureArgs;
use super::inputs::InputArgs;
use super::plan_args::PlanArgs;
use super::{exit_code, output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "Convert and audit every model of a folder for a target, several at a time",
    long_about = "Find every .onnx file below the given folders (and the files given by name), \
convert and audit each one as `audit` does, and write the converted models under OUTDIR in the \
same layout, with their external data beside them. A model that fails is listed with its error \
and nothing is written for it; the other models go on. Prints a summary per model and in total; \
--json, --markdown and --report give it as JSON, as Markdown for a CI job summary and as a \
self-contained HTML page. Drift on sample inputs certifies nothing for safety-relevant uses: \
validate as your domain requires.",
    after_help = "Examples:\n  actswap batch exported/ --target piecewise-linear --dim batch=1 -o converted/\n  actswap batch exported/ --to silu=hard_swish --dim batch=1 --max-abs 1e-2 -o converted/ --markdown summary.md --report batch.html\n\nOnly models whose verdict is pass are written (--write-failing writes every one).\nExit codes: 0 all pass, 1 some other verdict, 2 some model failed."
)]
pub struct Args {
    /// Model files, or folders searched for .onnx files (inputs are never modified).
    #[arg(required = true, value_name = "DIR_OR_FILE")]
    paths: Vec<PathBuf>,
    #[command(flatten)]
    plan: PlanArgs,
    /// Folder the converted models are written to, in the layout they were found in: those
    /// whose verdict is pass.
    #[arg(short = 'o', long = "output", value_name = "OUTDIR", required = true)]
    out_dir: PathBuf,
    /// Write every converted model, whatever its verdict.
    #[arg(long)]
    write_failing: bool,
    #[command(flatten)]
    inputs: InputArgs,
    #[command(flatten)]
    measure: MeasureArgs,
    /// Models converted at the same time [default: the number of cores]. Latency figures are
    /// steadiest with 1.
    #[arg(short = 'j', long, value_name = "N")]
    jobs: Option<usize>,
    /// Print the summary as JSON instead of text.
    #[arg(long, help_heading = "Output")]
    json: bool,
    /// Also write the summary as Markdown (for a CI job summary).
    #[arg(long, value_name = "FILE.md", help_heading = "Output")]
    markdown: Option<PathBuf>,
    /// Also write a self-contained HTML report of every model.
    #[arg(long, value_name = "FILE.html", help_heading = "Output")]
    report: Option<PathBuf>,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let opts = args.measure.options()?;
    let conversion = args.plan.conversion()?;
    let inputs = args.inputs.source(true)?;
    paths::output_files(&[
        ("--markdown", args.markdown.as_deref()),
        ("--report", args.report.as_deref()),
    ])?;
    let found = batch::discover(&args.paths, &args.out_dir)?;
    let extras = Extras {
        reads: [args.plan.files(), args.inputs.files()].concat(),
        writes: vec![
            ("the Markdown summary", args.markdown.as_deref()),
            ("the report", args.report.as_deref()),
        ],
    };
    access::check_batch(&found.jobs, &args.out_dir, &extras)?;
    for s in &found.skipped {
        eprintln!("actswap: skipped {}: {}", escape_path(&s.path), s.reason);
    }
    let jobs = found.jobs;
    let threads = args
        .jobs
        .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |n| n.get()))
        .max(1);
    let progress = Progress::new(jobs.len());
    let results = batch::run_ordered(
        &jobs,
        threads,
        |job| {
            let inputs = inputs.for_model(&job.relative);
            batch::convert(
                job,
                &args.out_dir,
                &conversion,
                &inputs,
                &opts,
                args.write_failing,
            )
        },
        |i, r| progress.finished(&jobs[i], r),
    );
    progress.clear();
    let sections: Vec<ModelSection> = jobs
        .iter()
        .zip(&results)
        .map(|(job, r)| ModelSection {
            name: job.source.display().to_string(),
            audit: r.as_ref().ok().map(|c| &c.audit),
            error: r.as_ref().err().map(|e| super::one_line(&format!("{e:#}"))),
        })
        .collect();
    let rows: Vec<ModelRow> = results
        .iter()
        .zip(&sections)
        .map(|(r, s)| ModelRow {
            output: r
                .as_ref()
                .ok()
                .and_then(|c| c.written.as_ref())
                .map(|p| p.display().to_string()),
            summary: s.summary().expect("a section holds a result or an error"),
        })
        .collect();
    let (budget, budget_source) = conversion.budget(opts.budgets);
    let context = BatchContext {
        converted_for: conversion.describe(),
        budget,
        budget_source,
        inputs: args.inputs.describe(),
    };
    let report = BatchReport::new(context, rows);
    if let Some(path) = &args.markdown {
        write_atomic(path, batch_table::markdown(&report).as_bytes())?;
    }
    if let Some(path) = &args.report {
        write_atomic(path, html::render("actswap batch", &sections).as_bytes())?;
    }
    if args.json {
        output::print_json(&report)?;
    } else {
        output::print(&batch_table::text(&report))?;
    }
    Ok(exit_code(report.worst_verdict()))
}

/// A progress bar on a terminal; plain lines on standard error otherwise.
struct Progress {
    bar: Option<indicatif::ProgressBar>,
    total: usize,
    done: std::sync::atomic::AtomicUsize,
    start: Instant,
}

impl Progress {
    fn new(total: usize) -> Self {
        let bar = std::io::stderr().is_terminal().then(|| {
            let bar = indicatif::ProgressBar::new(total as u64);
            bar.set_style(
                indicatif::ProgressStyle::with_template(
                    "{elapsed_precise} [{bar:30}] {pos}/{len} models {msg}",
                )
                .expect("a valid template")
                .progress_chars("=> "),
            );
            bar
        });
        Progress {
            bar,
            total,
            done: Default::default(),
            start: Instant::now(),
        }
    }

    fn finished(&self, job: &Job, result: &Result<Converted>) {
        let n = self.done.fetch_add(1, std::sync::atomic::Ordering::Relaxed) + 1;
        let verdict = match result {
            Ok(c) => c.audit.judgement().line(),
            Err(e) => format!("error: {}", super::one_line(&format!("{e:#}"))),
        };
        let line = format!(
            "[{n}/{}] {}: {verdict} ({:.1} s)",
            self.total,
            job.source.display(),
            self.start.elapsed().as_secs_f64()
        );
        match &self.bar {
            Some(bar) => {
                bar.println(line);
                bar.inc(1);
            }
            None => eprintln!("actswap: {line}"),
        }
    }

    fn clear(&self) {
        if let Some(bar) = &self.bar {
            bar.finish_and_clear();
        }
    }
}
