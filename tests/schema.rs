//! `ampchain schema` against a general-purpose JSON-Schema validator (the `jsonschema`
//! crate, draft 2020-12): every demo chain and test fixture is valid, and each file of
//! `tests/malformed` whose fault is its shape (an unknown key or stage type, a missing
//! key, a value of the wrong JSON type) is invalid, while files whose fault is a value's
//! meaning (a unit, a range, the graph) pass the schema and are refused when read.

mod common;

use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Command;

fn schema() -> Value {
    let out = Command::new(env!("CARGO_BIN_EXE_ampchain"))
        .arg("schema")
        .output()
        .unwrap();
    assert!(out.status.success());
    serde_json::from_slice(&out.stdout).expect("the schema is JSON")
}

fn json_files(dir: &str) -> Vec<PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join(dir);
    let mut files: Vec<PathBuf> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|x| x == "json"))
        .collect();
    files.sort();
    files
}

/// The file as JSON, or `None` when it is not JSON at all.
fn read(path: &Path) -> Option<Value> {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).ok()
}

#[test]
fn the_schema_is_draft_2020_12_and_every_valid_chain_passes() {
    let schema = schema();
    assert_eq!(
        schema["$schema"],
        "https://json-schema.org/draft/2020-12/schema"
    );
    let validator = jsonschema::draft202012::new(&schema).expect("a valid schema");
    let mut checked = 0;
    for dir in ["chains", "tests/fixtures"] {
        for path in json_files(dir) {
            let chain = read(&path).unwrap_or_else(|| panic!("{} is JSON", path.display()));
            let errors: Vec<String> = validator
                .iter_errors(&chain)
                .map(|e| format!("{} at {}", e, e.instance_path))
                .collect();
            assert!(errors.is_empty(), "{}: {errors:?}", path.display());
            checked += 1;
        }
    }
    assert!(checked >= 15, "{checked} files");
}

/// A change to a chain file's JSON.
type Edit = fn(&mut Value);

#[test]
fn shape_errors_fail_the_schema_and_value_errors_pass_it() {
    let validator = jsonschema::draft202012::new(&schema()).expect("a valid schema");
    // The malformed files whose fault is their shape; every other one that is JSON is
    // faulty only in what a value means.
    const SHAPE: &[&str] = &[
        "03-unknown-top-level-key.json",
        "17-unknown-polarity.json",
        "04-unknown-stage-key.json",
        "05-unknown-stage-type.json",
        "36-stage-value-an-array.json",
        "37-stage-id-a-number.json",
        "38-unknown-key-in-stage-tolerance.json",
        "39-stage-type-a-number.json",
        "40-stage-a-string.json",
        "41-chain-an-array.json",
        "43-load-an-array.json",
        "44-stage-entry-an-array.json",
        "45-distribution-an-object.json",
    ];
    let mut seen = 0;
    for path in json_files("tests/malformed") {
        let name = path.file_name().unwrap().to_str().unwrap();
        let Some(chain) = read(&path) else {
            continue; // not JSON at all: no schema applies
        };
        let valid = validator.is_valid(&chain);
        if SHAPE.contains(&name) {
            assert!(!valid, "{name} passes the schema");
            seen += 1;
        } else {
            assert!(
                valid,
                "{name} fails the schema: {:?}",
                validator
                    .iter_errors(&chain)
                    .map(|e| e.to_string())
                    .collect::<Vec<_>>()
            );
        }
    }
    assert_eq!(seen, SHAPE.len());
    // Shape errors made here: a missing required key, a wrong JSON type, an unknown
    // stage key, a spread object with neither form or with both, a polarity or a
    // version the reader does not know, no rails at all.
    let base =
        read(&Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json")).unwrap();
    let broken: [(&str, Edit); 8] = [
        ("no links", |c| {
            c.as_object_mut().unwrap().remove("links");
        }),
        ("stages not a list", |c| c["stages"] = Value::from("buffer")),
        ("unknown stage key", |c| {
            c["stages"][0]["r_colector"] = Value::from("4k7")
        }),
        ("spread without tolerance", |c| {
            c["stages"][0]["r_top"] = serde_json::json!({ "value": "100k" })
        }),
        (
            "spread with both forms",
            |c| {
                c["stages"][0]["r_top"] =
                    serde_json::json!({ "value": "220k", "tolerance": "1%", "min": "200k" })
            },
        ),
        ("unknown polarity", |c| {
            let name = common::first_device(c);
            c["devices"][name]["polarity"] = Value::from("nmos")
        }),
        ("unknown version", |c| c["version"] = Value::from(3)),
        ("no rails", |c| {
            c.as_object_mut().unwrap().remove("supply");
        }),
    ];
    for (what, edit) in broken {
        let mut chain = base.clone();
        edit(&mut chain);
        assert!(!validator.is_valid(&chain), "{what} passes the schema");
    }
}

#[test]
fn a_schema_key_is_ignored_when_read() {
    // Editors find the schema through "$schema"; ampchain reads the chain as without it.
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/boost-pedal.json");
    let mut chain = read(&path).unwrap();
    chain["$schema"] = Value::from("./ampchain.schema.json");
    let with = ampchain::Chain::from_json_str(&chain.to_string()).expect("reads");
    let without = ampchain::Chain::from_json_str(&read(&path).unwrap().to_string()).unwrap();
    let (a, b) = (with.evaluate().unwrap(), without.evaluate().unwrap());
    assert_eq!(a.dc[0].op, b.dc[0].op);
}
