//! The correlation library: published SDAS correlations as data.
//!
//! The built-in entries live in `data/correlations.json`, compiled into the
//! binary; users add their own in a file of the same format
//! (`--correlations FILE`, documented in DEVELOPERS.md). Every entry names
//! its source and says whether its numbers were read in that source
//! ("found"), recalled ("from memory") or come from a physical model
//! ("model").
//!
//! Forms (lambda2 in the entry's `sdas_unit`, x in its `variable_unit`):
//! - `cooling_rate`: lambda2 = A x CR^(-n), n = `exponent` > 0;
//! - `solidification_time`: lambda2 = B x t_f^m, m = `exponent` > 0;
//! - `coarsening`: lambda2 = K (M t_f)^(1/3), M from alloy parameters
//!   (see [`super::coarsening`]).
//!
//! A coefficient may depend on the composition C_i (wt%):
//! A = (value + sum_i linear_i C_i) x prod_j C_j^(exponent_j + exponent_per_wt_pct_j C_j),
//! which covers the carbon-dependent steel fits and the Cu- and Si-dependent
//! Al-Cu-Si fits.

mod file;
use file::invalid;
pub use file::parse;

use super::coarsening::CoarseningParams;
use super::PowerLaw;
use crate::{Error, Result};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// The format tag of a correlation file.
pub const FORMAT: &str = "armspace.correlations/1";

/// Nominal composition, wt% by element symbol ("C", "Si", "Cu").
pub type Composition = BTreeMap<String, f64>;

/// What the law relates lambda2 to.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Form {
    CoolingRate,
    SolidificationTime,
    Coarsening,
}

impl Form {
    pub fn name(self) -> &'static str {
        match self {
            Form::CoolingRate => "cooling_rate",
            Form::SolidificationTime => "solidification_time",
            Form::Coarsening => "coarsening",
        }
    }
}

/// The unit of the law's variable, as a factor to the tool's unit (K/s for a
/// cooling rate, s for a time): value_in_tool_unit = factor x value.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct VariableUnit {
    pub name: &'static str,
    pub to_base: f64,
}

/// Cooling-rate units; a kelvin and a degree Celsius are the same interval.
pub fn rate_unit(text: &str) -> Option<VariableUnit> {
    let (name, to_base) = match text {
        "K/s" | "degC/s" | "\u{00b0}C/s" | "C/s" => ("K/s", 1.0),
        "K/min" | "degC/min" | "\u{00b0}C/min" | "C/min" => ("K/min", 1.0 / 60.0),
        "K/h" | "degC/h" | "\u{00b0}C/h" => ("K/h", 1.0 / 3600.0),
        _ => return None,
    };
    Some(VariableUnit { name, to_base })
}

/// Time units.
pub fn time_unit(text: &str) -> Option<VariableUnit> {
    let (name, to_base) = match text {
        "s" => ("s", 1.0),
        "min" => ("min", 60.0),
        "h" => ("h", 3600.0),
        _ => return None,
    };
    Some(VariableUnit { name, to_base })
}

/// Length units accepted for lambda2, as a factor to micrometres.
fn sdas_unit_factor(text: &str) -> Option<f64> {
    match text {
        "um" | "\u{00b5}m" | "\u{03bc}m" => Some(1.0),
        "mm" => Some(1e3),
        "m" => Some(1e6),
        _ => None,
    }
}

/// A range of validity (a composition in wt%, or the fitted range of the
/// law's variable or of lambda2); a missing bound is unknown. Bounds are
/// inclusive unless `min_exclusive` is set, so two forms that share a
/// boundary (Won & Thomas: C <= 0.15 and C > 0.15) give it to exactly one.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields)]
pub struct Range {
    pub min: Option<f64>,
    pub max: Option<f64>,
    /// The lower bound itself is outside the range.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub min_exclusive: bool,
    /// Where the bounds come from: "found" (read in the source), "from
    /// memory", or "assumed" (a conservative guard set by armspace, not the
    /// source's range); absent for user files (their own).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    #[schemars(with = "String")]
    pub status: Option<String>,
    /// What exactly is known about the bounds, and why an assumed bound is
    /// where it is.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    #[schemars(with = "String")]
    pub note: Option<String>,
}

impl Range {
    /// Whether `x` lies inside (unknown bounds do not exclude).
    pub fn contains(&self, x: f64) -> bool {
        let above_min = self
            .min
            .is_none_or(|m| if self.min_exclusive { x > m } else { x >= m });
        above_min && self.max.is_none_or(|m| x <= m)
    }

    /// Bounds read in the source, or a range without a status (a user's own).
    pub fn is_from_source(&self) -> bool {
        matches!(self.status.as_deref(), None | Some("found"))
    }
}

