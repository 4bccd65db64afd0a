//! The parent process: hands out chunks of inputs to child processes, watches each for death
//! and stalls, saves the inputs that caused a finding, and prints the figures.

use std::collections::BTreeMap;
use std::io::{BufRead, BufReader};
use std::process::{Child, Command, ExitCode, Stdio};
use std::sync::mpsc::{self, Sender};
use std::time::{Instant, SystemTime, UNIX_EPOCH};

use super::Settings;
use super::mutate;
use super::pipeline::Stage;

/// A finding: what happened to which input.
struct Finding {
    kind: &'static str,
    index: u64,
    detail: String,
}

enum Event {
    Line(usize, String),
    Closed(usize),
}

struct Worker {
    child: Child,
    /// The input running now (the last `at` line), and the end of the chunk.
    current: Option<u64>,
    end: u64,
    last_progress: Instant,
    hung: bool,
}

#[derive(Default)]
struct Figures {
    tried: u64,
    stages: BTreeMap<&'static str, u64>,
    findings: Vec<Finding>,
}

pub fn run(s: &Settings) -> ExitCode {
    let seeds = mutate::seeds();
    let start = Instant::now();
    let until = s.seconds.map(|secs| {
        SystemTime::now()
            .duration_since(UNIX_EPOCH)
            .map_or(0, |d| d.as_secs())
            + secs
    });
    let end = s.inputs.map_or(u64::MAX, |n| s.from.saturating_add(n));
    println!(
        "fuzz: {} seed models, seed {}, inputs {}..{}{}, {} at a time",
        seeds.len(),
        s.seed,
        s.from,
        if end == u64::MAX {
            "".into()
        } else {
            end.to_string()
        },
        s.seconds
            .map_or(String::new(), |t| format!(" for at most {t} s")),
        s.jobs
    );
    let (tx, rx) = mpsc::channel();
    let mut workers: BTreeMap<usize, Worker> = BTreeMap::new();
    let mut next_id = 0;
    let mut next = s.from;
    let mut figures = Figures::default();
    let mut last_report = Instant::now();
    loop {
        let time_left = until.is_none_or(|u| {
            SystemTime::now()
                .duration_since(UNIX_EPOCH)
                .map_or(0, |d| d.as_secs())
                < u
        });
        while workers.len() < s.jobs && next < end && time_left {
            let to = next.saturating_add(s.chunk).min(end);
            workers.insert(next_id, spawn(s, next_id, next, to, until, &tx));
            next_id += 1;
            next = to;
        }
        if workers.is_empty() {
            break;
        }
        match rx.recv_timeout(std::time::Duration::from_millis(500)) {
            Ok(Event::Line(id, line)) => {
                if let Some(w) = workers.get_mut(&id) {
                    take_line(w, &line, &mut figures, s.verbose);
                }
            }
            Ok(Event::Closed(id)) => {
                let mut w = workers.remove(&id).expect("a live worker");
                let status = w.child.wait();
                let ok = status.as_ref().is_ok_and(|st| st.success());
                if let Some(i) = w.current
                    && (!ok || w.hung)
                {
                    // The input that was running when the child died or was stopped.
                    figures.tried += 1;
                    let detail = match (&status, w.hung) {
                        (_, true) => format!("no progress for {} s", s.stall.as_secs()),
                        (Ok(st), _) => format!("child ended: {st}"),
                        (Err(e), _) => format!("child lost: {e}"),
                    };
                    let kind = if w.hung { "hang" } else { "crash" };
                    figures.findings.push(Finding {
                        kind,
                        index: i,
                        detail,
                    });
                    if i + 1 < w.end {
                        workers.insert(next_id, spawn(s, next_id, i + 1, w.end, until, &tx));
                        next_id += 1;
                    }
                } else if !ok {
                    eprintln!("fuzz: a child failed before its first input: {status:?}");
                    return ExitCode::from(2);
                }
            }
            Err(_) => {}
        }
        for w in workers.values_mut() {
            if w.current.is_some() && !w.hung && w.last_progress.elapsed() > s.stall {
                w.hung = true;
                let _ = w.child.kill();
            }
        }
        if last_report.elapsed().as_secs() >= 30 {
            last_report = Instant::now();
            eprintln!(
                "fuzz: {} inputs, {} findings, {:.0} s",
                figures.tried,
                figures.findings.len(),
                start.elapsed().as_secs_f64()
            );
        }
    }
    report(s, &seeds, &figures, start.elapsed().as_secs_f64())
}

