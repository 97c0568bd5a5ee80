//! Reading a correlation file: the raw entries as written, and their
//! validation into [`Correlation`]s, every problem named with the entry's
//! position and id.

use super::*;

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileRaw {
    format: Option<String>,
    correlations: Vec<serde_json::Value>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct EntryRaw {
    id: Option<String>,
    alloy_family: Option<String>,
    alloys: Option<String>,
    #[serde(default)]
    composition_wt_pct: BTreeMap<String, Range>,
    form: Option<String>,
    sdas_unit: Option<String>,
    variable_unit: Option<String>,
    coefficient: Option<Coefficient>,
    exponent: Option<f64>,
    coarsening: Option<crate::interpret::coarsening::CoarseningRaw>,
    #[serde(default)]
    fitted_range: Option<Range>,
    #[serde(default)]
    fitted_sdas_um: Option<Range>,
    #[serde(default)]
    scatter_pct: Option<f64>,
    #[serde(default)]
    scatter_note: Option<String>,
    #[serde(default)]
    measuring_convention: Option<Statement>,
    status: Option<String>,
    #[serde(default)]
    status_note: Option<String>,
    source: Option<Source>,
}

/// Parses and validates a correlation file; `origin` names it in messages.
/// Every problem is reported with the entry's position and id.
pub fn parse(text: &str, origin: &str, builtin: bool) -> Result<Vec<Correlation>> {
    let bad = |reason: String| Error::Input {
        path: origin.into(),
        reason,
    };
    let raw: FileRaw =
        serde_json::from_str(text).map_err(|e| bad(crate::error::excerpt(&e.to_string(), 300)))?;
    match raw.format.as_deref() {
        Some(FORMAT) => {}
        Some(other) => return Err(bad(format!("format '{other}' is not '{FORMAT}'"))),
        None => return Err(bad(format!("missing \"format\": \"{FORMAT}\""))),
    }
    let mut out: Vec<Correlation> = Vec::new();
    for (i, value) in raw.correlations.into_iter().enumerate() {
        let label = value
            .get("id")
            .and_then(|v| v.as_str())
            .map_or(format!("entry {}", i + 1), |id| {
                format!("entry {} ('{}')", i + 1, crate::error::excerpt(id, 60))
            });
        let entry: EntryRaw = serde_json::from_value(value).map_err(|e| {
            bad(format!(
                "{label}: {}",
                crate::error::excerpt(&e.to_string(), 300)
            ))
        })?;
        let c = validate(entry, origin, builtin).map_err(|e| {
            bad(format!(
                "{label}: {}",
                crate::error::excerpt(&e.to_string(), 300)
            ))
        })?;
        if out.iter().any(|o| o.id == c.id) {
            return Err(bad(format!("{label}: duplicate id '{}'", c.id)));
        }
        out.push(c);
    }
    Ok(out)
}

/// A correlation that cannot be used as asked: an invalid entry, a
/// composition it excludes or needs, an unknown id.
pub(super) fn invalid(reason: impl Into<String>) -> Error {
    Error::Correlation {
        reason: reason.into(),
    }
}

fn positive(name: &str, v: Option<f64>) -> Result<f64> {
    match v {
        None => Err(invalid(format!("missing \"{name}\""))),
        Some(v) if v.is_finite() && v > 0.0 => Ok(v),
        Some(v) => Err(invalid(format!(
            "\"{name}\" must be a positive number, got {}",
            crate::units::fmt_num(v)
        ))),
    }
}

fn validate(e: EntryRaw, origin: &str, builtin: bool) -> Result<Correlation> {
    let id =
        e.id.filter(|s| !s.trim().is_empty())
            .ok_or_else(|| invalid("missing \"id\""))?;
    if id.chars().any(char::is_whitespace) {
        return Err(invalid(format!("id '{id}' must not contain spaces")));
    }
    let form = match e.form.as_deref() {
        None => return Err(invalid("missing \"form\"")),
        Some("cooling_rate") => Form::CoolingRate,
        Some("solidification_time") => Form::SolidificationTime,
        Some("coarsening") => Form::Coarsening,
        Some(other) => {
            return Err(invalid(format!(
                "unknown form '{other}' (accepted: cooling_rate, solidification_time, coarsening)"
            )))
        }
    };
    let sdas_unit = e
        .sdas_unit
        .ok_or_else(|| invalid("missing unit: \"sdas_unit\" (the unit of lambda2, e.g. \"um\")"))?;
    let sdas_to_um = sdas_unit_factor(&sdas_unit).ok_or_else(|| {
        invalid(format!(
            "unknown sdas_unit '{sdas_unit}' (accepted: um, mm, m)"
        ))
    })?;
    let vu = e.variable_unit.ok_or_else(|| {
        invalid(match form {
            Form::CoolingRate => {
                "missing unit: \"variable_unit\" (the cooling rate's unit, e.g. \"K/s\")"
            }
            _ => "missing unit: \"variable_unit\" (the time's unit, e.g. \"s\")",
        })
    })?;
    let variable_unit = match form {
        Form::CoolingRate => rate_unit(&vu).ok_or_else(|| {
            invalid(format!(
                "unknown cooling-rate unit '{vu}' (accepted: K/s, degC/s, K/min, degC/min, K/h)"
            ))
        })?,
        _ => time_unit(&vu)
            .ok_or_else(|| invalid(format!("unknown time unit '{vu}' (accepted: s, min, h)")))?,
    };
    let law = match form {
        Form::Coarsening => {
            if e.coefficient.is_some() || e.exponent.is_some() {
                return Err(invalid("a coarsening entry takes \"coarsening\" parameters, not \"coefficient\" or \"exponent\""));
            }
            let raw = e
                .coarsening
                .ok_or_else(|| invalid("missing \"coarsening\" parameters"))?;
            Law::Coarsening(Box::new(CoarseningParams::from_raw(raw)?))
        }
        _ => {
            if e.coarsening.is_some() {
                return Err(invalid(
                    "\"coarsening\" parameters belong to form \"coarsening\"",
                ));
            }
            let coefficient = e
                .coefficient
                .ok_or_else(|| invalid("missing \"coefficient\""))?;
            if !(coefficient.value.is_finite() && coefficient.value != 0.0) {
                return Err(invalid(format!(
                    "\"coefficient\" value must be a non-zero number, got {}",
                    crate::units::fmt_num(coefficient.value)
                )));
            }
            if coefficient.linear.is_empty() && coefficient.value < 0.0 {
                return Err(invalid("\"coefficient\" must be positive"));
            }
            let all_finite = coefficient.linear.values().all(|v| v.is_finite())
                && coefficient
                    .power
                    .values()
                    .all(|t| t.exponent.is_finite() && t.exponent_per_wt_pct.is_finite());
            if !all_finite {
                return Err(invalid("\"coefficient\" terms must be finite numbers"));
            }
            let exponent = positive("exponent", e.exponent).map_err(|m| {
                invalid(format!("{m} (write the magnitude: lambda2 = A CR^-n takes n > 0, lambda2 = B t_f^m takes m > 0)"))
            })?;
            Law::Power {
                coefficient,
                exponent,
            }
        }
    };
    // Every element named (composition limits, composition terms of a
    // coefficient, a coarsening solute) must be a chemical element, written
    // as its symbol: a misspelt "SI" would never match a composition.
    let named: Vec<&str> = e
        .composition_wt_pct
        .keys()
        .map(String::as_str)
        .chain(match &law {
            Law::Power { coefficient, .. } => coefficient.elements(),
            _ => vec![],
        })
        .collect();
    if let Some(el) = named
        .iter()
        .find(|el| !crate::interpret::is_element_symbol(el))
    {
        return Err(invalid(format!(
            "'{el}' is not an element symbol (e.g. C, Si, Cu)"
        )));
    }
    for (el, r) in &e.composition_wt_pct {
        let ok = |v: Option<f64>| v.is_none_or(|v| v.is_finite() && v >= 0.0);
        if !ok(r.min) || !ok(r.max) || matches!((r.min, r.max), (Some(a), Some(b)) if a > b) {
            return Err(invalid(format!(
                "composition range of {el} is not a valid wt% range"
            )));
        }
    }
    if e.fitted_range.is_some() && e.fitted_sdas_um.is_some() {
        return Err(invalid(
            "give either \"fitted_range\" (of the variable) or \"fitted_sdas_um\", not both",
        ));
    }
    for (name, range) in [
        ("fitted_range", &e.fitted_range),
        ("fitted_sdas_um", &e.fitted_sdas_um),
    ] {
        if let Some(r) = range {
            let ok = |v: Option<f64>| v.is_none_or(|v| v.is_finite() && v > 0.0);
            if !ok(r.min) || !ok(r.max) || matches!((r.min, r.max), (Some(a), Some(b)) if a > b) {
                return Err(invalid(format!(
                    "\"{name}\" must have positive bounds, min <= max"
                )));
            }
        }
    }
    for (name, r) in e
        .composition_wt_pct
        .values()
        .chain(e.fitted_range.iter())
        .chain(e.fitted_sdas_um.iter())
        .map(|r| ("range", r))
    {
        if let Some(s) = r.status.as_deref() {
            if !["found", "from memory", "assumed"].contains(&s) {
                return Err(invalid(format!(
                    "unknown {name} status '{s}' (accepted: found, from memory, assumed)"
                )));
            }
        }
    }
    if builtin {
        // A built-in range says where its bounds come from (the
        // interpretation warns on every result whose range is not the
        // source's).
        let unlabelled = e
            .composition_wt_pct
            .values()
            .chain(e.fitted_range.iter())
            .chain(e.fitted_sdas_um.iter())
            .any(|r| r.status.is_none());
        if unlabelled {
            return Err(invalid("a built-in range needs a \"status\""));
        }
    }
    if let Some(s) = e.scatter_pct {
        if !(s.is_finite() && s > 0.0 && s < 100.0) {
            return Err(invalid(format!(
                "\"scatter_pct\" must be between 0 and 100, got {s}"
            )));
        }
    }
    let status = match e.status.as_deref() {
        Some("found") => Status::Found,
        Some("from memory") => Status::FromMemory,
        Some("model") => Status::Model,
        Some("user") | None if !builtin => Status::User,
        None => return Err(invalid("missing \"status\"")),
        Some(other) => {
            return Err(invalid(format!(
                "unknown status '{other}' (accepted: found, from memory, model, user)"
            )))
        }
    };
    let source = e.source.ok_or_else(|| invalid("missing \"source\" (authors, year, title, published_in; for your own data, name your report)"))?;
    Ok(Correlation {
        id,
        alloy_family: e.alloy_family.unwrap_or_default(),
        alloys: e.alloys.unwrap_or_default(),
        composition: e.composition_wt_pct,
        form,
        sdas_to_um,
        sdas_unit,
        variable_unit,
        law,
        fitted_range: e.fitted_range,
        fitted_sdas_um: e.fitted_sdas_um,
        scatter_pct: e.scatter_pct,
        scatter_note: e.scatter_note,
        measuring_convention: e.measuring_convention.unwrap_or(Statement {
            value: "unknown".into(),
            status: None,
            source: None,
        }),
        status,
        status_note: e.status_note.unwrap_or_default(),
        source,
        origin: origin.to_string(),
    })
}