/// A stated fact about an entry in words (e.g. how lambda2 was measured),
/// with where it comes from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Statement {
    pub value: String,
    #[serde(default)]
    pub status: Option<String>,
    #[serde(default)]
    pub source: Option<String>,
}

/// Where an entry's numbers come from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Source {
    pub authors: String,
    pub year: Option<i32>,
    pub title: String,
    pub published_in: String,
    #[serde(default)]
    pub doi: Option<String>,
    #[serde(default)]
    pub locator: Option<String>,
}

impl Source {
    /// "Authors (year)".
    pub fn short(&self) -> String {
        match self.year {
            Some(y) => format!("{} ({y})", self.authors),
            None => self.authors.clone(),
        }
    }
}

/// Power term of a composition-dependent coefficient: C^(exponent + exponent_per_wt_pct x C).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PowerTerm {
    pub exponent: f64,
    #[serde(default)]
    pub exponent_per_wt_pct: f64,
}

/// A coefficient, possibly composition-dependent (see the module docs).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Coefficient {
    pub value: f64,
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub linear: BTreeMap<String, f64>,
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub power: BTreeMap<String, PowerTerm>,
}

impl Coefficient {
    /// Elements whose content the coefficient needs.
    pub fn elements(&self) -> Vec<&str> {
        let mut e: Vec<&str> = self
            .linear
            .keys()
            .chain(self.power.keys())
            .map(String::as_str)
            .collect();
        e.sort_unstable();
        e.dedup();
        e
    }

    /// The coefficient at a composition.
    pub fn at(&self, composition: &Composition) -> Result<f64> {
        let content = |el: &str| {
            composition.get(el).copied().ok_or_else(|| {
                invalid(format!(
                    "needs the {el} content: give it with --composition {el}=<wt%>"
                ))
            })
        };
        let mut a = self.value;
        for (el, slope) in &self.linear {
            a += slope * content(el)?;
        }
        for (el, term) in &self.power {
            let c = content(el)?;
            if c <= 0.0 {
                return Err(invalid(format!(
                    "needs a positive {el} content (the fit has a power of {el}); got {c} wt%"
                )));
            }
            a *= c.powf(term.exponent + term.exponent_per_wt_pct * c);
        }
        if !(a.is_finite() && a > 0.0) {
            return Err(invalid(format!(
                "its coefficient is not positive at this composition ({a:.4}); the composition is outside what the fit describes"
            )));
        }
        Ok(a)
    }
}

/// The law of an entry.
#[derive(Clone, Debug, PartialEq)]
pub enum Law {
    /// lambda2 = coefficient x x^(+-exponent), by form.
    Power {
        coefficient: Coefficient,
        exponent: f64,
    },
    Coarsening(Box<CoarseningParams>),
}

/// One validated correlation.
#[derive(Clone, Debug, PartialEq)]
pub struct Correlation {
    pub id: String,
    pub alloy_family: String,
    pub alloys: String,
    pub composition: BTreeMap<String, Range>,
    pub form: Form,
    /// Factor from the entry's lambda2 unit to micrometres.
    pub sdas_to_um: f64,
    pub sdas_unit: String,
    pub variable_unit: VariableUnit,
    pub law: Law,
    /// Range of the variable over which the law was fitted, in
    /// `variable_unit` (bounds may be unknown); None when not recorded.
    pub fitted_range: Option<Range>,
    /// The same as a range of lambda2 (um), when the source states that
    /// instead; converted to the variable at the composition by the law.
    pub fitted_sdas_um: Option<Range>,
    /// One standard deviation of lambda2 about the fit, percent, when published.
    pub scatter_pct: Option<f64>,
    /// Where the scatter comes from, or why it is not known.
    pub scatter_note: Option<String>,
    /// How lambda2 was measured in the source (line intercept, centre to
    /// centre, ...), or "unknown".
    pub measuring_convention: Statement,
    pub status: Status,
    pub status_note: String,
    pub source: Source,
    /// "built-in" or the file the entry came from.
    pub origin: String,
}

/// Whether an entry's numbers were read in the source.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, JsonSchema)]
pub enum Status {
    #[serde(rename = "found")]
    Found,
    #[serde(rename = "from memory")]
    FromMemory,
    #[serde(rename = "model")]
    Model,
    #[serde(rename = "user")]
    User,
}

impl Status {
    pub fn name(self) -> &'static str {
        match self {
            Status::Found => "found",
            Status::FromMemory => "from memory",
            Status::Model => "model",
            Status::User => "user",
        }
    }
}

