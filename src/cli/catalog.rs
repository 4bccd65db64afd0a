//! `actswap catalog`: the activation kinds actswap knows, with formulas, sources and forms.

use std::process::ExitCode;

use anyhow::{Result, bail};

use crate::catalog;

use super::output;

#[derive(Debug, clap::Args)]
#[command(
    about = "Describe the activation kinds: formula, parameters, source, fused op and opset, forms",
    after_help = "Examples:\n  actswap catalog\n  actswap catalog swish\n  actswap catalog gelu --json"
)]
pub struct Args {
    /// One kind id (all kinds when omitted).
    kind: Option<String>,
    /// Print JSON instead of text.
    #[arg(long)]
    json: bool,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let kinds: Vec<&catalog::Kind> = match &args.kind {
        None => catalog::all().to_vec(),
        Some(id) => match catalog::get(id) {
            Some(k) => vec![k],
            None => {
                let ids: Vec<&str> = catalog::all().iter().map(|k| k.id).collect();
                bail!("unknown kind '{id}' (known: {})", ids.join(", "));
            }
        },
    };
    if args.json {
        let v: Vec<serde_json::Value> = kinds.iter().map(|k| catalog::to_json(k)).collect();
        output::print_json(&if args.kind.is_some() {
            v[0].clone()
        } else {
            v.into()
        })?;
    } else {
        let text: Vec<String> = kinds.iter().map(|k| catalog::describe(k)).collect();
        output::print(&text.join("\n"))?;
    }
    Ok(ExitCode::SUCCESS)
}
