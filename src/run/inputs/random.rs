//! Seeded random samples shaped by the model's declared inputs.

use std::collections::BTreeMap;

use ndarray::{ArrayD, IxDyn};
use rand::rngs::StdRng;
use rand::{Rng, SeedableRng};
use rand_distr::{Distribution as _, Normal, Uniform};
use tract_onnx::prelude::{Datum, DatumType, Tensor, f16};

use super::super::{Dim, InputSpec, NamedTensor, RunError};
use super::Budget;

/// The distribution random inputs are drawn from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Distribution {
    /// Normal with this mean and standard deviation.
    Normal { mean: f64, std_dev: f64 },
    /// Uniform on `[low, high)`.
    Uniform { low: f64, high: f64 },
}

/// How to generate random samples.
#[derive(Debug, Clone, PartialEq)]
pub struct RandomInputs {
    /// Seed of the single generator all samples are drawn from.
    pub seed: u64,
    /// The distribution of every element.
    pub distribution: Distribution,
    /// How many samples when every input is random (files set the count otherwise).
    pub samples: usize,
    /// Sizes of symbolic dims, by `dim_param` name; files given with them must agree.
    pub dims: BTreeMap<String, usize>,
}

impl Default for RandomInputs {
    /// One sample of standard-normal values, seed 0, no dims set.
    fn default() -> Self {
        RandomInputs {
            seed: 0,
            distribution: Distribution::Normal {
                mean: 0.0,
                std_dev: 1.0,
            },
            samples: 1,
            dims: BTreeMap::new(),
        }
    }
}

/// A sampler for one distribution, validated once.
enum Sampler {
    Normal(Normal<f64>),
    Uniform(Uniform<f64>, f64, f64),
}

impl Sampler {
    fn new(d: Distribution) -> Result<Sampler, RunError> {
        let bad = |reason: String| RunError::BadArgument {
            text: format!("{d:?}"),
            reason,
        };
        match d {
            Distribution::Normal { mean, std_dev } => Normal::new(mean, std_dev)
                .map(Sampler::Normal)
                .map_err(|e| bad(e.to_string())),
            Distribution::Uniform { low, high } => Uniform::new(low, high)
                .map(|u| Sampler::Uniform(u, low, high))
                .map_err(|e| bad(e.to_string())),
        }
    }

    fn draw(&self, rng: &mut StdRng) -> f64 {
        match self {
            Sampler::Normal(n) => n.sample(rng),
            Sampler::Uniform(u, _, _) => u.sample(rng),
        }
    }
}

/// Completes each sample with the inputs it lacks, drawn from one generator seeded with
/// `spec.seed`, in model order, sample after sample. Dims take sizes from `spec.dims` and from the
/// tensors the sample has, which must agree. Returns the samples and the inputs drawn.
pub(super) fn complete(
    inputs: &[InputSpec],
    given: Vec<Vec<NamedTensor>>,
    spec: &RandomInputs,
    budget: &mut Budget,
) -> Result<(Vec<Vec<NamedTensor>>, Vec<String>), RunError> {
    check_dim_names(inputs, &spec.dims)?;
    let mut drawn: Vec<String> = Vec::new();
    let mut plans = Vec::with_capacity(given.len());
    for sample in &given {
        let sizes = dim_sizes(inputs, sample, &spec.dims)?;
        let mut plan = Vec::new();
        for input in inputs {
            if sample.iter().any(|t| t.name == input.name) {
                continue;
            }
            let shape = resolve_shape(input, &sizes, budget.limit)?;
            budget.take(shape.iter().map(|&d| d as u128).product())?;
            if !drawn.contains(&input.name) {
                drawn.push(input.name.clone());
            }
            plan.push((input, shape));
        }
        plans.push(plan);
    }
    let sampler = Sampler::new(spec.distribution)?;
    let mut rng = StdRng::seed_from_u64(spec.seed);
    let samples = given
        .into_iter()
        .zip(plans)
        .map(|(mut sample, plan)| {
            for (input, shape) in plan {
                let tensor = fill(input, &shape, &sampler, &mut rng)?;
                sample.push(NamedTensor::new(&input.name, tensor));
            }
            Ok(sample)
        })
        .collect::<Result<_, RunError>>()?;
    Ok((samples, drawn))
}

/// The sizes of the named dims: `set` ones, then those the tensors of `sample` give, refusing a
/// size that disagrees with an earlier one.
fn dim_sizes(
    inputs: &[InputSpec],
    sample: &[NamedTensor],
    set: &BTreeMap<String, usize>,
) -> Result<BTreeMap<String, usize>, RunError> {
    let mut sizes = set.clone();
    let mut origin: BTreeMap<String, String> = set
        .keys()
        .map(|k| (k.clone(), "(--dim)".to_string()))
        .collect();
    for tensor in sample {
        let Some(dims) = inputs
            .iter()
            .find(|i| i.name == tensor.name)
            .and_then(|i| i.dims.as_ref())
        else {
            continue;
        };
        for (dim, &size) in dims.iter().zip(tensor.tensor.shape()) {
            let Dim::Named(name) = dim else { continue };
            match sizes.get(name) {
                Some(&known) if known != size => {
                    return Err(RunError::DimConflict {
                        dim: name.clone(),
                        first: format!("{known} {}", origin[name]),
                        second: format!("{size} in input '{}'", tensor.name),
                    });
                }
                Some(_) => {}
                None => {
                    sizes.insert(name.clone(), size);
                    origin.insert(name.clone(), format!("in input '{}'", tensor.name));
                }
            }
        }
    }
    Ok(sizes)
}

