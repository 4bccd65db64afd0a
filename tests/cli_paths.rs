//! Paths on the command line: a folder given where a model file is expected is refused with one
//! line naming it, and every command creates the missing folders above the files it writes, as
//! `batch` creates its output folder. Exit codes: 2 for the refusals, the command's own otherwise
//! (README, Exit codes: this tool's documented contract).

mod cli_support;

use std::path::Path;
use std::process::Output;

use cli_support::{actswap, path, repo, stderr};

const SAMPLE: &str = "sample-models/orchard-grader.onnx";

/// Asserts exit code 2 and one line on stderr that contains every piece of `wanted`.
fn refused(out: &Output, wanted: &[&str]) {
    let err = stderr(out);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert_eq!(err.lines().count(), 1, "{err}");
    for w in wanted {
        assert!(err.contains(w), "{w:?} not in {err}");
    }
}

#[test]
fn a_folder_given_as_a_model_is_refused_by_every_command_that_reads_one() {
    let folder = repo("sample-models");
    let model = repo(SAMPLE);
    let f = path(&folder);
    let m = path(&model);
    let cases: [(&str, Vec<&str>); 6] = [
        ("scan", vec!["scan", f]),
        ("info", vec!["info", f]),
        ("swap", vec!["swap", f, "--to", "*=primitive", "--dry-run"]),
        (
            "audit",
            vec!["audit", f, "--to", "*=primitive", "--dim", "batch=1"],
        ),
        ("drift", vec!["drift", m, f, "--dim", "batch=1"]),
        ("drift", vec!["drift", f, m, "--dim", "batch=1"]),
    ];
    for (command, args) in cases {
        let out = actswap(&args);
        refused(
            &out,
            &[&format!("'{f}' is a folder; {command} takes a model file")],
        );
    }
    // The commands batch also does point to it.
    refused(&actswap(&["scan", f]), &["(batch takes folders)"]);
}

#[test]
fn missing_output_folders_are_created_by_every_command_that_writes() {
    let tmp = tempfile::tempdir().unwrap();
    let at = |rel: &str| tmp.path().join(rel);
    let model = repo(SAMPLE);
    let m = path(&model);
    let swapped = at("swap/new/model.onnx");
    let out = actswap(&["swap", m, "-o", path(&swapped), "--to", "*=primitive"]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(swapped.is_file());

    let (audited, report) = (at("audit/a/model.onnx"), at("audit/b/report.html"));
    let out = actswap(&[
        "audit",
        m,
        "--to",
        "*=primitive",
        "--dim",
        "batch=1",
        "--no-latency",
        "-o",
        path(&audited),
        "--report",
        path(&report),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(audited.is_file() && report.is_file());

    let (summary, page) = (at("batch/md/summary.md"), at("batch/html/batch.html"));
    let out = actswap(&[
        "batch",
        m,
        "-o",
        path(&at("batch/converted")),
        "--to",
        "*=primitive",
        "--dim",
        "batch=1",
        "--no-latency",
        "--markdown",
        path(&summary),
        "--report",
        path(&page),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    assert!(summary.is_file() && page.is_file());
}

#[test]
fn an_output_that_names_a_folder_is_refused_before_the_model_is_read() {
    let tmp = tempfile::tempdir().unwrap();
    let model = repo(SAMPLE);
    let existing = path(tmp.path());
    let trailing = format!("{}/", tmp.path().join("new").display());
    for out_path in [existing, trailing.as_str()] {
        let out = actswap(&["swap", path(&model), "-o", out_path, "--to", "*=primitive"]);
        refused(&out, &[&format!("-o '{out_path}' is a folder")]);
    }
    assert!(!Path::new(&trailing).exists(), "nothing is created");
    let out = actswap(&[
        "audit",
        path(&model),
        "--to",
        "*=primitive",
        "--dim",
        "batch=1",
        "--report",
        existing,
    ]);
    refused(&out, &[&format!("--report '{existing}' is a folder")]);
}

#[test]
fn an_output_folder_that_cannot_be_created_is_one_line() {
    let tmp = tempfile::tempdir().unwrap();
    let file = tmp.path().join("plain-file");
    std::fs::write(&file, b"not a folder").unwrap();
    let out_path = file.join("x.onnx");
    let out = actswap(&[
        "swap",
        path(&repo(SAMPLE)),
        "-o",
        path(&out_path),
        "--to",
        "*=primitive",
    ]);
    refused(
        &out,
        &[&format!("cannot create the folder '{}'", file.display())],
    );
}
