//! Rendering results for people: terminal tables, the HTML report and per-model summaries (JSON
//! comes straight from the serde types).

pub mod batch_table;
pub mod drift_table;
pub mod html;
pub mod plan_table;
pub mod scan_table;
pub mod table;
