//! Measuring what a swap costs: numeric drift per site and at the outputs, and latency, with both
//! models run on CPU by tract ([`crate::run`]).
//!
//! [`compare`] is the entry point; [`metrics`] defines the figures, [`isolate`] cuts a site out
//! of its model, [`latency`] times plans, [`budget`] judges the figures and [`report`] holds the
//! result and its JSON schema.

pub mod budget;
pub mod capture;
pub mod compare;
pub mod isolate;
pub mod latency;
pub mod metrics;
pub mod range;
pub mod report;
mod stats;

pub use budget::{Budgets, Offender, Scope};
pub use compare::{CompareOptions, compare};
pub use latency::LatencyOptions;
pub use metrics::{Drift, Tolerance, Top1};
pub use report::{CAUTION, DriftReport};
