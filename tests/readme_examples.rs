//! Every example a reader is shown runs, with an exit code the documentation gives it: each
//! `actswap ...` example of README.md and each line under "Examples:" in every subcommand's
//! `--help`.
//!
//! What counts as an example:
//! - in a ```sh block of README, a line that starts with `actswap ` or `cargo run --release -- `
//!   (run as `actswap`), with the next line joined on when it ends in `\`;
//! - in any other README code block, a line that starts with `$ actswap ` (the output shown
//!   after it is not compared); the Usage synopsis is a ```text block and holds none;
//! - in README's prose, an inline code span that starts with `actswap `, names arguments after
//!   the command (`actswap scan` alone names the command) and has no placeholder
//!   (no `...`, no `<...>`, no word in capitals such as MODEL or FILE.html);
//! - in `actswap COMMAND --help`, every line under "Examples:" that starts with `actswap `.
//!
//! Placeholders: every example runs in one fresh folder, in the order above, that holds
//! - `model.onnx`: a copy of sample-models/orchard-grader.onnx (one input, `image`, float32
//!   `[batch, 3, 32, 32]`, with sites s1 silu, s2 swish, s3 hard_swish and s4 relu6);
//! - `model.fast.onnx`: `model.onnx` with every site in its primitive form (`swap --to
//!   '*=primitive'`), written before the examples run;
//! - `batch.npy`: float32 `[1, 3, 32, 32]` values for `image`;
//! - `exported/`: a copy of sample-models/;
//! - every other path an example names that exists in the repository (`sample-models/...`,
//!   `tests/fixtures/...`), copied to the same relative path.
//!
//! Shell syntax: `> FILE` writes standard output to FILE; `| jq .KEY` checks what jq would
//! read: standard output is JSON with that key.
//!
//! Exit codes (README, "Exit codes": this tool's documented contract): 0 or 1; 2 is an error
//! and fails the test. README's main command exits with the code README states beside it, and
//! its last line is the verdict README quotes.

mod cli_support;

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use cli_support::{actswap, repo, stderr};

use ndarray_npy::WriteNpyExt;

/// One example: where it was found, and its words.
#[derive(Debug)]
struct Example {
    origin: String,
    words: Vec<String>,
}

/// The prefix of README's main command, run as `actswap`.
const CARGO_RUN: &str = "cargo run --release -- ";

/// The examples of README's code blocks and prose.
fn readme_examples(readme: &str) -> Vec<Example> {
    let mut examples = Vec::new();
    let mut fence: Option<String> = None;
    let mut pending = String::new();
    for (n, line) in readme.lines().enumerate() {
        let origin = format!("README.md:{}", n + 1);
        if let Some(info) = line.trim_start().strip_prefix("```") {
            fence = match fence {
                Some(_) => None,
                None => Some(info.trim().to_string()),
            };
            continue;
        }
        let command = match fence.as_deref() {
            Some("sh") => {
                let line = pending.clone() + line.trim();
                pending.clear();
                if let Some(head) = line.strip_suffix('\\') {
                    pending = head.to_string();
                    continue;
                }
                line.strip_prefix(CARGO_RUN)
                    .map(|rest| format!("actswap {rest}"))
                    .or_else(|| line.starts_with("actswap ").then_some(line.clone()))
            }
            Some(_) => line.strip_prefix("$ ").map(str::to_string),
            None => {
                examples.extend(inline_examples(line).map(|c| example(&origin, &c)));
                None
            }
        };
        if let Some(command) = command.filter(|c| c.starts_with("actswap ")) {
            examples.push(example(&origin, &command));
        }
    }
    examples
}

