//! `actswap catalog`: one line per kind without an argument, one kind in full with one.
//!
//! Sources: the fused ops and the opset each first appeared in are the ONNX operator schemas
//! (Operators.md, "since version": HardSwish 14, Mish 18, Gelu 20, Swish 24, Relu 6 for the
//! float types this tool writes); the kinds are the registry's.

mod cli_support;

use cli_support::actswap;

fn stdout(args: &[&str]) -> String {
    let out = actswap(args);
    assert_eq!(out.status.code(), Some(0), "{args:?}");
    String::from_utf8(out.stdout).unwrap()
}

#[test]
fn the_summary_has_one_line_per_kind_with_its_fused_op_and_opset() {
    let text = stdout(&["catalog"]);
    let kinds = actswap::catalog::all();
    let lines: Vec<&str> = text.lines().collect();
    assert!(lines[0].starts_with("kind "), "{}", lines[0]);
    for (kind, line) in kinds.iter().zip(&lines[1..]) {
        assert_eq!(line.split_whitespace().next(), Some(kind.id), "{line}");
    }
    let row = |id: &str| {
        *lines
            .iter()
            .find(|l| l.split_whitespace().next() == Some(id))
            .unwrap()
    };
    // ONNX operator schemas (see the module comment).
    for (id, fused) in [
        ("hard_swish", "HardSwish (opset 14)"),
        ("mish", "Mish (opset 18)"),
        ("gelu", "Gelu (opset 20)"),
        ("swish", "Swish (opset 24)"),
        ("relu", "Relu (opset 6)"),
    ] {
        assert!(row(id).contains(fused), "{}", row(id));
    }
    // ONNX has no single op for these: the row says so.
    assert!(row("squared_relu").contains("none"));
    assert!(row("hard_sigmoid").contains("alpha=0.2 beta=0.5"));
    assert!(
        lines.len() < kinds.len() + 8,
        "a summary, not the long form"
    );
}

#[test]
fn a_kind_given_is_described_in_full() {
    let text = stdout(&["catalog", "swish"]);
    for section in ["Formula", "Source", "Fused op"] {
        assert!(text.lines().any(|l| l == section), "{section} in {text}");
    }
    let json: serde_json::Value = serde_json::from_str(&stdout(&["catalog", "--json"])).unwrap();
    assert_eq!(
        json["kinds"].as_array().unwrap().len(),
        actswap::catalog::all().len()
    );
}
