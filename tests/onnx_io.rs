//! Lossless model I/O, the graph index and `info`, checked against files and figures produced by
//! the `onnx` Python package (onnx 1.23.2; see tests/fixtures/manifest.json and scripts/).

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use actswap::onnx::{Model, ModelIndex, SaveOptions, summary::Summary};
use prost::Message;
use serde_json::Value;

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn json(path: &Path) -> Value {
    serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap()
}

/// Every .onnx file below `dir`.
fn onnx_files(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else if p.extension().is_some_and(|x| x == "onnx") {
                out.push(p);
            }
        }
    }
    out.sort();
    out
}

/// Source: models written by the onnx package's conformance case generator and by torch's two
/// exporters (tests/fixtures), our own sample models, and a model with external data. Decoding
/// with our schema and re-encoding must give back every byte (the loader's own unchanged-save path
/// is tested separately; this checks the schema is complete and field-ordered).
#[test]
fn decode_encode_is_byte_identical() {
    let mut files = onnx_files(&root().join("tests/fixtures"));
    files.extend(onnx_files(&root().join("sample-models")));
    files.push(root().join("tests/corpus/good-external/model.onnx"));
    assert!(files.len() > 100, "fixtures missing: {}", files.len());
    for f in &files {
        let bytes = std::fs::read(f).unwrap();
        let proto = actswap::onnx::proto::ModelProto::decode(bytes.as_slice())
            .unwrap_or_else(|e| panic!("{}: {e}", f.display()));
        assert!(
            proto.encode_to_vec() == bytes,
            "{} does not re-encode identically",
            f.display()
        );
    }
}

#[test]
fn unchanged_save_is_byte_identical_and_atomic() {
    let src = root().join("tests/fixtures/conformance/test_gelu_tanh_1_expanded/model.onnx");
    let model = Model::load(&src).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("copy.onnx");
    model.save(&out, &SaveOptions::default()).unwrap();
    assert_eq!(std::fs::read(&out).unwrap(), std::fs::read(&src).unwrap());
    let leftovers: Vec<_> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(leftovers.len(), 1, "temporary files left: {leftovers:?}");
}

#[test]
fn saving_over_the_input_is_refused_unless_asked() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("m.onnx");
    std::fs::copy(
        root().join("tests/fixtures/conformance/test_relu/model.onnx"),
        &p,
    )
    .unwrap();
    let model = Model::load(&p).unwrap();
    let err = model.save(&p, &SaveOptions::default()).unwrap_err();
    assert!(
        format!("{err:#}").contains("refusing to overwrite"),
        "{err:#}"
    );
    let opts = SaveOptions {
        overwrite_input: true,
        ..SaveOptions::default()
    };
    model.save(&p, &opts).unwrap();
    assert_eq!(
        std::fs::read(&p).unwrap(),
        std::fs::read(root().join("tests/fixtures/conformance/test_relu/model.onnx")).unwrap()
    );
}

/// Source: tests/corpus/good-external, written with onnx.external_data_helper (onnx 1.23.2).
#[test]
fn external_data_is_read_and_copied_when_saving_elsewhere() {
    let src = root().join("tests/corpus/good-external/model.onnx");
    let manifest = json(&root().join("tests/corpus/good-external/manifest.json"));
    let model = Model::load(&src).unwrap();
    let index = ModelIndex::build(&model).unwrap();
    for init in manifest["external_initializers"].as_array().unwrap() {
        let name = init["name"].as_str().unwrap();
        let v = index.constant(0, name).unwrap();
        let dims: Vec<usize> = init["dims"]
            .as_array()
            .unwrap()
            .iter()
            .map(|d| d.as_u64().unwrap() as usize)
            .collect();
        assert_eq!(v.dims, dims, "{name}");
    }
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("nested/copy.onnx");
    std::fs::create_dir_all(out.parent().unwrap()).unwrap();
    model.save(&out, &SaveOptions::default()).unwrap();
    assert_eq!(
        std::fs::read(out.parent().unwrap().join("weights.bin")).unwrap(),
        std::fs::read(root().join("tests/corpus/good-external/weights.bin")).unwrap()
    );
    let copy = Model::load(&out).unwrap();
    let copy_index = ModelIndex::build(&copy).unwrap();
    assert_eq!(
        copy_index.constant(0, "conv.w").unwrap(),
        index.constant(0, "conv.w").unwrap()
    );
}

/// A model above the protobuf size limit is saved with its initializers in external data; the
/// limit is lowered here so the test stays small (the 2 GiB path is the same code).
#[test]
fn oversized_models_move_initializers_to_external_data() {
    let src = root().join("tests/fixtures/torch/pump-ts-op13/model.onnx");
    let model = Model::load(&src).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("big.onnx");
    let limit = std::fs::metadata(&src).unwrap().len() / 2;
    let opts = SaveOptions {
        proto_limit: limit,
        ..SaveOptions::default()
    };
    model.save(&out, &opts).unwrap();
    assert!(dir.path().join("big.onnx.data").exists());
    let copy = Model::load(&out).unwrap();
    assert!(!copy.external_locations().unwrap().is_empty());
    let (a, b) = (
        ModelIndex::build(&model).unwrap(),
        ModelIndex::build(&copy).unwrap(),
    );
    for t in &model.proto().graph.as_ref().unwrap().initializer {
        assert_eq!(
            a.constant(0, t.name()),
            b.constant(0, t.name()),
            "{}",
            t.name()
        );
    }
    assert!(std::fs::metadata(&out).unwrap().len() < limit);
}

