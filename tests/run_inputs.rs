//! Input loading: NumPy .npy/.npz, ONNX TensorProto .pb, folders of samples, seeded random data,
//! and the errors for bad input.
//!
//! Outside sources: files are written by ndarray-npy (a reference implementation of the NumPy
//! format), by hand following the NumPy `.npy` format specification (`numpy.lib.format`, version
//! 1.0 header) where ndarray-npy has no writer (float16), and as ONNX `TensorProto` messages laid
//! out by the ONNX IR spec (`raw_data` little-endian, or the typed `float_data` field).

use std::collections::BTreeMap;
use std::path::Path;

use actswap::run::inputs::{
    Binding, Distribution, InputLoader, Loaded, RandomInputs, Source, parse_dim_size,
};
use actswap::run::{DatumType, Dim, InputSpec, RunError, Sample};
use ndarray::{ArrayD, IxDyn, array};
use ndarray_npy::{NpzWriter, WriteNpyExt};
use prost::Message;
use tract_onnx::pb::TensorProto;
use tract_onnx::pb::tensor_proto::DataType;
use tract_onnx::prelude::{Tensor, f16};

fn spec(name: &str, datum_type: DatumType, dims: Vec<Dim>) -> InputSpec {
    InputSpec {
        name: name.into(),
        datum_type,
        dims: Some(dims),
    }
}

fn two_inputs() -> Vec<InputSpec> {
    vec![
        spec(
            "x",
            DatumType::F32,
            vec![Dim::Named("batch".into()), Dim::Fixed(3)],
        ),
        spec("mask", DatumType::I64, vec![Dim::Named("batch".into())]),
    ]
}

fn write_npy<T: ndarray_npy::WritableElement>(path: &Path, a: &ArrayD<T>) {
    a.write_npy(std::fs::File::create(path).unwrap()).unwrap();
}

/// A `.npy` version 1.0 header after the NumPy format spec (`numpy.lib.format`): magic string,
/// version, header length (u16 LE), then a dict literal padded with spaces so that the data
/// starts on a 64-byte boundary, ending in '\n'.
fn npy_header(descr: &str, shape: &str) -> Vec<u8> {
    let mut header = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape}, }}");
    while !(10 + header.len() + 1).is_multiple_of(64) {
        header.push(' ');
    }
    header.push('\n');
    let mut bytes = b"\x93NUMPY\x01\x00".to_vec();
    bytes.extend((header.len() as u16).to_le_bytes());
    bytes.extend(header.as_bytes());
    bytes
}

fn tensor_of(sample: &Sample, name: &str) -> Tensor {
    sample
        .iter()
        .find(|t| t.name == name)
        .expect("input present")
        .tensor
        .clone()
}

fn bind(text: &str) -> Binding {
    Binding::parse(text).unwrap()
}

#[test]
fn npy_files_bind_by_name() {
    let dir = tempfile::tempdir().unwrap();
    let x = array![[1.0f32, 2.0, 3.0], [4.0, 5.0, 6.0]].into_dyn();
    let mask = array![1i64, 0].into_dyn();
    write_npy(&dir.path().join("x.npy"), &x);
    write_npy(&dir.path().join("mask.npy"), &mask);
    let inputs = two_inputs();
    let bindings = [
        bind(&format!("mask={}", dir.path().join("mask.npy").display())),
        bind(&format!("x={}", dir.path().join("x.npy").display())),
    ];
    let samples = InputLoader::new(&inputs).from_bindings(&bindings).unwrap();
    assert_eq!(samples.len(), 1);
    let names: Vec<&str> = samples[0].iter().map(|t| t.name.as_str()).collect();
    assert_eq!(names, ["x", "mask"], "ordered as the model's inputs");
    assert_eq!(tensor_of(&samples[0], "x"), Tensor::from(x));
    assert_eq!(tensor_of(&samples[0], "mask"), Tensor::from(mask));
}

