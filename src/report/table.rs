//! A plain left-aligned text table with a header row, fitted to the terminal: on a terminal,
//! long cells wrap at word boundaries so that no line is wider than the window; elsewhere
//! (files, pipes, tests) nothing wraps. The full text of every cell is in the JSON.

use comfy_table::presets::NOTHING;
use comfy_table::{ContentArrangement, Table};

/// Renders rows under a header, each column as wide as its widest cell (or as the terminal
/// allows), two spaces apart.
pub fn render(header: &[&str], rows: &[Vec<String>]) -> String {
    let mut table = Table::new();
    table
        .load_preset(NOTHING)
        .set_content_arrangement(ContentArrangement::Dynamic)
        .set_header(header.to_vec());
    for r in rows {
        table.add_row(r.clone());
    }
    let last = header.len().saturating_sub(1);
    for (i, column) in table.column_iter_mut().enumerate() {
        column.set_padding((0, if i == last { 0 } else { 2 }));
    }
    let mut out = String::new();
    for line in table.lines() {
        out.push_str(line.trim_end());
        out.push('\n');
    }
    out
}
