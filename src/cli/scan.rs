//! `actswap scan`: the inventory of activation sites.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, Result, bail};

use crate::catalog;
use crate::onnx::{Model, ModelIndex};
use crate::report::scan_table;
use crate::scan;

use super::{output, paths};

#[derive(Debug, clap::Args)]
#[command(
    about = "List every activation site, fused or spelled out as primitive ops, with its parameters",
    after_help = "Examples:\n  actswap scan sample-models/orchard-grader.onnx\n  actswap scan model.onnx --kind gelu --kind gelu_tanh\n  actswap scan model.onnx --json > sites.json"
)]
pub struct Args {
    /// The ONNX model file.
    model: PathBuf,
    /// Only report sites of this kind (repeatable; see `actswap catalog`).
    #[arg(long = "kind", value_name = "KIND")]
    kinds: Vec<String>,
    /// Print JSON instead of text.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> Result<ExitCode> {
    for k in &args.kinds {
        if catalog::get(k).is_none() {
            let ids: Vec<&str> = catalog::all().iter().map(|k| k.id).collect();
            bail!("unknown kind '{k}' (known: {})", ids.join(", "));
        }
    }
    paths::model_file(&args.model, "scan")?;
    let model = Model::load(&args.model)?;
    let index = ModelIndex::build(&model).with_context(|| format!("'{}'", args.model.display()))?;
    let mut report = scan::scan(&index);
    if !args.kinds.is_empty() {
        report
            .sites
            .retain(|s| args.kinds.iter().any(|k| k == s.kind.id));
        report
            .counts
            .retain(|k, _| args.kinds.iter().any(|a| a == k));
    }
    if args.json {
        output::print_json(&report)?;
    } else if std::io::stdout().is_terminal() {
        output::print(&scan_table::render(&report))?;
    } else {
        output::write_with(|mut out| scan_table::write(&mut out, &report))?;
    }
    output::keep_until_exit(report);
    output::keep_until_exit(index);
    output::keep_until_exit(model);
    Ok(ExitCode::SUCCESS)
}
