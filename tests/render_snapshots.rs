//! Snapshots of what people read: the catalogue, and the plan table, drift table and HTML report
//! of one audit (`orchard-grader.onnx` under the built-in piecewise-linear target, seeded random
//! inputs, latency off). A regression guard for the wording and layout; the figures themselves
//! are checked against outside references in tests/catalog.rs, tests/forms.rs and
//! tests/measure_compare.rs.
//!
//! Figures with more than six significant digits are rounded to six before the comparison, and
//! the full figures the HTML shows on hover to four: the drift is computed by tract's float32
//! kernels, whose last bits differ between CPUs (an output's max abs moved in its sixth digit
//! on a CPU with AVX-512).

use std::collections::BTreeMap;
use std::path::Path;

use actswap::audit::{self, Conversion, InputSource, Origin};
use actswap::catalog::{all, describe};
use actswap::measure::CompareOptions;
use actswap::plan::profile::Profile;
use actswap::report::html::{ModelSection, render};
use actswap::report::{drift_table, plan_table};
use actswap::run::inputs::{DEFAULT_MAX_ELEMENTS, RandomInputs};

#[test]
fn catalog_text() {
    let text: Vec<String> = all().iter().map(|k| describe(k)).collect();
    insta::assert_snapshot!("catalog", text.join("\n"));
}

#[test]
fn audit_plan_drift_and_html() {
    let model = Path::new("sample-models/orchard-grader.onnx");
    let conversion = Conversion::new(
        Vec::new(),
        Some(Profile::load("piecewise-linear").unwrap()),
        Vec::new(),
    )
    .unwrap();
    let inputs = InputSource {
        origin: Origin::Random,
        random: RandomInputs {
            samples: 2,
            dims: BTreeMap::from([("batch".to_string(), 1)]),
            ..RandomInputs::default()
        },
        max_elements: DEFAULT_MAX_ELEMENTS,
        ignore_unused_dims: false,
    };
    let opts = CompareOptions {
        latency: None,
        ..CompareOptions::default()
    };
    let a = audit::audit(model, &conversion, &inputs, &opts).unwrap();
    insta::assert_snapshot!("plan_table", plan_table::render(&a.plan));
    insta::assert_snapshot!("drift_table", six_digits(&drift_table::render(&a.drift)));
    let section = ModelSection {
        name: model.display().to_string(),
        audit: Some(&a),
        error: None,
    };
    let html = render("actswap audit: orchard-grader.onnx", &[section]);
    insta::assert_snapshot!(
        "report_html",
        six_digits(&hover_figures_to_four_digits(&html))
    );
}

/// `html` with the full figure of every `<span class="num" title="...">` rounded to four
/// significant digits.
fn hover_figures_to_four_digits(html: &str) -> String {
    const OPEN: &str = "<span class=\"num\" title=\"";
    let mut out = String::with_capacity(html.len());
    let mut rest = html;
    while let Some(at) = rest.find(OPEN) {
        let (head, tail) = rest.split_at(at + OPEN.len());
        out.push_str(head);
        let end = tail.find('"').unwrap_or(tail.len());
        match tail[..end].parse::<f64>() {
            Ok(v) if v != 0.0 && v.is_finite() => out.push_str(&format!("{v:.3e}")),
            _ => out.push_str(&tail[..end]),
        }
        rest = &tail[end..];
    }
    out.push_str(rest);
    out
}

/// `text` with every decimal figure of more than six significant digits rounded to six.
fn six_digits(text: &str) -> String {
    let chars: Vec<char> = text.chars().collect();
    let mut out = String::with_capacity(text.len());
    let mut i = 0;
    while i < chars.len() {
        let starts_number = chars[i].is_ascii_digit()
            && (i == 0 || !(chars[i - 1].is_alphanumeric() || "_.".contains(chars[i - 1])));
        if !starts_number {
            out.push(chars[i]);
            i += 1;
            continue;
        }
        let mut j = i;
        while j < chars.len() && (chars[j].is_ascii_digit() || chars[j] == '.') {
            j += 1;
        }
        if j < chars.len() && chars[j] == 'e' {
            let mut k = j + 1;
            if k < chars.len() && "+-".contains(chars[k]) {
                k += 1;
            }
            if k < chars.len() && chars[k].is_ascii_digit() {
                j = k;
                while j < chars.len() && chars[j].is_ascii_digit() {
                    j += 1;
                }
            }
        }
        let token: String = chars[i..j].iter().collect();
        let digits = token
            .split('e')
            .next()
            .unwrap_or("")
            .trim_start_matches(['0', '.'])
            .chars()
            .filter(char::is_ascii_digit)
            .count();
        match token.parse::<f64>() {
            Ok(v) if digits > 6 && token.contains(['.', 'e']) => out.push_str(&format!("{v:.5e}")),
            _ => out.push_str(&token),
        }
        i = j;
    }
    out
}
