//! Compiles proto/onnx.proto with protox (a pure-Rust protobuf compiler, so no system protoc) and
//! prost-build. Every `bytes` field becomes `bytes::Bytes`, so decoding a memory-mapped model
//! shares its initializer data instead of copying it.

fn main() -> Result<(), Box<dyn std::error::Error>> {
    println!("cargo:rerun-if-changed=proto/onnx.proto");
    let descriptors = protox::compile(["proto/onnx.proto"], ["proto"])?;
    prost_build::Config::new()
        .bytes(["."])
        .compile_fds(descriptors)?;
    Ok(())
}
