//! The committed OpenAPI document (`openapi/kinema.json`) is the one the code
//! generates. After an API change, regenerate it with
//! `cargo run -p kinema-server -- openapi > openapi/kinema.json`
//! (or run this test with `KINEMA_UPDATE_OPENAPI=1`).

use std::path::PathBuf;

fn committed() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../openapi/kinema.json")
}

#[test]
fn committed_openapi_matches_the_code() {
    let generated = kinema_server::api::openapi_json();
    let path = committed();
    if std::env::var_os("KINEMA_UPDATE_OPENAPI").is_some() {
        std::fs::write(&path, &generated).expect("write openapi/kinema.json");
    }
    let on_disk = std::fs::read_to_string(&path).unwrap_or_default();
    if on_disk != generated {
        let first = on_disk
            .lines()
            .zip(generated.lines())
            .position(|(a, b)| a != b)
            .unwrap_or_else(|| on_disk.lines().count().min(generated.lines().count()));
        panic!(
            "openapi/kinema.json differs from the code's document from line {} on.\n\
             Regenerate it: cargo run -p kinema-server -- openapi > openapi/kinema.json",
            first + 1
        );
    }
}

#[test]
fn every_schema_property_has_a_description() {
    let doc: serde_json::Value =
        serde_json::from_str(&kinema_server::api::openapi_json()).expect("JSON");
    let mut missing = Vec::new();
    if let Some(schemas) = doc
        .pointer("/components/schemas")
        .and_then(|s| s.as_object())
    {
        for (name, schema) in schemas {
            walk(name, schema, &mut missing);
        }
    }
    assert!(
        missing.is_empty(),
        "properties without a description: {missing:#?}"
    );
}

/// Collect `schema.property` paths whose property has neither a description nor a
/// `$ref` (a reference carries the description of its own schema).
fn walk(at: &str, schema: &serde_json::Value, missing: &mut Vec<String>) {
    if let Some(props) = schema.get("properties").and_then(|p| p.as_object()) {
        for (k, v) in props {
            // A serde tag (`"kind": {"enum": ["local"]}`) is described by its variant.
            let is_tag = v
                .get("enum")
                .and_then(|e| e.as_array())
                .is_some_and(|e| e.len() == 1);
            let described = is_tag
                || v.get("description").is_some()
                || v.get("$ref").is_some()
                || v.get("allOf")
                    .is_some_and(|a| a.to_string().contains("$ref"))
                || v.get("oneOf")
                    .is_some_and(|a| a.to_string().contains("$ref"));
            if !described {
                missing.push(format!("{at}.{k}"));
            }
            walk(&format!("{at}.{k}"), v, missing);
        }
    }
    for key in ["oneOf", "anyOf", "allOf"] {
        if let Some(list) = schema.get(key).and_then(|l| l.as_array()) {
            for (i, s) in list.iter().enumerate() {
                walk(&format!("{at}[{i}]"), s, missing);
            }
        }
    }
    if let Some(items) = schema.get("items") {
        walk(&format!("{at}[]"), items, missing);
    }
}
