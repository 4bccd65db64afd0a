//! A small SVG writer of our own, for the report's plots.
//!
//! Why not a plotting crate: the report needs exact control of what is drawn (a curve is one
//! `<polyline>` with exactly the points computed, which the tests count), styling by CSS class
//! from the page's one style sheet (so colours live in one place and no element carries inline
//! colours), tooltips as SVG `<title>` children with full-precision figures, and no font files
//! or font metrics at all: text is laid out by the browser with the page's system fonts. What
//! remains, a handful of elements with escaped text, is shorter than the glue a crate would need.
//!
//! Coordinates are in the SVG's own units (its `viewBox`); the page scales the picture to its
//! column width.

use std::fmt::Write;

use super::markup::esc;

/// How a text is placed relative to its x coordinate.
#[derive(Debug, Clone, Copy)]
pub enum Anchor {
    Start,
    Middle,
    End,
}

/// An SVG picture being written.
pub struct Svg {
    width: f64,
    height: f64,
    class: &'static str,
    label: String,
    data: Vec<(&'static str, String)>,
    body: String,
}

impl Svg {
    /// An empty picture of `width` x `height` units, with a CSS class and an accessible label.
    pub fn new(width: f64, height: f64, class: &'static str, label: &str) -> Svg {
        Svg {
            width,
            height,
            class,
            label: label.to_string(),
            data: Vec::new(),
            body: String::new(),
        }
    }

    /// A `data-<key>` attribute on the picture, for readers of the file (escaped here).
    pub fn data(&mut self, key: &'static str, value: &str) {
        self.data.push((key, esc(value)));
    }

    /// A straight line.
    pub fn line(&mut self, (x1, y1): (f64, f64), (x2, y2): (f64, f64), class: &str) {
        let _ = writeln!(
            self.body,
            r#"<line class="{class}" x1="{}" y1="{}" x2="{}" y2="{}"/>"#,
            c(x1),
            c(y1),
            c(x2),
            c(y2)
        );
    }

    /// A rectangle from its top-left corner; `tip` becomes its tooltip.
    pub fn rect(&mut self, (x, y): (f64, f64), (w, h): (f64, f64), class: &str, tip: Option<&str>) {
        let _ = write!(
            self.body,
            r#"<rect class="{class}" x="{}" y="{}" width="{}" height="{}""#,
            c(x),
            c(y),
            c(w.max(0.0)),
            c(h.max(0.0))
        );
        self.close("rect", tip);
    }

    /// A polyline through `points`, in order.
    pub fn polyline(&mut self, points: &[(f64, f64)], class: &str) {
        self.points("polyline", points, class);
    }

    /// A closed polygon through `points`.
    pub fn polygon(&mut self, points: &[(f64, f64)], class: &str) {
        self.points("polygon", points, class);
    }

    /// An element drawn through `points` (polyline or polygon).
    fn points(&mut self, element: &str, points: &[(f64, f64)], class: &str) {
        let pts: Vec<String> = points
            .iter()
            .map(|&(x, y)| format!("{},{}", c(x), c(y)))
            .collect();
        let _ = writeln!(
            self.body,
            r#"<{element} class="{class}" points="{}"/>"#,
            pts.join(" ")
        );
    }

    /// A circle; `tip` becomes its tooltip.
    pub fn circle(&mut self, (x, y): (f64, f64), r: f64, class: &str, tip: Option<&str>) {
        let _ = write!(
            self.body,
            r#"<circle class="{class}" cx="{}" cy="{}" r="{}""#,
            c(x),
            c(y),
            c(r)
        );
        self.close("circle", tip);
    }

    /// A line of text at baseline `y` (escaped here); `tip` becomes its tooltip.
    pub fn text(
        &mut self,
        (x, y): (f64, f64),
        anchor: Anchor,
        class: &str,
        text: &str,
        tip: Option<&str>,
    ) {
        let anchor = match anchor {
            Anchor::Start => "start",
            Anchor::Middle => "middle",
            Anchor::End => "end",
        };
        let _ = write!(
            self.body,
            r#"<text class="{class}" x="{}" y="{}" text-anchor="{anchor}">{}"#,
            c(x),
            c(y),
            esc(text)
        );
        if let Some(t) = tip {
            let _ = write!(self.body, "<title>{}</title>", esc(t));
        }
        self.body.push_str("</text>\n");
    }

    /// The picture as an inline `<svg>` element (no namespace declaration is needed inline).
    pub fn finish(self) -> String {
        let data: String = self
            .data
            .iter()
            .map(|(k, v)| format!(" data-{k}=\"{v}\""))
            .collect();
        format!(
            "<svg class=\"{}\" viewBox=\"0 0 {} {}\" role=\"img\" aria-label=\"{}\"{data}>\n{}</svg>\n",
            self.class,
            c(self.width),
            c(self.height),
            esc(&self.label),
            self.body
        )
    }

    /// Ends an element that was opened without its closing `>`, with an optional tooltip.
    fn close(&mut self, tag: &str, tip: Option<&str>) {
        match tip {
            Some(t) => {
                let _ = writeln!(self.body, "><title>{}</title></{tag}>", esc(t));
            }
            None => self.body.push_str("/>\n"),
        }
    }
}

/// A coordinate with two decimals, trailing zeros dropped.
fn c(v: f64) -> String {
    let s = format!("{v:.2}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" { "0".into() } else { s.into() }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn elements_are_written_with_escaped_text() {
        let mut s = Svg::new(100.0, 50.0, "plot", "a <b>");
        s.polyline(&[(0.0, 1.5), (2.25, -0.001)], "curve");
        s.text((1.0, 2.0), Anchor::End, "label", "x<y", Some("\"q\""));
        s.rect((0.0, 0.0), (3.0, -1.0), "bar", None);
        let out = s.finish();
        assert!(out.starts_with(
            r#"<svg class="plot" viewBox="0 0 100 50" role="img" aria-label="a &lt;b&gt;">"#
        ));
        assert!(out.contains(r#"<polyline class="curve" points="0,1.5 2.25,0"/>"#));
        assert!(out.contains(r#"text-anchor="end">x&lt;y<title>&quot;q&quot;</title></text>"#));
        assert!(out.contains(r#"width="3" height="0"/>"#));
    }
}
