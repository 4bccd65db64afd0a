//! Fuzzes the model loader and the rewriter with mutations of the repository's models.
//!
//! Every input is a seed model (tests/fixtures, tests/corpus, sample-models) changed by one to
//! three mutations: byte flips, truncation, inserted or repeated bytes, and protobuf-aware edits
//! (a varint set to an edge value, such as a dim, a data type or an opset; a length-delimited
//! field replaced by an edge string, deleted, repeated or given a wrong length). Each input goes
//! through decode -> index (validation) -> info -> scan -> plan (`*=primitive`) -> rewrite ->
//! lossless encode -> decode and index again, in memory. Input `i` of seed `S` is the same on
//! every run, so any finding is reproduced with `--seed S --from i --inputs 1`.
//!
//! The parent process runs children over chunks of inputs, several at a time. A child catches
//! panics itself; a child that dies (abort, signal, out of memory under its 4 GiB limit) or
//! stops making progress is reported by the parent with the input that killed it, which is
//! saved under `--save`, and the chunk resumes after it.
//!
//! ```sh
//! cargo run --release --example fuzz -- --inputs 1000000            # a long run
//! cargo run --example fuzz -- --seconds 90                          # what CI runs
//! cargo run --release --example fuzz -- --seed 7 --from 123 --inputs 1 --verbose   # one input
//! ```
//! Exit code 0 when no input panicked, crashed, hung or broke an invariant, else 1.

mod mutate;
mod pipeline;
mod supervise;

use std::path::PathBuf;
use std::time::Duration;

/// Command-line settings.
#[derive(Debug, Clone)]
pub struct Settings {
    pub seed: u64,
    pub from: u64,
    /// Inputs to try (from `from`); `None` with `seconds` runs until the time is up.
    pub inputs: Option<u64>,
    pub seconds: Option<u64>,
    pub jobs: usize,
    pub chunk: u64,
    /// Seconds without progress before a child counts as hung.
    pub stall: Duration,
    pub save: PathBuf,
    pub verbose: bool,
}

fn main() -> std::process::ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.first().map(String::as_str) == Some("--child") {
        return pipeline::child(&args[1..]);
    }
    let settings = match parse(&args) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("fuzz: {e}");
            eprintln!(
                "usage: fuzz [--inputs N | --seconds S] [--seed S] [--from I] [--jobs J] [--chunk C] [--save DIR] [--verbose]"
            );
            return std::process::ExitCode::from(2);
        }
    };
    supervise::run(&settings)
}

fn parse(args: &[String]) -> Result<Settings, String> {
    let mut s = Settings {
        seed: 1,
        from: 0,
        inputs: None,
        seconds: None,
        jobs: std::thread::available_parallelism().map_or(1, |n| n.get()),
        chunk: 20_000,
        stall: Duration::from_secs(30),
        save: PathBuf::from("target/fuzz-findings"),
        verbose: false,
    };
    let mut it = args.iter();
    while let Some(flag) = it.next() {
        if flag == "--verbose" {
            s.verbose = true;
            continue;
        }
        let value = it.next().ok_or(format!("{flag} needs a value"))?;
        let number = || {
            value
                .parse::<u64>()
                .map_err(|_| format!("{flag}: '{value}' is not a number"))
        };
        match flag.as_str() {
            "--seed" => s.seed = number()?,
            "--from" => s.from = number()?,
            "--inputs" => s.inputs = Some(number()?),
            "--seconds" => s.seconds = Some(number()?),
            "--jobs" => s.jobs = number()?.max(1) as usize,
            "--chunk" => s.chunk = number()?.max(1),
            "--stall" => s.stall = Duration::from_secs(number()?.max(1)),
            "--save" => s.save = PathBuf::from(value),
            _ => return Err(format!("unknown option {flag}")),
        }
    }
    if s.inputs.is_none() && s.seconds.is_none() {
        s.inputs = Some(100_000);
    }
    Ok(s)
}
