//! Serialized ONNX `TensorProto` files (`.pb`) as tensors, decoded with tract's own loader.

use std::path::Path;

use prost::Message;
use tract_onnx::pb::TensorProto;
use tract_onnx::pb::tensor_proto::DataType;

use super::super::guard::guarded;
use super::super::signature::datum_type;
use super::super::{NamedTensor, RunError};

/// Reads a `TensorProto`, keeping its `name` (may be empty). External data is resolved against
/// the file's folder.
pub(super) fn read_pb(path: &Path, max_elements: usize) -> Result<NamedTensor, RunError> {
    let fail = |m: &dyn std::fmt::Display| RunError::file(path, m);
    check_file_size(path, max_elements)?;
    let bytes = std::fs::read(path).map_err(|e| fail(&e))?;
    let proto = TensorProto::decode(bytes.as_slice())
        .map_err(|e| fail(&format!("not a TensorProto: {e}")))?;
    datum_type(proto.data_type).map_err(|e| fail(&e))?;
    if proto.data_type == DataType::String as i32 {
        return Err(fail(&"string tensors are not supported as inputs"));
    }
    if proto.dims.iter().any(|&d| d < 0) {
        return Err(fail(&format!("negative dimension in {:?}", proto.dims)));
    }
    let elements: u128 = proto.dims.iter().map(|&d| d as u128).product();
    if elements > max_elements as u128 {
        return Err(RunError::OverLimit {
            name: path.display().to_string(),
            elements,
            limit: max_elements,
        });
    }
    let dir = path.parent().and_then(Path::to_str);
    let resolver = tract_onnx::data_resolver::MmapDataResolver;
    let tensor = guarded("decode a tensor", || {
        tract_onnx::tensor::load_tensor(&resolver, &proto, dir)
    })
    .map_err(|e| fail(&e))?;
    Ok(NamedTensor::new(proto.name, tensor))
}

/// Refuses a file too large to hold at most `max_elements` elements of 8 bytes (plus 64 KiB for
/// headers and names), before reading it.
pub(super) fn check_file_size(path: &Path, max_elements: usize) -> Result<(), RunError> {
    let size = std::fs::metadata(path)
        .map_err(|e| RunError::file(path, e))?
        .len() as u128;
    let allowed = max_elements as u128 * 8 + (64 << 10);
    if size > allowed {
        return Err(RunError::file(
            path,
            format!("{size} bytes is more than {max_elements} elements can take ({allowed} bytes)"),
        ));
    }
    Ok(())
}
