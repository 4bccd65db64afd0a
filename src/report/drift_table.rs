//! The terminal form of a drift report: the budget and what is over it, a table per site and per
//! output, latency and the caution line (the verdict comes after, see [`super::footer`]).

use crate::catalog::{Kind, NamedParams, ParamValue, Params};
use crate::measure::DriftReport;
use crate::measure::result::{LocalBasis, OutputDrift, SiteDrift};

use super::table;

/// Renders the whole report.
pub fn render(r: &DriftReport) -> String {
    let mut out = String::new();
    let samples = if r.samples == 1 { "sample" } else { "samples" };
    out.push_str(&format!("original   {}\n", r.model_a));
    out.push_str(&format!("rewritten  {}\n", r.model_b));
    out.push_str(&format!(
        "inputs     {} ({} {samples})\n",
        r.input_source, r.samples
    ));
    out.push_str(&format!(
        "tolerance  atol {:e}, rtol {:e}; max rel divides by max(|original|, {:e})\n",
        r.tolerance.atol, r.tolerance.rtol, r.tolerance.rel_floor
    ));
    out.push_str(&format!("budget     {}\n", r.budgets.describe()));
    if !r.offenders.is_empty() {
        out.push_str(&format!("\nover budget ({}):\n", r.offenders.len()));
        for o in &r.offenders {
            let what = match &o.site {
                Some(id) => format!("site {id} ({})", o.name),
                None => format!("output {}", o.name),
            };
            out.push_str(&format!("  {what}: {}\n", o.reason));
        }
    }
    out.push_str(&format!("\nsites ({} matched)\n", r.sites.len()));
    if r.sites.is_empty() {
        out.push_str("no activation site found in both models\n");
    } else {
        let rows: Vec<Vec<String>> = r.sites.iter().map(site_row).collect();
        out.push_str(&table::render(
            &[
                "site",
                "kind",
                "form",
                "local max abs",
                "propagated max abs",
                "observed range (p01..p99)",
                "bound over range",
                "latency new/orig",
            ],
            &rows,
        ));
        let notes: Vec<String> = r
            .sites
            .iter()
            .flat_map(|s| s.notes.iter().map(move |n| format!("  {}: {n}\n", s.id_a)))
            .collect();
        if !notes.is_empty() {
            out.push_str("notes:\n");
            out.push_str(&notes.concat());
        }
    }
    out.push_str("\noutputs\n");
    let rows: Vec<Vec<String>> = r.outputs.iter().map(output_row).collect();
    out.push_str(&table::render(
        &[
            "output",
            "max abs",
            "mean abs",
            "rms",
            "max rel",
            "cosine",
            "beyond tol",
            "nan/inf mismatches",
            "top-1",
        ],
        &rows,
    ));
    for o in &r.outputs {
        for n in &o.notes {
            out.push_str(&format!("  {}: {n}\n", o.name));
        }
    }
    if !r.unmatched.is_empty() {
        out.push_str("\nsites found in one model only:\n");
        for u in &r.unmatched {
            let model = if u.model == "a" {
                "original"
            } else {
                "rewritten"
            };
            out.push_str(&format!(
                "  {model} {} {} -> {} ({})\n",
                u.id, u.kind.id, u.output, u.graph
            ));
        }
    }
    if let Some(l) = &r.latency {
        out.push_str(&format!(
            "\nlatency    original {} (p10-p90 {}-{}), rewritten {} (p10-p90 {}-{}), ratio {:.3}; {} interleaved runs after {} warm-up\n",
            secs(l.a.median_s),
            secs(l.a.p10_s),
            secs(l.a.p90_s),
            secs(l.b.median_s),
            secs(l.b.p10_s),
            secs(l.b.p90_s),
            l.ratio,
            l.runs,
            l.warmup
        ));
    }
    out.push_str(&format!("\ncaution: {}\n", r.caution));
    out
}

