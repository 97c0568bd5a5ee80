//! The report's JSON Schema: generated from the report types
//! (`armspace::report::json_schema`), committed as
//! schema/report.schema.json, and strict enough to catch a report that
//! breaks the contract.
//!
//! After a change to the report types, rewrite the committed file with
//! `ARMSPACE_BLESS=1 cargo test --release --test schema` and commit it with
//! the change (the contract only grows: add fields, never remove or retype
//! one).

mod common;
use common::*;
use serde_json::{json, Value};

const SCHEMA_FILE: &str = "schema/report.schema.json";

fn committed() -> Value {
    let text = std::fs::read_to_string(repo_file(SCHEMA_FILE)).expect("the schema file is there");
    serde_json::from_str(&text).expect("the schema file is JSON")
}

/// JSON pointers where `a` and `b` differ (at most `limit`).
fn differences(a: &Value, b: &Value, at: &str, out: &mut Vec<String>, limit: usize) {
    if out.len() >= limit {
        return;
    }
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            for (k, v) in x {
                let here = format!("{at}/{k}");
                match y.get(k) {
                    Some(w) => differences(v, w, &here, out, limit),
                    None => out.push(format!("{here}: only in the committed file")),
                }
            }
            for k in y.keys().filter(|k| !x.contains_key(*k)) {
                out.push(format!("{at}/{k}: only in the generated schema"));
            }
        }
        (Value::Array(x), Value::Array(y)) if x.len() == y.len() => {
            for (i, (v, w)) in x.iter().zip(y).enumerate() {
                differences(v, w, &format!("{at}/{i}"), out, limit);
            }
        }
        _ if a != b => out.push(format!("{at}: {a} in the committed file, {b} generated")),
        _ => {}
    }
}

#[test]
fn the_committed_schema_is_the_one_generated_from_the_report_types() {
    let generated = armspace::report::json_schema();
    if std::env::var("ARMSPACE_BLESS").as_deref() == Ok("1") {
        let mut text = serde_json::to_string_pretty(&generated).unwrap();
        text.push('\n');
        std::fs::write(repo_file(SCHEMA_FILE), text).expect("the schema file is written");
        return;
    }
    let file = committed();
    let mut diffs = Vec::new();
    differences(&file, &generated, "", &mut diffs, 20);
    assert!(
        diffs.is_empty(),
        "{SCHEMA_FILE} is not the schema generated from the report types.\n\
         If the change to the report types is meant, rewrite the file with\n  \
         ARMSPACE_BLESS=1 cargo test --release --test schema\n\
         and commit it with the change (add fields; never remove or retype one).\n\
         First differences (JSON pointers):\n  {}",
        diffs.join("\n  ")
    );
}

fn def<'a>(schema: &'a Value, name: &str) -> &'a Value {
    schema
        .pointer(&format!("/$defs/{name}"))
        .unwrap_or_else(|| panic!("no $defs/{name} in the schema"))
}

fn required(object: &Value) -> Vec<&str> {
    object["required"]
        .as_array()
        .map(|r| r.iter().filter_map(Value::as_str).collect())
        .unwrap_or_default()
}

/// Every object schema in the document with its location and, for each
/// property that is not required, its name.
fn optional_properties(v: &Value, at: &str, out: &mut Vec<String>) {
    match v {
        Value::Object(map) => {
            if let Some(Value::Object(props)) = map.get("properties") {
                let req = required(v);
                for k in props.keys().filter(|k| !req.contains(&k.as_str())) {
                    out.push(format!("{at}/properties/{k}"));
                }
            }
            for (k, sub) in map {
                optional_properties(sub, &format!("{at}/{k}"), out);
            }
        }
        Value::Array(items) => {
            for (i, sub) in items.iter().enumerate() {
                optional_properties(sub, &format!("{at}/{i}"), out);
            }
        }
        _ => {}
    }
}

