//! Rendering results for people: terminal tables (JSON comes straight from the serde types).

pub mod drift_table;
pub mod plan_table;
pub mod scan_table;
pub mod table;
