//! ONNX models as files: the generated protobuf types, lossless load and save, external data,
//! tensor values and the graph index that later stages query.

pub mod attrs;
pub mod builder;
mod decode;
pub mod external;
pub mod index;
pub mod inline;
pub mod model;
mod stream;
pub mod summary;
pub mod tensor;
mod unknown;
pub mod unroll;
pub mod walk;
mod wire;

/// Types generated from `proto/onnx.proto` by prost (see build.rs).
#[allow(clippy::all, missing_docs)]
pub mod proto {
    include!(concat!(env!("OUT_DIR"), "/onnx.rs"));
}

pub use index::{GraphIndex, GraphKind, GraphLocation, ModelIndex};
pub use model::{Model, SaveOptions};
pub use tensor::TensorValue;
