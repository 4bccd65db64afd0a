//! The version every JSON document actswap prints carries at top level as `schema_version`.
//! It is bumped on a breaking change (a field removed, renamed or given another meaning or
//! type); new fields leave it as it is.

use std::borrow::Cow;

use schemars::{JsonSchema, Schema, SchemaGenerator, json_schema};
use serde::{Serialize, Serializer};

/// The version of the JSON documents this build prints (the schemas under `schemas/`).
pub const SCHEMA_VERSION: u32 = 1;

/// A `schema_version` field: always [`SCHEMA_VERSION`].
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct SchemaVersion;

impl Serialize for SchemaVersion {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_u32(SCHEMA_VERSION)
    }
}

impl JsonSchema for SchemaVersion {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        "SchemaVersion".into()
    }

    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        json_schema!({
            "description": "The version of this document's schema, bumped on a breaking change.",
            "type": "integer",
            "const": SCHEMA_VERSION,
        })
    }
}
