//! Calibration: how many micrometres one pixel spans, where that came from,
//! and how uncertain it is.
//!
//! Sources, in order of precedence (the first one available is used):
//! 1. `manual`: `--um-per-px`, the user's explicit value;
//! 2. `profile`: a named entry of a calibration profile file (per objective
//!    or camera);
//! 3. `scale-bar`: the bar burned into the image, measured in pixels, with
//!    its physical length given by `--scale-bar LENGTH`, or read from its
//!    label with `--scale-bar auto` (`label.rs`);
//! 4. `file-metadata`: TIFF resolution tags.
//!
//! Every source that gave a value is reported; when one differs from the
//! value used by more than 2 %, the image carries a warning.

pub mod label;
pub mod profile;
pub mod scale_bar;

use crate::error::{Error, Result, Warning};
use crate::units::{Micrometres, UmPerPx};
use scale_bar::ScaleBar;
use schemars::JsonSchema;
use serde::Serialize;

/// Where a calibration came from.
#[derive(
    Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Serialize, serde::Deserialize, JsonSchema,
)]
#[serde(rename_all = "kebab-case")]
pub enum CalibrationSource {
    Manual,
    Profile,
    ScaleBar,
    FileMetadata,
}

impl CalibrationSource {
    pub fn name(self) -> &'static str {
        match self {
            Self::Manual => "manual",
            Self::Profile => "profile",
            Self::ScaleBar => "scale-bar",
            Self::FileMetadata => "file-metadata",
        }
    }
}

/// A calibration value offered by one source.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Offer {
    pub source: CalibrationSource,
    pub um_per_px: UmPerPx,
    /// Relative standard uncertainty, when the source states or allows one.
    pub rel_uncertainty: Option<f64>,
}

/// The calibration applied to one image.
#[derive(Clone, Debug, PartialEq)]
pub struct Calibration {
    pub um_per_px: UmPerPx,
    pub source: CalibrationSource,
    pub rel_uncertainty: Option<f64>,
    /// The bar, when the calibration came from it.
    pub bar: Option<ScaleBar>,
    /// The bar's label, when it was read with confidence.
    pub label: Option<label::Label>,
    /// Every source that offered a value, in order of precedence.
    pub offers: Vec<Offer>,
    /// When sources the user gave (value, profile, scale bar) disagree
    /// beyond their uncertainties and none was named as trusted: which and
    /// by how much. The image is then undecidable.
    pub conflict: Option<String>,
}

impl Calibration {
    /// A calibration from a given value alone.
    pub fn manual(um_per_px: UmPerPx) -> Self {
        let offer = Offer {
            source: CalibrationSource::Manual,
            um_per_px,
            rel_uncertainty: None,
        };
        Self {
            um_per_px,
            source: CalibrationSource::Manual,
            rel_uncertainty: None,
            bar: None,
            label: None,
            offers: vec![offer],
            conflict: None,
        }
    }
}

/// The physical length of the scale bar, as the user states it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BarLength {
    pub length: Micrometres,
    /// Relative standard uncertainty of the bar itself (from its certificate
    /// or the software that drew it); 0 when not stated.
    pub rel_uncertainty: f64,
}

/// What the user asked for.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct CalibrationRequest {
    pub manual: Option<UmPerPx>,
    /// Relative standard uncertainty of the manual value, when the user
    /// states it; without it the value is taken as exact (the report's
    /// calibration then has no uncertainty, and says so by a null).
    pub manual_rel_uncertainty: Option<f64>,
    pub profile: Option<profile::Profile>,
    pub scale_bar: Option<BarLength>,
    /// `--scale-bar auto`: the bar's length is read from its label
    /// (`label::read`). A length given in `scale_bar` takes precedence; the
    /// label is then only checked against it.
    pub read_label: bool,
    /// The source the user trusts when sources conflict; without it a
    /// conflict leaves the image undecidable (`Calibration::conflict`).
    pub trust: Option<CalibrationSource>,
}

/// Sources whose values differ by more than this (relative) are reported.
pub const DISAGREEMENT: f64 = 0.02;

/// A bar shorter than this many pixels limits the calibration to about 1 %.
pub const SHORT_BAR_PX: f64 = 100.0;

/// Standard uncertainty of one end of a bar located by half-contrast: a
/// rectangular distribution of +-0.5 px, i.e. 0.5 / sqrt(3) px (JCGM 100:2008,
/// GUM 4.3.7).
pub const END_UNCERTAINTY_PX: f64 = 0.288_675_134_594_812_9;

