//! Never lose data, never hang, never crash: every promise of the README's "Exit codes" and
//! "Lossless model I/O" sections about bad input and output paths, checked end to end. Each
//! refusal is exit code 2 with one line on stderr, before any work, and leaves every input byte
//! as it was.
//!
//! Sources: tests/corpus/refused (scripts/gen_bad_corpus.py), where the manifest records the
//! onnx checker's and onnxruntime's verdict on each file (onnx 1.23.2, onnxruntime 1.32.0);
//! tests/corpus/unknown-fields, whose unknown fields were kept by protobuf's own Python parser;
//! the ONNX IR specification (names assigned once per graph, sorted nodes, external data
//! relative to the model's folder); POSIX for FIFOs, device nodes and signals. The rules on
//! output paths are this tool's documented contract (README).

mod cli_support;

use std::collections::BTreeMap;
use std::io::{BufRead, BufReader};
use std::os::unix::process::ExitStatusExt;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

use actswap::onnx::builder::{model, node, opset, value};
use actswap::onnx::proto::tensor_proto::DataType;
use actswap::onnx::{Model, builder::Dim};
use cli_support::{path, repo, stderr};
use prost::Message;
use serde_json::Value;

/// Every file below `dir` with its bytes (links and special files as their kind).
fn snapshot(dir: &Path) -> BTreeMap<PathBuf, Vec<u8>> {
    walkdir::WalkDir::new(dir)
        .into_iter()
        .filter_map(Result::ok)
        .map(|e| {
            let t = e.file_type();
            let content = if t.is_file() {
                std::fs::read(e.path()).unwrap()
            } else {
                format!("{t:?}").into_bytes()
            };
            (e.path().to_path_buf(), content)
        })
        .collect()
}

