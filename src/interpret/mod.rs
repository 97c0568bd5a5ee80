//! Interpretation of a measured SDAS: what it says about how that spot of
//! the casting solidified.
//!
//! Published correlations tie lambda2 to the cooling rate
//! (lambda2 = A x CR^-n) and to the local solidification time
//! (lambda2 = B x t_f^m); the coarsening model gives the second form with
//! m = 1/3 from alloy parameters. The correlations are data
//! ([`library`], with [`coarsening`] for the model).
//!
//! Both forms are `lambda2 = coefficient x x^exponent` ([`PowerLaw`]) with a
//! positive coefficient and a non-zero exponent; a measured lambda2 is
//! inverted as x = (lambda2 / coefficient)^(1 / exponent). The inverse is
//! monotonic, so a confidence interval of lambda2 maps to one of x by
//! transforming its bounds (swapped when the exponent is negative).
//!
//! Uncertainty ([`interpret`]): the SDAS 95 % interval and the correlation's
//! published scatter (one standard deviation of lambda2 about the fit, s %)
//! are combined in log space, side by side:
//! d = sqrt( ln(value / bound)^2 + (z ln(1 + s/100))^2 ), with z = 1.959964
//! the 0.975 normal quantile (`stats::Z95`),
//! and the widened interval [value e^-d_low, value e^+d_high] is inverted.
//! A relative uncertainty u of lambda2 becomes about u / exponent in the
//! inverted quantity: 10 % in SDAS is about 30 % in t_f when m is near 1/3.
//! This gain is reported with each result.

pub mod acceptance;
mod alternatives;
pub mod coarsening;
pub mod library;
pub mod plausibility;
pub mod pool;
pub use alternatives::{interpret_with_alternatives, same_family};

pub use library::{Composition, Correlation, Form};

use crate::units::{Kelvin, KelvinPerSecond, Micrometres, Seconds};
use crate::{Error, Result};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// lambda2 (um) = coefficient x x^exponent, x in the law's own unit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PowerLaw {
    pub coefficient: f64,
    pub exponent: f64,
}

impl PowerLaw {
    pub fn new(coefficient: f64, exponent: f64) -> Result<Self> {
        if !(coefficient.is_finite() && coefficient > 0.0) {
            return Err(Error::Correlation {
                reason: format!("coefficient {coefficient} must be a positive number"),
            });
        }
        if !(exponent.is_finite() && exponent != 0.0) {
            return Err(Error::Correlation {
                reason: format!("exponent {exponent} must be a non-zero number"),
            });
        }
        // The inverse raises to 1 / exponent: an exponent whose reciprocal
        // overflows f64 (below about 5.6e-309 in magnitude) cannot be
        // inverted, and would report an infinite uncertainty gain.
        if !(1.0 / exponent).is_finite() {
            return Err(Error::Correlation {
                reason: format!(
                    "exponent {} is too close to zero to invert the law",
                    crate::units::fmt_num(exponent)
                ),
            });
        }
        Ok(Self {
            coefficient,
            exponent,
        })
    }

    /// lambda2 predicted at x (x > 0).
    pub fn predict(&self, x: f64) -> Option<Micrometres> {
        (x.is_finite() && x > 0.0).then(|| Micrometres(self.coefficient * x.powf(self.exponent)))
    }

    /// x at which the law gives `lambda2`; None when there is no finite
    /// positive one (a coefficient so far from lambda2 that the power
    /// overflows to infinity or underflows to 0: no cooling rate or time).
    pub fn invert(&self, lambda2: Micrometres) -> Option<f64> {
        let l = lambda2.0;
        (l.is_finite() && l > 0.0)
            .then(|| (l / self.coefficient).powf(1.0 / self.exponent))
            .filter(|x| x.is_finite() && *x > 0.0)
    }

    /// Interval of x for an interval of lambda2, lower bound first.
    pub fn invert_interval(&self, low: Micrometres, high: Micrometres) -> Option<[f64; 2]> {
        let a = self.invert(low)?;
        let b = self.invert(high)?;
        Some(if a <= b { [a, b] } else { [b, a] })
    }
}