/// The calibration a detected bar gives, with its relative standard
/// uncertainty: both ends' localisation, the spread of the per-row lengths
/// (as a standard error), and the bar's own stated uncertainty, combined in
/// quadrature (GUM 5.1.2, uncorrelated inputs).
pub fn from_bar(bar: &ScaleBar, length: &BarLength) -> Result<Offer> {
    if !(bar.length_px > 0.0 && bar.length_px.is_finite()) {
        return Err(Error::Calibration {
            reason: "the scale bar's length could not be measured (its ends are not sharp enough to locate)".into(),
        });
    }
    let um = UmPerPx::new(length.length.0 / bar.length_px)?;
    let u_px = (2.0 * END_UNCERTAINTY_PX * END_UNCERTAINTY_PX
        + bar.length_sd_px.powi(2) / bar.rows.max(1) as f64)
        .sqrt();
    let rel = ((u_px / bar.length_px).powi(2) + length.rel_uncertainty.powi(2)).sqrt();
    Ok(Offer {
        source: CalibrationSource::ScaleBar,
        um_per_px: um,
        rel_uncertainty: Some(rel),
    })
}

/// Picks the calibration by precedence and lists disagreements. `bar` is the
/// detection result (used only when the request names the bar's length);
/// `metadata` is what the file's resolution tags give.
pub fn resolve(
    req: &CalibrationRequest,
    bar: Option<&Result<ScaleBar>>,
    metadata: Option<UmPerPx>,
) -> Result<(Calibration, Vec<Warning>)> {
    resolve_with_label(req, bar, None, metadata)
}

/// Whether two lengths are one: labels state round numbers and a length
/// typed in is one of them, so any difference beyond the rounding of
/// floating point is a disagreement.
fn same_length(a: Micrometres, b: Micrometres) -> bool {
    (a.0 / b.0 - 1.0).abs() <= 1e-9
}

