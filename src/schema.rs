//! The JSON Schema (draft 2020-12) of chain files, generated from the same serde types
//! that read them (`spec.rs`, each stage kind's `…Spec`), so it cannot drift from the
//! reader: `ampchain schema` prints it. The types with a reader of their own (a value,
//! a map of named entries) describe themselves here. The schema checks the file's
//! shape (keys, types, which kinds exist); what the values mean (units, ranges, the
//! graph) is checked when the chain is read.

use crate::spec::{ChainSpec, NamedMap, ValueSpec};
use schemars::{json_schema, JsonSchema, Schema, SchemaGenerator};
use std::borrow::Cow;

/// The chain file's schema as JSON.
pub fn chain_schema() -> serde_json::Value {
    let mut schema = schemars::schema_for!(ChainSpec);
    schema.insert(
        "title".into(),
        "ampchain chain file (version 1 and 2)".into(),
    );
    // The rails: `supply` (one rail) or `supplies` (named rails), at least one.
    schema.insert(
        "anyOf".into(),
        serde_json::json!([{ "required": ["supply"] }, { "required": ["supplies"] }]),
    );
    schema.to_value()
}

impl JsonSchema for ValueSpec {
    fn schema_name() -> Cow<'static, str> {
        "Value".into()
    }

    /// A number in SI base units, a string with prefix and unit ("4k7", "100 nF",
    /// "-32 dBu"), or an object giving its spread: `value` with `tolerance`, or
    /// `typical` with `min` and `max`, each with an optional `distribution`.
    fn json_schema(_: &mut SchemaGenerator) -> Schema {
        let plain = json_schema!({ "type": ["number", "string"] });
        json_schema!({
            "description": "A number in SI base units, a string with prefix and unit (\"4k7\", \"100 nF\", \"-32 dBu\"), or an object with its spread: value and tolerance, or typical with min and max",
            "oneOf": [
                { "type": "number" },
                { "type": "string" },
                {
                    "type": "object",
                    "properties": {
                        "value": plain,
                        "tolerance": plain,
                        "typical": plain,
                        "min": plain,
                        "max": plain,
                        "distribution": { "enum": ["uniform", "normal"] }
                    },
                    "additionalProperties": false,
                    "oneOf": [
                        {
                            "required": ["value", "tolerance"],
                            "not": { "anyOf": [
                                { "required": ["typical"] },
                                { "required": ["min"] },
                                { "required": ["max"] }
                            ] }
                        },
                        {
                            "required": ["typical", "min", "max"],
                            "not": { "anyOf": [
                                { "required": ["value"] },
                                { "required": ["tolerance"] }
                            ] }
                        }
                    ]
                }
            ]
        })
    }
}

impl<T: JsonSchema> JsonSchema for NamedMap<T> {
    fn inline_schema() -> bool {
        true
    }

    fn schema_name() -> Cow<'static, str> {
        format!("NamedMap_{}", T::schema_name()).into()
    }

    /// An object of named entries (each name once).
    fn json_schema(generator: &mut SchemaGenerator) -> Schema {
        let entry = generator.subschema_for::<T>();
        json_schema!({
            "type": "object",
            "additionalProperties": entry
        })
    }
}
