//! The HTML report, read back with an HTML parser (the `scraper` crate): one SVG per plot, every
//! curve with its points, worst-case points that agree with the drift report's catalogue bounds,
//! the caution, nothing fetched from outside, escaped names, error sections.
//!
//! Models: the sample models (sample-models/README.md) and a torch 2.15 export with its
//! inputs (tests/fixtures/torch). Outside facts: SiLU against hard-swish differs most at
//! x = ±3, by 3 - 3·sigmoid(3) = 3 / (1 + e^3) (hard-swish: Howard et al. 2019, "Searching for
//! MobileNetV3"; SiLU: Elfwing et al. 2018), checked where the observed range holds ±3.

mod measure_support;

use std::process::{Command, Output};

use actswap::audit::{self, Audit, Conversion, InputSource, Origin, Verdict, summarize};
use actswap::measure::{CAUTION, CompareOptions};
use actswap::onnx::builder::{Dim, model, node, opset, value};
use actswap::onnx::proto::{GraphProto, tensor_proto::DataType};
use actswap::onnx::{Model, SaveOptions};
use actswap::plan::request::Request;
use actswap::report::html::{CURVE_POINTS, ModelSection, render};
use actswap::run::inputs::{Binding, DEFAULT_MAX_ELEMENTS, RandomInputs};
use measure_support as fx;
use scraper::{ElementRef, Html, Selector};
use serde_json::Value;

fn sample(name: &str) -> String {
    format!("{}/sample-models/{name}", env!("CARGO_MANIFEST_DIR"))
}

fn audit(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_actswap"))
        .arg("audit")
        .args(args)
        .output()
        .unwrap()
}

fn sel(s: &str) -> Selector {
    Selector::parse(s).unwrap()
}

fn count(doc: &Html, s: &str) -> usize {
    doc.select(&sel(s)).count()
}

/// The points of a polyline, as (x, y) pairs.
fn points(e: ElementRef) -> Vec<(f64, f64)> {
    e.value()
        .attr("points")
        .unwrap()
        .split_whitespace()
        .map(|p| {
            let (x, y) = p.split_once(',').unwrap();
            (x.parse().unwrap(), y.parse().unwrap())
        })
        .collect()
}

fn data(e: ElementRef, key: &str) -> f64 {
    e.value()
        .attr(&format!("data-{key}"))
        .unwrap_or_else(|| panic!("no data-{key}"))
        .parse()
        .unwrap()
}

/// The page fetches nothing: no script at all, no external reference, no linked resource, and
/// a content security policy that forbids fetching.
fn assert_self_contained(html: &str, doc: &Html) {
    assert!(!html.contains("http://") && !html.contains("https://"));
    for tag in [
        "script", "link", "img", "iframe", "object", "embed", "image", "use",
    ] {
        assert_eq!(count(doc, tag), 0, "<{tag}> in the report");
    }
    let css: String = doc.select(&sel("style")).map(|s| s.inner_html()).collect();
    assert!(!css.contains("url(") && !css.contains("@import") && !css.contains("@font-face"));
    let csp = doc
        .select(&sel("meta[http-equiv=\"Content-Security-Policy\"]"))
        .next()
        .unwrap();
    assert!(
        csp.value()
            .attr("content")
            .unwrap()
            .starts_with("default-src 'none'")
    );
}

/// Sites whose kind or parameters changed, grouped by (kind_a, params_a, kind_b, params_b),
/// with an observed input range: the plots the report must hold.
fn swapped_groups(sites: &[Value]) -> Vec<Vec<&Value>> {
    let key = |s: &Value| {
        (
            s["kind_a"].clone(),
            s["params_a"].clone(),
            s["kind_b"].clone(),
            s["params_b"].clone(),
        )
    };
    let mut groups: Vec<Vec<&Value>> = Vec::new();
    for s in sites {
        let k = key(s);
        if (k.0 == k.2 && k.1 == k.3) || s["input_range"].is_null() {
            continue;
        }
        match groups.iter_mut().find(|g| key(g[0]) == k) {
            Some(g) => g.push(s),
            None => groups.push(vec![s]),
        }
    }
    groups
}