/// The inline code spans of a prose line that are placeholder-free `actswap` commands.
fn inline_examples(line: &str) -> impl Iterator<Item = String> + '_ {
    line.split('`')
        .skip(1)
        .step_by(2)
        .filter(|span| span.starts_with("actswap ") && span.split_whitespace().count() > 2)
        .filter(|span| {
            !span.contains("...")
                && !span.contains('<')
                && !span.split_whitespace().any(|w| {
                    w.chars().any(|c| c.is_ascii_uppercase())
                        && !w.chars().any(|c| c.is_ascii_lowercase())
                })
        })
        .map(str::to_string)
}

/// The subcommands `actswap --help` lists, `help` aside.
fn subcommands() -> Vec<String> {
    let help = String::from_utf8(actswap(&["--help"]).stdout).unwrap();
    help.lines()
        .skip_while(|l| *l != "Commands:")
        .skip(1)
        .take_while(|l| !l.trim().is_empty())
        .filter_map(|l| l.split_whitespace().next())
        .filter(|c| *c != "help")
        .map(str::to_string)
        .collect()
}

/// The lines under "Examples:" in `actswap COMMAND --help`.
fn help_examples(command: &str) -> Vec<Example> {
    // Wide enough that clap wraps no example line.
    let help = Command::new(env!("CARGO_BIN_EXE_actswap"))
        .args([command, "--help"])
        .env("COLUMNS", "1000")
        .output()
        .unwrap();
    let help = String::from_utf8(help.stdout).unwrap();
    help.lines()
        .skip_while(|l| *l != "Examples:")
        .skip(1)
        .take_while(|l| !l.trim().is_empty())
        .map(|l| example(&format!("actswap {command} --help"), l.trim()))
        .collect()
}

fn example(origin: &str, command: &str) -> Example {
    let words = shlex::split(command).unwrap_or_else(|| panic!("{origin}: cannot split {command}"));
    Example {
        origin: origin.to_string(),
        words,
    }
}

/// Copies a file or a folder (recursively).
fn copy(from: &Path, to: &Path) {
    if from.is_dir() {
        std::fs::create_dir_all(to).unwrap();
        for entry in std::fs::read_dir(from).unwrap() {
            let entry = entry.unwrap();
            copy(&entry.path(), &to.join(entry.file_name()));
        }
    } else {
        std::fs::create_dir_all(to.parent().unwrap()).unwrap();
        std::fs::copy(from, to).unwrap();
    }
}

/// The folder the examples run in, with the placeholders of the module comment.
fn workspace(examples: &[Example]) -> tempfile::TempDir {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    copy(
        &repo("sample-models/orchard-grader.onnx"),
        &dir.join("model.onnx"),
    );
    copy(&repo("sample-models"), &dir.join("exported"));
    let values: Vec<f32> = (0..3 * 32 * 32)
        .map(|i| (i as f32 * 0.37).sin() * 2.0)
        .collect();
    ndarray::Array::from_shape_vec((1, 3, 32, 32), values)
        .unwrap()
        .write_npy(std::fs::File::create(dir.join("batch.npy")).unwrap())
        .unwrap();
    let fast = actswap(&[
        "swap",
        dir.join("model.onnx").to_str().unwrap(),
        "-o",
        dir.join("model.fast.onnx").to_str().unwrap(),
        "--to",
        "*=primitive",
    ]);
    assert_eq!(fast.status.code(), Some(0), "{}", stderr(&fast));
    for word in examples.iter().flat_map(|e| &e.words) {
        let path = word.split_once('=').map_or(word.as_str(), |(_, p)| p);
        let in_repo = repo(path);
        if !path.is_empty()
            && !path.starts_with('-')
            && in_repo.exists()
            && !dir.join(path).exists()
        {
            copy(&in_repo, &dir.join(path));
        }
    }
    tmp
}