/// What is known about the measured lambda2 and the alloy.
#[derive(Clone, Debug, Default)]
pub struct Request {
    pub sdas: Option<Micrometres>,
    /// 95 % interval of the SDAS, lower bound first.
    pub ci95: Option<[Micrometres; 2]>,
    pub composition: Composition,
    /// Freezing range used to link the forms: t_f = freezing range / CR.
    pub freezing_range: Option<Kelvin>,
    /// Report values more than 3x beyond the fitted range.
    pub extrapolate: bool,
}

/// An inverted quantity in the tool's units (K/s or s).
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize, JsonSchema)]
#[schemars(rename = "quantity", deny_unknown_fields)]
pub struct Quantity {
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub value: Option<f64>,
    pub ci95: Option<[f64; 2]>,
    /// Relative deviation of the interval's bounds from the value, percent.
    pub ci95_rel_pct: Option<[f64; 2]>,
    /// Relative uncertainty here per relative uncertainty of the SDAS (1/exponent).
    pub uncertainty_gain: Option<f64>,
    /// How the value was obtained ("correlation" or "freezing range / ...").
    #[schemars(extend("enum" = [
        "correlation",
        "freezing range / cooling rate",
        "freezing range / solidification time",
        null
    ]))]
    #[serde(deserialize_with = "crate::report::names::optional_name")]
    pub derived: Option<crate::report::names::Name>,
    /// Why there is no value, when there is none.
    pub reason: Option<String>,
    /// The 95 % interval with the correlation's published scatter combined
    /// with the SDAS's (module docs); null when no scatter is published, in
    /// which case `ci95` leaves the law's own scatter out.
    #[schemars(
        description = "The 95 % interval with the correlation's published scatter combined with the SDAS's (in log space); null when no scatter is published, in which case ci95 leaves the law's own scatter out."
    )]
    pub ci95_with_scatter: Option<[f64; 2]>,
}

impl Quantity {
    /// The same quantity with values to 4 significant digits, for reports.
    pub fn rounded(&self) -> Self {
        let r = |x: f64| round_significant(x, 4);
        Self {
            value: self.value.map(r),
            ci95: self.ci95.map(|[a, b]| [r(a), r(b)]),
            ci95_rel_pct: self
                .ci95_rel_pct
                .map(|[a, b]| [round_significant(a, 3), round_significant(b, 3)]),
            uncertainty_gain: self.uncertainty_gain.map(r),
            derived: self.derived,
            reason: self.reason.clone(),
            ci95_with_scatter: self.ci95_with_scatter.map(|[a, b]| [r(a), r(b)]),
        }
    }

    fn none(reason: String) -> Self {
        Self {
            reason: Some(reason),
            ..Self::default()
        }
    }
}

/// Cooling rate and local solidification time from the image's SDAS
/// through a published correlation (with --correlation).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[schemars(rename = "interpretation", deny_unknown_fields)]
pub struct Interpretation {
    pub correlation: CorrelationRef,
    pub sdas_um: Option<f64>,
    pub sdas_ci95_um: Option<[f64; 2]>,
    /// The SDAS interval's bounds relative to its value, percent.
    pub sdas_ci95_rel_pct: Option<[f64; 2]>,
    #[serde(rename = "cooling_rate_K_per_s")]
    pub cooling_rate_k_per_s: Quantity,
    pub solidification_time_s: Quantity,
    #[serde(rename = "freezing_range_K")]
    pub freezing_range_k: Option<f64>,
    pub warnings: Vec<String>,
    /// Whether the correlation's scatter is published (then it is in
    /// `ci95_with_scatter`); when false the intervals exclude it.
    pub scatter_published: bool,
    /// For an alternative: how it compares with the chosen law.
    pub comparison: Option<Comparison>,
    /// The other laws of the same alloy family that apply to the
    /// composition, each interpreted the same way.
    pub alternatives: Vec<Interpretation>,
    /// Laws of the family that do not apply here, with the reason.
    pub alternatives_not_applicable: Vec<NotApplicable>,
}

/// An alternative law set beside the chosen one.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[schemars(deny_unknown_fields)]
pub struct Comparison {
    /// The quantity compared (a report field name), null when the two laws
    /// give no common quantity.
    #[schemars(extend("enum" = ["cooling_rate_K_per_s", "solidification_time_s", null]))]
    #[serde(deserialize_with = "crate::report::names::optional_name")]
    pub quantity: Option<crate::report::names::Name>,
    /// The chosen law's value and interval of that quantity.
    pub chosen_value: Option<f64>,
    pub chosen_ci95: Option<[f64; 2]>,
    /// This law's value and interval.
    pub value: Option<f64>,
    pub ci95: Option<[f64; 2]>,
    /// This law's value over the chosen one's.
    pub ratio: Option<f64>,
    /// Whether the two intervals overlap; null without an interval on
    /// either side.
    pub intervals_overlap: Option<bool>,
    pub note: String,
}

