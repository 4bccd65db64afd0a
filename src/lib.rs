//! actswap: find activation functions in ONNX models, convert them to forms a target runtime
//! accepts, and measure what the swap costs in drift and latency.

pub mod audit;
pub mod batch;
pub mod catalog;
pub mod cli;
pub mod files;
pub mod measure;
pub mod onnx;
pub mod plan;
pub mod report;
pub mod rewrite;
pub mod run;
pub mod scan;
pub mod schema_version;
pub mod text;
