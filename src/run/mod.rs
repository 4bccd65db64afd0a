//! Running ONNX models on CPU with tract: loading, feeding inputs, running, and reading outputs
//! in the model's own element type.
//!
//! [`prepare`] -> [`TractModel`] -> [`TractModel::compile`] -> [`Compiled`] -> [`Compiled::run`]
//! -> [`NamedTensor`]s. Inputs come from files or seeded random data ([`inputs`]).
//!
//! # Symbolic dims
//! Exporters name dynamic dims in the inputs and in the `value_info` of intermediate values.
//! Compiling learns each symbol's size from the tensors fed (inputs that disagree are refused by
//! name) and fixes every fact of the model before tract analyses it, so the model's own
//! `value_info` agrees with the inputs. A model compiles once per set of input shapes.
//!
//! # Workarounds for tract 0.23.9
//! - Symbolic `value_info` against concrete inputs fails to type: fixed before analysis (above).
//! - Node names are made unique before tract sees them (it refuses repeats at typing).
//! - Parsing and typing are kept linear in the node count: initializers become constants after
//!   parsing (module `weights`) and each node is typed on its own (module `typing`); tract's own paths
//!   compare every node they add with every node before it.
//! - Celu and Swish load with loaders that honour `alpha` (tract's ignore it); Pow keeps the
//!   base's element type (tract's takes the exponent's when wider).
//! - A model with ops tract lacks is refused at [`prepare`], naming each op type and node, the
//!   tract version, and that `scan` and `swap` still work.
//! - tract returns shape values as symbolic dims; they are handed back as int64, as ONNX types them.
//! - Errors and panics inside tract become one-line [`RunError`]s; a panic while typing names the
//!   node it came from, and the panic hook stays quiet ([`catching_panics`]).
//! - tract aborts the process when an allocation fails: a memory ceiling
//!   ([`TractModel::with_memory_ceiling`]) refuses, before anything is allocated, a model whose
//!   values or convolution and pooling windows would exceed it.
//!
//! # Capturing intermediate values
//! Any ONNX tensor name can be requested as an extra output. tract keeps requested values through
//! optimization by computing them beside the fused path (a Sigmoid+Mul fused into SiLU still
//! yields the Sigmoid's output), so the graph outputs are the same with or without requests.

mod blame;
mod ceiling;
mod celu;
mod cumsum;
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
mod typing;
mod unary;
mod vector_state;
mod weights;

pub use ceiling::DEFAULT_MEMORY_CEILING;
pub use error::RunError;
pub use execute::{Compilation, Compiled};
pub use guard::catching_panics;
pub use load::{TractModel, input_specs, prepare, prepare_parts};
pub use signature::{Dim, InputSpec};
pub use tensor::{NamedTensor, Sample, to_f64_array};
pub use tract_onnx::prelude::{DatumType, Tensor};

/// The version of tract that runs models, named in errors about what it cannot do.
pub const TRACT_VERSION: &str = "0.23.9";
