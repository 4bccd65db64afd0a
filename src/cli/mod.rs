//! The command line: one file per subcommand, a thin [`main`] and documented exit codes.
//!
//! Exit codes: 0 the verdict is pass; 1 any other verdict (ops the target does not run, unserved
//! sites, over budget, nothing compared, a rewritten site unmeasured); 2 an error (bad input, unreadable model, invalid
//! options).

mod access;
mod audit;
mod batch;
mod catalog;
mod drift;
mod info;
mod inputs;
mod output;
mod paths;
mod plan_args;
mod scan;
mod schema;
mod swap;
mod targets;

use std::process::ExitCode;

use anyhow::Result;
use clap::{Parser, Subcommand};

/// Success: the verdict is pass.
pub const EXIT_OK: u8 = 0;
/// Any verdict but pass and error: ops the target does not run, unserved sites, over budget,
/// nothing compared, a rewritten site unmeasured.
pub const EXIT_FAILED: u8 = 1;
/// An error: bad input, unreadable model, invalid options.
pub const EXIT_ERROR: u8 = 2;

/// The exit code of a verdict.
fn exit_code(verdict: crate::audit::Verdict) -> ExitCode {
    use crate::audit::Verdict;
    ExitCode::from(match verdict {
        Verdict::Pass => EXIT_OK,
        Verdict::Error => EXIT_ERROR,
        Verdict::NotReady
        | Verdict::Unserved
        | Verdict::OverBudget
        | Verdict::NothingCompared
        | Verdict::Unmeasured => EXIT_FAILED,
    })
}

#[derive(Debug, Parser)]
#[command(
    name = "actswap",
    version,
    about = "Find, convert and audit activation functions in ONNX models",
    long_about = "Find every activation site in an ONNX model (fused ops and the primitive chains \
exporters spell them as), convert them to forms a target runtime accepts, and measure the numeric \
drift and latency of the swap on CPU.",
    after_help = "Exit codes: 0 pass, 1 another verdict (not_ready, unserved, over_budget, nothing_compared, unmeasured), 2 error."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    Audit(Box<audit::Args>),
    Batch(Box<batch::Args>),
    Scan(scan::Args),
    Swap(Box<swap::Args>),
    Drift(Box<drift::Args>),
    Targets(targets::Args),
    Catalog(catalog::Args),
    Info(info::Args),
    Schema(schema::Args),
}

/// Runs the command line and maps the outcome to an exit code; errors print as one line.
pub fn main() -> ExitCode {
    std::panic::set_hook(Box::new(|info| {
        if crate::run::catching_panics() {
            return;
        }
        let at = info
            .location()
            .map(|l| format!(" at {}:{}", l.file(), l.line()))
            .unwrap_or_default();
        let msg = info
            .payload()
            .downcast_ref::<&str>()
            .map(|s| s.to_string())
            .or_else(|| info.payload().downcast_ref::<String>().cloned())
            .unwrap_or_else(|| "unknown cause".into());
        eprintln!("actswap: internal error{at}: {msg}");
    }));
    crate::files::temps::remove_on_signals();
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let code = if e.use_stderr() { EXIT_ERROR } else { EXIT_OK };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    match std::panic::catch_unwind(|| run(cli)) {
        Ok(Ok(code)) => code,
        Ok(Err(e)) if output::is_broken_pipe(&e) => ExitCode::from(EXIT_OK),
        Ok(Err(e)) => {
            eprintln!("actswap: error: {}", one_line(&format!("{e:#}")));
            ExitCode::from(EXIT_ERROR)
        }
        Err(_) => ExitCode::from(EXIT_ERROR),
    }
}

fn run(cli: Cli) -> Result<ExitCode> {
    match cli.command {
        Command::Info(args) => info::run(args),
        Command::Scan(args) => scan::run(args),
        Command::Swap(args) => swap::run(*args),
        Command::Targets(args) => targets::run(args),
        Command::Catalog(args) => catalog::run(args),
        Command::Audit(args) => audit::run(*args),
        Command::Batch(args) => batch::run(*args),
        Command::Drift(args) => drift::run(*args),
        Command::Schema(args) => schema::run(args),
    }
}

/// Folds a multi-line message into one line.
fn one_line(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}