/// [`resolve`] with the bar's label as read (`label::read`), when it was
/// looked for: with `--scale-bar auto` the length it states calibrates the
/// bar; with a length given, a label that reads otherwise is warned about.
pub fn resolve_with_label(
    req: &CalibrationRequest,
    bar: Option<&Result<ScaleBar>>,
    label: Option<&std::result::Result<label::Label, String>>,
    metadata: Option<UmPerPx>,
) -> Result<(Calibration, Vec<Warning>)> {
    let mut offers = Vec::new();
    let mut warnings = Vec::new();
    if let Some(v) = req.manual {
        offers.push(Offer {
            source: CalibrationSource::Manual,
            um_per_px: v,
            rel_uncertainty: req.manual_rel_uncertainty,
        });
    }
    if let Some(p) = &req.profile {
        offers.push(Offer {
            source: CalibrationSource::Profile,
            um_per_px: p.um_per_px,
            rel_uncertainty: p.rel_uncertainty,
        });
    }
    let mut used_bar = None;
    let mut bar_failure = None;
    let mut read = None;
    let length = match (&req.scale_bar, req.read_label) {
        (Some(given), _) => {
            if let Some(Ok(l)) = label {
                if !same_length(l.length(), given.length) {
                    warnings.push(Warning::new(
                        "calibration.label-disagrees",
                        format!(
                            "the scale bar's label reads '{}' ({} um, confidence {:.2}), but --scale-bar gives {} um; the length given is used",
                            l.text, l.length_um, l.confidence, given.length.0
                        ),
                    ));
                }
            }
            Some(*given)
        }
        (None, true) => match (bar, label) {
            (Some(Ok(_)), Some(Ok(l))) => {
                read = Some(l.clone());
                Some(BarLength {
                    length: l.length(),
                    rel_uncertainty: 0.0,
                })
            }
            (Some(Ok(_)), Some(Err(why))) => {
                bar_failure = Some(format!(
                    "the bar was found, but its label was not read with confidence ({:.2} needed): {why}",
                    label::MIN_CONFIDENCE
                ));
                None
            }
            (Some(Ok(_)), None) => {
                bar_failure = Some("the bar's label was not looked for".into());
                None
            }
            (Some(Err(why)), _) => {
                bar_failure = Some(why.to_string());
                None
            }
            (None, _) => {
                bar_failure = Some("the image was not searched for a scale bar".into());
                None
            }
        },
        (None, false) => None,
    };
    if let Some(len) = &length {
        match bar {
            Some(Ok(b)) => {
                let o = from_bar(b, len)?;
                if b.length_px < SHORT_BAR_PX {
                    warnings.push(Warning::new(
                        "calibration.short-bar",
                        format!(
                            "the scale bar is only {:.1} px long: its calibration is uncertain by about 1 % or more",
                            b.length_px
                        ),
                    ));
                }
                offers.push(o);
                used_bar = Some(b.clone());
            }
            Some(Err(why)) => bar_failure = Some(why.to_string()),
            None => bar_failure = Some("the image was not searched for a scale bar".into()),
        }
    }
    if let Some(v) = metadata {
        offers.push(Offer {
            source: CalibrationSource::FileMetadata,
            um_per_px: v,
            rel_uncertainty: None,
        });
    }
    offers.sort_by_key(|o| o.source);
    let trusted = match req.trust {
        Some(t) => Some(offers.iter().copied().find(|o| o.source == t).ok_or_else(|| {
            Error::Calibration {
                reason: format!(
                    "the {} calibration is named as trusted, but this image has none (sources offered: {})",
                    t.name(),
                    if offers.is_empty() {
                        "none".to_string()
                    } else {
                        offers.iter().map(|o| o.source.name()).collect::<Vec<_>>().join(", ")
                    }
                ),
            }
        })?),
        None => None,
    };
    let Some(chosen) = trusted.or_else(|| offers.first().copied()) else {
        return Err(Error::Calibration {
            reason: match bar_failure {
                Some(why) if req.read_label && req.scale_bar.is_none() => format!(
                    "no calibration from the scale bar ({why}); pass --um-per-px, --profile or the bar's length (--scale-bar 50um)"
                ),
                Some(why) => format!(
                    "no scale bar found with confidence ({why}); pass --um-per-px or --profile"
                ),
                None => "no calibration: give --um-per-px, --profile or --scale-bar (the file has no usable resolution tags)".into(),
            },
        });
    };
    if let Some(reason) = bar_failure {
        warnings.push(Warning::new(
            if req.read_label && req.scale_bar.is_none() {
                "calibration.label-not-read"
            } else {
                "calibration.bar-not-found"
            },
            format!(
                "no scale bar found with confidence ({reason}); the {} calibration is used",
                chosen.source.name()
            ),
        ));
    }
    let conflict = if req.trust.is_none() {
        conflict_of(&offers)
    } else {
        None
    };
    if let Some(c) = &conflict {
        warnings.push(Warning::new("calibration.conflict", c.clone()));
    }
    for o in offers.iter().filter(|o| o.source != chosen.source) {
        let diff = o.um_per_px.get() / chosen.um_per_px.get() - 1.0;
        if diff.abs() > DISAGREEMENT && conflict.is_none() {
            warnings.push(Warning::new(
                "calibration.sources-disagree",
                format!(
                    "calibration sources disagree: {} gives {:.6} um/px, {} gives {:.6} um/px ({:+.1} %); {} is used",
                    chosen.source.name(),
                    chosen.um_per_px.get(),
                    o.source.name(),
                    o.um_per_px.get(),
                    100.0 * diff,
                    chosen.source.name()
                ),
            ));
        }
    }
    let bar = (chosen.source == CalibrationSource::ScaleBar)
        .then_some(used_bar)
        .flatten();
    let label = match (read, label) {
        (Some(l), _) => Some(l),
        (None, Some(Ok(l))) if req.scale_bar.is_some() => Some(l.clone()),
        _ => None,
    };
    Ok((
        Calibration {
            um_per_px: chosen.um_per_px,
            source: chosen.source,
            rel_uncertainty: chosen.rel_uncertainty,
            bar,
            label,
            offers,
            conflict,
        },
        warnings,
    ))
}

/// The first conflict between two calibrations the user gave (a value, a
/// profile, a measured scale bar): values whose ratio differs from 1 by more
/// than both [`DISAGREEMENT`] and 1.96 times their combined relative
/// standard uncertainty (JCGM 100:2008, 5.1.2; a source without a stated
/// uncertainty counts as exact), i.e. a difference their uncertainties do
/// not explain. The file's resolution tags are left out: cameras write a
/// default resolution (often 72 or 96 dpi) that says nothing of the
/// objective, so a disagreement with them is usual and only warned about.
fn conflict_of(offers: &[Offer]) -> Option<String> {
    let given: Vec<&Offer> = offers
        .iter()
        .filter(|o| o.source != CalibrationSource::FileMetadata)
        .collect();
    for (i, a) in given.iter().enumerate() {
        for b in &given[i + 1..] {
            let ratio = b.um_per_px.get() / a.um_per_px.get();
            let u = a
                .rel_uncertainty
                .unwrap_or(0.0)
                .hypot(b.rel_uncertainty.unwrap_or(0.0));
            let allowed = DISAGREEMENT.max(crate::stats::Z95 * u);
            if (ratio - 1.0).abs() > allowed {
                return Some(format!(
                    "calibration sources conflict: {} gives {:.6} um/px, {} gives {:.6} um/px ({:+.1} %, beyond the {:.1} % their uncertainties allow); the image cannot be decided until one is named as trusted (--trust-calibration {} or {})",
                    a.source.name(),
                    a.um_per_px.get(),
                    b.source.name(),
                    b.um_per_px.get(),
                    100.0 * (ratio - 1.0),
                    100.0 * allowed,
                    a.source.name(),
                    b.source.name()
                ));
            }
        }
    }
    None
}