/// A law of the family that does not apply to the composition given.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[schemars(deny_unknown_fields)]
pub struct NotApplicable {
    pub id: String,
    pub reason: String,
}

impl Interpretation {
    /// The cooling rate, when there is one, in its unit.
    pub fn cooling_rate(&self) -> Option<KelvinPerSecond> {
        self.cooling_rate_k_per_s.value.map(KelvinPerSecond)
    }

    /// The local solidification time, when there is one, in its unit.
    pub fn solidification_time(&self) -> Option<Seconds> {
        self.solidification_time_s.value.map(Seconds)
    }

    /// The same interpretation with numbers to 4 significant digits, for
    /// reports (the inputs are not more precise than that).
    pub fn rounded(&self) -> Self {
        let r = |x: f64| round_significant(x, 4);
        let mut out = self.clone();
        out.correlation.coefficient_um = r(out.correlation.coefficient_um);
        out.correlation.exponent = r(out.correlation.exponent);
        out.sdas_um = out.sdas_um.map(r);
        out.sdas_ci95_um = out.sdas_ci95_um.map(|[a, b]| [r(a), r(b)]);
        out.sdas_ci95_rel_pct = out
            .sdas_ci95_rel_pct
            .map(|[a, b]| [round_significant(a, 3), round_significant(b, 3)]);
        out.cooling_rate_k_per_s = out.cooling_rate_k_per_s.rounded();
        out.solidification_time_s = out.solidification_time_s.rounded();
        if let Some(fr) = &mut out.correlation.fitted_range {
            fr.min = fr.min.map(r);
            fr.max = fr.max.map(r);
        }
        if let Some(c) = &mut out.comparison {
            c.chosen_value = c.chosen_value.map(r);
            c.chosen_ci95 = c.chosen_ci95.map(|[a, b]| [r(a), r(b)]);
            c.value = c.value.map(r);
            c.ci95 = c.ci95.map(|[a, b]| [r(a), r(b)]);
            c.ratio = c.ratio.map(|x| round_significant(x, 3));
        }
        out.alternatives = out.alternatives.iter().map(Self::rounded).collect();
        out
    }
}

/// Rounds to `digits` significant digits (0 and non-finite values unchanged).
pub fn round_significant(x: f64, digits: i32) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    // Below about 1e-290 the scale 10^(digits - 1 - exponent) overflows f64
    // (10^309 for x = 1e-306 and 4 digits, and x * inf / inf is NaN): such a
    // value is rounded at a scale 10^300 larger, then brought back.
    if x.abs() < 1e-290 {
        return round_significant(x * 1e300, digits) / 1e300;
    }
    let scale = 10f64.powi(digits - 1 - x.abs().log10().floor() as i32);
    let r = (x * scale).round() / scale;
    // Rounding up a value within one unit of the last digit of f64::MAX
    // would overflow: such a value is kept as it is.
    if r.is_finite() {
        r
    } else {
        x
    }
}

/// The correlation used, as the report names it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct CorrelationRef {
    pub id: String,
    #[schemars(with = "library::Form")]
    #[serde(deserialize_with = "crate::report::names::name")]
    pub form: crate::report::names::Name,
    pub law: String,
    #[schemars(with = "library::Status")]
    #[serde(deserialize_with = "crate::report::names::name")]
    pub status: crate::report::names::Name,
    pub source: String,
    /// The law's coefficient at the given composition: lambda2 (um) =
    /// coefficient x x^exponent, x in `variable_unit`.
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub coefficient_um: f64,
    pub exponent: f64,
    #[serde(deserialize_with = "crate::report::names::name")]
    pub variable_unit: crate::report::names::Name,
    /// The family the law is for; the alternatives are the other laws of it.
    pub alloy_family: String,
    /// Composition limits and fitted range in words, with the status of
    /// bounds not read in the source.
    pub validity: String,
    /// The fitted range of the variable (in `variable_unit`) at this
    /// composition, with where its bounds come from; null when not on record.
    pub fitted_range: Option<library::Range>,
    /// One standard deviation of lambda2 about the fit, percent; null when
    /// not published.
    pub scatter_pct: Option<f64>,
    /// How lambda2 was measured in the source, or "unknown".
    pub measuring_convention: String,
}