fn site_row(s: &SiteDrift) -> Vec<String> {
    let dash = || "-".to_string();
    vec![
        if s.id_a == s.id_b {
            s.id_a.clone()
        } else {
            format!("{}/{}", s.id_a, s.id_b)
        },
        change(
            kind(s.kind_a, s.params_a.as_ref()),
            kind(s.kind_b, s.params_b.as_ref()),
        ),
        change(s.ops_a.join(" "), s.ops_b.join(" ")),
        s.local.as_ref().map_or_else(dash, |d| match s.local_basis {
            Some(LocalBasis::Identical) => format!("{} (identical)", num(d.max_abs)),
            _ => num(d.max_abs),
        }),
        s.propagated.as_ref().map_or_else(dash, |d| num(d.max_abs)),
        s.input_range.as_ref().map_or_else(dash, |r| {
            format!(
                "[{}, {}] ({}..{})",
                num(r.min),
                num(r.max),
                num(r.p01),
                num(r.p99)
            )
        }),
        s.bound_over_range.map_or_else(dash, num),
        s.latency
            .as_ref()
            .map_or_else(dash, |l| format!("{:.3}", l.ratio)),
    ]
}

fn output_row(o: &OutputDrift) -> Vec<String> {
    let Some(m) = &o.metrics else {
        let mut row = vec![o.name.clone()];
        row.extend(std::iter::repeat_n("-".to_string(), 8));
        return row;
    };
    vec![
        o.name.clone(),
        num(m.max_abs),
        num(m.mean_abs),
        num(m.rms),
        num(m.max_rel),
        format!("{:.9}", m.cosine),
        format!("{:.2}% ({})", m.beyond_tol_share * 100.0, m.beyond_tol),
        format!("{}/{}", m.nan_mismatches, m.inf_mismatches),
        o.top1_agreement.map_or_else(
            || "-".to_string(),
            |t| format!("{:.2}% of {}", t.share * 100.0, t.rows),
        ),
    ]
}

/// `a -> b`, or `a (same)` when nothing changed.
fn change(a: String, b: String) -> String {
    if a == b {
        format!("{a} (same)")
    } else {
        format!("{a} -> {b}")
    }
}

/// `swish(beta=1.702)`, `prelu(slope=[8 per channel])`, `silu`.
pub(crate) fn kind(kind: &Kind, params: Option<&Params>) -> String {
    let pairs = NamedParams::of(kind.params, params).pairs();
    if pairs.is_empty() {
        return kind.id.to_string();
    }
    let id = kind.id;
    let p: Vec<String> = pairs
        .iter()
        .map(|(k, v)| match v {
            ParamValue::Scalar(x) => format!("{k}={}", num(*x)),
            ParamValue::PerChannel(c) => format!("{k}=[{} per channel]", c.len()),
        })
        .collect();
    format!("{id}({})", p.join(" "))
}

/// A figure: 0, four significant digits in [1e-3, 1e4), scientific otherwise; a figure that is
/// not 1 is never shown as 1 (a cosine of 0.99997 is `0.99997`).
pub(crate) fn num(x: f64) -> String {
    if x == 0.0 {
        "0".into()
    } else if !x.is_finite() {
        x.to_string()
    } else if (1e-3..1e4).contains(&x.abs()) {
        let least = (3 - x.abs().log10().floor() as i32).max(0) as usize;
        (least..=12)
            .map(|digits| {
                let s = format!("{x:.digits$}");
                if s.contains('.') {
                    s.trim_end_matches('0').trim_end_matches('.').to_string()
                } else {
                    s
                }
            })
            .find(|s| !s.parse::<f64>().is_ok_and(|v| v.abs() == 1.0 && v != x))
            .unwrap_or_else(|| format!("{x:e}"))
    } else {
        format!("{x:.3e}")
    }
}

/// Seconds as µs or ms.
fn secs(s: f64) -> String {
    if s < 1e-3 {
        format!("{:.1} µs", s * 1e6)
    } else {
        format!("{:.3} ms", s * 1e3)
    }
}

#[cfg(test)]
mod tests {
    use super::num;

    #[test]
    fn figures_keep_four_significant_digits() {
        assert_eq!(num(0.0), "0");
        assert_eq!(num(0.14227761953270035), "0.1423");
        assert_eq!(num(-3.5), "-3.5");
        assert_eq!(num(4.7323552e-4), "4.732e-4");
        assert_eq!(num(1234.5678), "1235");
    }
}