/// Runs `actswap args`, killing it after 60 s (a hang fails the test instead of the suite).
fn bounded(args: &[&str]) -> Output {
    let mut child = Command::new(env!("CARGO_BIN_EXE_actswap"))
        .args(args)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let start = Instant::now();
    while child.try_wait().unwrap().is_none() {
        if start.elapsed() > Duration::from_secs(60) {
            child.kill().unwrap();
            panic!("actswap {args:?} hung");
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    child.wait_with_output().unwrap()
}

/// Asserts exit code 2, one line on stderr containing `want`, and no raw control character.
fn assert_refused(out: &Output, want: &str, ctx: &str) {
    let err = stderr(out);
    assert_eq!(out.status.code(), Some(2), "{ctx}: {err}");
    assert_eq!(err.trim_end().lines().count(), 1, "{ctx}: {err}");
    assert!(err.contains(want), "{ctx}: expected '{want}' in: {err}");
    assert!(
        !err.contains("internal error") && !err.contains("panicked"),
        "{ctx}: {err}"
    );
    assert!(
        !err.trim_end().chars().any(|c| c.is_control()),
        "{ctx}: raw control character in: {err:?}"
    );
}

fn mkfifo(p: &Path) {
    let c = std::ffi::CString::new(p.to_str().unwrap()).unwrap();
    assert_eq!(unsafe { libc::mkfifo(c.as_ptr(), 0o600) }, 0, "mkfifo");
}

/// A copy of the model with external data (tests/corpus/good-external) in a fresh folder.
fn external_copy(root: &Path) -> PathBuf {
    let dir = root.join("ext");
    std::fs::create_dir_all(&dir).unwrap();
    for f in ["model.onnx", "weights.bin"] {
        std::fs::copy(repo("tests/corpus/good-external").join(f), dir.join(f)).unwrap();
    }
    dir
}

const TO: [&str; 2] = ["--to", "*=primitive"];
const FAST: [&str; 2] = ["--no-latency", "--samples=1"];

/// The refused corpus: each file fails its command (and every command that reads a model,
/// `swap` and `audit` included, when `info` refuses it) with its one-line error; nothing is
/// written and no input byte changes.
#[test]
fn every_refused_model_fails_before_any_work() {
    let dir = repo("tests/corpus/refused");
    let manifest: Value =
        serde_json::from_slice(&std::fs::read(dir.join("manifest.json")).unwrap()).unwrap();
    let before = snapshot(&dir);
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("out.onnx");
    for entry in manifest["files"].as_array().unwrap() {
        let file = dir.join(entry["file"].as_str().unwrap());
        let want = entry["expect_error"].as_str().unwrap();
        let f = path(&file);
        let o = path(&out);
        let mut command = entry["command"].as_str().unwrap().split_whitespace();
        let mut commands: Vec<Vec<&str>> = vec![match command.next().unwrap() {
            "swap" => [&["swap", f, "-o", o][..], &command.collect::<Vec<_>>()].concat(),
            other => vec![other, f],
        }];
        if commands[0][0] == "info" {
            commands.push(vec!["scan", f]);
            commands.push([&["swap", f, "-o", o][..], &TO].concat());
            commands.push([&["audit", f, "-o", o][..], &TO, &FAST].concat());
        }
        for args in commands {
            assert_refused(&bounded(&args), want, &format!("{args:?}"));
            assert!(!out.exists(), "{args:?} wrote {}", out.display());
        }
    }
    assert_eq!(snapshot(&dir), before, "an input byte changed");
}

/// The onnx checker refuses every file of the refused corpus (its recorded verdict) or cannot
/// decode it; actswap agrees with it.
#[test]
fn the_onnx_checker_refuses_the_same_files() {
    let manifest: Value =
        serde_json::from_slice(&std::fs::read(repo("tests/corpus/refused/manifest.json")).unwrap())
            .unwrap();
    for entry in manifest["files"].as_array().unwrap() {
        let verdict = entry["onnx_checker"].as_str().unwrap();
        assert!(
            verdict.starts_with("refused") || verdict == "not decoded",
            "{}: {verdict}",
            entry["file"]
        );
    }
}

/// `audit m.onnx --report m.onnx`, `audit m.onnx -o m.onnx`, `audit -o X --report X`, a report
/// over an input sample, and `swap ext/model.onnx -o ext/weights.bin` (its own external data),
/// through a symbolic link and a hard link too.
#[test]
fn no_command_writes_over_a_file_it_reads_or_writes_twice() {
    let tmp = tempfile::tempdir().unwrap();
    let ext = external_copy(tmp.path());
    let m = ext.join("model.onnx");
    let weights = ext.join("weights.bin");
    std::os::unix::fs::symlink(&m, tmp.path().join("link.onnx")).unwrap();
    std::fs::hard_link(&weights, tmp.path().join("hard.bin")).unwrap();
    let sample = repo("tests/corpus/good-external/input_pixels.npy");
    std::fs::copy(&sample, tmp.path().join("pixels.npy")).unwrap();
    let x = tmp.path().join("x.onnx");
    let (m, weights, x) = (path(&m), path(&weights), path(&x));
    let link = tmp.path().join("link.onnx");
    let hard = tmp.path().join("hard.bin");
    let pixels = tmp.path().join("pixels.npy");
    let pixels_arg = format!("pixels={}", path(&pixels));
    let cases: Vec<(Vec<&str>, &str)> = vec![
        (
            [&["audit", m, "--report", m][..], &TO, &FAST].concat(),
            "refusing to overwrite the input model",
        ),
        (
            [&["audit", m, "-o", m][..], &TO, &FAST].concat(),
            "refusing to overwrite the input model",
        ),
        (
            [&["audit", m, "-o", x, "--report", x][..], &TO, &FAST].concat(),
            "the converted model and the report would both be written",
        ),
        (
            [
                &[
                    "audit",
                    m,
                    "--input",
                    &pixels_arg,
                    "--report",
                    path(&pixels),
                ][..],
                &TO,
            ]
            .concat(),
            "refusing to overwrite an input file",
        ),
        (
            [&["swap", m, "-o", weights][..], &TO].concat(),
            "refusing to overwrite external data of the input model",
        ),
        (
            [&["swap", m, "-o", path(&hard)][..], &TO].concat(),
            "refusing to overwrite external data of the input model",
        ),
        (
            [&["swap", m, "-o", path(&link)][..], &TO].concat(),
            "refusing to overwrite the input model",
        ),
        (
            [&["swap", m, "-o", path(&link), "--overwrite"][..], &TO].concat(),
            "",
        ),
    ];
    for (args, want) in cases {
        let before = snapshot(tmp.path());
        let out = bounded(&args);
        if want.is_empty() {
            // --overwrite asks for the input to be replaced: that one is allowed.
            assert_eq!(out.status.code(), Some(0), "{args:?}: {}", stderr(&out));
            continue;
        }
        assert_refused(&out, want, &format!("{args:?}"));
        assert_eq!(snapshot(tmp.path()), before, "{args:?} changed a file");
    }
}

/// `batch in/ -o out/ --report in/a.onnx --markdown in/b.onnx` would have replaced input models
/// with HTML and Markdown.
#[test]
fn batch_reports_never_replace_input_models() {
    let tmp = tempfile::tempdir().unwrap();
    let models = tmp.path().join("in");
    std::fs::create_dir(&models).unwrap();
    for name in ["a.onnx", "b.onnx"] {
        std::fs::copy(
            repo("tests/fixtures/conformance/test_relu/model.onnx"),
            models.join(name),
        )
        .unwrap();
    }
    let out_dir = tmp.path().join("out");
    let (a, b) = (models.join("a.onnx"), models.join("b.onnx"));
    for extra in [
        vec!["--report", path(&a)],
        vec!["--markdown", path(&b)],
        vec!["--report", path(&a), "--markdown", path(&b)],
    ] {
        let before = snapshot(tmp.path());
        let args = [
            &["batch", path(&models), "-o", path(&out_dir)][..],
            &TO,
            &FAST,
            &extra,
        ]
        .concat();
        assert_refused(
            &bounded(&args),
            "refusing to overwrite an input model",
            &format!("{args:?}"),
        );
        assert_eq!(snapshot(tmp.path()), before, "{args:?} changed a file");
    }
    let converted_a = out_dir.join("a.onnx");
    let args = [
        &["batch", path(&models), "-o", path(&out_dir)][..],
        &TO,
        &FAST,
        &["--report", path(&converted_a)],
    ]
    .concat();
    assert_refused(
        &bounded(&args),
        "the converted model and the report would both be written",
        "report over an output model",
    );
}

/// `-o` naming a FIFO or a device node: refused, and the node stays what it was.
#[test]
fn outputs_must_be_regular_files() {
    let tmp = tempfile::tempdir().unwrap();
    let ext = external_copy(tmp.path());
    let m = ext.join("model.onnx");
    let fifo = tmp.path().join("pipe.onnx");
    mkfifo(&fifo);
    let folder = tmp.path().join("folder.onnx");
    std::fs::create_dir(&folder).unwrap();
    for (target, kind) in [
        (fifo.as_path(), "a FIFO"),
        (Path::new("/dev/null"), "a device"),
        (folder.as_path(), "a folder"),
    ] {
        for args in [
            [&["swap", path(&m), "-o", path(target)][..], &TO].concat(),
            [&["audit", path(&m), "-o", path(target)][..], &TO, &FAST].concat(),
            [
                &["audit", path(&m), "--report", path(target)][..],
                &TO,
                &FAST,
            ]
            .concat(),
        ] {
            assert_refused(&bounded(&args), kind, &format!("{args:?}"));
        }
    }
    use std::os::unix::fs::FileTypeExt;
    assert!(std::fs::metadata(&fifo).unwrap().file_type().is_fifo());
    assert!(
        std::fs::metadata("/dev/null")
            .unwrap()
            .file_type()
            .is_char_device()
    );
}

/// External data that is a FIFO used to hang `scan`, `swap`, `audit` and `batch` forever; a
/// folder was accepted by `info` and `scan`. A model path that is a FIFO is refused too.
#[test]
fn external_data_must_be_a_regular_file_and_never_hangs() {
    let tmp = tempfile::tempdir().unwrap();
    for (kind, make) in [
        ("a FIFO", mkfifo as fn(&Path)),
        ("a folder", |p: &Path| std::fs::create_dir(p).unwrap()),
    ] {
        let root = tmp.path().join(kind.replace(' ', "-"));
        let ext = external_copy(&root);
        std::fs::remove_file(ext.join("weights.bin")).unwrap();
        make(&ext.join("weights.bin"));
        let before = snapshot(&ext);
        let m = path(&ext.join("model.onnx")).to_string();
        let o = path(&root.join("out.onnx")).to_string();
        let out_dir = path(&root.join("converted")).to_string();
        for args in [
            vec!["info", &m],
            vec!["scan", &m],
            [&["swap", &m, "-o", &o][..], &TO].concat(),
            [&["audit", &m][..], &TO, &FAST].concat(),
        ] {
            assert_refused(
                &bounded(&args),
                &format!("external data location 'weights.bin' is {kind}, not a regular file"),
                &format!("{args:?}"),
            );
        }
        let args = [&["batch", &m, "-o", &out_dir][..], &TO, &FAST].concat();
        let out = bounded(&args);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", stderr(&out));
        let all = format!("{}{}", String::from_utf8_lossy(&out.stdout), stderr(&out));
        assert!(all.contains("not a regular file"), "{args:?}: {all}");
        assert!(!root.join("converted/model.onnx").exists());
        assert!(!root.join("out.onnx").exists());
        assert_eq!(snapshot(&ext), before, "an input changed");
    }
    let fifo = tmp.path().join("model.onnx");
    mkfifo(&fifo);
    assert_refused(&bounded(&["info", path(&fifo)]), "is a FIFO", "FIFO model");
    let profile = tmp.path().join("target.toml");
    mkfifo(&profile);
    let m = repo("sample-models/orchard-grader.onnx");
    let o = tmp.path().join("out.onnx");
    let args = ["swap", path(&m), "-o", path(&o), "--target", path(&profile)];
    assert_refused(&bounded(&args), "is a FIFO", "FIFO profile");
}

/// `drift` reads external data through tract: a FIFO there is refused before tract opens it.
#[test]
fn drift_refuses_external_data_that_is_no_file() {
    let tmp = tempfile::tempdir().unwrap();
    let ext = external_copy(tmp.path());
    std::fs::remove_file(ext.join("weights.bin")).unwrap();
    mkfifo(&ext.join("weights.bin"));
    let m = ext.join("model.onnx");
    let args = [&["drift", path(&m), path(&m)][..], &FAST].concat();
    assert_refused(&bounded(&args), "is a FIFO, not a regular file", "drift");
}

/// A model whose messages carry fields of a newer IR (tests/corpus/unknown-fields): a rewrite
/// keeps the unknown fields of every message it keeps, and the bytes of every untouched node.
#[test]
fn a_rewrite_keeps_unknown_fields() {
    let dir = repo("tests/corpus/unknown-fields");
    let manifest: Value =
        serde_json::from_slice(&std::fs::read(dir.join("manifest.json")).unwrap()).unwrap();
    let tmp = tempfile::tempdir().unwrap();
    let out = tmp.path().join("out.onnx");
    let before = snapshot(&dir);
    let result = bounded(&[
        "swap",
        path(&dir.join("model.onnx")),
        "-o",
        path(&out),
        "--to",
        "hard_swish=primitive",
    ]);
    assert_eq!(result.status.code(), Some(0), "{}", stderr(&result));
    assert_eq!(snapshot(&dir), before);
    let written = std::fs::read(&out).unwrap();
    let contains = |hex: &str| {
        let needle: Vec<u8> = (0..hex.len())
            .step_by(2)
            .map(|i| u8::from_str_radix(&hex[i..i + 2], 16).unwrap())
            .collect();
        written.windows(needle.len()).any(|w| w == needle)
    };
    for f in manifest["unknown_fields"].as_array().unwrap() {
        let kept = !f["where"].as_str().unwrap().contains("rewritten");
        assert_eq!(contains(f["bytes_hex"].as_str().unwrap()), kept, "{f}");
    }
    for node in manifest["kept_nodes_hex"].as_array().unwrap() {
        assert!(
            contains(node.as_str().unwrap()),
            "an untouched node changed"
        );
    }
    let proto = actswap::onnx::proto::ModelProto::decode(written.as_slice()).unwrap();
    let ops: Vec<&str> = proto
        .graph
        .as_ref()
        .unwrap()
        .node
        .iter()
        .map(|n| n.op_type())
        .collect();
    assert!(!ops.contains(&"HardSwish"), "{ops:?}");
    let again = Model::load(&out).unwrap();
    actswap::onnx::ModelIndex::build(&again).unwrap();
}

/// Names with ESC, BEL and CR are printed escaped by `info` and `scan` (and in errors, see the
/// refused corpus's control-characters.onnx).
#[test]
fn control_characters_in_names_are_escaped() {
    let x = "pixels\u{1b}[31m";
    let gate = "gate\u{7}";
    let y = "heat\r";
    let graph = actswap::onnx::proto::GraphProto {
        node: vec![
            node("Sigmoid", "silu\u{1b}]0;title\u{7}", &[x], &[gate], vec![]),
            node("Mul", "mul", &[x, gate], &[y], vec![]),
        ],
        name: Some("bakery".into()),
        input: vec![value(x, DataType::Float, &[Dim::Size(2)])],
        output: vec![value(y, DataType::Float, &[Dim::Size(2)])],
        ..Default::default()
    };
    let tmp = tempfile::tempdir().unwrap();
    let m = tmp.path().join("m.onnx");
    std::fs::write(
        &m,
        model(graph, vec![opset("", 13)], "test").encode_to_vec(),
    )
    .unwrap();
    for args in [vec!["info", path(&m)], vec!["scan", path(&m)]] {
        let out = bounded(&args);
        assert_eq!(out.status.code(), Some(0), "{args:?}: {}", stderr(&out));
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(
            !text.chars().any(|c| c.is_control() && c != '\n'),
            "{args:?}: {text:?}"
        );
        assert!(text.contains("pixels\\u{1b}[31m"), "{args:?}: {text}");
    }
}

/// `batch` lists `.onnx` entries it cannot read (a FIFO, a folder, a link loop) as skipped.
#[test]
fn batch_lists_what_it_skips() {
    let tmp = tempfile::tempdir().unwrap();
    let models = tmp.path().join("in");
    std::fs::create_dir(&models).unwrap();
    std::fs::copy(
        repo("tests/fixtures/conformance/test_relu/model.onnx"),
        models.join("relu.onnx"),
    )
    .unwrap();
    mkfifo(&models.join("pipe.onnx"));
    std::fs::create_dir(models.join("folder.onnx")).unwrap();
    std::os::unix::fs::symlink("loop.onnx", models.join("loop.onnx")).unwrap();
    let out_dir = tmp.path().join("out");
    let args = [
        &["batch", path(&models), "-o", path(&out_dir)][..],
        &TO,
        &FAST,
    ]
    .concat();
    let out = bounded(&args);
    let err = stderr(&out);
    assert!(matches!(out.status.code(), Some(0 | 1)), "{err}");
    for (name, reason) in [
        ("pipe.onnx", "a FIFO"),
        ("folder.onnx", "a folder"),
        ("loop.onnx", "a broken link or a link loop"),
    ] {
        assert!(
            err.lines()
                .any(|l| l.contains("skipped") && l.contains(name) && l.contains(reason)),
            "{name}: {err}"
        );
    }
    assert!(out_dir.join("relu.onnx").exists());
}

/// The child half of `interrupted_writes_leave_no_temporary`: registers a temporary, says so,
/// and waits to be interrupted.
#[test]
fn signal_child() {
    let Some(dir) = std::env::var_os("ACTSWAP_SIGNAL_CHILD_DIR") else {
        return;
    };
    actswap::files::temps::remove_on_signals();
    let mut t = actswap::files::temps::LiveTemp::new_in(Path::new(&dir)).unwrap();
    t.write_all(&vec![0u8; 1 << 20]).unwrap();
    println!("ready");
    std::thread::sleep(Duration::from_secs(60));
    panic!("not interrupted");
}

/// SIGINT or SIGTERM during a write removes its `.actswap-XXXXXX` temporary, and the process
/// ends as the signal ends it (POSIX: killed by that signal, 130 or 143 in a shell).
#[test]
fn interrupted_writes_leave_no_temporary() {
    for signal in [libc::SIGINT, libc::SIGTERM] {
        let dir = tempfile::tempdir().unwrap();
        let mut child = Command::new(std::env::current_exe().unwrap())
            .args(["--exact", "signal_child", "--nocapture", "--test-threads=1"])
            .env("ACTSWAP_SIGNAL_CHILD_DIR", dir.path())
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        let mut lines = BufReader::new(child.stdout.take().unwrap()).lines();
        assert!(lines.any(|l| l.unwrap().contains("ready")));
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
        unsafe { libc::kill(child.id() as i32, signal) };
        let status = child.wait().unwrap();
        assert_eq!(status.signal(), Some(signal), "{status}");
        let left: Vec<_> = std::fs::read_dir(dir.path()).unwrap().collect();
        assert!(left.is_empty(), "temporaries left: {left:?}");
    }
}