fn spawn(
    s: &Settings,
    id: usize,
    from: u64,
    to: u64,
    until: Option<u64>,
    tx: &Sender<Event>,
) -> Worker {
    let exe = std::env::current_exe().expect("the fuzz binary");
    let mut cmd = Command::new(exe);
    cmd.args(["--child", "--seed", &s.seed.to_string()])
        .args(["--from", &from.to_string(), "--to", &to.to_string()])
        .stdout(Stdio::piped())
        .stderr(Stdio::null());
    if let Some(u) = until {
        cmd.args(["--until", &u.to_string()]);
    }
    if s.verbose {
        cmd.arg("--verbose");
    }
    let mut child = cmd.spawn().expect("a child process");
    let stdout = child.stdout.take().expect("piped");
    let tx = tx.clone();
    std::thread::spawn(move || {
        for line in BufReader::new(stdout).lines() {
            let Ok(line) = line else { break };
            if tx.send(Event::Line(id, line)).is_err() {
                return;
            }
        }
        let _ = tx.send(Event::Closed(id));
    });
    Worker {
        child,
        current: None,
        end: to,
        last_progress: Instant::now(),
        hung: false,
    }
}

fn take_line(w: &mut Worker, line: &str, f: &mut Figures, verbose: bool) {
    let mut parts = line.splitn(3, ' ');
    let (Some(kind), Some(index)) = (parts.next(), parts.next().and_then(|i| i.parse().ok()))
    else {
        return;
    };
    let rest = parts.next().unwrap_or("");
    w.last_progress = Instant::now();
    match kind {
        "at" => w.current = Some(index),
        "done" => {
            w.current = None;
            f.tried += 1;
            let (stage, why) = rest.split_once(' ').unwrap_or((rest, ""));
            if let Some(s) = Stage::ALL.iter().find(|s| s.name() == stage) {
                *f.stages.entry(s.name()).or_default() += 1;
            }
            if verbose {
                println!("input {index}: {stage} {why}");
            }
        }
        "panic" | "broken" => {
            w.current = None;
            f.tried += 1;
            f.findings.push(Finding {
                kind: if kind == "panic" { "panic" } else { "broken" },
                index,
                detail: rest.to_string(),
            });
        }
        _ => {}
    }
}

fn report(s: &Settings, seeds: &[mutate::Seed], f: &Figures, secs: f64) -> ExitCode {
    let count = |kind: &str| f.findings.iter().filter(|x| x.kind == kind).count();
    println!(
        "fuzz: {} inputs in {secs:.0} s ({:.0}/s): {} panics, {} crashes, {} hangs, {} broken invariants",
        f.tried,
        f.tried as f64 / secs.max(1e-9),
        count("panic"),
        count("crash"),
        count("hang"),
        count("broken")
    );
    let stages: Vec<String> = f.stages.iter().map(|(k, v)| format!("{k} {v}")).collect();
    println!("fuzz: outcomes: {}", stages.join(", "));
    if f.findings.is_empty() {
        return ExitCode::SUCCESS;
    }
    let _ = std::fs::create_dir_all(&s.save);
    for x in &f.findings {
        let (which, bytes) = mutate::input(seeds, s.seed, x.index);
        let file = s
            .save
            .join(format!("{}-seed{}-input{}.onnx", x.kind, s.seed, x.index));
        let _ = std::fs::write(&file, bytes);
        println!(
            "{} at input {} (from {}): {} -> {}",
            x.kind,
            x.index,
            seeds[which].path.display(),
            x.detail,
            file.display()
        );
    }
    ExitCode::from(1)
}