impl Correlation {
    /// The law as lambda2 (um) = c x x^e, x in `variable_unit`, at a
    /// composition (for a coarsening entry, the solute's content, or its
    /// default C0).
    pub fn power_law(&self, composition: &Composition) -> Result<PowerLaw> {
        let what = |e: Error| invalid(format!("correlation '{}' {e}", self.id));
        self.check_composition(composition).map_err(what)?;
        let (c, e) = match &self.law {
            Law::Power {
                coefficient,
                exponent,
            } => {
                let c = coefficient.at(composition).map_err(what)?;
                let e = match self.form {
                    Form::CoolingRate => -exponent,
                    _ => *exponent,
                };
                (c * self.sdas_to_um, e)
            }
            Law::Coarsening(p) => {
                let c0 = composition.get(&p.solute).copied();
                let b = p.coefficient_um(c0).map_err(what)?;
                // The model gives um at t_f in seconds; a file may state
                // minutes, converted here so the law is in its own unit.
                (b * self.variable_unit.to_base.powf(1.0 / 3.0), 1.0 / 3.0)
            }
        };
        // A coefficient finite in the entry's own units can overflow f64 in
        // um (7e305 mm is 7e308 um): said as such, not as an infinite one.
        if c.is_infinite() {
            return Err(what(invalid(format!(
                "has a coefficient beyond the range of numbers armspace holds (about 1.8e308) once lambda2 is in um (its sdas_unit is {})",
                self.sdas_unit
            ))));
        }
        PowerLaw::new(c, e).map_err(what)
    }

    /// A composition outside an entry's stated range is refused: the entry
    /// does not describe that alloy.
    fn check_composition(&self, composition: &Composition) -> Result<()> {
        for (el, range) in &self.composition {
            if let Some(&c) = composition.get(el) {
                if !range.contains(c) {
                    return Err(invalid(format!(
                        "covers {el} {} wt%; {el} = {c} wt% is outside it",
                        range_text(range)
                    )));
                }
            }
        }
        Ok(())
    }

    /// The fitted range in the law's variable (its own unit) at a
    /// composition: `fitted_range` as given, or `fitted_sdas_um` inverted
    /// through the law (bounds swap for a cooling-rate law, whose lambda2
    /// falls as the rate rises). None when neither is on record.
    pub fn variable_range(&self, law: &PowerLaw) -> Option<Range> {
        if let Some(r) = &self.fitted_range {
            return Some(r.clone());
        }
        let s = self.fitted_sdas_um.as_ref()?;
        let inv = |v: Option<f64>| v.and_then(|v| law.invert(crate::units::Micrometres(v)));
        let (lo, hi) = if law.exponent < 0.0 {
            (inv(s.max), inv(s.min))
        } else {
            (inv(s.min), inv(s.max))
        };
        Some(Range {
            min: lo,
            max: hi,
            min_exclusive: false,
            status: s.status.clone(),
            note: s.note.clone(),
        })
    }

    /// The law written out, e.g. "lambda2 = 97.01 x CR^-0.4935 (um, K/s)".
    pub fn law_text(&self) -> String {
        let var = match self.form {
            Form::CoolingRate => "CR",
            _ => "t_f",
        };
        let units = format!("{}, {}", self.sdas_unit, self.variable_unit.name);
        match &self.law {
            Law::Power {
                coefficient,
                exponent,
            } => {
                let mut a = crate::units::fmt_num(coefficient.value);
                for (el, s) in &coefficient.linear {
                    a = format!(
                        "({a} {} {} {el})",
                        if *s < 0.0 { "-" } else { "+" },
                        s.abs()
                    );
                }
                for (el, t) in &coefficient.power {
                    if t.exponent_per_wt_pct != 0.0 {
                        a.push_str(&format!(
                            " {el}^({} {} {} {el})",
                            t.exponent,
                            if t.exponent_per_wt_pct < 0.0 {
                                "-"
                            } else {
                                "+"
                            },
                            t.exponent_per_wt_pct.abs()
                        ));
                    } else {
                        a.push_str(&format!(" {el}^{}", t.exponent));
                    }
                }
                let sign = if self.form == Form::CoolingRate {
                    "-"
                } else {
                    ""
                };
                format!("lambda2 = {a} {var}^{sign}{exponent} ({units})")
            }
            Law::Coarsening(p) => format!(
                "lambda2 = {} (M t_f)^(1/3), M from Gamma, D, m, k, C0 ({}), CE ({units})",
                p.prefactor.value, p.solute
            ),
        }
    }