/// Runs an example in `dir`, applying its `> FILE` and `| jq .KEY`; returns the output.
fn run(example: &Example, dir: &Path) -> Output {
    let mut words: &[String] = &example.words[1..];
    let mut jq_key = None;
    if let Some(i) = words.iter().position(|w| w == "|") {
        let tail = &words[i + 1..];
        assert_eq!(tail.len(), 2, "{example:?}: only `| jq .KEY` is understood");
        assert_eq!(tail[0], "jq", "{example:?}");
        jq_key = Some(tail[1].trim_start_matches('.').to_string());
        words = &words[..i];
    }
    let mut redirect: Option<PathBuf> = None;
    if let Some(i) = words.iter().position(|w| w == ">") {
        redirect = Some(dir.join(&words[i + 1]));
        words = &words[..i];
    }
    let out = Command::new(env!("CARGO_BIN_EXE_actswap"))
        .args(words)
        .current_dir(dir)
        .output()
        .unwrap();
    if let Some(file) = redirect {
        std::fs::write(file, &out.stdout).unwrap();
    }
    if let Some(key) = jq_key {
        let json: serde_json::Value = serde_json::from_slice(&out.stdout)
            .unwrap_or_else(|e| panic!("{}: stdout is not JSON ({e})", example.origin));
        assert!(json.get(&key).is_some(), "{}: no key {key}", example.origin);
    }
    out
}

/// What README says of its main command: (exit code, quoted verdict), from the first paragraph
/// after it that states an exit code ("... it reads `VERDICT` and the exit code is N").
fn readme_main_claims(readme: &str) -> (i32, String) {
    let after = &readme[readme.find(CARGO_RUN).expect("README has its main command")..];
    let paragraph = after
        .split("\n\n")
        .map(|p| p.replace('\n', " "))
        .find(|p| p.contains("the exit code is "))
        .expect("README states the main command's exit code");
    let code = paragraph
        .split("the exit code is ")
        .nth(1)
        .and_then(|rest| rest.split(|c: char| !c.is_ascii_digit()).next())
        .and_then(|digits| digits.parse().ok())
        .unwrap_or_else(|| panic!("no exit code in: {paragraph}"));
    let verdict = paragraph
        .split("reads `")
        .nth(1)
        .and_then(|rest| rest.split('`').next())
        .unwrap_or_else(|| panic!("README quotes the main command's verdict: {paragraph}"));
    (code, verdict.to_string())
}

#[test]
fn every_example_of_the_readme_and_the_help_runs_with_a_documented_exit_code() {
    let readme = std::fs::read_to_string(repo("README.md")).unwrap();
    let mut examples = readme_examples(&readme);
    let from_readme = examples.len();
    for command in subcommands() {
        let found = help_examples(&command);
        assert!(
            !found.is_empty(),
            "actswap {command} --help shows no example"
        );
        examples.extend(found);
    }
    assert!(from_readme >= 3, "README examples found: {examples:?}");
    let tmp = workspace(&examples);
    let mut failures = Vec::new();
    for example in &examples {
        let out = run(example, tmp.path());
        let code = out.status.code();
        if !matches!(code, Some(0 | 1)) {
            failures.push(format!(
                "{}: `{}` exited {code:?}: {}",
                example.origin,
                example.words.join(" "),
                stderr(&out).trim()
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

#[test]
fn the_readme_main_command_ends_as_the_readme_says() {
    let readme = std::fs::read_to_string(repo("README.md")).unwrap();
    let (code, verdict) = readme_main_claims(&readme);
    let line = readme
        .lines()
        .position(|l| l.starts_with(CARGO_RUN))
        .expect("README has its main command");
    let main = readme_examples(&readme)
        .into_iter()
        .find(|e| e.origin == format!("README.md:{}", line + 1))
        .unwrap();
    let tmp = workspace(std::slice::from_ref(&main));
    let out = run(&main, tmp.path());
    assert_eq!(out.status.code(), Some(code), "{}", stderr(&out));
    let stdout = String::from_utf8(out.stdout).unwrap();
    let last = stdout.lines().last().unwrap_or_default();
    assert!(
        last.starts_with(&verdict),
        "last line {last:?}, README says {verdict:?}"
    );
}
