//! Given float data in another float type than the input's, converted to the input's type.
//!
//! numpy writes float64 unless told otherwise, and half-precision models are fed float32 arrays:
//! refusing them would only make users convert by hand. Values are rounded to nearest (IEEE 754
//! round-half-to-even, as numpy's `astype` does); widening is exact.

use ndarray::ArrayD;
use tract_onnx::prelude::{Datum, DatumType, Tensor, f16};

use super::super::{InputSpec, NamedTensor, RunError, to_f64_array};

/// Converts each float tensor of `sample` whose input declares another float type, adding a note
/// per input to `notes` (once). Other tensors are left for the input checks.
pub(super) fn to_input_types(
    inputs: &[InputSpec],
    sample: Vec<NamedTensor>,
    notes: &mut Vec<String>,
) -> Result<Vec<NamedTensor>, RunError> {
    sample
        .into_iter()
        .map(|given| {
            let Some(spec) = inputs.iter().find(|i| i.name == given.name) else {
                return Ok(given);
            };
            let (from, to) = (given.tensor.datum_type(), spec.datum_type);
            if from == to || !from.is_float() || !to.is_float() {
                return Ok(given);
            }
            let tensor = convert(&given, to)?;
            let how = if to.size_of() < from.size_of() {
                "rounded to nearest"
            } else {
                "widened exactly"
            };
            let note = format!(
                "input '{}': {} data converted to {} ({how})",
                given.name,
                name(from),
                name(to)
            );
            if !notes.contains(&note) {
                notes.push(note);
            }
            Ok(NamedTensor::new(given.name, tensor))
        })
        .collect()
}

fn convert(given: &NamedTensor, to: DatumType) -> Result<Tensor, RunError> {
    let values = to_f64_array(&given.name, &given.tensor)?;
    fn build<T: Datum>(values: &ArrayD<f64>, f: impl Fn(f64) -> T) -> Tensor {
        Tensor::from(values.mapv(f))
    }
    let tensor = match to {
        DatumType::F16 => build(&values, f16::from_f64),
        DatumType::F32 => build(&values, |v| v as f32),
        _ => build(&values, |v| v),
    };
    let widened = to_f64_array(&given.name, &tensor)?;
    if let Some((v, _)) = values
        .iter()
        .zip(widened.iter())
        .find(|(v, w)| v.is_finite() && !w.is_finite())
    {
        return Err(RunError::Conversion {
            name: given.name.clone(),
            reason: format!("the value {v} does not fit in {}", name(to)),
        });
    }
    Ok(tensor)
}

/// numpy's name of a float type.
fn name(dt: DatumType) -> &'static str {
    match dt {
        DatumType::F16 => "float16",
        DatumType::F32 => "float32",
        _ => "float64",
    }
}