fn info_of(path: &Path) -> Value {
    let model = Model::load(path).unwrap();
    let index = ModelIndex::build(&model).unwrap();
    serde_json::to_value(Summary::of(&index).unwrap()).unwrap()
}

/// Source: the figures the onnx Python package reads from the same files (fixture manifests).
fn check_info(path: &Path, expected: &Value) {
    let got = info_of(path);
    let ctx = path.display();
    assert_eq!(got["ir_version"], expected["ir_version"], "{ctx}");
    assert_eq!(got["producer_name"], expected["producer_name"], "{ctx}");
    assert_eq!(
        got["producer_version"], expected["producer_version"],
        "{ctx}"
    );
    assert_eq!(got["opsets"], expected["opset_import"], "{ctx}");
    assert_eq!(got["graph"]["nodes"], expected["node_count"], "{ctx}");
    assert_eq!(got["graph"]["op_counts"], expected["op_counts"], "{ctx}");
    assert_eq!(
        got["graph"]["initializers"], expected["initializer_count"],
        "{ctx}"
    );
    assert_eq!(
        got["functions"].as_array().unwrap().len() as u64,
        expected["local_function_count"].as_u64().unwrap(),
        "{ctx}"
    );
    assert_eq!(
        got["subgraphs"].as_array().unwrap().len() as u64,
        expected["subgraph_count"].as_u64().unwrap(),
        "{ctx}"
    );
    for side in ["inputs", "outputs"] {
        let g = got["graph"][side].as_array().unwrap();
        let e = expected[side].as_array().unwrap();
        assert_eq!(g.len(), e.len(), "{ctx} {side}");
        for (g, e) in g.iter().zip(e) {
            assert_eq!(g["name"], e["name"], "{ctx}");
            assert_eq!(g["elem_type"], e["elem_type"], "{ctx} {}", e["name"]);
            assert_eq!(g["shape"], e["shape"], "{ctx} {}", e["name"]);
        }
    }
}

#[test]
fn info_agrees_with_the_onnx_package_on_conformance_cases() {
    let dir = root().join("tests/fixtures/conformance");
    let manifest = json(&dir.join("manifest.json"));
    let cases = manifest["cases"].as_array().unwrap();
    assert!(cases.len() > 80);
    for case in cases {
        let path = dir.join(case["dir"].as_str().unwrap()).join("model.onnx");
        check_info(&path, &case["info"]);
    }
}

#[test]
fn info_agrees_with_the_onnx_package_on_torch_exports() {
    let dir = root().join("tests/fixtures/torch");
    let manifest = json(&dir.join("manifest.json"));
    let mut n = 0;
    for m in manifest["models"].as_array().unwrap() {
        if m.get("skipped").is_some_and(|s| !s.is_null()) {
            continue;
        }
        let path = dir.join(m["id"].as_str().unwrap()).join("model.onnx");
        check_info(&path, &m["info"]);
        n += 1;
    }
    assert!(n >= 15);
}

