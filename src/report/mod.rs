//! Rendering results: terminal tables, Markdown, the HTML report, and the JSON documents that
//! combine several stages ([`json`]) with the schemas of every JSON output ([`schemas`]).
//! Rendering only: the figures and the verdict come from [`crate::audit`] and [`crate::measure`].

pub mod batch_table;
pub mod drift_table;
pub mod footer;
pub mod html;
pub mod json;
pub mod plan_table;
pub mod scan_table;
pub mod schemas;
pub mod table;