#[test]
fn the_schema_keeps_the_contracts_constraints() {
    let schema = armspace::report::json_schema();
    assert_eq!(
        schema["$schema"],
        "https://json-schema.org/draft/2020-12/schema"
    );
    assert_eq!(schema["$id"], "https://armspace.invalid/schema/report/1");
    assert_eq!(schema["title"], "armspace report, schema armspace.report/1");
    assert_eq!(
        schema["properties"]["schema"]["const"],
        armspace::report::SCHEMA
    );
    assert_eq!(schema["properties"]["tool"]["$ref"], "#/$defs/Tool");
    assert_eq!(
        def(&schema, "Tool")["properties"]["name"]["const"],
        "armspace"
    );

    // Objects the report never adds to within version 1 are closed.
    for name in [
        "acceptance",
        "interpretation",
        "quantity",
        "Comparison",
        "NotApplicable",
        "Range",
    ] {
        assert_eq!(
            def(&schema, name)["additionalProperties"],
            false,
            "$defs/{name} is closed"
        );
    }

    // A field is required unless the report may leave it out: exactly these
    // may be absent (the others are written, as null when there is nothing).
    let mut optional = Vec::new();
    optional_properties(&schema, "", &mut optional);
    optional.retain(|p| !p.contains("/allOf/"));
    optional.sort();
    let mut expected = vec![
        "/$defs/CalibrationReport/properties/bar",
        "/$defs/MethodsReport/properties/centres",
        "/$defs/MethodsReport/properties/fft",
        "/$defs/MethodsReport/properties/intercept",
        "/$defs/Parameters/properties/along",
        "/$defs/Parameters/properties/at",
        "/$defs/Parameters/properties/interpretation",
        "/$defs/Parameters/properties/shard",
        "/$defs/Parameters/properties/spec",
        "/$defs/Range/properties/min_exclusive",
        "/$defs/Range/properties/note",
        "/$defs/Range/properties/status",
        "/$defs/Summary/properties/acceptance",
        // Absent unless the spec pools the zone or compares max_local, so
        // that a report without them reads as before.
        "/$defs/ZoneSummary/properties/pooled",
        "/$defs/acceptance/properties/max_local_bootstrap",
        "/$defs/acceptance/properties/pool_field",
        "/$defs/centres/properties/omitted",
        "/$defs/fft/properties/omitted",
        "/$defs/intercept/properties/omitted",
        "/$defs/image/properties/acceptance",
        "/$defs/image/properties/at",
        "/$defs/image/properties/profile",
        "/$defs/image/properties/interpretation",
        // Absent without --map or --points, --correlation, or a plot
        // written, so that a report without them reads as before.
        "/$defs/image/properties/map",
        // Absent for an image that could not be measured.
        "/$defs/image/properties/morphology",
        "/$defs/map/properties/cooling_rate_K_per_s",
        "/$defs/map/properties/solidification_time_s",
        "/$defs/map/properties/picture_solidification_time",
        "/$defs/profile/properties/plot",
        // Absent unless the bar's label was read (`--scale-bar auto`, or
        // a length given and checked against it), so that a report
        // without it reads as before.
        "/$defs/CalibrationReport/properties/label",
        "/$defs/Parameters/properties/scale_bar_auto",
        "/$defs/BinReport/properties/cooling_rate_K_per_s",
        "/$defs/BinReport/properties/solidification_time_s",
    ];
    expected.sort();
    assert_eq!(optional, expected, "the fields a report may leave out");

    // Names and units a reader relies on.
    let image = def(&schema, "image");
    assert_eq!(
        image["properties"]["sha256"]["pattern"], "^[0-9a-f]{64}$",
        "{image}"
    );
    let sdas = def(&schema, "SdasReport");
    assert!(required(sdas).contains(&"value"));
    assert_eq!(
        def(&schema, "SdasReport")["properties"]["value"]["type"],
        json!(["number", "null"])
    );
    let methods = &def(&schema, "Parameters")["properties"]["methods"]["items"]["enum"];
    assert_eq!(methods, &json!(["fft", "intercept", "centres"]));
    assert_eq!(
        def(&schema, "CalibrationSource")["enum"],
        json!(["manual", "profile", "scale-bar", "file-metadata"])
    );
    assert_eq!(
        def(&schema, "intercept")["properties"]["convention"]["enum"],
        json!(["centre-to-centre", "length-over-count"])
    );
    assert_eq!(
        def(&schema, "CalibrationReport")["properties"]["um_per_px"]["exclusiveMinimum"],
        0
    );
}

