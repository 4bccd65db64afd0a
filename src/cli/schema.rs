//! `actswap schema`: the JSON Schema of each JSON output and of the target profile.

use std::process::ExitCode;

use anyhow::{Result, bail};

use crate::report::schemas::{SCHEMAS, schema};
use crate::report::table;
use crate::schema_version::SCHEMA_VERSION;

use super::output;

#[derive(Debug, clap::Args)]
#[command(
    about = "Print the JSON Schema of a command's --json output, or of the target profile TOML",
    after_help = "Examples:\n  actswap schema\n  actswap schema audit > audit.schema.json\n\nEvery JSON output carries \"schema_version\" at top level; it is bumped on a breaking change."
)]
pub struct Args {
    /// The schema's name (without it: the list of names).
    name: Option<String>,
}

pub fn run(args: Args) -> Result<ExitCode> {
    let Some(name) = args.name else {
        let rows: Vec<Vec<String>> = SCHEMAS
            .iter()
            .map(|(n, about)| vec![n.to_string(), about.to_string()])
            .collect();
        output::print(&format!(
            "{}schema_version {SCHEMA_VERSION}. `actswap schema NAME` prints one.\n",
            table::render(&["name", "describes"], &rows)
        ))?;
        return Ok(ExitCode::SUCCESS);
    };
    match schema(&name) {
        Some(s) => output::print_json(&s)?,
        None => {
            let names: Vec<&str> = SCHEMAS.iter().map(|(n, _)| *n).collect();
            bail!("unknown schema '{name}' (known: {})", names.join(", "));
        }
    }
    Ok(ExitCode::SUCCESS)
}
