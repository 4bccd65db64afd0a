//! Running ONNX models on CPU with tract: loading (with workarounds for tract defects), feeding
//! inputs, running, and reading outputs in the model's own precision.
//!
//! `prepare` -> [`TractModel`] -> `compile` -> [`Plan`] -> `run` -> [`NamedTensor`]s.
//! Inputs come from files or seeded random data ([`inputs`]).

mod celu;
mod error;
mod execute;
mod framework;
pub mod inputs;
mod load;
mod names;
mod signature;
mod swish;
mod tensor;

pub use error::RunError;
pub use execute::Plan;
pub use load::{TractModel, prepare};
pub use signature::{Dim, InputSpec};
pub use tensor::{NamedTensor, Sample, to_f64_array};
pub use tract_onnx::prelude::{DatumType, Tensor};