    /// Composition validity as text, e.g. "C 0-0.15 wt%".
    pub fn validity_text(&self) -> String {
        let mut parts: Vec<String> = self
            .composition
            .iter()
            .map(|(el, r)| format!("{el} {} wt%", range_text(r)))
            .collect();
        match self.fitted_range.as_ref().or(self.fitted_sdas_um.as_ref()) {
            Some(r) if self.fitted_range.is_none() => parts.push(format!(
                "lambda2 {} um{}",
                range_text(r),
                r.status
                    .as_deref()
                    .filter(|s| *s != "found")
                    .map(|s| format!(" ({s})"))
                    .unwrap_or_default()
            )),
            Some(r) => parts.push(
                format!(
                    "{} {} {}",
                    if self.form == Form::CoolingRate {
                        "CR"
                    } else {
                        "t_f"
                    },
                    range_text(r),
                    self.variable_unit.name,
                ) + &r
                    .status
                    .as_deref()
                    .filter(|s| *s != "found")
                    .map(|s| format!(" ({s})"))
                    .unwrap_or_default(),
            ),
            None => parts.push("fitted range not recorded".into()),
        }
        parts.join("; ")
    }
}

/// A range as text: "0-0.15", or ">0.15-1" when the lower bound is excluded.
pub fn range_text(r: &Range) -> String {
    let b = |v: Option<f64>| v.map_or("?".to_string(), |v| format!("{v}"));
    format!(
        "{}{}-{}",
        if r.min_exclusive { ">" } else { "" },
        b(r.min),
        b(r.max)
    )
}

/// The built-in library (data/correlations.json).
pub fn builtin() -> Vec<Correlation> {
    // The file is part of the build and checked by the tests; a failure here
    // is a defect of the build, reported instead of a panic.
    parse(
        include_str!("../../../data/correlations.json"),
        "built-in",
        true,
    )
    .unwrap_or_else(|e| {
        use std::io::Write as _;
        let _ = writeln!(
            std::io::stderr(),
            "armspace: the built-in correlation library is invalid: {e}"
        );
        Vec::new()
    })
}

/// The built-in library plus the entries of a user file; an id used twice is
/// an error.
pub fn with_file(path: &std::path::Path) -> Result<Vec<Correlation>> {
    let text = crate::files::read_text(path, "correlation file")?;
    let user = parse(&text, &path.display().to_string(), false)?;
    let mut all = builtin();
    for c in user {
        if all.iter().any(|b| b.id == c.id) {
            return Err(Error::Input {
                path: path.to_path_buf(),
                reason: format!("duplicate id '{}' (already a built-in correlation)", c.id),
            });
        }
        all.push(c);
    }
    Ok(all)
}

/// The entry with this id, or a message listing the ids there are.
pub fn find<'a>(library: &'a [Correlation], id: &str) -> Result<&'a Correlation> {
    library.iter().find(|c| c.id == id).ok_or_else(|| {
        let ids: Vec<&str> = library.iter().map(|c| c.id.as_str()).collect();
        invalid(format!(
            "no correlation '{id}'; known: {} (see `armspace correlations`)",
            ids.join(", ")
        ))
    })
}

/// The library as a plain-text table (one row per entry, then its source and
/// notes), for `armspace correlations`.
pub fn table(library: &[Correlation]) -> String {
    let rows: Vec<[String; 5]> = library
        .iter()
        .map(|c| {
            [
                c.id.clone(),
                c.alloy_family.clone(),
                c.form.name().to_string(),
                c.status.name().to_string(),
                c.validity_text(),
            ]
        })
        .collect();
    let head = ["ID", "ALLOYS", "FORM", "STATUS", "VALID FOR"];
    let mut w = head.map(str::len);
    for r in &rows {
        for (i, cell) in r.iter().enumerate() {
            w[i] = w[i].max(cell.chars().count());
        }
    }
    let line = |cells: [&str; 5]| {
        let mut l = String::new();
        for (i, c) in cells.iter().enumerate() {
            if i + 1 < cells.len() {
                l.push_str(&format!("{c:<width$}  ", width = w[i]));
            } else {
                l.push_str(c);
            }
        }
        l.trim_end().to_string() + "\n"
    };
    let mut out = line(head);
    for r in &rows {
        out.push_str(&line([&r[0], &r[1], &r[2], &r[3], &r[4]]));
    }
    out.push('\n');
    for c in library {
        out.push_str(&format!("{}\n  law:    {}\n", c.id, c.law_text()));
        out.push_str(&format!(
            "  source: {}: {}. {}{}\n",
            c.source.short(),
            c.source.title,
            c.source.published_in,
            c.source
                .doi
                .as_ref()
                .map(|d| format!(", doi:{d}"))
                .unwrap_or_default()
        ));
        if !c.status_note.is_empty() {
            out.push_str(&format!(
                "  note:   [{}] {}\n",
                c.status.name(),
                c.status_note
            ));
        }
        if c.origin != "built-in" {
            out.push_str(&format!("  from:   {}\n", c.origin));
        }
    }
    out
}
