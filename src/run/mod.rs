//! Running ONNX models on CPU with tract: loading, feeding inputs, running, and reading outputs
//! in the model's own element type.
//!
//! [`prepare`] -> [`TractModel`] -> [`TractModel::compile`] -> [`Compiled`] -> [`Compiled::run`]
//! -> [`NamedTensor`]s. Inputs come from files or seeded random data ([`inputs`]).
//!
//! # Workarounds for tract 0.23.9
//! - Node names are made unique before tract sees them (it refuses repeats at typing).
//! - Celu and Swish load with loaders that honour `alpha` (tract's ignore it).
//! - A model with ops tract lacks is refused at [`prepare`], naming each op type and node.
//! - tract returns shape values as symbolic dims; they are handed back as int64, as ONNX types them.
//! - Errors and panics inside tract become one-line [`RunError`]s.
//!
//! # Capturing intermediate values
//! Any ONNX tensor name can be requested as an extra output. tract keeps requested values through
//! optimization by computing them beside the fused path (a Sigmoid+Mul fused into SiLU still
//! yields the Sigmoid's output), so the graph outputs are the same with or without requests.

mod blame;
mod ceiling;
mod celu;
mod error;
mod execute;
mod framework;
mod guard;
pub mod inputs;
mod load;
mod names;
mod pow;
mod signature;
mod swish;
mod symbols;
mod tensor;
mod unary;

pub use ceiling::DEFAULT_MEMORY_CEILING;
pub use error::RunError;
pub use execute::Compiled;
pub use guard::catching_panics;
pub use load::{TractModel, input_specs, prepare};
pub use signature::{Dim, InputSpec};
pub use tensor::{NamedTensor, Sample, to_f64_array};
pub use tract_onnx::prelude::{DatumType, Tensor};

/// The version of tract that runs models, named in errors about what it cannot do.
pub const TRACT_VERSION: &str = "0.23.9";