/// float16 `.npy` written by hand after the NumPy format spec (see [`npy_header`]), little-endian
/// IEEE 754 binary16 data.
#[test]
fn float16_npy_keeps_its_type() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("h.npy");
    let values = [0.5f32, -2.0, 65504.0, 1.0 / 1024.0];
    let mut bytes = npy_header("<f2", "(2, 2)");
    for v in values {
        bytes.extend(f16::from_f32(v).to_bits().to_le_bytes());
    }
    std::fs::write(&path, bytes).unwrap();
    let inputs = [spec(
        "h",
        DatumType::F16,
        vec![Dim::Fixed(2), Dim::Fixed(2)],
    )];
    let samples = InputLoader::new(&inputs)
        .from_bindings(&[bind(&format!("h={}", path.display()))])
        .unwrap();
    let h = tensor_of(&samples[0], "h");
    assert_eq!(h.datum_type(), DatumType::F16);
    let got: Vec<f32> = h
        .to_plain_array_view::<f16>()
        .unwrap()
        .iter()
        .map(|v| v.to_f32())
        .collect();
    assert_eq!(got, values);
}

#[test]
fn npz_archive_feeds_inputs_by_array_name() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("sample.npz");
    let x = array![[0.25f32, 0.5, 0.75]].into_dyn();
    let mask = array![7i64].into_dyn();
    let mut npz = NpzWriter::new(std::fs::File::create(&path).unwrap());
    npz.add_array("x", &x).unwrap();
    npz.add_array("mask", &mask).unwrap();
    npz.finish().unwrap();
    let inputs = two_inputs();
    let samples = InputLoader::new(&inputs)
        .from_bindings(&[bind(path.to_str().unwrap())])
        .unwrap();
    assert_eq!(tensor_of(&samples[0], "x"), Tensor::from(x.clone()));
    assert_eq!(tensor_of(&samples[0], "mask"), Tensor::from(mask));
    // NAME=archive takes the array of that name.
    let one = [spec(
        "x",
        DatumType::F32,
        vec![Dim::Fixed(1), Dim::Fixed(3)],
    )];
    let samples = InputLoader::new(&one)
        .from_bindings(&[bind(&format!("x={}", path.display()))])
        .unwrap();
    assert_eq!(tensor_of(&samples[0], "x"), Tensor::from(x));
}

fn tensor_proto_raw(name: &str, dims: &[i64], values: &[f32]) -> TensorProto {
    TensorProto {
        name: name.into(),
        dims: dims.to_vec(),
        data_type: DataType::Float as i32,
        raw_data: values.iter().flat_map(|v| v.to_le_bytes()).collect(),
        ..Default::default()
    }
}

#[test]
fn tensor_proto_files_in_raw_and_typed_layouts() {
    let dir = tempfile::tempdir().unwrap();
    let raw = dir.path().join("raw.pb");
    let typed = dir.path().join("typed.pb");
    std::fs::write(
        &raw,
        tensor_proto_raw("x", &[1, 3], &[1.5, -2.5, 3.0]).encode_to_vec(),
    )
    .unwrap();
    let typed_proto = TensorProto {
        name: "x".into(),
        dims: vec![1, 3],
        data_type: DataType::Float as i32,
        float_data: vec![1.5, -2.5, 3.0],
        ..Default::default()
    };
    std::fs::write(&typed, typed_proto.encode_to_vec()).unwrap();
    let inputs = [spec(
        "x",
        DatumType::F32,
        vec![Dim::Fixed(1), Dim::Fixed(3)],
    )];
    let loader = InputLoader::new(&inputs);
    // A bare .pb binds by the proto's name field.
    let a = loader
        .from_bindings(&[bind(raw.to_str().unwrap())])
        .unwrap();
    let b = loader
        .from_bindings(&[bind(&format!("x={}", typed.display()))])
        .unwrap();
    let expected = Tensor::from(array![[1.5f32, -2.5, 3.0]].into_dyn());
    assert_eq!(tensor_of(&a[0], "x"), expected);
    assert_eq!(tensor_of(&b[0], "x"), expected);
}

