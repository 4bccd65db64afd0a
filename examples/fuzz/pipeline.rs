//! The child process: runs a chunk of inputs through the whole in-memory pipeline and reports
//! each one on standard output, so the parent knows which input was running if the child dies.
//!
//! Lines: `at I` before input I, then `done I STAGE` (how far it got), `panic I MESSAGE` or
//! `broken I MESSAGE` (an invariant failed: the rewritten model did not load back).

use std::io::Write;
use std::panic::AssertUnwindSafe;
use std::process::ExitCode;
use std::sync::Mutex;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use actswap::onnx::summary::Summary;
use actswap::onnx::{Model, ModelIndex};
use actswap::plan::request::Request;
use actswap::plan::{Plan, Policy};
use actswap::report::{plan_table, scan_table};
use actswap::{rewrite, scan};
use bytes::Bytes;

use super::mutate;

/// How far an input got: it was refused at a stage (a clean error), or went all the way.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Stage {
    Decode,
    Index,
    Rewrite,
    Encode,
    Complete,
}

impl Stage {
    pub const ALL: [Stage; 5] = [
        Stage::Decode,
        Stage::Index,
        Stage::Rewrite,
        Stage::Encode,
        Stage::Complete,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Stage::Decode => "refused-at-decode",
            Stage::Index => "refused-at-index",
            Stage::Rewrite => "refused-at-rewrite",
            Stage::Encode => "refused-at-encode",
            Stage::Complete => "complete",
        }
    }
}

/// The outcome of one input.
enum Outcome {
    Stopped(Stage, String),
    /// The pipeline went through but its result broke a promise.
    Broken(String),
}

/// Runs decode -> index -> info -> scan -> plan -> rewrite -> encode -> decode and index again.
fn pipeline(bytes: Vec<u8>, seed: &mutate::Seed, requests: &[Request]) -> Outcome {
    let path = seed.dir.join("fuzzed.onnx");
    let model = match Model::from_bytes(Bytes::from(bytes), path, seed.dir.clone()) {
        Ok(m) => m,
        Err(e) => return Outcome::Stopped(Stage::Decode, format!("{e:#}")),
    };
    let index = match ModelIndex::build(&model) {
        Ok(i) => i,
        Err(e) => return Outcome::Stopped(Stage::Index, format!("{e:#}")),
    };
    if let Ok(summary) = Summary::of(&index) {
        std::hint::black_box(summary.render());
    }
    let report = scan::scan(&index);
    std::hint::black_box(scan_table::render(&report));
    let plan = Plan::build(
        report.sites,
        &Policy::requests(requests),
        index.main().opset(""),
    );
    std::hint::black_box(plan_table::render(&plan));
    let (rewritten, _) = match rewrite::apply(&model, &index, &plan) {
        Ok(r) => r,
        Err(e) => return Outcome::Stopped(Stage::Rewrite, format!("{e:#}")),
    };
    let encoded = match rewritten.encode_lossless() {
        Ok(b) => b,
        Err(e) => return Outcome::Stopped(Stage::Encode, format!("{e:#}")),
    };
    let again = Model::from_bytes(encoded, seed.dir.join("again.onnx"), seed.dir.clone())
        .and_then(|m| ModelIndex::build(&m).map(|_| ()));
    match again {
        Ok(()) => Outcome::Stopped(Stage::Complete, String::new()),
        Err(e) => Outcome::Broken(format!("the rewritten model does not load back: {e:#}")),
    }
}

static PANIC: Mutex<Option<String>> = Mutex::new(None);

/// `--child --seed S --from A --to B [--until UNIX_SECONDS] [--verbose]`.
pub fn child(args: &[String]) -> ExitCode {
    let value = |flag: &str| {
        args.iter()
            .position(|a| a == flag)
            .and_then(|i| args.get(i + 1))
            .and_then(|v| v.parse::<u64>().ok())
    };
    let (Some(seed), Some(from), Some(to)) = (value("--seed"), value("--from"), value("--to"))
    else {
        eprintln!("fuzz: a child needs --seed, --from and --to");
        return ExitCode::from(2);
    };
    let until = value("--until").map(|s| UNIX_EPOCH + Duration::from_secs(s));
    let verbose = args.iter().any(|a| a == "--verbose");
    limit_memory(4 << 30);
    std::panic::set_hook(Box::new(|info| {
        let at = info
            .location()
            .map(|l| format!("{}:{}", l.file(), l.line()))
            .unwrap_or_default();
        let msg = info
            .payload()
            .downcast_ref::<&str>()
            .map(|s| s.to_string())
            .or_else(|| info.payload().downcast_ref::<String>().cloned())
            .unwrap_or_default();
        *PANIC.lock().unwrap_or_else(|e| e.into_inner()) = Some(format!("{at}: {msg}"));
    }));
    let seeds = mutate::seeds();
    let requests = [Request::parse("*=primitive").expect("a valid request")];
    let mut out = std::io::stdout().lock();
    for i in from..to {
        if until.is_some_and(|u| SystemTime::now() >= u) {
            break;
        }
        let (which, bytes) = mutate::input(&seeds, seed, i);
        let _ = writeln!(out, "at {i}");
        let _ = out.flush();
        let result = std::panic::catch_unwind(AssertUnwindSafe(|| {
            pipeline(bytes, &seeds[which], &requests)
        }));
        let line = match result {
            Ok(Outcome::Stopped(stage, why)) if verbose => {
                format!("done {i} {} {}", stage.name(), one_line(&why))
            }
            Ok(Outcome::Stopped(stage, _)) => format!("done {i} {}", stage.name()),
            Ok(Outcome::Broken(why)) => format!("broken {i} {}", one_line(&why)),
            Err(_) => {
                let msg = PANIC.lock().unwrap_or_else(|e| e.into_inner()).take();
                format!("panic {i} {}", one_line(&msg.unwrap_or_default()))
            }
        };
        let _ = writeln!(out, "{line}");
    }
    let _ = out.flush();
    ExitCode::SUCCESS
}

fn one_line(s: &str) -> String {
    s.split_whitespace().collect::<Vec<_>>().join(" ")
}

/// Caps the child's address space, so a runaway allocation aborts the child (and is reported)
/// instead of exhausting the machine.
fn limit_memory(bytes: u64) {
    let limit = libc::rlimit {
        rlim_cur: bytes,
        rlim_max: bytes,
    };
    // SAFETY: setrlimit reads the struct we pass; it has no other effect on memory.
    unsafe {
        libc::setrlimit(libc::RLIMIT_AS, &limit);
    }
}
