//! Tensors handed to and returned by the runner, and their view as `f64` for comparison.

use ndarray::ArrayD;
use tract_onnx::prelude::{DatumType, Tensor, f16};

use super::RunError;

/// A tensor with the ONNX tensor name it belongs to.
#[derive(Debug, Clone, PartialEq)]
pub struct NamedTensor {
    /// The ONNX tensor name (a graph input, output or intermediate value).
    pub name: String,
    /// The values, in their own element type.
    pub tensor: Tensor,
}

impl NamedTensor {
    /// Pairs `tensor` with `name`.
    pub fn new(name: impl Into<String>, tensor: Tensor) -> Self {
        NamedTensor {
            name: name.into(),
            tensor,
        }
    }

    /// The values widened to `f64`; see [`to_f64_array`].
    pub fn to_f64(&self) -> Result<ArrayD<f64>, RunError> {
        to_f64_array(&self.name, &self.tensor)
    }
}

/// One set of input tensors, one per model input.
pub type Sample = Vec<NamedTensor>;

/// Widens a numeric tensor to `f64` for comparison. Exact for f16, f32, f64 and integers of up
/// to 32 bits; 64-bit integers beyond 2^53 round. `name` only labels the error.
pub fn to_f64_array(name: &str, tensor: &Tensor) -> Result<ArrayD<f64>, RunError> {
    fn widen<T: tract_onnx::prelude::Datum + Copy>(
        t: &Tensor,
        f: impl Fn(T) -> f64,
    ) -> Result<ArrayD<f64>, RunError> {
        let view = t
            .to_plain_array_view::<T>()
            .map_err(|e| RunError::tract("read a tensor", &e))?;
        Ok(view.mapv(f))
    }
    match tensor.datum_type() {
        DatumType::F16 => widen(tensor, |x: f16| x.to_f64()),
        DatumType::F32 => widen(tensor, |x: f32| x as f64),
        DatumType::F64 => widen(tensor, |x: f64| x),
        DatumType::I8 => widen(tensor, |x: i8| x as f64),
        DatumType::I16 => widen(tensor, |x: i16| x as f64),
        DatumType::I32 => widen(tensor, |x: i32| x as f64),
        DatumType::I64 => widen(tensor, |x: i64| x as f64),
        DatumType::U8 => widen(tensor, |x: u8| x as f64),
        DatumType::U16 => widen(tensor, |x: u16| x as f64),
        DatumType::U32 => widen(tensor, |x: u32| x as f64),
        DatumType::U64 => widen(tensor, |x: u64| x as f64),
        other => Err(RunError::NotNumeric {
            name: name.to_string(),
            found: format!("{other:?}"),
        }),
    }
}