#[test]
fn folder_of_data_sets_gives_samples_in_order() {
    let dir = tempfile::tempdir().unwrap();
    for (k, v) in [(0, 1.0f32), (1, 2.0), (10, 3.0), (2, 4.0)] {
        let set = dir.path().join(format!("test_data_set_{k}"));
        std::fs::create_dir(&set).unwrap();
        std::fs::write(
            set.join("input_0.pb"),
            tensor_proto_raw("x", &[1, 3], &[v; 3]).encode_to_vec(),
        )
        .unwrap();
    }
    let inputs = [spec(
        "x",
        DatumType::F32,
        vec![Dim::Fixed(1), Dim::Fixed(3)],
    )];
    let samples = InputLoader::new(&inputs).from_folder(dir.path()).unwrap();
    let firsts: Vec<f32> = samples
        .iter()
        .map(|s| tensor_of(s, "x").to_plain_array_view::<f32>().unwrap()[[0, 0]])
        .collect();
    assert_eq!(firsts, [1.0, 2.0, 4.0, 3.0], "numeric order 0, 1, 2, 10");
}

#[test]
fn repeated_bindings_make_samples_and_a_single_one_is_shared() {
    let dir = tempfile::tempdir().unwrap();
    for k in 0..3 {
        write_npy(
            &dir.path().join(format!("x{k}.npy")),
            &ArrayD::from_elem(IxDyn(&[2, 3]), k as f32),
        );
    }
    write_npy(&dir.path().join("mask.npy"), &array![1i64, 1].into_dyn());
    let inputs = two_inputs();
    let mut bindings: Vec<Binding> = (0..3)
        .map(|k| {
            bind(&format!(
                "x={}",
                dir.path().join(format!("x{k}.npy")).display()
            ))
        })
        .collect();
    bindings.push(bind(&format!(
        "mask={}",
        dir.path().join("mask.npy").display()
    )));
    let samples = InputLoader::new(&inputs).from_bindings(&bindings).unwrap();
    assert_eq!(samples.len(), 3);
    for (k, s) in samples.iter().enumerate() {
        assert_eq!(
            tensor_of(s, "x").to_plain_array_view::<f32>().unwrap()[[0, 0]],
            k as f32
        );
        assert_eq!(tensor_of(s, "mask").len(), 2);
    }
}

fn random(seed: u64, samples: usize) -> RandomInputs {
    RandomInputs {
        seed,
        distribution: Distribution::Normal {
            mean: 0.0,
            std_dev: 1.0,
        },
        samples,
        dims: BTreeMap::from([("batch".to_string(), 4)]),
    }
}

#[test]
fn random_inputs_are_reproducible_from_the_seed() {
    let inputs = two_inputs();
    let loader = InputLoader::new(&inputs);
    let a = loader.random(&random(7, 2)).unwrap();
    let b = loader.random(&random(7, 2)).unwrap();
    let c = loader.random(&random(8, 2)).unwrap();
    let longer = loader.random(&random(7, 5)).unwrap();
    assert_eq!(a, b, "same seed, same data");
    assert_ne!(a, c, "another seed, other data");
    assert_eq!(
        a[..],
        longer[..2],
        "the first samples do not depend on how many are drawn"
    );
    assert_ne!(a[0], a[1], "samples differ from each other");
    assert_eq!(tensor_of(&a[0], "x").shape(), [4, 3]);
    assert_eq!(tensor_of(&a[0], "mask").datum_type(), DatumType::I64);
}