/// A value more than this factor outside the fitted range is given only on
/// request (an explicit extrapolation).
pub const FAR_OUTSIDE: f64 = 3.0;

/// Inverts the SDAS with a correlation: cooling rate and solidification time
/// with 95 % intervals, and the warnings a reader needs. Errors are about
/// the request (a composition the correlation needs or excludes).
pub fn interpret(corr: &Correlation, req: &Request) -> Result<Interpretation> {
    let law = corr.power_law(&req.composition)?;
    let mut warnings = Vec::new();
    match corr.status {
        library::Status::FromMemory => warnings.push(format!(
            "correlation '{}' has coefficients from memory, not read in its source: check them before relying on the result",
            corr.id
        )),
        library::Status::Model => warnings.push(format!(
            "correlation '{}' is a physical model with textbook parameters, not a fit to castings of this alloy",
            corr.id
        )),
        _ => {}
    }
    if let library::Law::Coarsening(p) = &corr.law {
        if !req.composition.contains_key(&p.solute) {
            if let Some(c0) = &p.c0_wt_pct {
                warnings.push(format!(
                    "no {s} content given: the model uses its default C0 = {} wt% {s}; give the alloy's own with --composition {s}=<wt%>",
                    c0.value,
                    s = p.solute
                ));
            }
        }
        if let Some(w) = p.phase_diagram_mismatch() {
            warnings.push(format!("correlation '{}': {w}", corr.id));
        }
        // A parameter recalled rather than read moves M by as much as it is
        // off (M is proportional to Gamma and D, inversely to |m|): the
        // reader is told which ones, so that they can be checked.
        let recalled = p.recalled();
        if !recalled.is_empty() {
            warnings.push(format!(
                "correlation '{}': the model's {} from memory, not read in a publication at hand: check before relying on the result",
                corr.id,
                match recalled.as_slice() {
                    [one] => format!("{one} is"),
                    more => format!("{} are", more.join(", ")),
                }
            ));
        }
    }
    // A composition limit on an element not given is not checked: the
    // entry is applied on the reader's word that the alloy is inside it.
    for (el, r) in &corr.composition {
        let needed = match &corr.law {
            library::Law::Power { coefficient, .. } => {
                coefficient.elements().contains(&el.as_str())
            }
            library::Law::Coarsening(p) => p.solute == *el,
        };
        if !needed && !req.composition.contains_key(el) {
            warnings.push(format!(
                "no {el} content given: '{}' covers {el} {} wt% only, which could not be checked; give it with --composition {el}=<wt%>",
                corr.id,
                library::range_text(r)
            ));
        }
    }
    // Composition limits that are not the source's are said on every result.
    for (el, r) in &corr.composition {
        if !r.is_from_source() {
            warnings.push(format!(
                "the {el} limits {} wt% of '{}' are {}, not read in its source",
                library::range_text(r),
                corr.id,
                r.status.as_deref().unwrap_or("unknown")
            ));
        }
    }
    let fitted = corr.variable_range(&law);
    let corr_ref = CorrelationRef {
        id: corr.id.clone(),
        form: corr.form.name(),
        law: corr.law_text(),
        status: corr.status.name(),
        source: format!(
            "{}: {}. {}",
            corr.source.short(),
            corr.source.title,
            corr.source.published_in
        ),
        coefficient_um: law.coefficient,
        exponent: law.exponent,
        variable_unit: corr.variable_unit.name,
        alloy_family: corr.alloy_family.clone(),
        validity: corr.validity_text(),
        fitted_range: fitted.clone(),
        scatter_pct: corr.scatter_pct,
        measuring_convention: corr.measuring_convention.value.clone(),
    };
    let freezing = req.freezing_range.map(|k| k.0);
    let mut out = Interpretation {
        correlation: corr_ref,
        sdas_um: req.sdas.map(|s| s.0),
        sdas_ci95_um: req.ci95.map(|[a, b]| [a.0, b.0]),
        sdas_ci95_rel_pct: None,
        cooling_rate_k_per_s: Quantity::default(),
        solidification_time_s: Quantity::default(),
        freezing_range_k: freezing,
        warnings,
        scatter_published: corr.scatter_pct.is_some(),
        comparison: None,
        alternatives: Vec::new(),
        alternatives_not_applicable: Vec::new(),
    };
    let Some(sdas) = req.sdas.filter(|s| s.0.is_finite() && s.0 > 0.0) else {
        let reason = "no SDAS value to interpret".to_string();
        out.cooling_rate_k_per_s = Quantity::none(reason.clone());
        out.solidification_time_s = Quantity::none(reason);
        return Ok(out);
    };
    out.sdas_ci95_rel_pct = req.ci95.and_then(|[a, b]| rel_pct(sdas.0, [a.0, b.0]));

    // The primary quantity, in the correlation's own unit, then in K/s or s.
    let beyond = || {
        Error::Correlation {
        reason: format!(
            "correlation '{}' ({}) gives no finite positive {} at {} um: its coefficient or exponent is beyond any physical range",
            corr.id,
            corr.law_text(),
            match corr.form {
                Form::CoolingRate => "cooling rate",
                _ => "solidification time",
            },
            round_significant(sdas.0, 4)
        ),
    }
    };
    let x = law.invert(sdas).ok_or_else(beyond)?;
    let to_base = corr.variable_unit.to_base;
    // In the tool's unit the value may leave the range of f64 although it
    // is finite in the law's own (1e307 min is beyond it in seconds; a
    // rate near the smallest f64 in K/h underflows to 0 in K/s): then there
    // is no value either.
    let value = x * to_base;
    if !(value.is_finite() && value > 0.0) {
        return Err(beyond());
    }
    let gain = 1.0 / law.exponent.abs();
    // The measurement's part alone (ci95), and with the correlation's own
    // scatter when it is published (ci95_with_scatter); reported apart so a
    // reader sees which part dominates.
    let measured = sdas_interval(sdas.0, req.ci95, None);
    let with_scatter = corr
        .scatter_pct
        .and_then(|s| sdas_interval(sdas.0, req.ci95, Some(s)));
    // An interval whose bound leaves the range of f64 (overflows to
    // infinity or underflows to 0) in the tool's unit is no interval.
    let invert = |i: Option<[f64; 2]>| {
        i.and_then(|[lo, hi]| {
            law.invert_interval(Micrometres(lo), Micrometres(hi))
                .map(|[a, b]| [a * to_base, b * to_base])
                .filter(|&b| positive_finite(b))
        })
    };
    match (req.ci95.is_some(), corr.scatter_pct.is_some()) {
        (_, false) => out.warnings.push(format!(
            "correlation '{}' has no published scatter on record: the intervals carry the SDAS uncertainty only, not the scatter of the law itself (ci95_with_scatter is null)",
            corr.id
        )),
        (false, true) => out.warnings.push(
            "no SDAS interval given: ci95_with_scatter carries the correlation's scatter only".into(),
        ),
        _ => {}
    }
    let mut primary = Quantity {
        value: Some(value),
        ci95: invert(measured),
        ci95_rel_pct: None,
        uncertainty_gain: Some(gain),
        derived: Some("correlation"),
        reason: None,
        ci95_with_scatter: invert(with_scatter),
    };
    if let Some(ci) = primary.ci95 {
        primary.ci95_rel_pct = rel_pct(value, ci);
    }
    if primary.ci95.is_none() && primary.ci95_with_scatter.is_none() {
        primary.reason = Some("no interval: give the SDAS interval (--ci) or use a correlation with a published scatter".into());
    }

    // Range of validity.
    let var_name = match corr.form {
        Form::CoolingRate => "cooling rate",
        _ => "solidification time",
    };
    match &fitted {
        None => out.warnings.push(format!(
            "the fitted range of '{}' is not on record: whether this {var_name} is an extrapolation cannot be checked",
            corr.id
        )),
        Some(r) => {
            let range = format!(
                "{}-{} {}",
                r.min.map_or("?".into(), |v| format!("{}", round_significant(v, 4))),
                r.max.map_or("?".into(), |v| format!("{}", round_significant(v, 4))),
                corr.variable_unit.name
            );
            if !r.is_from_source() {
                out.warnings.push(format!(
                    "the fitted range of '{}' is not on record: the range {range} checked here is {}, not the source's",
                    corr.id,
                    match r.status.as_deref() {
                        Some("assumed") => "a conservative guard assumed by armspace",
                        Some("from memory") => "recalled (from memory)",
                        _ => "of unknown origin",
                    }
                ));
            }
            let below = r.min.filter(|&m| x < m);
            let above = r.max.filter(|&m| x > m);
            let far = below.is_some_and(|m| x < m / FAR_OUTSIDE)
                || above.is_some_and(|m| x > m * FAR_OUTSIDE);
            if below.is_some() || above.is_some() {
                let text = format!(
                    "{var_name} {} {} is outside the fitted range {range}",
                    round_significant(x, 4),
                    corr.variable_unit.name
                );
                if far && !req.extrapolate {
                    primary = Quantity::none(format!(
                        "{text}, by more than {FAR_OUTSIDE}x: not given (use the explicit extrapolation flag --extrapolate to report it)"
                    ));
                } else if far {
                    out.warnings.push(format!("{text}, by more than {FAR_OUTSIDE}x: extrapolated on request"));
                } else {
                    out.warnings.push(text);
                }
            }
        }
    }

    // The other quantity through t_f = freezing range / CR.
    let linked = match (freezing, primary.value) {
        (Some(dt), Some(v)) => {
            let derived = match corr.form {
                Form::CoolingRate => "freezing range / cooling rate",
                _ => "freezing range / solidification time",
            };
            // t_f = dT / CR, or CR = dT / t_f, by the units' own types.
            let across = |x: f64| match corr.form {
                Form::CoolingRate => (Kelvin(dt) / KelvinPerSecond(x)).0,
                _ => (Kelvin(dt) / Seconds(x)).0,
            };
            let value = across(v);
            // The quotient of two finite numbers can still leave the range
            // of f64 (a freezing range over a rate near the smallest f64):
            // then there is no value, or no interval, and the reason says so.
            let bounds = |i: Option<[f64; 2]>| {
                i.map(|[a, b]| [across(b), across(a)])
                    .filter(|&b| positive_finite(b))
            };
            if !(value.is_finite() && value > 0.0) {
                Quantity::none(format!(
                    "freezing range / {var_name} is beyond the range of numbers armspace holds"
                ))
            } else {
                let ci95 = bounds(primary.ci95);
                Quantity {
                    value: Some(value),
                    ci95,
                    ci95_rel_pct: ci95.and_then(|c| rel_pct(value, c)),
                    uncertainty_gain: Some(gain),
                    derived: Some(derived),
                    reason: None,
                    ci95_with_scatter: bounds(primary.ci95_with_scatter),
                }
            }
        }
        (Some(_), None) => Quantity::none(format!("no {var_name} to derive it from")),
        (None, _) => Quantity::none(
            "derived only with a freezing range (--freezing-range): t_f = freezing range / cooling rate".into(),
        ),
    };
    match corr.form {
        Form::CoolingRate => {
            out.cooling_rate_k_per_s = primary;
            out.solidification_time_s = linked;
        }
        _ => {
            out.solidification_time_s = primary;
            out.cooling_rate_k_per_s = linked;
        }
    }
    Ok(out)
}