/// A report of the demo with everything that can be in one: scale-bar
/// calibration, all methods, an interpretation with `correlation` (and an
/// alternative law, or one that does not apply), a spec with zones, an
/// unreadable file and a skipped one.
fn full_report(correlation: &str, composition: &str) -> Value {
    let dir = tempfile::tempdir().unwrap();
    let broken = dir.path().join("broken.png");
    std::fs::write(&broken, b"\x89PNG\r\n\x1a\n broken").unwrap();
    let run = armspace(&[
        "measure",
        &path_str(&repo_file("fixtures/demo")),
        &path_str(&broken),
        "--scale-bar",
        "200um",
        "--correlation",
        correlation,
        "--composition",
        composition,
        "--freezing-range",
        "50K",
        "--spec",
        &path_str(&repo_file("fixtures/demo-spec.json")),
        "--at",
        "150,120",
        "--at",
        "200px,150px:120px",
        "--along",
        "20,100:400,100:80",
    ]);
    serde_json::from_str(&run.stdout)
        .unwrap_or_else(|e| panic!("stdout is not JSON ({e}); stderr: {}", run.stderr))
}

/// The schema with every object schema closed (`additionalProperties:
/// false`), for the test that the report writes no key the schema does not
/// describe. The published schema leaves most objects open, since later
/// versions add fields.
fn closed(v: &mut Value) {
    match v {
        Value::Object(map) => {
            let is_object = match map.get("type") {
                Some(Value::String(t)) => t == "object",
                Some(Value::Array(ts)) => ts.iter().any(|t| t == "object"),
                _ => false,
            };
            if is_object && map.contains_key("properties") {
                map.entry("additionalProperties")
                    .or_insert(Value::Bool(false));
            }
            map.values_mut().for_each(closed);
        }
        Value::Array(items) => items.iter_mut().for_each(closed),
        _ => {}
    }
}

#[test]
fn a_full_report_validates_and_writes_no_key_the_schema_leaves_out() {
    let schema = committed();
    let validator = jsonschema::validator_for(&schema).expect("the schema itself is valid");
    let mut strict = schema.clone();
    closed(&mut strict);
    let strict = jsonschema::validator_for(&strict).expect("the closed schema is valid");
    // An Al-Si-Cu law with its alternative (compared), and a steel law whose
    // alternative does not apply to the carbon content.
    for (correlation, composition, alternative) in [
        (
            "al-cu-si-cooling-rate-ronto-roosz-2001",
            "Si=7,Cu=3",
            "/interpretation/alternatives/0/comparison/quantity",
        ),
        (
            "steel-c-le-0.15-won-thomas-2001",
            "C=0.1",
            "/interpretation/alternatives_not_applicable/0/reason",
        ),
    ] {
        let rep = full_report(correlation, composition);
        let images = rep["images"].as_array().unwrap();
        // What the report exercises.
        assert!(images.iter().any(|i| i["calibration"]["bar"].is_object()));
        assert!(images.iter().any(|i| i["error"].is_string()));
        assert!(images.iter().any(|i| i["methods"]["centres"].is_object()));
        assert!(images
            .iter()
            .any(|i| i["at"][1]["per_method"][0].is_object()));
        assert!(images.iter().any(|i| i.pointer(alternative).is_some()));
        assert!(rep["summary"]["acceptance"]["zones"][0].is_object());
        assert!(!rep["skipped"].as_array().unwrap().is_empty());

        let errors: Vec<String> = validator
            .iter_errors(&rep)
            .map(|e| format!("{e} at {}", e.instance_path))
            .collect();
        assert!(
            errors.is_empty(),
            "{correlation}: schema violations: {errors:#?}"
        );
        let errors: Vec<String> = strict
            .iter_errors(&rep)
            .map(|e| format!("{e} at {}", e.instance_path))
            .collect();
        assert!(
            errors.is_empty(),
            "{correlation}: keys the schema does not describe: {errors:#?}"
        );
    }
}

