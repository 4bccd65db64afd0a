//! `actswap swap`: convert activation sites to the forms a target accepts.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, Result};

use crate::audit::{self, Judgement, Verdict, readiness};
use crate::measure;
use crate::onnx::{Model, ModelIndex, SaveOptions};
use crate::report::footer::{self, Judged};
use crate::report::json::{AppliedJson, SwapJson};
use crate::report::plan_table;
use crate::rewrite;
use crate::run::{self, DEFAULT_MEMORY_CEILING};
use crate::schema_version::SchemaVersion;

use super::access::{self, Extras};
use super::inputs::InputArgs;
use super::plan_args::PlanArgs;
use super::{exit_code, output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "Convert activation sites to the forms a target runtime accepts",
    after_help = "Examples:\n  actswap swap model.onnx -o out.onnx --to silu=fused\n  actswap swap model.onnx -o out.onnx --to gelu=gelu_tanh --to '*=primitive'\n  actswap swap model.onnx -o out.onnx --to swish=hard_swish:primitive --site s3\n  actswap swap model.onnx -o out.onnx --target core-opset13 --dry-run\n  actswap swap model.onnx -o out.onnx --to silu=fitted:8 --input image=batch.npy\n\nWith any input option, fitted forms are fitted over the input ranges seen on those samples (each widened by 25% of its width on each side); without, over --fit-range or [-8, 8]. The plan is printed before anything is written; the model is written only when the verdict is pass (--write-failing writes it anyway). Exit codes: 0 pass, 1 unserved sites or ops the target does not run, 2 error."
)]
pub struct Args {
    /// The ONNX model file (never modified unless --overwrite and -o name it).
    model: PathBuf,
    /// Where to write the converted model.
    #[arg(
        short = 'o',
        long = "output",
        value_name = "OUT",
        required_unless_present = "dry_run"
    )]
    output: Option<PathBuf>,
    #[command(flatten)]
    plan: PlanArgs,
    /// With any input option, fitted forms are fitted over each site's input range observed on
    /// those samples (widened by 25% of its width on each side), as `audit` does.
    #[command(flatten)]
    inputs: InputArgs,
    /// Print the plan and stop.
    #[arg(long)]
    dry_run: bool,
    /// Print the plan (and what was written) as JSON.
    #[arg(long)]
    json: bool,
    /// Allow OUT to be the input file.
    #[arg(long)]
    overwrite: bool,
    /// Write the converted model whatever the verdict (by default only a model that passes:
    /// every site served and, with --target, every node run by the target).
    #[arg(long)]
    write_failing: bool,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let conversion = args.plan.conversion()?;
    let inputs = args
        .inputs
        .given()
        .then(|| args.inputs.source(false))
        .transpose()?;
    paths::model_file(&args.model, "swap")?;
    paths::output_files(&[("-o", args.output.as_deref().filter(|_| !args.dry_run))])?;
    let model = Model::load(&args.model)?;
    let out = args.output.as_deref().filter(|_| !args.dry_run);
    let reads = Extras {
        reads: [args.plan.files(), args.inputs.files()].concat(),
        ..Extras::default()
    };
    access::check_model(&model, out, &reads, args.overwrite)?;
    let index = ModelIndex::build(&model).with_context(|| format!("'{}'", args.model.display()))?;
    let plan = match inputs.filter(|_| conversion.may_fit()) {
        Some(inputs) => {
            let specs = run::input_specs(&model.encode())
                .with_context(|| format!("'{}'", args.model.display()))?;
            let samples = inputs.load(&specs)?.samples;
            let sites = conversion.sites(&index, &args.model)?;
            let ranges = audit::fit_ranges(&conversion, || {
                measure::calibrate::observe(&index, &sites, &samples, DEFAULT_MEMORY_CEILING)
            })?;
            conversion.plan_sites(sites, &index, &ranges)
        }
        None => conversion.plan(&index, &args.model)?,
    };
    let (rewritten, applied) = rewrite::apply(&model, &index, &plan)?;
    let readiness = match conversion.profile() {
        Some(p) => {
            let new_index = ModelIndex::build(&rewritten).context("the converted model")?;
            let sites = rewrite::counterparts(&plan, &applied, &index, &new_index)?;
            Some(readiness::check(&new_index, p, &sites))
        }
        None => None,
    };
    let judgement = Judgement::of(Some(&plan), readiness.as_ref(), None);
    let write = !args.dry_run && (judgement.verdict == Verdict::Pass || args.write_failing);
    if write {
        let out = args
            .output
            .as_ref()
            .expect("clap requires -o without --dry-run");
        let opts = SaveOptions {
            overwrite_input: args.overwrite,
            ..SaveOptions::default()
        };
        rewritten.save(out, &opts)?;
    }
    if args.json {
        output::print_json(&SwapJson {
            schema_version: SchemaVersion,
            plan: plan.json(),
            written: args
                .output
                .as_ref()
                .filter(|_| write)
                .map(|o| o.display().to_string()),
            applied: write.then(|| applied.iter().map(AppliedJson::from).collect()),
            converted_for: conversion.describe(),
            readiness: readiness.as_ref(),
            verdict: judgement.verdict,
            reasons: &judgement.reasons,
        })?;
    } else {
        output::print(&plan_table::render(&plan))?;
        match &args.output {
            Some(out) if write => output::print(&format!(
                "wrote {} ({} site{} rewritten)\n",
                out.display(),
                applied.len(),
                if applied.len() == 1 { "" } else { "s" }
            ))?,
            Some(out) if !args.dry_run => output::print(&format!(
                "not written: {} (the verdict is not pass; --write-failing writes it anyway)\n",
                out.display()
            ))?,
            _ => {}
        }
        let description = conversion.describe();
        let context = Judged {
            conversion: Some(&description),
            budget: None,
            readiness: readiness.as_ref(),
        };
        output::print(&footer::render(&context, &judgement))?;
    }
    Ok(exit_code(judgement.verdict))
}
