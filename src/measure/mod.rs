//! Measuring what a swap costs: numeric drift per site and at the outputs, and latency, with both
//! models run on CPU by tract ([`crate::run`]).
//!
//! [`compare`] is the entry point, given site pairs ([`pairs`]); [`metrics`] defines the
//! figures, [`isolate`] cuts a site out of its model, [`latency`] times plans, [`budget`] judges
//! the figures and [`result`] holds the result and its JSON schema.

pub mod budget;
pub mod calibrate;
pub mod capture;
pub mod compare;
pub mod isolate;
pub mod latency;
pub mod metrics;
pub mod pairs;
pub mod range;
pub mod result;
pub mod runnable;
mod stats;
pub mod subgraphs;

pub use budget::{Budgets, DEFAULT_BUDGET, Offender, Scope};
pub use compare::{CompareOptions, OriginalValues, capture_original, compare, compare_models};
pub use latency::LatencyOptions;
pub use metrics::{Drift, Tolerance, Top1};
pub use pairs::SitePair;
pub use result::{CAUTION, DriftReport, SiteDrift};
