//! `actswap info`: what a model file holds.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, Result};

use crate::onnx::{Model, ModelIndex, summary::Summary};

use super::{output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "Show a model's header, opsets, op counts, inputs, outputs, subgraphs and functions",
    after_help = "Examples:\n  actswap info sample-models/orchard-grader.onnx\n  actswap info model.onnx --json | jq .opsets"
)]
pub struct Args {
    /// The ONNX model file.
    model: PathBuf,
    /// Print JSON instead of text.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> Result<ExitCode> {
    paths::model_file(&args.model, "info")?;
    let model = Model::load(&args.model)?;
    let index = ModelIndex::build(&model).with_context(|| format!("'{}'", args.model.display()))?;
    let summary = Summary::of(&index)?;
    if args.json {
        output::print_json(&summary)?;
    } else {
        output::print(&summary.render())?;
    }
    output::keep_until_exit(summary);
    output::keep_until_exit(index);
    output::keep_until_exit(model);
    Ok(ExitCode::SUCCESS)
}
