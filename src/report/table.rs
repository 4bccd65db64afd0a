//! A plain left-aligned text table with a header row, fitted to the terminal: on a terminal,
//! long cells wrap at word boundaries so that no line is wider than the window; elsewhere
//! (files, pipes, tests) nothing wraps. The full text of every cell is in the JSON.

use std::io::{self, Write};

use comfy_table::presets::NOTHING;
use comfy_table::{ContentArrangement, Table};
use unicode_width::UnicodeWidthStr;

/// Spaces between two columns.
const GAP: usize = 2;

/// Fewer terminal columns than this are not a window to fit (a pseudo-terminal may report 0):
/// the table is then laid out unwrapped.
const NARROWEST: u16 = 40;

/// Renders rows under a header, each column as wide as its widest cell (or as the terminal
/// allows), two spaces apart.
pub fn render(header: &[&str], rows: &[Vec<String>]) -> String {
    let mut table = Table::new();
    table.load_preset(NOTHING).set_header(header.to_vec());
    for r in rows {
        table.add_row(r.clone());
    }
    table.set_content_arrangement(arrangement(table.width()));
    let last = header.len().saturating_sub(1);
    for (i, column) in table.column_iter_mut().enumerate() {
        column.set_padding((0, if i == last { 0 } else { GAP as u16 }));
    }
    let mut out = String::new();
    for line in table.lines() {
        out.push_str(line.trim_end());
        out.push('\n');
    }
    out
}

/// How to lay out a table for a terminal of `width` columns (`None` off a terminal).
fn arrangement(width: Option<u16>) -> ContentArrangement {
    match width {
        Some(w) if w < NARROWEST => ContentArrangement::Disabled,
        _ => ContentArrangement::Dynamic,
    }
}

/// Writes the table [`render`] lays out where nothing wraps, one row at a time, so that a
/// table of a million rows is never held: a first pass formats every row to measure the
/// columns, a second formats each again and writes it. `row(i)` gives the cells of row `i`.
pub fn write_unwrapped(
    out: &mut impl Write,
    header: &[&str],
    rows: usize,
    row: impl Fn(usize) -> Vec<String>,
) -> io::Result<()> {
    let mut widths: Vec<usize> = header.iter().map(|h| h.width()).collect();
    for i in 0..rows {
        for (w, cell) in widths.iter_mut().zip(row(i)) {
            *w = (*w).max(cell.width());
        }
    }
    let mut line = String::new();
    write_line(out, &mut line, &widths, header.iter().copied())?;
    for i in 0..rows {
        let cells = row(i);
        write_line(out, &mut line, &widths, cells.iter().map(String::as_str))?;
    }
    Ok(())
}

/// One line: each cell padded to its column's width and the gap, trailing spaces dropped.
fn write_line<'a>(
    out: &mut impl Write,
    line: &mut String,
    widths: &[usize],
    cells: impl Iterator<Item = &'a str>,
) -> io::Result<()> {
    line.clear();
    for (cell, &width) in cells.zip(widths) {
        line.push_str(cell);
        let pad = width.saturating_sub(cell.width()) + GAP;
        line.extend(std::iter::repeat_n(' ', pad));
    }
    out.write_all(line.trim_end().as_bytes())?;
    out.write_all(b"\n")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Written row by row, the table is the one comfy-table lays out (off a terminal), wide
    /// characters, empty cells and a short header included.
    #[test]
    fn written_table_is_the_rendered_one() {
        let header = ["id", "name", "note"];
        let rows = vec![
            vec!["s1".to_string(), "温度センサー".into(), String::new()],
            vec!["s22".to_string(), "x".into(), "a longer note".into()],
            vec![String::new(), "ünïcödé".into(), "-".into()],
        ];
        let mut written = Vec::new();
        write_unwrapped(&mut written, &header, rows.len(), |i| rows[i].clone()).unwrap();
        assert_eq!(String::from_utf8(written).unwrap(), render(&header, &rows));
    }

    /// A terminal reporting 0 columns (some pseudo-terminals do) gets the unwrapped table, not
    /// one character per line.
    #[test]
    fn a_terminal_without_columns_is_not_fitted() {
        assert!(matches!(arrangement(Some(0)), ContentArrangement::Disabled));
        assert!(matches!(
            arrangement(Some(120)),
            ContentArrangement::Dynamic
        ));
        assert!(matches!(arrangement(None), ContentArrangement::Dynamic));
    }
}
