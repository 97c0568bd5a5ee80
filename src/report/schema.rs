//! The report's JSON Schema, generated from the report types (schemars).
//!
//! The types in `report.rs` and the types they embed derive `JsonSchema`
//! beside `Serialize`; their doc comments become the descriptions. The
//! functions here give the shape of the fields whose Rust type says less
//! than what is written (a `&'static str` that takes a few names, a map
//! keyed by calibration source) and the rules that tie fields together.
//! schema/report.schema.json is this schema, written by `tests/schema.rs`
//! with `ARMSPACE_BLESS=1`; the same test fails when the committed file
//! differs from it.

use crate::calibrate::CalibrationSource;
use crate::methods::intercept::Convention;
use crate::methods::Method;
use schemars::generate::SchemaSettings;
use schemars::{json_schema, Schema, SchemaGenerator};
use serde_json::Value;

/// The schema's `$id`.
pub const ID: &str = "https://armspace.invalid/schema/report/1";

/// The JSON Schema (draft 2020-12) of the report, as it is serialised: a
/// field is required unless the report may leave it out, and a field that
/// is written as null when it has no value allows null.
pub fn json_schema() -> Value {
    let generator = SchemaSettings::draft2020_12()
        .for_serialize()
        .into_generator();
    let mut schema = generator.into_root_schema_for::<super::Report>().to_value();
    tidy(&mut schema);
    schema
}

/// Two touches on what schemars writes: doc comments are wrapped at 80
/// columns, and a description reads better as one line per paragraph; the
/// widths of Rust numbers (`"format": "uint8"`, `"double"`, ...) are not
/// formats JSON Schema defines, and strict validators refuse a schema with
/// unknown formats (the bounds of the integers stay as minimum and maximum).
fn tidy(v: &mut Value) {
    match v {
        Value::Object(map) => {
            map.retain(|key, value| !(key == "format" && value.is_string()));
            for (key, value) in map.iter_mut() {
                match value {
                    Value::String(text) if key == "description" => {
                        *text = text
                            .split("\n\n")
                            .map(|paragraph| paragraph.split('\n').collect::<Vec<_>>().join(" "))
                            .collect::<Vec<_>>()
                            .join("\n\n");
                    }
                    _ => tidy(value),
                }
            }
        }
        Value::Array(items) => items.iter_mut().for_each(tidy),
        _ => {}
    }
}

/// A method's name, as `Method::name` writes it.
pub(crate) fn method_name(_: &mut SchemaGenerator) -> Schema {
    let names: Vec<&str> = Method::ALL.iter().map(|m| m.name()).collect();
    json_schema!({ "type": "string", "enum": names })
}

/// A list of method names.
pub(crate) fn method_names(generator: &mut SchemaGenerator) -> Schema {
    json_schema!({ "type": "array", "items": method_name(generator) })
}

/// The intercept method's counting convention, as `convention_name` writes it.
pub(crate) fn convention(_: &mut SchemaGenerator) -> Schema {
    let names =
        [Convention::CentreToCentre, Convention::LengthOverCount].map(super::convention_name);
    json_schema!({ "type": "string", "enum": names })
}

/// wt% by element symbol, as `interpret::parse_composition` accepts it.
pub(crate) fn composition(_: &mut SchemaGenerator) -> Schema {
    json_schema!({
        "type": "object",
        "propertyNames": { "pattern": "^[A-Z][a-z]?$" },
        "additionalProperties": { "type": "number", "minimum": 0, "maximum": 100 }
    })
}

/// um per px by the name of the source that offered it.
pub(crate) fn calibration_sources(generator: &mut SchemaGenerator) -> Schema {
    json_schema!({
        "type": "object",
        "propertyNames": generator.subschema_for::<CalibrationSource>(),
        "additionalProperties": { "type": "number", "exclusiveMinimum": 0 }
    })
}

fn push_rule(schema: &mut Schema, rule: Value) {
    let all_of = schema
        .ensure_object()
        .entry("allOf")
        .or_insert_with(|| Value::Array(Vec::new()));
    if let Value::Array(rules) = all_of {
        rules.push(rule);
    }
}

/// An image that could not be read has no SDAS value.
pub(crate) fn error_means_no_value(schema: &mut Schema) {
    push_rule(
        schema,
        serde_json::json!({
            "if": { "properties": { "error": { "type": "string" } }, "required": ["error"] },
            "then": { "properties": { "sdas_um": { "properties": { "value": { "type": "null" } } } } }
        }),
    );
}

/// A method without a value says why.
pub(crate) fn no_value_has_a_reason(schema: &mut Schema) {
    push_rule(
        schema,
        serde_json::json!({
            "if": { "properties": { "value": { "type": "null" } }, "required": ["value"] },
            "then": { "properties": { "reason": { "type": "string" } } }
        }),
    );
}
