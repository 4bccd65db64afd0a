//! The inputs a model declares: names, element types and (symbolic) shapes, and the checks a
//! tensor fed to an input must pass.

use std::collections::HashSet;
use std::fmt;

use tract_onnx::pb::ValueInfoProto;
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::pb::tensor_shape_proto::dimension::Value;
use tract_onnx::pb::type_proto;
use tract_onnx::prelude::{DatumType, Tensor};

use super::RunError;

/// One axis of a declared input shape.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Dim {
    /// A fixed size (`dim_value`).
    Fixed(usize),
    /// A symbolic size (`dim_param`), set by name.
    Named(String),
    /// Neither given.
    Unknown,
}

impl fmt::Display for Dim {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Dim::Fixed(n) => write!(f, "{n}"),
            Dim::Named(s) => write!(f, "{s}"),
            Dim::Unknown => write!(f, "?"),
        }
    }
}

/// A graph input that is not an initializer.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct InputSpec {
    /// The ONNX tensor name.
    pub name: String,
    /// The declared element type.
    pub datum_type: DatumType,
    /// The declared shape; `None` when the model declares none (any rank).
    pub dims: Option<Vec<Dim>>,
}

impl InputSpec {
    /// The declared shape as text, e.g. `[batch, 3, 224, 224]`.
    pub fn shape_text(&self) -> String {
        match &self.dims {
            None => "no shape".to_string(),
            Some(dims) => {
                let dims: Vec<String> = dims.iter().map(Dim::to_string).collect();
                format!("[{}]", dims.join(", "))
            }
        }
    }

    /// Checks that `tensor` has this input's element type and fits its declared shape.
    pub fn check(&self, tensor: &Tensor) -> Result<(), RunError> {
        if tensor.datum_type() != self.datum_type {
            return Err(RunError::WrongType {
                name: self.name.clone(),
                expected: format!("{:?}", self.datum_type),
                found: format!("{:?}", tensor.datum_type()),
            });
        }
        let Some(dims) = &self.dims else {
            return Ok(());
        };
        let shape = tensor.shape();
        let fits = shape.len() == dims.len()
            && dims
                .iter()
                .zip(shape)
                .all(|(d, &n)| !matches!(d, Dim::Fixed(m) if *m != n));
        if fits {
            Ok(())
        } else {
            Err(self.shape_mismatch(shape))
        }
    }

    pub(crate) fn shape_mismatch(&self, shape: &[usize]) -> RunError {
        RunError::ShapeMismatch {
            name: self.name.clone(),
            expected: self.shape_text(),
            found: shape.to_vec(),
        }
    }
}

/// Reads the graph inputs that are not initializers, in graph order.
pub(crate) fn read_inputs(
    inputs: &[ValueInfoProto],
    initializers: &HashSet<&str>,
) -> Result<Vec<InputSpec>, RunError> {
    inputs
        .iter()
        .filter(|i| !initializers.contains(i.name.as_str()))
        .map(|input| {
            let type_proto::Value::TensorType(tensor) = input
                .r#type
                .as_ref()
                .and_then(|t| t.value.as_ref())
                .ok_or_else(|| {
                    RunError::Decode(format!("input '{}' is not a typed tensor", input.name))
                })?;
            Ok(InputSpec {
                name: input.name.clone(),
                datum_type: datum_type(tensor.elem_type)
                    .map_err(|e| RunError::Decode(format!("input '{}': {e}", input.name)))?,
                dims: tensor.shape.as_ref().map(|shape| {
                    shape
                        .dim
                        .iter()
                        .map(|d| match &d.value {
                            Some(Value::DimValue(n)) if *n >= 0 => Dim::Fixed(*n as usize),
                            Some(Value::DimParam(s)) if !s.is_empty() => Dim::Named(s.clone()),
                            _ => Dim::Unknown,
                        })
                        .collect()
                }),
            })
        })
        .collect()
}

/// The tract element type of an ONNX `TensorProto.DataType` code.
pub(crate) fn datum_type(code: i32) -> Result<DatumType, String> {
    let onnx = DataType::try_from(code).map_err(|_| format!("unknown element type code {code}"))?;
    DatumType::try_from(onnx).map_err(|_| {
        format!(
            "element type {} is not supported by tract",
            onnx.as_str_name()
        )
    })
}

/// Orders `sample` as `inputs`, checking each tensor against its spec, rejecting unknown,
/// repeated and missing names, and symbolic dims whose sizes disagree between inputs.
pub(crate) fn bind<'a>(
    inputs: &[InputSpec],
    sample: &'a [super::NamedTensor],
) -> Result<Vec<&'a Tensor>, RunError> {
    let mut seen = HashSet::new();
    for given in sample {
        if !inputs.iter().any(|i| i.name == given.name) {
            let known: Vec<&str> = inputs.iter().map(|i| i.name.as_str()).collect();
            return Err(RunError::UnknownInput {
                name: given.name.clone(),
                known: known.join(", "),
            });
        }
        if !seen.insert(given.name.as_str()) {
            return Err(RunError::DuplicateInput(given.name.clone()));
        }
    }
    let mut sizes: Vec<(&str, usize, &str)> = Vec::new();
    inputs
        .iter()
        .map(|spec| {
            let given = sample
                .iter()
                .find(|t| t.name == spec.name)
                .ok_or_else(|| RunError::MissingInput(spec.name.clone()))?;
            spec.check(&given.tensor)?;
            for (dim, &n) in spec.dims.iter().flatten().zip(given.tensor.shape()) {
                if let Dim::Named(param) = dim {
                    match sizes.iter().find(|(p, _, _)| p == param) {
                        Some(&(_, m, first)) if m != n => {
                            return Err(RunError::DimConflict {
                                dim: param.clone(),
                                first: format!("{m} in input '{first}'"),
                                second: format!("{n} in input '{}'", spec.name),
                            });
                        }
                        Some(_) => {}
                        None => sizes.push((param.as_str(), n, spec.name.as_str())),
                    }
                }
            }
            Ok(&given.tensor)
        })
        .collect()
}