#[test]
fn a_report_that_breaks_the_contract_fails_validation() {
    let rep = full_report("al-cu-si-cooling-rate-ronto-roosz-2001", "Si=7,Cu=3");
    let validator = jsonschema::validator_for(&committed()).expect("the schema itself is valid");
    assert!(validator.is_valid(&rep));
    let measured = rep["images"]
        .as_array()
        .unwrap()
        .iter()
        .position(|i| i["sdas_um"]["value"].is_number())
        .expect("an image with a value");
    let unreadable = rep["images"]
        .as_array()
        .unwrap()
        .iter()
        .position(|i| i["error"].is_string())
        .expect("an unreadable image");
    let img = format!("/images/{measured}");
    let breaks: Vec<(&str, String, Option<Value>)> = vec![
        (
            "SDAS value as a string",
            format!("{img}/sdas_um/value"),
            Some(json!("17.6")),
        ),
        (
            "an FFT value as a string",
            format!("{img}/methods/fft/value"),
            Some(json!("17.9")),
        ),
        (
            "a 95 % interval of three numbers",
            format!("{img}/sdas_um/ci95"),
            Some(json!([1.0, 2.0, 3.0])),
        ),
        (
            "a negative calibration",
            format!("{img}/calibration/um_per_px"),
            Some(json!(-0.5)),
        ),
        (
            "an unknown calibration source",
            format!("{img}/calibration/source"),
            Some(json!("guess")),
        ),
        (
            "an unknown method",
            "/parameters/methods/0".to_string(),
            Some(json!("eyeball")),
        ),
        ("a missing required field", format!("{img}/sha256"), None),
        (
            "a missing summary count",
            "/summary/measured".to_string(),
            None,
        ),
        (
            "a negative count",
            "/summary/measured".to_string(),
            Some(json!(-1)),
        ),
        (
            "another schema",
            "/schema".to_string(),
            Some(json!("armspace.report/2")),
        ),
        (
            "an unknown decision",
            format!("{img}/acceptance/decision"),
            Some(json!("maybe")),
        ),
        (
            "a key the acceptance does not have",
            format!("{img}/acceptance/confidence"),
            Some(json!(0.9)),
        ),
        (
            "a key the interpretation does not have",
            format!("{img}/interpretation/cooling_rate_K_per_s/unit"),
            Some(json!("K/s")),
        ),
        (
            "a value for an image that could not be read",
            format!("/images/{unreadable}/sdas_um/value"),
            Some(json!(20.0)),
        ),
        (
            "a method without a value and without a reason",
            format!("{img}/methods/fft"),
            Some({
                let mut fft = rep.pointer(&format!("{img}/methods/fft")).unwrap().clone();
                fft["value"] = Value::Null;
                fft["reason"] = Value::Null;
                fft
            }),
        ),
    ];
    for (what, pointer, new) in breaks {
        let mut bad = rep.clone();
        let (parent, key) = pointer.rsplit_once('/').unwrap();
        let target = bad
            .pointer_mut(parent)
            .unwrap_or_else(|| panic!("{what}: no {parent} in the report"));
        match (target, new) {
            (Value::Object(map), Some(v)) => {
                map.insert(key.to_string(), v);
            }
            (Value::Object(map), None) => {
                assert!(map.remove(key).is_some(), "{what}: no {pointer} to remove");
            }
            (Value::Array(items), Some(v)) => items[key.parse::<usize>().unwrap()] = v,
            _ => panic!("{what}: cannot change {pointer}"),
        }
        assert!(!validator.is_valid(&bad), "the schema lets through {what}");
    }
}