#[test]
fn uniform_inputs_stay_in_range() {
    let inputs = [
        spec("x", DatumType::F64, vec![Dim::Fixed(10_000)]),
        spec("i", DatumType::I32, vec![Dim::Fixed(10_000)]),
    ];
    let spec = RandomInputs {
        distribution: Distribution::Uniform {
            low: -0.5,
            high: 2.0,
        },
        ..RandomInputs::default()
    };
    let sample = &InputLoader::new(&inputs).random(&spec).unwrap()[0];
    let x = tensor_of(sample, "x");
    let x = x.to_plain_array_view::<f64>().unwrap();
    assert!(x.iter().all(|&v| (-0.5..2.0).contains(&v)));
    let i = tensor_of(sample, "i");
    let ints: std::collections::BTreeSet<i32> = i
        .to_plain_array_view::<i32>()
        .unwrap()
        .iter()
        .copied()
        .collect();
    assert_eq!(
        ints.into_iter().collect::<Vec<_>>(),
        [0, 1, 2],
        "integers in [ceil(low), floor(high)]"
    );
}

#[test]
fn an_unset_dim_is_named_in_the_error() {
    let inputs = two_inputs();
    let spec = RandomInputs {
        dims: BTreeMap::new(),
        ..random(0, 1)
    };
    let error = InputLoader::new(&inputs).random(&spec).unwrap_err();
    assert!(
        matches!(&error, RunError::UnsetDim { dim, .. } if dim == "batch"),
        "{error}"
    );
    assert!(error.to_string().contains("batch=SIZE"), "{error}");
}

#[test]
fn a_dim_no_input_has_is_refused() {
    let inputs = two_inputs();
    let mut spec = random(0, 1);
    spec.dims.insert("bacth".into(), 2);
    let error = InputLoader::new(&inputs).random(&spec).unwrap_err();
    assert!(error.to_string().contains("bacth"), "{error}");
}

#[test]
fn the_element_limit_refuses_before_allocating() {
    let inputs = two_inputs();
    let mut spec = random(0, 1);
    spec.dims.insert("batch".into(), 1 << 40);
    let error = InputLoader::new(&inputs).random(&spec).unwrap_err();
    assert!(matches!(error, RunError::OverLimit { .. }), "{error}");
    let small = InputLoader::new(&inputs).with_max_elements(11);
    let error = small.random(&random(0, 1)).unwrap_err();
    assert!(
        matches!(&error, RunError::OverLimit { name, elements: 12, limit: 11 } if name == "x"),
        "{error}"
    );
}

/// A `.npy` header announcing 2^40 elements is refused from the header alone.
#[test]
fn an_oversized_npy_is_refused_from_its_header() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("huge.npy");
    let bytes = npy_header("<f4", "(1048576, 1048576)");
    std::fs::write(&path, bytes).unwrap();
    let inputs = [spec("x", DatumType::F32, vec![Dim::Unknown, Dim::Unknown])];
    let error = InputLoader::new(&inputs)
        .from_bindings(&[bind(&format!("x={}", path.display()))])
        .unwrap_err();
    assert!(matches!(error, RunError::OverLimit { .. }), "{error}");
}

#[test]
fn bad_inputs_get_one_line_errors() {
    let dir = tempfile::tempdir().unwrap();
    let int_file = dir.path().join("x_int.npy");
    write_npy(&int_file, &ArrayD::<i32>::zeros(IxDyn(&[2, 3])));
    let wrong_shape = dir.path().join("x4.npy");
    write_npy(&wrong_shape, &ArrayD::<f32>::zeros(IxDyn(&[2, 4])));
    let inputs = two_inputs();
    let loader = InputLoader::new(&inputs);
    let error = |text: String| loader.from_bindings(&[bind(&text)]).unwrap_err();

    let e = loader.from_bindings(&[]).unwrap_err();
    assert!(
        matches!(&e, RunError::MissingInput(name) if name == "x"),
        "{e}"
    );
    let e = error(format!("y={}", int_file.display()));
    assert!(
        matches!(&e, RunError::UnknownInput { name, .. } if name == "y"),
        "{e}"
    );
    let e = error(format!("x={}", int_file.display()));
    assert!(matches!(e, RunError::WrongType { .. }), "{e}");
    let e = error(format!("x={}", wrong_shape.display()));
    assert!(matches!(e, RunError::ShapeMismatch { .. }), "{e}");
    let e = error(format!("x={}", dir.path().join("missing.npy").display()));
    assert!(matches!(e, RunError::File { .. }), "{e}");
    std::fs::write(dir.path().join("junk.pb"), b"\xff\xff\xff").unwrap();
    let e = error(format!("x={}", dir.path().join("junk.pb").display()));
    assert!(matches!(e, RunError::File { .. }), "{e}");
    for e in [e, loader.from_folder(dir.path()).unwrap_err()] {
        assert!(!e.to_string().contains('\n'), "one line: {e}");
    }
}

