//! Text made safe for HTML and SVG, and figures written short with their full value on hover.
//!
//! Everything that comes from a model (tensor names, graph paths, notes) goes through
//! [`esc`]; attribute values are always double-quoted, so the same escaping serves both.

use crate::report::drift_table::num;

/// `s` with `& < > " '` replaced by character references.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// A figure at full precision: the shortest text that reads back as the same f64.
pub fn full(x: f64) -> String {
    x.to_string()
}

/// A figure for the text: four significant digits, the full value in the tooltip.
pub fn fig(x: f64) -> String {
    format!(
        r#"<span class="num" title="{}">{}</span>"#,
        full(x),
        esc(&short(x))
    )
}

/// Four significant digits, as the terminal tables write them, without the zeros that end a
/// mantissa (`1e-5` rather than `1.000e-5`).
pub fn short(x: f64) -> String {
    let s = num(x);
    match s.split_once('e') {
        Some((m, e)) if m.contains('.') => {
            format!("{}e{e}", m.trim_end_matches('0').trim_end_matches('.'))
        }
        _ => s,
    }
}

/// [`fig`], or a dash when there is no figure.
pub fn opt_fig(x: Option<f64>) -> String {
    x.map_or_else(dash, fig)
}

/// A ratio such as `1.23×`, the full value in the tooltip.
pub fn ratio(x: f64) -> String {
    format!(
        r#"<span class="num" title="{}">{}×</span>"#,
        full(x),
        esc(&short(x))
    )
}

/// A share as a percentage with two decimals, the full fraction in the tooltip.
pub fn percent(x: f64) -> String {
    format!(
        r#"<span class="num" title="{}">{:.2}%</span>"#,
        full(x),
        x * 100.0
    )
}

/// The mark of a missing figure.
pub fn dash() -> String {
    r#"<span class="none">–</span>"#.to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hostile_text_is_inert() {
        assert_eq!(
            esc(r#"<img src=x onerror="a('b')">&"#),
            "&lt;img src=x onerror=&quot;a(&#39;b&#39;)&quot;&gt;&amp;"
        );
    }

    #[test]
    fn figures_carry_their_full_value() {
        assert_eq!(
            fig(0.14227761953270035),
            r#"<span class="num" title="0.14227761953270035">0.1423</span>"#
        );
        assert_eq!(full(f64::NAN), "NaN");
        assert_eq!(short(1e-5), "1e-5");
        assert_eq!(short(4.7323552e-4), "4.732e-4");
        assert_eq!(short(-3.5), "-3.5");
    }
}