/// Source: the standard's schema as the onnx package's protobuf descriptors
/// (tests/fixtures/onnx-schema.json, from scripts/dump_onnx_schema.py). Every message, field
/// number, label, type and packing of our proto must match. Our file declares oneof members as
/// plain optional fields (identical on the wire), so oneof membership is not compared.
#[test]
fn our_schema_matches_the_standard() {
    let fds = protox::compile(["onnx.proto"], [root().join("proto")]).unwrap();
    let mut ours: BTreeMap<String, &prost_types::DescriptorProto> = BTreeMap::new();
    fn collect<'a>(
        prefix: &str,
        msgs: &'a [prost_types::DescriptorProto],
        out: &mut BTreeMap<String, &'a prost_types::DescriptorProto>,
    ) {
        for m in msgs {
            let name = format!("{prefix}.{}", m.name());
            collect(&name, &m.nested_type, out);
            out.insert(name, m);
        }
    }
    let file = &fds.file[0];
    collect("onnx", &file.message_type, &mut ours);
    let schema = json(&root().join("tests/fixtures/onnx-schema.json"));
    for m in schema["messages"].as_array().unwrap() {
        let full = m["full_name"].as_str().unwrap();
        let ours = ours
            .get(full)
            .unwrap_or_else(|| panic!("missing message {full}"));
        let fields = m["fields"].as_array().unwrap();
        assert_eq!(ours.field.len(), fields.len(), "{full}: field count");
        for f in fields {
            let name = f["name"].as_str().unwrap();
            let o = ours
                .field
                .iter()
                .find(|o| o.name() == name)
                .unwrap_or_else(|| panic!("{full}.{name} missing"));
            assert_eq!(
                o.number() as u64,
                f["number"].as_u64().unwrap(),
                "{full}.{name}"
            );
            let label = if o.label() == prost_types::field_descriptor_proto::Label::Repeated {
                "repeated"
            } else {
                "optional"
            };
            assert_eq!(label, f["label"], "{full}.{name}");
            let ty = o
                .r#type()
                .as_str_name()
                .trim_start_matches("TYPE_")
                .to_lowercase();
            assert_eq!(ty, f["type"].as_str().unwrap(), "{full}.{name}");
            if let Some(tn) = f["type_name"].as_str() {
                assert_eq!(o.type_name().trim_start_matches('.'), tn, "{full}.{name}");
            }
            let packed = o.options.as_ref().and_then(|x| x.packed).unwrap_or(false);
            assert_eq!(
                packed,
                f["packed"].as_bool().unwrap(),
                "{full}.{name} packed"
            );
        }
    }
    let mut enums: BTreeMap<String, &prost_types::EnumDescriptorProto> = BTreeMap::new();
    for e in &file.enum_type {
        enums.insert(format!("onnx.{}", e.name()), e);
    }
    for (name, m) in &ours {
        for e in &m.enum_type {
            enums.insert(format!("{name}.{}", e.name()), e);
        }
    }
    for e in schema["enums"].as_array().unwrap() {
        let full = e["full_name"].as_str().unwrap();
        let ours = enums
            .get(full)
            .unwrap_or_else(|| panic!("missing enum {full}"));
        for v in e["values"].as_array().unwrap() {
            let o = ours
                .value
                .iter()
                .find(|o| o.name() == v["name"].as_str().unwrap())
                .unwrap_or_else(|| panic!("{full}.{} missing", v["name"]));
            assert_eq!(
                o.number() as i64,
                v["number"].as_i64().unwrap(),
                "{full}.{}",
                v["name"]
            );
        }
    }
}

/// Bad input corpus (tests/corpus/bad, scripts/gen_bad_corpus.py): one clear line on stderr,
/// exit code 2, never a panic.
#[test]
fn bad_inputs_give_one_line_errors_and_exit_2() {
    let dir = root().join("tests/corpus/bad");
    let manifest = json(&dir.join("manifest.json"));
    for f in manifest["files"].as_array().unwrap() {
        let file = f["file"].as_str().unwrap();
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_actswap"))
            .args(["info"])
            .arg(dir.join(file))
            .output()
            .unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{file}: {stderr}");
        assert_eq!(stderr.trim_end().lines().count(), 1, "{file}: {stderr}");
        assert!(
            !stderr.contains("panicked") && !stderr.contains("internal error"),
            "{file}: {stderr}"
        );
        let want = f["expect_error"].as_str().unwrap();
        assert!(
            stderr.contains(want),
            "{file}: expected '{want}' in: {stderr}"
        );
    }
}

#[test]
fn a_symlink_out_of_the_model_folder_is_refused() {
    let outside = tempfile::tempdir().unwrap();
    let inside = tempfile::tempdir().unwrap();
    std::fs::copy(
        root().join("tests/corpus/good-external/weights.bin"),
        outside.path().join("weights.bin"),
    )
    .unwrap();
    std::fs::copy(
        root().join("tests/corpus/good-external/model.onnx"),
        inside.path().join("model.onnx"),
    )
    .unwrap();
    std::os::unix::fs::symlink(
        outside.path().join("weights.bin"),
        inside.path().join("weights.bin"),
    )
    .unwrap();
    let model = Model::load(&inside.path().join("model.onnx")).unwrap();
    let err = ModelIndex::build(&model).unwrap_err();
    assert!(format!("{err:#}").contains("escapes"), "{err:#}");
}

mod mutation {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #![proptest_config(ProptestConfig { cases: 400, ..ProptestConfig::default() })]
        /// Random byte mutations of a valid model never panic the loader, index or summary.
        #[test]
        fn mutated_models_never_panic(edits in proptest::collection::vec((any::<prop::sample::Index>(), any::<u8>()), 1..8),
                                       cut in any::<prop::sample::Index>(), truncate in any::<bool>()) {
            let src = root().join("tests/fixtures/torch/door-chime-ts-op13/model.onnx");
            let mut bytes = std::fs::read(src).unwrap();
            for (at, b) in edits {
                let i = at.index(bytes.len());
                bytes[i] = b;
            }
            if truncate {
                bytes.truncate(cut.index(bytes.len()));
            }
            let r = std::panic::catch_unwind(|| {
                if let Ok(m) = Model::from_bytes(bytes.into(), PathBuf::from("m.onnx"), root())
                    && let Ok(i) = ModelIndex::build(&m)
                {
                    let _ = Summary::of(&i).map(|s| s.render());
                }
            });
            prop_assert!(r.is_ok());
        }
    }
}