/// The names of the symbolic dims the inputs use, in input order (repeats kept).
pub fn symbolic_dims(inputs: &[InputSpec]) -> Vec<&str> {
    inputs
        .iter()
        .flat_map(|i| i.dims.iter().flatten())
        .filter_map(|d| {
            if let Dim::Named(n) = d {
                Some(n.as_str())
            } else {
                None
            }
        })
        .collect()
}

/// Refuses a set dim that no input uses (most likely a typo).
fn check_dim_names(inputs: &[InputSpec], dims: &BTreeMap<String, usize>) -> Result<(), RunError> {
    let mut used = symbolic_dims(inputs);
    used.sort_unstable();
    used.dedup();
    match dims.keys().find(|k| !used.contains(&k.as_str())) {
        Some(unused) => Err(RunError::BadArgument {
            text: format!("{unused}=SIZE"),
            reason: if used.is_empty() {
                "the model has no symbolic dimensions".to_string()
            } else {
                format!(
                    "no input has this dimension (symbolic dimensions: {})",
                    used.join(", ")
                )
            },
        }),
        None => Ok(()),
    }
}

/// The concrete shape of `input`, refusing unset dims and shapes over the limit.
fn resolve_shape(
    input: &InputSpec,
    dims: &BTreeMap<String, usize>,
    max_elements: usize,
) -> Result<Vec<usize>, RunError> {
    let declared = input
        .dims
        .as_ref()
        .ok_or_else(|| RunError::NoShape(input.name.clone()))?;
    let shape = declared
        .iter()
        .enumerate()
        .map(|(axis, d)| match d {
            Dim::Fixed(n) => Ok(*n),
            Dim::Named(name) => dims.get(name).copied().ok_or_else(|| RunError::UnsetDim {
                input: input.name.clone(),
                axis,
                dim: name.clone(),
            }),
            Dim::Unknown => Err(RunError::AnonymousDim {
                input: input.name.clone(),
                axis,
            }),
        })
        .collect::<Result<Vec<_>, _>>()?;
    let elements: u128 = shape.iter().map(|&d| d as u128).product();
    if elements > max_elements as u128 {
        return Err(RunError::OverLimit {
            name: input.name.clone(),
            elements,
            limit: max_elements,
        });
    }
    Ok(shape)
}

/// One random tensor of `input`'s element type.
fn fill(
    input: &InputSpec,
    shape: &[usize],
    sampler: &Sampler,
    rng: &mut StdRng,
) -> Result<Tensor, RunError> {
    fn array<T: Datum>(shape: &[usize], f: impl FnMut() -> T) -> Tensor {
        Tensor::from(ArrayD::from_shape_simple_fn(IxDyn(shape), f))
    }
    /// A draw rounded into an integer type's range (uniform: within [ceil(low), floor(high)]).
    fn integer(sampler: &Sampler, rng: &mut StdRng, min: f64, max: f64) -> f64 {
        match sampler {
            Sampler::Uniform(_, low, high) => {
                let (lo, hi) = (low.ceil().max(min), high.floor().min(max));
                if lo >= hi {
                    lo
                } else {
                    (lo + (rng.random::<f64>() * (hi - lo + 1.0)).floor()).min(hi)
                }
            }
            Sampler::Normal(n) => n.sample(rng).round().clamp(min, max),
        }
    }
    macro_rules! ints {
        ($t:ty) => {
            array(shape, || {
                integer(sampler, rng, <$t>::MIN as f64, <$t>::MAX as f64) as $t
            })
        };
    }
    Ok(match input.datum_type {
        DatumType::F16 => array(shape, || f16::from_f64(sampler.draw(rng))),
        DatumType::F32 => array(shape, || sampler.draw(rng) as f32),
        DatumType::F64 => array(shape, || sampler.draw(rng)),
        DatumType::I8 => ints!(i8),
        DatumType::I16 => ints!(i16),
        DatumType::I32 => ints!(i32),
        DatumType::I64 => ints!(i64),
        DatumType::U8 => ints!(u8),
        DatumType::U16 => ints!(u16),
        DatumType::U32 => ints!(u32),
        DatumType::U64 => ints!(u64),
        DatumType::Bool => array(shape, || rng.random_bool(0.5)),
        other => {
            return Err(RunError::NotNumeric {
                name: input.name.clone(),
                found: format!("{other:?}"),
            });
        }
    })
}
