//! What the report's horizontal bar charts share: a label column sized to its labels, one row
//! per item, and the label of a site.

use super::svg::{Anchor, Svg};
use crate::measure::result::SiteDrift;

/// Width of a bar chart, in SVG units.
pub const WIDTH: f64 = 1100.0;
/// Width of one character of label text, estimated for the page's sans-serif at 12 units.
const CHAR_W: f64 = 7.0;
/// Label columns grow with their labels within these widths; longer labels are cut.
const LABEL_W: (f64, f64) = (90.0, 340.0);

/// Where a bar chart's parts go.
pub struct Layout {
    /// The label column ends here (labels are right-aligned to it).
    pub label_end: f64,
    /// The x extent of the bars.
    pub plot: (f64, f64),
    /// The y of the first row's top edge, and the row height.
    pub top: f64,
    pub row_h: f64,
    pub rows: usize,
}

impl Layout {
    /// A layout for these labels, leaving `value_room` right of the bars for their figures.
    pub fn new(labels: &[String], top: f64, row_h: f64, value_room: f64) -> Layout {
        let longest = labels.iter().map(|l| l.chars().count()).max().unwrap_or(0);
        let label_w = (longest as f64 * CHAR_W + 12.0).clamp(LABEL_W.0, LABEL_W.1);
        Layout {
            label_end: label_w,
            plot: (label_w + 10.0, WIDTH - value_room),
            top,
            row_h,
            rows: labels.len(),
        }
    }

    /// The y of row `i`'s top edge.
    pub fn row(&self, i: usize) -> f64 {
        self.top + i as f64 * self.row_h
    }

    /// The y just below the last row.
    pub fn bottom(&self) -> f64 {
        self.row(self.rows)
    }

    /// Writes row `i`'s label, cut to the column with an ellipsis (the whole text as tooltip).
    pub fn label(&self, svg: &mut Svg, i: usize, text: &str) {
        let fits = ((self.label_end - 12.0) / CHAR_W) as usize;
        let shown = if text.chars().count() > fits {
            let mut cut: String = text.chars().take(fits.saturating_sub(1)).collect();
            cut.push('…');
            cut
        } else {
            text.to_string()
        };
        let y = self.row(i) + self.row_h / 2.0 + 4.0;
        svg.text(
            (self.label_end, y),
            Anchor::End,
            "row-label",
            &shown,
            Some(text),
        );
    }
}

/// `s01  silu → hard_swish`, or `s03  relu6` when the kind stayed.
pub fn site_label(s: &SiteDrift) -> String {
    let id = if s.id_a == s.id_b {
        s.id_a.clone()
    } else {
        format!("{}/{}", s.id_a, s.id_b)
    };
    if s.kind_a.id == s.kind_b.id {
        format!("{id}  {}", s.kind_a.id)
    } else {
        format!("{id}  {} → {}", s.kind_a.id, s.kind_b.id)
    }
}
