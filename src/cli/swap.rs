//! `actswap swap`: convert activation sites to the forms a target accepts.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, Result, bail};

use crate::onnx::{Model, ModelIndex, SaveOptions};
use crate::report::plan_table;
use crate::rewrite;

use super::plan_args::PlanArgs;
use super::{EXIT_OVER_BUDGET, output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "Convert activation sites to the forms a target runtime accepts",
    after_help = "Examples:\n  actswap swap model.onnx -o out.onnx --to silu=fused\n  actswap swap model.onnx -o out.onnx --to gelu=gelu_tanh --to '*=primitive'\n  actswap swap model.onnx -o out.onnx --to swish=hard_swish:primitive --site s3\n  actswap swap model.onnx -o out.onnx --target core-opset13 --dry-run\n\nThe plan is printed before anything is written. Exit code 1 when a site cannot be served."
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
    /// Print the plan and stop.
    #[arg(long)]
    dry_run: bool,
    /// Print the plan (and what was written) as JSON.
    #[arg(long)]
    json: bool,
    /// Allow OUT to be the input file.
    #[arg(long)]
    overwrite: bool,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let conversion = args.plan.conversion()?;
    paths::model_file(&args.model, "swap")?;
    paths::output_files(&[("-o", args.output.as_deref())])?;
    let model = Model::load(&args.model)?;
    if let Some(out) = &args.output
        && !args.overwrite
        && out.canonicalize().ok() == args.model.canonicalize().ok()
        && out.exists()
    {
        bail!(
            "output '{}' is the input model; refusing to overwrite it (use --overwrite)",
            out.display()
        );
    }
    let index = ModelIndex::build(&model).with_context(|| format!("'{}'", args.model.display()))?;
    let plan = conversion.plan(&index, &args.model)?;
    let mut json = plan.to_json();
    if !args.json {
        output::print(&plan_table::render(&plan))?;
    }
    if !args.dry_run {
        let out = args
            .output
            .as_ref()
            .expect("clap requires -o without --dry-run");
        let (rewritten, applied) = rewrite::apply(&model, &index, &plan)?;
        let opts = SaveOptions {
            overwrite_input: args.overwrite,
            ..SaveOptions::default()
        };
        rewritten.save(out, &opts)?;
        json["written"] = out.display().to_string().into();
        json["applied"] = applied
            .iter()
            .map(|a| serde_json::json!({"site": a.site, "output": a.output, "nodes": a.nodes, "constants": a.constants}))
            .collect();
        if !args.json {
            output::print(&format!(
                "wrote {} ({} site{} rewritten)\n",
                out.display(),
                applied.len(),
                if applied.len() == 1 { "" } else { "s" }
            ))?;
        }
    }
    if args.json {
        output::print_json(&json)?;
    }
    Ok(if plan.unserved() > 0 {
        ExitCode::from(EXIT_OVER_BUDGET)
    } else {
        ExitCode::SUCCESS
    })
}