/// The SDAS interval widened by the correlation's scatter (module docs);
/// None when neither is known.
fn sdas_interval(
    value: f64,
    ci95: Option<[Micrometres; 2]>,
    scatter_pct: Option<f64>,
) -> Option<[f64; 2]> {
    let fit = scatter_pct.map_or(0.0, |s| crate::stats::Z95 * (1.0 + s / 100.0).ln());
    let (d_lo, d_hi) = match ci95 {
        Some([lo, hi]) if lo.0 > 0.0 && hi.0 >= lo.0 => {
            ((value / lo.0).ln().max(0.0), (hi.0 / value).ln().max(0.0))
        }
        _ if scatter_pct.is_some() => (0.0, 0.0),
        _ => return None,
    };
    let lo = value * (-(d_lo.hypot(fit))).exp();
    let hi = value * d_hi.hypot(fit).exp();
    Some([lo, hi])
}

/// Relative deviations of the bounds from the value, percent; None when
/// they overflow f64 (an interval spanning hundreds of decades).
fn rel_pct(value: f64, [lo, hi]: [f64; 2]) -> Option<[f64; 2]> {
    let r = [100.0 * (lo / value - 1.0), 100.0 * (hi / value - 1.0)];
    r.iter().all(|v| v.is_finite()).then_some(r)
}

