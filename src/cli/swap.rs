//! `actswap swap`: convert activation sites to the forms a target accepts.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::{Context, Result, bail};

use crate::onnx::{Model, ModelIndex, SaveOptions};
use crate::plan::profile::Profile;
use crate::plan::request::Request;
use crate::plan::{Plan, Policy};
use crate::report::plan_table;
use crate::rewrite;
use crate::scan;

use super::{EXIT_OVER_BUDGET, output};

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
    /// A conversion: KIND=FORM, KIND=SUBSTITUTE or KIND=SUBSTITUTE:FORM; KIND may be '*'.
    #[arg(long = "to", value_name = "KIND=FORM", conflicts_with = "target")]
    to: Vec<String>,
    /// A target profile: a built-in name (see `actswap targets`) or a TOML file.
    #[arg(long, value_name = "PROFILE")]
    target: Option<String>,
    /// Only these sites (ids from `actswap scan`; repeatable).
    #[arg(long = "site", value_name = "ID")]
    sites: Vec<String>,
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
    let requests: Vec<Request> = args
        .to
        .iter()
        .map(|t| Request::parse(t))
        .collect::<Result<_>>()?;
    let profile = args.target.as_deref().map(Profile::load).transpose()?;
    if requests.is_empty() && profile.is_none() {
        bail!("say what to convert to: --to KIND=FORM (repeatable) or --target PROFILE");
    }
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
    let mut sites = scan::scan(&index).sites;
    if !args.sites.is_empty() {
        for id in &args.sites {
            if !sites.iter().any(|s| &s.id == id) {
                bail!(
                    "no site '{id}' in '{}' (see `actswap scan`)",
                    args.model.display()
                );
            }
        }
        sites.retain(|s| args.sites.contains(&s.id));
    }
    let policy = match &profile {
        Some(p) => Policy::Target(p),
        None => Policy::Requests(&requests),
    };
    let plan = Plan::build(&index, sites, &policy);
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
