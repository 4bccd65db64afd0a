//! The JSON Schema of every JSON document actswap prints, and of the target profile TOML,
//! generated from the Rust types (`actswap schema NAME`; committed under `schemas/`).

use schemars::generate::SchemaSettings;
use schemars::transform::transform_subschemas;
use schemars::{JsonSchema, Schema};
use serde_json::{Map, Value};

use super::json::{AuditJson, CatalogJson, DriftJson, SwapJson};
use crate::audit::BatchReport;
use crate::onnx::summary::Summary;
use crate::plan::profile::Profile;
use crate::scan::ScanReport;

/// Every schema: its name and what it describes.
pub const SCHEMAS: [(&str, &str); 8] = [
    ("scan", "actswap scan --json"),
    ("swap", "actswap swap --json"),
    ("audit", "actswap audit --json"),
    ("drift", "actswap drift --json"),
    ("batch", "actswap batch --json"),
    ("info", "actswap info --json"),
    ("catalog", "actswap catalog --json"),
    (
        "profile",
        "a target profile (TOML), as `--target FILE` reads it",
    ),
];

/// The schema called `name` (one of [`SCHEMAS`]).
pub fn schema(name: &str) -> Option<Value> {
    let schema = match name {
        "scan" => printed::<ScanReport>(),
        "swap" => printed::<SwapJson>(),
        "audit" => printed::<AuditJson>(),
        "drift" => printed::<DriftJson>(),
        "batch" => printed::<BatchReport>(),
        "info" => printed::<Summary>(),
        "catalog" => printed::<CatalogJson>(),
        "profile" => SchemaSettings::draft2020_12()
            .for_deserialize()
            .into_generator()
            .into_root_schema_for::<Profile>(),
        _ => return None,
    };
    let (_, about) = SCHEMAS.iter().find(|(n, _)| *n == name)?;
    // The header first: the meta-schema, the type's name, what it describes.
    let mut document = Map::new();
    let mut body = schema.to_value().as_object().cloned().unwrap_or_default();
    for key in ["$schema", "title"] {
        if let Some(v) = body.remove(key) {
            document.insert(key.into(), v);
        }
    }
    body.remove("description");
    document.insert("description".into(), Value::from(*about));
    document.extend(body);
    Some(Value::Object(document))
}

/// The schema of a document as printed. serde_json writes a number that is not finite (a NaN
/// figure, a ratio over a zero time) as `null`, so every float may be `null`.
fn printed<T: JsonSchema>() -> Schema {
    SchemaSettings::draft2020_12()
        .for_serialize()
        .with_transform(nullable_floats)
        .into_generator()
        .into_root_schema_for::<T>()
}

/// Lets every `"type": "number"` (here and below) also be `null`.
fn nullable_floats(schema: &mut Schema) {
    transform_subschemas(&mut nullable_floats, schema);
    if schema.get("type") == Some(&Value::from("number")) {
        schema.insert("type".into(), serde_json::json!(["number", "null"]));
    }
}