/// Parses a user-given micrometres-per-pixel value, naming the problem.
pub fn parse_um_per_px(text: &str) -> Result<UmPerPx> {
    let v: f64 = text.trim().parse().map_err(|_| Error::Value {
        reason: format!("'{text}' is not a number"),
    })?;
    UmPerPx::new(v)
}

/// What `--scale-bar` asks for: the bar's length as given, or read from
/// its label (`auto`).
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ScaleBarLength {
    Given(Micrometres),
    Read,
}

/// Parses `--scale-bar`: `auto`, or a length with its unit.
pub fn parse_scale_bar(text: &str) -> Result<ScaleBarLength> {
    if text.trim().eq_ignore_ascii_case("auto") {
        Ok(ScaleBarLength::Read)
    } else {
        parse_length(text).map(ScaleBarLength::Given)
    }
}

/// Parses a length with its unit: um (also µm with the micro sign or the
/// Greek mu), nm or mm, with or without a space: "100um", "0.5 mm".
pub fn parse_length(text: &str) -> Result<Micrometres> {
    let unusable = |reason: String| Error::Value { reason };
    let t = text.trim();
    let split = t
        .char_indices()
        .find(|(_, c)| !(c.is_ascii_digit() || matches!(c, '.' | '+' | '-' | 'e' | 'E')))
        .map(|(i, _)| i)
        .unwrap_or(t.len());
    // An exponent letter directly followed by a unit ("1e2um") is fine; a
    // bare "e" unit is not a unit we accept anyway.
    let (num, unit) = t.split_at(split);
    let unit = unit.trim();
    let value: f64 = num
        .trim()
        .parse()
        .map_err(|_| unusable(format!("'{text}': no number before the unit")))?;
    let factor = match unit {
        "um" | "\u{00b5}m" | "\u{03bc}m" => 1.0,
        "nm" => 1e-3,
        "mm" => 1e3,
        "" => {
            return Err(unusable(format!(
                "'{text}' has no unit: write it as 100um, 100µm, 0.1mm or 100000nm"
            )))
        }
        other => {
            return Err(unusable(format!(
                "'{text}': unknown unit '{other}' (accepted: um, µm, nm, mm)"
            )))
        }
    };
    let um = value * factor;
    if !(um.is_finite() && um > 0.0) {
        return Err(unusable(format!("'{text}' is not a positive length")));
    }
    Ok(Micrometres(um))
}

/// Micrometres per pixel from TIFF resolution tags (pixels per unit, with
/// ResolutionUnit 2 = inch, 3 = centimetre; TIFF 6.0, section 8). Unit 1
/// (none) carries no physical scale. Values coarser than 50 um/px (under
/// about 500 pixels per inch) are the screen or print resolutions that image
/// software writes by default, not a microscope calibration, and are ignored
/// with a note.
pub fn from_resolution(
    x_per_unit: f64,
    y_per_unit: f64,
    unit: u16,
) -> Result<(UmPerPx, Vec<String>)> {
    let unusable = |reason: String| Err(Error::Calibration { reason });
    let unit_um = match unit {
        2 => 25_400.0,
        3 => 10_000.0,
        1 => return unusable("the resolution tags have no unit (ResolutionUnit = 1)".into()),
        other => return unusable(format!("unknown ResolutionUnit {other}")),
    };
    if !(x_per_unit.is_finite() && x_per_unit > 0.0) {
        return unusable(format!("XResolution {x_per_unit} is not usable"));
    }
    let um = unit_um / x_per_unit;
    if um > 50.0 {
        return unusable(format!(
            "the resolution tags give {um:.1} um/px, a screen or print resolution, not a calibration"
        ));
    }
    let mut notes = Vec::new();
    if y_per_unit.is_finite() && y_per_unit > 0.0 && (y_per_unit / x_per_unit - 1.0).abs() > 0.01 {
        notes.push(format!(
            "the resolution tags give non-square pixels ({:.6} x {:.6} um); the horizontal value is used",
            um,
            unit_um / y_per_unit
        ));
    }
    Ok((UmPerPx::new(um)?, notes))
}

#[cfg(test)]
mod tests;