#[test]
fn dim_sizes_parse() {
    assert_eq!(parse_dim_size("batch=8").unwrap(), ("batch".to_string(), 8));
    assert!(parse_dim_size("batch").is_err());
    assert!(parse_dim_size("batch=-1").is_err());
    assert!(parse_dim_size("=3").is_err());
}

/// numpy writes float64 unless told otherwise (numpy documentation, `numpy.save` / default dtype):
/// a float64 file for a float32 input is rounded to nearest as numpy's `astype(np.float32)` does
/// (IEEE 754 round-half-to-even), and a float32 file for a float16 input likewise, each with a note.
#[test]
fn float_files_of_another_width_are_converted_with_a_note() {
    let dir = tempfile::tempdir().unwrap();
    // 0.1 is not exact in binary; 1 + 2^-30 rounds to 1 in float32 (24-bit significand).
    let wide = array![[0.1f64, -2.5, 1.0 + 2f64.powi(-30)], [1e30, 0.0, 3.0]].into_dyn();
    write_npy(&dir.path().join("x.npy"), &wide);
    write_npy(&dir.path().join("mask.npy"), &array![1i64, 0].into_dyn());
    let inputs = two_inputs();
    let bindings = [
        bind(&format!("x={}", dir.path().join("x.npy").display())),
        bind(&format!("mask={}", dir.path().join("mask.npy").display())),
    ];
    let loaded = InputLoader::new(&inputs)
        .load(Source::Files(&bindings))
        .unwrap();
    let x = tensor_of(&loaded.samples[0], "x");
    assert_eq!(x.datum_type(), DatumType::F32);
    let got: Vec<f32> = x
        .to_plain_array_view::<f32>()
        .unwrap()
        .iter()
        .copied()
        .collect();
    assert_eq!(got, [0.1f32, -2.5, 1.0, 1e30, 0.0, 3.0]);
    assert_eq!(
        loaded.notes,
        ["input 'x': float64 data converted to float32 (rounded to nearest)"]
    );

    // float32 -> float16: 65504 is float16's largest finite value (IEEE 754 binary16).
    let half = [spec("h", DatumType::F16, vec![Dim::Fixed(3)])];
    write_npy(
        &dir.path().join("h.npy"),
        &array![0.5f32, 65504.0, 1.0 / 3.0].into_dyn(),
    );
    let loaded = InputLoader::new(&half)
        .load(Source::Files(&[bind(&format!(
            "h={}",
            dir.path().join("h.npy").display()
        ))]))
        .unwrap();
    let h = tensor_of(&loaded.samples[0], "h");
    let got: Vec<f16> = h
        .to_plain_array_view::<f16>()
        .unwrap()
        .iter()
        .copied()
        .collect();
    assert_eq!(
        got,
        [f16::from_f32(0.5), f16::MAX, f16::from_f32(1.0 / 3.0)]
    );
    assert_eq!(loaded.notes.len(), 1);

    // A finite value float16 cannot hold is refused, not turned into infinity.
    write_npy(
        &dir.path().join("big.npy"),
        &array![0.5f32, 1e6, 0.0].into_dyn(),
    );
    let error = InputLoader::new(&half)
        .from_bindings(&[bind(&format!("h={}", dir.path().join("big.npy").display()))])
        .unwrap_err();
    assert!(matches!(error, RunError::Conversion { .. }), "{error}");
    assert!(error.to_string().contains("1000000"), "{error}");
}

