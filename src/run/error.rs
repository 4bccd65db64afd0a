//! Errors of the model runner: one line each, naming what is wrong and where.

use std::path::PathBuf;

use super::TRACT_VERSION;

/// What a user can still do with a model tract cannot run.
const STILL_WORKS: &str = "`scan` and `swap` do not run the model and still work on it";

/// Everything that can go wrong while loading, feeding or running a model with tract.
#[derive(Debug, thiserror::Error)]
pub enum RunError {
    /// The model bytes do not decode as an ONNX ModelProto.
    #[error("not an ONNX model: {0}")]
    Decode(String),
    /// Nodes read tensors that nothing defines.
    #[error("undefined tensors (read by a node, defined by no input, initializer or node): {}", .0.join(", "))]
    UndefinedTensors(Vec<String>),
    /// An initializer lives in an external file but no model folder was given.
    #[error(
        "initializer '{tensor}' is stored in the external file '{location}'; the model's folder is needed to read it"
    )]
    ExternalDataWithoutFolder { tensor: String, location: String },
    /// The model has ops tract has no implementation for.
    #[error("tract {TRACT_VERSION} cannot run {}; {STILL_WORKS}", .0.join(", "))]
    UnsupportedOps(Vec<String>),
    /// tract failed at a stage; the message is tract's own, flattened to one line.
    #[error("tract {TRACT_VERSION} failed to {stage}: {message}")]
    Tract {
        stage: &'static str,
        message: String,
    },
    /// A tensor was given for a name that is not a model input.
    #[error("'{name}' is not an input of the model (inputs: {known})")]
    UnknownInput { name: String, known: String },
    /// A model input was given no tensor.
    #[error("no tensor given for model input '{0}'")]
    MissingInput(String),
    /// The same input was given twice in one sample.
    #[error("input '{0}' is given more than once")]
    DuplicateInput(String),
    /// A tensor's element type differs from the one the model declares.
    #[error("input '{name}' has element type {found:?}, the model declares {expected:?}")]
    WrongType {
        name: String,
        expected: String,
        found: String,
    },
    /// A tensor's shape does not fit the shape the model declares.
    #[error("input '{name}' has shape {found:?}, the model declares {expected}")]
    ShapeMismatch {
        name: String,
        expected: String,
        found: Vec<usize>,
    },
    /// A symbolic dimension takes two sizes in one sample.
    #[error("dimension '{dim}' is {first} but {second}")]
    DimConflict {
        dim: String,
        first: String,
        second: String,
    },
    /// A symbolic dimension has no size.
    #[error(
        "input '{input}' axis {axis}: dimension '{dim}' has no size (set it with --dim {dim}=SIZE)"
    )]
    UnsetDim {
        input: String,
        axis: usize,
        dim: String,
    },
    /// A dimension is neither fixed nor named, so it cannot be set by name.
    #[error(
        "input '{input}' axis {axis} has no declared size or name; give this input from a file"
    )]
    AnonymousDim { input: String, axis: usize },
    /// An input declares no shape at all, so random data cannot be shaped.
    #[error("input '{0}' declares no shape; give this input from a file")]
    NoShape(String),
    /// A tensor would exceed the element-count limit.
    #[error("input '{name}' would have {elements} elements, over the limit of {limit}")]
    OverLimit {
        name: String,
        elements: u128,
        limit: usize,
    },
    /// All samples together would exceed the element-count limit.
    #[error("the samples would hold {elements} input elements together, over the limit of {limit}")]
    SamplesOverLimit { elements: u128, limit: usize },
    /// A run would need more memory than the ceiling allows.
    #[error("{what} would take {}, over the memory ceiling of {}", bytes_text(*.bytes), bytes_text(*.ceiling as u128))]
    OverMemory {
        what: String,
        bytes: u128,
        ceiling: u64,
    },
    /// A value given for an input cannot be converted to the input's element type.
    #[error("input '{name}': {reason}")]
    Conversion { name: String, reason: String },
    /// tract failed at a stage on a node it names; `node` is that node as the ONNX file has it.
    #[error("tract {TRACT_VERSION} failed to {stage} at {node}: {message}; {STILL_WORKS}")]
    NodeFailed {
        stage: &'static str,
        node: String,
        message: String,
    },
    /// A requested output is not a tensor of the model.
    #[error("no tensor named '{0}' in the model")]
    UnknownTensor(String),
    /// A tensor cannot be viewed as numbers.
    #[error("tensor '{name}' has element type {found}, which is not numeric")]
    NotNumeric { name: String, found: String },
    /// A file could not be read or understood.
    #[error("{}: {message}", path.display())]
    File { path: PathBuf, message: String },
    /// An argument such as `NAME=FILE` or `NAME=SIZE` is malformed.
    #[error("bad argument '{text}': {reason}")]
    BadArgument { text: String, reason: String },
}

impl RunError {
    /// A tract error at `stage`, with its cause chain joined on one line.
    pub(crate) fn tract(stage: &'static str, error: &anyhow::Error) -> Self {
        let message = error
            .chain()
            .map(|cause| {
                cause
                    .to_string()
                    .lines()
                    .next()
                    .unwrap_or("")
                    .trim()
                    .to_string()
            })
            .filter(|line| !line.is_empty())
            .collect::<Vec<_>>()
            .join(": ");
        RunError::Tract { stage, message }
    }

    /// A file error with a message.
    pub(crate) fn file(path: impl Into<PathBuf>, message: impl std::fmt::Display) -> Self {
        RunError::File {
            path: path.into(),
            message: message.to_string(),
        }
    }
}

/// A byte count in binary units, e.g. `256.0 GiB`.
fn bytes_text(bytes: u128) -> String {
    const UNITS: [&str; 7] = ["bytes", "KiB", "MiB", "GiB", "TiB", "PiB", "EiB"];
    let mut value = bytes as f64;
    let mut unit = 0;
    while value >= 1024.0 && unit + 1 < UNITS.len() {
        value /= 1024.0;
        unit += 1;
    }
    if unit == 0 {
        format!("{bytes} bytes")
    } else {
        format!("{value:.1} {}", UNITS[unit])
    }
}
