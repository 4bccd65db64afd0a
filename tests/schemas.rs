//! The JSON Schemas committed under `schemas/` are the ones `actswap schema NAME` prints, one
//! file per name and no other file, so they never go stale. Whether real outputs conform to
//! them is checked against the `jsonschema` reference validator in scripts/check_schemas.py.

mod cli_support;

use cli_support::{actswap, repo};

use actswap::report::schemas::SCHEMAS;

const REGENERATE: &str = "regenerate them with `ACTSWAP_WRITE_SCHEMAS=1 cargo test --test schemas`";

/// What `actswap schema NAME` prints.
fn printed(name: &str) -> String {
    let out = actswap(&["schema", name]);
    assert_eq!(out.status.code(), Some(0), "actswap schema {name}");
    String::from_utf8(out.stdout).unwrap()
}

#[test]
fn committed_schemas_are_what_the_command_prints() {
    let write = std::env::var_os("ACTSWAP_WRITE_SCHEMAS").is_some();
    let mut stale = Vec::new();
    for (name, _) in SCHEMAS {
        let file = repo(&format!("schemas/{name}.schema.json"));
        let text = printed(name);
        if write {
            std::fs::write(&file, &text).unwrap();
        } else if std::fs::read_to_string(&file).ok().as_deref() != Some(text.as_str()) {
            stale.push(format!("schemas/{name}.schema.json"));
        }
    }
    assert!(
        stale.is_empty(),
        "{} differ from `actswap schema NAME`: {REGENERATE}",
        stale.join(", ")
    );
}

#[test]
fn schemas_holds_one_file_per_name_and_nothing_else() {
    let mut files: Vec<String> = std::fs::read_dir(repo("schemas"))
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    files.sort();
    let mut expected: Vec<String> = SCHEMAS
        .iter()
        .map(|(n, _)| format!("{n}.schema.json"))
        .collect();
    expected.sort();
    assert_eq!(files, expected, "{REGENERATE}, and remove the others");
}

#[test]
fn each_output_schema_pins_the_schema_version() {
    for (name, _) in SCHEMAS.iter().filter(|(n, _)| *n != "profile") {
        let schema: serde_json::Value = serde_json::from_str(&printed(name)).unwrap();
        let versions: Vec<&serde_json::Value> = match schema.get("anyOf") {
            Some(branches) => branches
                .as_array()
                .unwrap()
                .iter()
                .map(|b| &b["properties"]["schema_version"]["const"])
                .collect(),
            None => vec![&schema["properties"]["schema_version"]["const"]],
        };
        for v in versions {
            assert_eq!(
                v.as_u64(),
                Some(actswap::schema_version::SCHEMA_VERSION.into()),
                "{name}"
            );
        }
    }
}

#[test]
fn the_list_names_every_schema_and_an_unknown_name_is_an_error() {
    let list = String::from_utf8(actswap(&["schema"]).stdout).unwrap();
    for (name, _) in SCHEMAS {
        assert!(
            list.lines().any(|l| l.starts_with(name)),
            "{name} in {list}"
        );
    }
    let out = actswap(&["schema", "nonesuch"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&out.stderr).contains("unknown schema 'nonesuch'"));
}