/// Both bounds finite and above zero.
fn positive_finite([a, b]: [f64; 2]) -> bool {
    a.is_finite() && b.is_finite() && a > 0.0 && b > 0.0
}

/// The interpretation asked for a batch: a correlation and the alloy.
#[derive(Clone, Debug)]
pub struct Settings {
    pub correlation: Correlation,
    /// The library the correlation comes from: its other entries of the
    /// same family are interpreted beside it.
    pub library: Vec<Correlation>,
    pub composition: Composition,
    pub freezing_range: Option<Kelvin>,
    pub extrapolate: bool,
}

impl Settings {
    /// Checks once, before a batch, that the correlation applies to the
    /// composition given.
    pub fn check(&self) -> Result<()> {
        self.correlation.power_law(&self.composition).map(|_| ())
    }

    /// The interpretation of one image's SDAS.
    pub fn apply(
        &self,
        sdas: Option<Micrometres>,
        ci95: Option<[Micrometres; 2]>,
    ) -> Result<Interpretation> {
        interpret_with_alternatives(
            &self.correlation,
            &self.library,
            &Request {
                sdas,
                ci95,
                composition: self.composition.clone(),
                freezing_range: self.freezing_range,
                extrapolate: self.extrapolate,
            },
        )
    }
}

impl Settings {
    /// The cooling rate and solidification time of a local SDAS (a point,
    /// a profile's bin, a map's cell): the chosen law only, without its
    /// alternatives, which the image's interpretation already sets beside
    /// it.
    pub fn local(
        &self,
        sdas: Option<Micrometres>,
        ci95: Option<[Micrometres; 2]>,
    ) -> Result<LocalTimes> {
        let i = interpret(
            &self.correlation,
            &Request {
                sdas,
                ci95,
                composition: self.composition.clone(),
                freezing_range: self.freezing_range,
                extrapolate: self.extrapolate,
            },
        )?
        .rounded();
        Ok(LocalTimes {
            cooling_rate_k_per_s: i.cooling_rate_k_per_s,
            solidification_time_s: i.solidification_time_s,
        })
    }
}

