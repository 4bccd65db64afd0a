//! Rendering results for people: terminal tables, Markdown and the HTML report. Rendering only:
//! the figures and the verdict come from [`crate::audit`] and [`crate::measure`], and JSON comes
//! straight from their serde types.

pub mod batch_table;
pub mod drift_table;
pub mod footer;
pub mod html;
pub mod plan_table;
pub mod scan_table;
pub mod table;
