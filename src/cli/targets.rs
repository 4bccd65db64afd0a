//! `actswap targets`: the built-in target profiles.

use std::process::ExitCode;

use anyhow::Result;

use crate::plan::profile::{BUILT_IN, Profile};
use crate::report::table;

use super::output;

#[derive(Debug, clap::Args)]
#[command(
    about = "List the built-in target profiles, or print one as TOML to start your own",
    after_help = "Examples:\n  actswap targets\n  actswap targets --show piecewise-linear > my-npu.toml"
)]
pub struct Args {
    /// Print this profile's TOML.
    #[arg(long, value_name = "NAME")]
    show: Option<String>,
}

pub fn run(args: Args) -> Result<ExitCode> {
    if let Some(name) = args.show {
        Profile::load(&name)?;
        let text = BUILT_IN.iter().find(|(n, _)| *n == name).map(|(_, t)| *t);
        output::print(text.unwrap_or_default())?;
        return Ok(ExitCode::SUCCESS);
    }
    let mut rows = Vec::new();
    for (name, text) in BUILT_IN {
        let p = Profile::parse(text, name)?;
        rows.push(vec![
            name.to_string(),
            p.max_opset.map_or("any".into(), |o| o.to_string()),
            format!("{}", p.max_approx_error),
            format!("{} ops", p.ops.len()),
            p.description,
        ]);
    }
    output::print(&table::render(
        &[
            "name",
            "max opset",
            "max approx error",
            "accepts",
            "description",
        ],
        &rows,
    ))?;
    Ok(ExitCode::SUCCESS)
}
