//! Calibration profile files: named calibrations per objective or camera.
//!
//! ```json
//! {
//!   "profiles": {
//!     "x20": 0.345,
//!     "x50": { "um_per_px": 0.138, "rel_uncertainty": 0.004,
//!              "note": "stage micrometer, 2026-03-12" }
//!   }
//! }
//! ```
//!
//! A profile is a number (micrometres per pixel) or an object with
//! `um_per_px`, an optional relative standard uncertainty and a note.

use crate::units::UmPerPx;
use crate::{Error, Result};
use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::Path;

/// One named calibration.
#[derive(Clone, Debug, PartialEq)]
pub struct Profile {
    pub name: String,
    pub um_per_px: UmPerPx,
    pub rel_uncertainty: Option<f64>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct File {
    /// Each profile as written, checked one by one so that a message names
    /// the profile and says what it should be.
    profiles: BTreeMap<String, serde_json::Value>,
}

/// The object form (other keys are ignored, as they always were).
#[derive(Deserialize)]
struct Full {
    um_per_px: f64,
    #[serde(default)]
    rel_uncertainty: Option<f64>,
    #[serde(default)]
    #[allow(dead_code)]
    note: Option<String>,
}

/// A profile's value and relative uncertainty, or what is wrong with its
/// form, naming the file (`origin`) and the profile (`key`).
fn entry(value: &serde_json::Value, origin: &str, key: &str) -> Result<(f64, Option<f64>)> {
    use serde_json::Value;
    let bad = |why: String| Error::Input {
        path: origin.into(),
        reason: format!("profile '{}': {why}", crate::error::excerpt(key, 60)),
    };
    let expected = "give a number (um per pixel) or an object with \"um_per_px\"";
    match value {
        Value::Number(n) => n
            .as_f64()
            .map(|v| (v, None))
            .ok_or_else(|| bad(format!("{n} is not a number armspace can hold"))),
        Value::Object(_) => Full::deserialize(value)
            .map(|f| (f.um_per_px, f.rel_uncertainty))
            .map_err(|e| bad(crate::error::excerpt(&e.to_string(), 200))),
        Value::String(t) => Err(bad(format!(
            "is the text \"{}\", not a number; {expected}",
            crate::error::excerpt(t, 40)
        ))),
        Value::Array(_) => Err(bad(format!("is a list; {expected}"))),
        Value::Bool(_) => Err(bad(format!("is true or false; {expected}"))),
        Value::Null => Err(bad(format!("is null; {expected}"))),
    }
}

/// Reads the profile `name` from a profile file's text; `origin` names the
/// file in messages. Every profile of the file must have a valid form.
pub fn parse(text: &str, name: &str, origin: &str) -> Result<Profile> {
    let bad = |reason: String| Error::Input {
        path: origin.into(),
        reason,
    };
    let file: File = serde_json::from_str(text).map_err(|e| {
        bad(format!(
            "not a valid calibration profile file: {}",
            crate::error::excerpt(&e.to_string(), 300)
        ))
    })?;
    let mut selected = None;
    for (key, value) in &file.profiles {
        let e = entry(value, origin, key)?;
        if key == name {
            selected = Some(e);
        }
    }
    let Some((value, rel)) = selected else {
        let names: Vec<&str> = file.profiles.keys().map(|k| k.as_str()).collect();
        return Err(bad(format!(
            "no profile named '{name}' (the file has: {})",
            if names.is_empty() {
                "none".to_string()
            } else {
                crate::error::excerpt(&names.join(", "), 300)
            }
        )));
    };
    let um_per_px =
        UmPerPx::new(value).map_err(|e| bad(format!("profile '{name}': um_per_px {e}")))?;
    if let Some(r) = rel {
        if !(r.is_finite() && (0.0..1.0).contains(&r)) {
            return Err(bad(format!(
                "profile '{name}': rel_uncertainty {} must be a fraction from 0 to 1",
                crate::units::fmt_num(r)
            )));
        }
    }
    Ok(Profile {
        name: name.to_string(),
        um_per_px,
        rel_uncertainty: rel,
    })
}

/// Reads the profile `name` from a file.
pub fn load(path: &Path, name: &str) -> Result<Profile> {
    let text = crate::files::read_text(path, "profile file")?;
    parse(&text, name, &path.display().to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn both_forms_and_clear_errors() {
        let text = r#"{"profiles": {"x20": 0.345, "x50": {"um_per_px": 0.138, "rel_uncertainty": 0.004, "note": "n"}}}"#;
        let p = parse(text, "x20", "p.json").unwrap();
        assert_eq!((p.um_per_px.get(), p.rel_uncertainty), (0.345, None));
        let p = parse(text, "x50", "p.json").unwrap();
        assert_eq!((p.um_per_px.get(), p.rel_uncertainty), (0.138, Some(0.004)));
        let e = parse(text, "x100", "p.json").unwrap_err().to_string();
        assert!(
            e.contains("p.json") && e.contains("x100") && e.contains("x20, x50"),
            "{e}"
        );
        let e = parse(r#"{"profiles": {"a": -1}}"#, "a", "p.json")
            .unwrap_err()
            .to_string();
        assert!(e.contains("not positive"), "{e}");
        let e = parse(
            r#"{"profiles": {"a": {"um_per_px": 1, "rel_uncertainty": 3}}}"#,
            "a",
            "p.json",
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("rel_uncertainty"), "{e}");
        assert!(parse("[1, 2]", "a", "p.json")
            .unwrap_err()
            .to_string()
            .contains("not a valid"));
        // A profile of the wrong form is named, with what it should be.
        let e = parse(r#"{"profiles": {"a": 1, "b": "1.25"}}"#, "a", "p.json")
            .unwrap_err()
            .to_string();
        assert!(
            e.contains("p.json: profile 'b'") && e.contains("not a number"),
            "{e}"
        );
        let e = parse(r#"{"profiles": {"a": {"note": "x"}}}"#, "a", "p.json")
            .unwrap_err()
            .to_string();
        assert!(e.contains("profile 'a'") && e.contains("um_per_px"), "{e}");
    }
}