/// The cooling rate and solidification time of a local SDAS.
#[derive(Clone, Debug, PartialEq)]
pub struct LocalTimes {
    pub cooling_rate_k_per_s: Quantity,
    pub solidification_time_s: Quantity,
}

/// The symbols of the 118 named chemical elements, by atomic number (IUPAC
/// Periodic Table of the Elements, with the names of elements 113, 115, 117
/// and 118 approved in 2016).
pub const ELEMENT_SYMBOLS: [&str; 118] = [
    "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al", "Si", "P", "S", "Cl",
    "Ar", "K", "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn", "Ga", "Ge", "As",
    "Se", "Br", "Kr", "Rb", "Sr", "Y", "Zr", "Nb", "Mo", "Tc", "Ru", "Rh", "Pd", "Ag", "Cd", "In",
    "Sn", "Sb", "Te", "I", "Xe", "Cs", "Ba", "La", "Ce", "Pr", "Nd", "Pm", "Sm", "Eu", "Gd", "Tb",
    "Dy", "Ho", "Er", "Tm", "Yb", "Lu", "Hf", "Ta", "W", "Re", "Os", "Ir", "Pt", "Au", "Hg", "Tl",
    "Pb", "Bi", "Po", "At", "Rn", "Fr", "Ra", "Ac", "Th", "Pa", "U", "Np", "Pu", "Am", "Cm", "Bk",
    "Cf", "Es", "Fm", "Md", "No", "Lr", "Rf", "Db", "Sg", "Bh", "Hs", "Mt", "Ds", "Rg", "Cn", "Nh",
    "Fl", "Mc", "Lv", "Ts", "Og",
];

/// Whether `s` is the symbol of a chemical element (case as written:
/// "Si", not "SI" or "si").
pub fn is_element_symbol(s: &str) -> bool {
    ELEMENT_SYMBOLS.contains(&s)
}