fn random_with(dims: &[(&str, usize)]) -> RandomInputs {
    RandomInputs {
        dims: dims.iter().map(|(k, v)| (k.to_string(), *v)).collect(),
        ..RandomInputs::default()
    }
}

/// An input no file gives is drawn at random, sized by the dims the files give; a set dim is
/// checked against the files.
#[test]
fn files_and_random_inputs_mix_and_agree_on_dims() {
    let dir = tempfile::tempdir().unwrap();
    write_npy(
        &dir.path().join("x.npy"),
        &ArrayD::<f32>::zeros(IxDyn(&[5, 3])),
    );
    let inputs = two_inputs();
    let files = [bind(&format!("x={}", dir.path().join("x.npy").display()))];

    let strict = InputLoader::new(&inputs).from_bindings(&files).unwrap_err();
    assert!(
        matches!(&strict, RunError::MissingInput(n) if n == "mask"),
        "{strict}"
    );

    let loaded: Loaded = InputLoader::new(&inputs)
        .with_random(random_with(&[]))
        .load(Source::Files(&files))
        .unwrap();
    assert_eq!(loaded.drawn, ["mask"]);
    assert_eq!(
        tensor_of(&loaded.samples[0], "mask").shape(),
        [5],
        "batch from x"
    );

    let agreeing = InputLoader::new(&inputs)
        .with_random(random_with(&[("batch", 5)]))
        .load(Source::Files(&files));
    assert!(agreeing.is_ok());
    let error = InputLoader::new(&inputs)
        .with_random(random_with(&[("batch", 4)]))
        .load(Source::Files(&files))
        .unwrap_err();
    assert!(
        matches!(&error, RunError::DimConflict { dim, .. } if dim == "batch"),
        "{error}"
    );
    assert!(error.to_string().contains("--dim"), "{error}");
}

/// The element limit bounds all samples together: many small samples are refused before any is
/// drawn.
#[test]
fn the_element_limit_bounds_all_samples_together() {
    let inputs = [spec("x", DatumType::F32, vec![Dim::Fixed(1000)])];
    let many = RandomInputs {
        samples: 100_000,
        ..RandomInputs::default()
    };
    let error = InputLoader::new(&inputs)
        .with_max_elements(1 << 20)
        .random(&many)
        .unwrap_err();
    assert!(
        matches!(error, RunError::SamplesOverLimit { .. }),
        "{error}"
    );
    let fits = RandomInputs {
        samples: 1000,
        ..RandomInputs::default()
    };
    let samples = InputLoader::new(&inputs)
        .with_max_elements(1 << 20)
        .random(&fits)
        .unwrap();
    assert_eq!(samples.len(), 1000);

    // A file given once is copied into every sample, and counted so.
    let dir = tempfile::tempdir().unwrap();
    let two = two_inputs();
    write_npy(
        &dir.path().join("x.npy"),
        &ArrayD::<f32>::zeros(IxDyn(&[2, 3])),
    );
    write_npy(&dir.path().join("m.npy"), &array![1i64, 1].into_dyn());
    let mut bindings = vec![bind(&format!("x={}", dir.path().join("x.npy").display()))];
    for _ in 0..4 {
        bindings.push(bind(&format!(
            "mask={}",
            dir.path().join("m.npy").display()
        )));
    }
    // 4 samples of 6 + 2 elements: 32.
    let loader = |limit| InputLoader::new(&two).with_max_elements(limit);
    assert_eq!(loader(32).from_bindings(&bindings).unwrap().len(), 4);
    let error = loader(31).from_bindings(&bindings).unwrap_err();
    assert!(
        matches!(error, RunError::SamplesOverLimit { .. }),
        "{error}"
    );
}
