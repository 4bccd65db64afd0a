//! `actswap catalog`: the activation kinds actswap knows. With no kind, one line per kind; with
//! a kind, its formula, source, forms and approximations in full.

use std::process::ExitCode;

use anyhow::{Result, bail};

use crate::catalog;
use crate::report::json::CatalogJson;
use crate::report::table;

use super::output;

#[derive(Debug, clap::Args)]
#[command(
    about = "Describe the activation kinds: formula, parameters, source, fused op and opset, forms",
    after_help = "Examples:\n  actswap catalog\n  actswap catalog swish\n  actswap catalog gelu --json"
)]
pub struct Args {
    /// One kind id, described in full (without it: one line per kind).
    kind: Option<String>,
    /// Print JSON instead of text (every kind in full under "kinds" when no kind is given).
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let kind = match &args.kind {
        None => None,
        Some(id) => match catalog::get(id) {
            Some(k) => Some(k),
            None => {
                let ids: Vec<&str> = catalog::all().iter().map(|k| k.id).collect();
                bail!("unknown kind '{id}' (known: {})", ids.join(", "));
            }
        },
    };
    match (kind, args.json) {
        (kind, true) => output::print_json(&CatalogJson::of(kind))?,
        (Some(k), false) => output::print(&catalog::describe(k))?,
        (None, false) => output::print(&summary())?,
    }
    Ok(ExitCode::SUCCESS)
}

/// One line per kind, then how to see one in full.
fn summary() -> String {
    let rows: Vec<Vec<String>> = catalog::all()
        .iter()
        .map(|k| catalog::summary_row(k))
        .collect();
    format!(
        "{}\n{} kinds. fused, primitive: the first op and the least opset of each form actswap\n\
writes (float32). `actswap catalog KIND` describes one kind in full: formula, parameters,\n\
source, forms and approximations.\n",
        table::render(&catalog::SUMMARY_COLUMNS, &rows),
        rows.len()
    )
}