/// Parses "C=0.1,Si=7" (wt%) into a composition.
pub fn parse_composition(text: &str) -> Result<Composition> {
    let unusable = |reason: String| Error::Value { reason };
    let mut out = Composition::new();
    for part in text.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        let (el, v) = part.split_once('=').ok_or_else(|| {
            unusable(format!(
                "'{part}': write each element as Symbol=wt%, e.g. Si=7"
            ))
        })?;
        let el = el.trim();
        if !is_element_symbol(el) {
            return Err(unusable(format!(
                "'{el}' is not an element symbol (e.g. C, Si, Cu)"
            )));
        }
        let v: f64 = v
            .trim()
            .trim_end_matches("wt%")
            .trim_end_matches('%')
            .trim()
            .parse()
            .map_err(|_| unusable(format!("'{part}': the content is not a number")))?;
        if !(v.is_finite() && (0.0..=100.0).contains(&v)) {
            return Err(unusable(format!(
                "'{part}': the content must be 0 to 100 wt%"
            )));
        }
        if out.insert(el.to_string(), v).is_some() {
            return Err(unusable(format!("'{el}' is given twice")));
        }
    }
    if out.is_empty() {
        return Err(unusable(
            "no element given (e.g. --composition Si=7,Cu=0.2)".into(),
        ));
    }
    Ok(out)
}

/// Parses a temperature interval: "60K", "60 K", "60degC", "60°C" or "60".
pub fn parse_kelvin(text: &str) -> Result<Kelvin> {
    let t = text.trim();
    let num = ["K", "degC", "\u{00b0}C", "C"]
        .iter()
        .find_map(|u| t.strip_suffix(u))
        .unwrap_or(t)
        .trim();
    match num.parse::<f64>() {
        Ok(v) if v.is_finite() && v > 0.0 && v < 2000.0 => Ok(Kelvin(v)),
        _ => Err(Error::Value {
            reason: format!(
                "'{text}' is not a temperature interval between 0 and 2000 K (e.g. 60K)"
            ),
        }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn forward_then_inverse_round_trips() {
        for (c, e) in [
            (50.0, -1.0 / 3.0),
            (7.5, 0.39),
            (97.0, -0.4935),
            (35.5, -0.31),
        ] {
            let law = PowerLaw::new(c, e).expect("valid in this test");
            for x in [0.01, 0.7, 1.0, 12.0, 3000.0] {
                let l = law.predict(x).expect("valid in this test");
                let back = law.invert(l).expect("valid in this test");
                assert!((back / x - 1.0).abs() < 1e-12, "{c} {e} {x}: {back}");
            }
        }
    }

    #[test]
    fn interval_bounds_are_ordered_and_amplified_by_the_exponent() {
        // lambda2 = B t^(1/3): a +-10 % interval of lambda2 spans
        // (1.1/0.9)^3 = 1.826 in t_f (algebra of the power law).
        let law = PowerLaw::new(10.0, 1.0 / 3.0).expect("valid in this test");
        let [lo, hi] = law
            .invert_interval(Micrometres(36.0), Micrometres(44.0))
            .expect("valid in this test");
        assert!(lo < hi);
        assert!((hi / lo - (44.0f64 / 36.0).powi(3)).abs() < 1e-9);
        // A negative exponent (cooling rate) swaps the bounds.
        let law = PowerLaw::new(50.0, -1.0 / 3.0).expect("valid in this test");
        let [lo, hi] = law
            .invert_interval(Micrometres(36.0), Micrometres(44.0))
            .expect("valid in this test");
        assert!(lo < hi && law.invert(Micrometres(44.0)).expect("valid in this test") == lo);
    }

    #[test]
    fn rejects_unusable_laws() {
        assert!(PowerLaw::new(0.0, 0.3).is_err());
        assert!(PowerLaw::new(5.0, 0.0).is_err());
        assert!(PowerLaw::new(f64::NAN, 0.3).is_err());
        let law = PowerLaw::new(5.0, 0.3).expect("valid in this test");
        assert!(law.invert(Micrometres(-1.0)).is_none());
        assert!(law.predict(0.0).is_none());
        // (20 / 1e300)^(1 / 0.33) is about 1e-905, below the smallest f64
        // (IEEE 754 binary64, about 4.9e-324): it underflows to 0, which is
        // no solidification time.
        let absurd = PowerLaw::new(1e300, 0.33).expect("finite and positive");
        assert!(absurd.invert(Micrometres(20.0)).is_none());
    }
}