#[test]
fn audit_report_holds_a_plot_per_chart_and_swapped_kind_even_over_budget() {
    let tmp = tempfile::tempdir().unwrap();
    let report = tmp.path().join("orchard.html");
    let m = sample("orchard-grader.onnx");
    let out = audit(&[
        &m,
        "--target",
        "piecewise-linear",
        "--dim",
        "batch=1",
        "--samples",
        "3",
        "--runs",
        "3",
        "--warmup",
        "1",
        "--max-abs",
        "1e-12",
        "--json",
        "--report",
        report.to_str().unwrap(),
    ]);
    // Over budget (a tolerance no approximation meets): exit 1, and the report is written.
    assert_eq!(
        out.status.code(),
        Some(1),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let json: Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(json["report"], report.to_str().unwrap());
    let html = std::fs::read_to_string(&report).unwrap();
    let doc = Html::parse_document(&html);
    assert_self_contained(&html, &doc);

    let caution = caution_text(&doc);
    assert!(caution.contains(CAUTION), "{caution}");
    assert_eq!(count(&doc, "section.model"), 1);
    assert_eq!(
        count(&doc, "table.overview"),
        0,
        "no overview for one model"
    );
    // The badge is the one verdict (ops the target does not run and unserved sites outrank
    // drift); the offenders are listed either way, and every failing reason.
    let verdict = json["verdict"].as_str().unwrap();
    assert_ne!(verdict, "pass");
    assert_eq!(count(&doc, &format!("h2 .verdict.{verdict}")), 1);
    assert_eq!(
        count(&doc, "ul.reasons li"),
        json["reasons"].as_array().unwrap().len()
    );
    let offenders = json["drift"]["offenders"].as_array().unwrap().len();
    assert!(offenders >= 1);
    assert_eq!(count(&doc, "ul.offenders li"), offenders);

    let sites = json["drift"]["sites"].as_array().unwrap();
    let plan_sites = json["plan"]["sites"].as_array().unwrap();
    assert_eq!(count(&doc, "table.sites tbody tr"), plan_sites.len());
    assert_eq!(
        count(&doc, "table.outputs tbody tr"),
        json["drift"]["outputs"].as_array().unwrap().len()
    );

    // One drift chart with a row per site, one latency chart, one plot per swapped kind.
    let groups = swapped_groups(sites);
    assert!(
        !groups.is_empty(),
        "the piecewise-linear target swaps kinds"
    );
    assert_eq!(count(&doc, "svg.plot-drift"), 1);
    assert_eq!(count(&doc, "svg.plot-latency"), 1);
    assert_eq!(count(&doc, "svg.plot-curves"), groups.len());
    assert_eq!(count(&doc, "svg"), 2 + groups.len());
    let drift_svg = doc.select(&sel("svg.plot-drift")).next().unwrap();
    assert_eq!(data(drift_svg, "sites") as usize, sites.len());
    let bars = drift_svg.select(&sel("rect.bar")).count();
    let notes = drift_svg.select(&sel("text.bar-note")).count();
    assert_eq!(
        bars + notes,
        2 * sites.len(),
        "a bar or a written figure for local and propagated"
    );

    let latency_svg = doc.select(&sel("svg.plot-latency")).next().unwrap();
    let timed = sites.iter().filter(|s| !s["latency"].is_null()).count();
    assert_eq!(data(latency_svg, "rows") as usize, 1 + timed);

    for (g, svg) in groups.iter().zip(doc.select(&sel("svg.plot-curves"))) {
        let ids: Vec<&str> = g.iter().map(|s| s["id_a"].as_str().unwrap()).collect();
        assert_eq!(svg.value().attr("data-sites").unwrap(), ids.join(","));
        assert_eq!(data(svg, "points") as usize, CURVE_POINTS);
        for class in ["curve-a", "curve-b", "curve-err"] {
            let line = svg
                .select(&sel(&format!("polyline.{class}")))
                .next()
                .unwrap();
            let pts = points(line);
            assert_eq!(pts.len(), CURVE_POINTS, "{class} of {ids:?}");
            assert!(
                pts.windows(2).all(|w| w[1].0 > w[0].0),
                "x increases along {class}"
            );
        }
        assert_eq!(svg.select(&sel("circle.worst")).count(), 1);
        if let [site] = g.as_slice() {
            // The marked worst case is the drift report's catalogue bound over the same range.
            assert_eq!(
                data(svg, "worst-error"),
                site["bound_over_range"].as_f64().unwrap()
            );
            assert_eq!(data(svg, "worst-at"), site["bound_at"].as_f64().unwrap());
            let r = &site["input_range"];
            let (lo, hi) = (r["min"].as_f64().unwrap(), r["max"].as_f64().unwrap());
            if site["kind_a"] == "silu" && site["kind_b"] == "hard_swish" && lo <= -3.0 && hi >= 3.0
            {
                let expected = 3.0 / (1.0 + 3f64.exp());
                assert!((data(svg, "worst-error") - expected).abs() < 1e-9);
                assert!((data(svg, "worst-at").abs() - 3.0).abs() < 1e-6);
            }
        }
    }
}

#[test]
fn an_error_before_measurement_writes_no_report() {
    let tmp = tempfile::tempdir().unwrap();
    let bad = tmp.path().join("not-a-model.onnx");
    std::fs::write(&bad, b"these bytes are no protobuf model").unwrap();
    let report = tmp.path().join("r.html");
    let out = audit(&[
        bad.to_str().unwrap(),
        "--target",
        "piecewise-linear",
        "--report",
        report.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(!report.exists());
    assert_eq!(
        std::fs::read_dir(tmp.path()).unwrap().count(),
        1,
        "no temporary file left"
    );
}

/// Audits a torch export on its own inputs through the library stage.
fn library_audit(id: &str, to: &str) -> Audit {
    let dir = fx::fixture_dir(id);
    let conversion = Conversion::new(vec![Request::parse(to).unwrap()], None, Vec::new()).unwrap();
    let inputs = InputSource {
        origin: Origin::Files(vec![Binding {
            input: None,
            path: dir.join("inputs.npz"),
        }]),
        random: RandomInputs::default(),
        max_elements: DEFAULT_MAX_ELEMENTS,
        ignore_unused_dims: false,
    };
    let opts = CompareOptions {
        latency: None,
        ..CompareOptions::default()
    };
    audit::audit(&dir.join("model.onnx"), &conversion, &inputs, &opts).unwrap()
}

#[test]
fn many_models_get_an_overview_and_a_failed_one_its_error_line() {
    let a = library_audit("pump-ts-op13", "gelu=gelu_tanh");
    let (plan, drift) = (&a.plan, &a.drift);
    let summary = summarize(plan, None, drift);
    assert_eq!(summary.rewritten, plan.rewrites().count());
    assert!(summary.rewritten >= 1);
    assert_eq!(
        summary.verdict,
        if drift.within_budget {
            Verdict::Pass
        } else {
            Verdict::OverBudget
        }
    );
    let worst_local = drift
        .sites
        .iter()
        .filter_map(|s| s.local.as_ref())
        .map(|d| d.max_abs)
        .fold(0.0, f64::max);
    assert_eq!(summary.worst_local_max_abs, Some(worst_local));
    let sections = [
        ModelSection {
            name: "models/pump.onnx".into(),
            audit: Some(&a),
            error: None,
        },
        ModelSection {
            name: "models/truncated.onnx".into(),
            audit: None,
            error: Some("cannot decode 'models/truncated.onnx': unexpected end of data".into()),
        },
    ];
    let html = render("nightly conversion", &sections);
    let doc = Html::parse_document(&html);
    assert_self_contained(&html, &doc);
    assert_eq!(
        doc.select(&sel("title")).next().unwrap().inner_html(),
        "nightly conversion"
    );

    let rows: Vec<ElementRef> = doc.select(&sel("table.overview tbody tr")).collect();
    assert_eq!(rows.len(), 2);
    let first: String = rows[0].text().collect();
    assert!(first.contains("models/pump.onnx"));
    assert_eq!(rows[1].select(&sel(".verdict.error")).count(), 1);
    assert_eq!(
        rows[0]
            .select(&sel("a"))
            .next()
            .unwrap()
            .value()
            .attr("href"),
        Some("#model-1")
    );

    let sections: Vec<ElementRef> = doc.select(&sel("section.model")).collect();
    assert_eq!(sections.len(), 2);
    assert_eq!(sections[1].value().attr("id"), Some("model-2"));
    let error: String = sections[1]
        .select(&sel("p.error"))
        .next()
        .unwrap()
        .text()
        .collect();
    assert_eq!(
        error,
        "error: cannot decode 'models/truncated.onnx': unexpected end of data"
    );
    assert_eq!(sections[1].select(&sel("svg")).count(), 0);
    assert_eq!(sections[1].select(&sel("table")).count(), 0);
    // The measured model: a drift chart, no latency chart (not measured), a plot per swap.
    let ok = sections[0];
    assert_eq!(ok.select(&sel("svg.plot-drift")).count(), 1);
    assert_eq!(ok.select(&sel("svg.plot-latency")).count(), 0);
    assert_eq!(
        ok.select(&sel("svg.plot-curves")).count(),
        1,
        "gelu -> gelu_tanh"
    );
    let caution = caution_text(&doc);
    assert!(caution.contains(CAUTION));
}

#[test]
fn hostile_tensor_names_are_shown_as_text() {
    let tmp = tempfile::tempdir().unwrap();
    let (input, pre, out) = (
        "<script>alert('in')</script>",
        "\"><img src=x onerror=alert(1)>",
        "</td></tr><b id=\"x\">&amp;",
    );
    let graph = GraphProto {
        name: Some("hostile".into()),
        node: vec![
            node("Sigmoid", "sig", &[input], &[pre], vec![]),
            node("Mul", "mul", &[input, pre], &[out], vec![]),
        ],
        input: vec![value(input, DataType::Float, &[Dim::Size(2), Dim::Size(8)])],
        output: vec![value(out, DataType::Float, &[Dim::Size(2), Dim::Size(8)])],
        ..Default::default()
    };
    let path = tmp.path().join("hostile.onnx");
    Model::from_proto(
        model(graph, vec![opset("", 14)], "test"),
        tmp.path().to_path_buf(),
    )
    .save(&path, &SaveOptions::default())
    .unwrap();
    let report = tmp.path().join("hostile.html");
    let run = audit(&[
        path.to_str().unwrap(),
        "--to",
        "silu=hard_swish",
        "--no-latency",
        "--report",
        report.to_str().unwrap(),
    ]);
    assert!(
        matches!(run.status.code(), Some(0 | 1)),
        "{}",
        String::from_utf8_lossy(&run.stderr)
    );
    let html = std::fs::read_to_string(&report).unwrap();
    let doc = Html::parse_document(&html);
    assert_self_contained(&html, &doc);
    assert_eq!(count(&doc, "b"), 0);
    assert!(!html.contains("<img") && !html.contains("<b id"));
    // The names read back as the text they are.
    let site_id = doc.select(&sel("table.sites tbody td")).next().unwrap();
    assert_eq!(
        site_id.value().attr("title"),
        Some(format!("{out} in main").as_str())
    );
    let outputs: String = doc
        .select(&sel("table.outputs tbody td"))
        .next()
        .unwrap()
        .text()
        .collect();
    assert_eq!(outputs, out);
    assert_eq!(
        count(&doc, "table.outputs tbody tr"),
        1,
        "the hostile name broke no row"
    );
    assert_eq!(count(&doc, "svg.plot-curves"), 1);
}

/// The text of the report's caution box.
fn caution_text(doc: &Html) -> String {
    doc.select(&sel("aside.caution"))
        .next()
        .unwrap()
        .text()
        .collect()
}

/// SiLU, x·sigmoid(x) (Elfwing et al. 2017, arXiv:1702.03118), in f64.
fn silu(x: f64) -> f64 {
    x / (1.0 + (-x).exp())
}

/// `knot 3: x = -1.5, fitted = -0.27` -> (-1.5, -0.27).
fn knot(tip: &str) -> (f64, f64) {
    let (_, rest) = tip.split_once("x = ").unwrap();
    let (x, y) = rest.split_once(", fitted = ").unwrap();
    (x.parse().unwrap(), y.parse().unwrap())
}

#[test]
fn a_fitted_site_is_plotted_with_its_knots_range_and_error() {
    let tmp = tempfile::tempdir().unwrap();
    let report = tmp.path().join("fitted.html");
    let out = audit(&[
        &sample("orchard-grader.onnx"),
        "--to",
        "silu=fitted:8",
        "--dim",
        "batch=1",
        "--samples",
        "2",
        "--no-latency",
        "--json",
        "--report",
        report.to_str().unwrap(),
    ]);
    assert!(
        matches!(out.status.code(), Some(0 | 1)),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    let json: Value = serde_json::from_slice(&out.stdout).unwrap();
    let html = std::fs::read_to_string(&report).unwrap();
    let doc = Html::parse_document(&html);
    assert_self_contained(&html, &doc);
    assert_eq!(count(&doc, ".legend .key.knot"), 1);
    assert_eq!(count(&doc, ".legend .key.fit-range"), 1);

    let fitted: Vec<&Value> = json["plan"]["sites"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|s| s["to"]["form"] == "fitted")
        .collect();
    assert!(!fitted.is_empty(), "orchard-grader has a silu site");
    let plots: Vec<ElementRef> = doc
        .select(&sel("svg.plot-curves[data-form=\"fitted\"]"))
        .collect();
    for site in fitted {
        let id = site["site"].as_str().unwrap();
        let svg = *plots
            .iter()
            .find(|p| {
                p.value()
                    .attr("data-sites")
                    .unwrap()
                    .split(',')
                    .any(|s| s == id)
            })
            .unwrap_or_else(|| panic!("no fitted plot for {id}"));
        let fit = &site["fit"];
        assert_eq!(data(svg, "segments"), 8.0);
        assert_eq!(data(svg, "fit-lo"), fit["range"][0].as_f64().unwrap());
        assert_eq!(data(svg, "fit-hi"), fit["range"][1].as_f64().unwrap());
        let bound = fit["in_range"]["max_abs"].as_f64().unwrap();
        assert_eq!(data(svg, "fit-bound"), bound);
        // The figure to beat: hard-swish against SiLU, 3 / (1 + e^3) (Howard et al. 2019).
        assert!(bound < 3.0 / (1.0 + 3f64.exp()));
        // The fitting range shaded in both panels, the bound drawn once, one marker per knot.
        assert_eq!(svg.select(&sel("rect.fit-range")).count(), 2);
        assert_eq!(svg.select(&sel("line.fit-bound")).count(), 1);
        let knots: Vec<(f64, f64)> = svg
            .select(&sel("circle.knot title"))
            .map(|t| knot(&t.inner_html()))
            .collect();
        assert_eq!(knots.len(), 9, "8 segments between 9 knots");
        let (lo, hi) = (data(svg, "fit-lo"), data(svg, "fit-hi"));
        for (x, y) in knots {
            assert!(lo <= x && x <= hi, "knot {x} inside [{lo}, {hi}]");
            assert!(
                (y - silu(x)).abs() <= bound,
                "knot ({x}, {y}) within the bound"
            );
        }
        for class in ["curve-a", "curve-b", "curve-err"] {
            let line = svg
                .select(&sel(&format!("polyline.{class}")))
                .next()
                .unwrap();
            assert_eq!(points(line).len(), CURVE_POINTS, "{class} of {id}");
        }
        // The marked worst case is the drift report's bound over the inputs seen.
        let drift = json["drift"]["sites"]
            .as_array()
            .unwrap()
            .iter()
            .find(|s| s["id_a"] == id)
            .unwrap();
        assert_eq!(
            data(svg, "worst-error"),
            drift["bound_over_range"].as_f64().unwrap()
        );
        assert!(data(svg, "worst-error") <= bound);
    }
}
