//! The coarsening model of secondary arms: lambda2 = K (M t_f)^(1/3).
//!
//! During the local solidification time t_f thin arms dissolve in favour of
//! thick ones, at a rate set by capillarity and solute diffusion in the
//! liquid. The coarsening constant is
//!
//! M = Gamma D ln(C_E / C_0) / ( |m| (1 - k) (C_E - C_0) )   [m^3/s]
//!
//! with Gamma the Gibbs-Thomson coefficient (K m), D the solute diffusivity
//! in the liquid (m^2/s), m the liquidus slope (K/wt%), k the partition
//! coefficient, C_0 the nominal and C_E the eutectic composition (wt%); the
//! usual prefactor is K = 5.5 (W. Kurz, D. J. Fisher, Fundamentals of
//! Solidification, Trans Tech, 1998, after Kattamis and Flemings; the
//! prefactor and this form of M are from memory and marked so in the data).
//! Textbooks write the denominator m (1 - k) (C_0 - C_E); with m < 0 and
//! C_0 < C_E that is the same positive number.
//!
//! The ln(C_E / C_0) comes from integrating over the liquid's composition
//! from C_0 to C_E with one liquidus slope, so m and k must be those of a
//! straight-line phase diagram through the solvent's melting point T_m and
//! the eutectic (T_E, C_E): m = (T_E - T_m) / C_E and k = C_alpha / C_E,
//! with C_alpha the solute's maximum solubility in the solid. An entry that
//! states T_m, T_E and C_alpha is checked against that
//! ([`CoarseningParams::phase_diagram_mismatch`]); a slope read off the
//! curved liquidus near C_0 instead (e.g. -2.65 K/wt% for Al-Cu against the
//! chord's -3.38) makes M wrong by the ratio of the two.

use crate::{Error, Result};
use serde::{Deserialize, Serialize};

/// One model parameter with where it comes from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Param {
    pub value: f64,
    #[serde(default)]
    pub status: Option<String>,
    #[serde(default)]
    pub source: Option<String>,
}

/// As written in a correlation file.
#[derive(Clone, Debug, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CoarseningRaw {
    solute: Option<String>,
    prefactor: Option<Param>,
    #[serde(rename = "gibbs_thomson_K_m")]
    gibbs_thomson_k_m: Option<Param>,
    diffusivity_m2_per_s: Option<Param>,
    #[serde(rename = "liquidus_slope_K_per_wt_pct")]
    liquidus_slope_k_per_wt_pct: Option<Param>,
    partition_coefficient: Option<Param>,
    #[serde(default)]
    c0_wt_pct: Option<Param>,
    ce_wt_pct: Option<Param>,
    #[serde(default, rename = "melting_point_degC")]
    melting_point_degc: Option<Param>,
    #[serde(default, rename = "eutectic_temperature_degC")]
    eutectic_temperature_degc: Option<Param>,
    #[serde(default)]
    max_solubility_wt_pct: Option<Param>,
}

/// Validated model parameters (SI units, compositions in wt%).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct CoarseningParams {
    pub solute: String,
    pub prefactor: Param,
    #[serde(rename = "gibbs_thomson_K_m")]
    pub gibbs_thomson_k_m: Param,
    pub diffusivity_m2_per_s: Param,
    #[serde(rename = "liquidus_slope_K_per_wt_pct")]
    pub liquidus_slope_k_per_wt_pct: Param,
    pub partition_coefficient: Param,
    /// Default nominal composition, used when none is given.
    pub c0_wt_pct: Option<Param>,
    pub ce_wt_pct: Param,
    /// The phase diagram the slope and partition coefficient should agree
    /// with (module docs): the solvent's melting point, the eutectic
    /// temperature and the solute's maximum solubility in the solid.
    #[serde(rename = "melting_point_degC")]
    pub melting_point_degc: Option<Param>,
    #[serde(rename = "eutectic_temperature_degC")]
    pub eutectic_temperature_degc: Option<Param>,
    pub max_solubility_wt_pct: Option<Param>,
}

/// Largest relative difference between a stated slope or partition
/// coefficient and the straight-line phase diagram's before a warning:
/// tables print these values to two significant figures, which alone is up
/// to 5 % off (half a unit in the last place of 10..99), while the
/// diagram's temperatures (about 1 K in 100) and compositions give the
/// straight-line values to 1-2 %.
pub const PHASE_DIAGRAM_TOLERANCE: f64 = 0.05;

fn need(name: &str, p: Option<Param>, check: impl Fn(f64) -> bool, what: &str) -> Result<Param> {
    let p = p.ok_or_else(|| Error::Correlation {
        reason: format!("coarsening: missing \"{name}\""),
    })?;
    if !(p.value.is_finite() && check(p.value)) {
        return Err(Error::Correlation {
            reason: format!("coarsening: \"{name}\" must be {what}, got {}", p.value),
        });
    }
    Ok(p)
}

impl CoarseningParams {
    pub fn from_raw(r: CoarseningRaw) -> Result<Self> {
        let solute =
            r.solute
                .filter(|s| !s.trim().is_empty())
                .ok_or_else(|| {
                    Error::Correlation {
                reason:
                    "coarsening: missing \"solute\" (the element whose content is C0, e.g. \"Si\")"
                        .into(),
            }
                })?;
        if !super::is_element_symbol(solute.trim()) {
            return Err(Error::Correlation {
                reason: format!(
                    "coarsening: \"solute\" '{solute}' is not an element symbol (e.g. Si, Cu)"
                ),
            });
        }
        let solute = solute.trim().to_string();
        let positive = |v: f64| v > 0.0;
        let p = Self {
            solute,
            prefactor: need("prefactor", r.prefactor, positive, "positive")?,
            gibbs_thomson_k_m: need(
                "gibbs_thomson_K_m",
                r.gibbs_thomson_k_m,
                positive,
                "positive (K m)",
            )?,
            diffusivity_m2_per_s: need(
                "diffusivity_m2_per_s",
                r.diffusivity_m2_per_s,
                positive,
                "positive (m^2/s)",
            )?,
            liquidus_slope_k_per_wt_pct: need(
                "liquidus_slope_K_per_wt_pct",
                r.liquidus_slope_k_per_wt_pct,
                |v| v != 0.0,
                "non-zero (K per wt%)",
            )?,
            partition_coefficient: need(
                "partition_coefficient",
                r.partition_coefficient,
                |v| v > 0.0 && v < 1.0,
                "between 0 and 1",
            )?,
            c0_wt_pct: match r.c0_wt_pct {
                Some(c) => Some(need("c0_wt_pct", Some(c), positive, "positive (wt%)")?),
                None => None,
            },
            ce_wt_pct: need("ce_wt_pct", r.ce_wt_pct, positive, "positive (wt%)")?,
            melting_point_degc: match r.melting_point_degc {
                Some(t) => Some(need(
                    "melting_point_degC",
                    Some(t),
                    |v| v > -273.15,
                    "a temperature (degC)",
                )?),
                None => None,
            },
            eutectic_temperature_degc: match r.eutectic_temperature_degc {
                Some(t) => Some(need(
                    "eutectic_temperature_degC",
                    Some(t),
                    |v| v > -273.15,
                    "a temperature (degC)",
                )?),
                None => None,
            },
            max_solubility_wt_pct: match r.max_solubility_wt_pct {
                Some(c) => Some(need(
                    "max_solubility_wt_pct",
                    Some(c),
                    positive,
                    "positive (wt%)",
                )?),
                None => None,
            },
        };
        if let Some(c0) = &p.c0_wt_pct {
            p.m_constant(c0.value)?;
        }
        Ok(p)
    }

    /// The straight-line phase diagram's liquidus slope (T_E - T_m) / C_E,
    /// K/wt%, when the entry states both temperatures.
    pub fn chord_slope(&self) -> Option<f64> {
        let tm = self.melting_point_degc.as_ref()?.value;
        let te = self.eutectic_temperature_degc.as_ref()?.value;
        Some((te - tm) / self.ce_wt_pct.value)
    }

    /// The straight-line phase diagram's partition coefficient C_alpha / C_E,
    /// when the entry states the maximum solubility.
    pub fn chord_partition(&self) -> Option<f64> {
        Some(self.max_solubility_wt_pct.as_ref()?.value / self.ce_wt_pct.value)
    }

    /// Why the slope or partition coefficient disagree with the entry's own
    /// phase diagram by more than [`PHASE_DIAGRAM_TOLERANCE`], if they do.
    pub fn phase_diagram_mismatch(&self) -> Option<String> {
        let mut out = Vec::new();
        let m = self.liquidus_slope_k_per_wt_pct.value;
        if let Some(chord) = self.chord_slope() {
            if (m / chord - 1.0).abs() > PHASE_DIAGRAM_TOLERANCE {
                out.push(format!(
                    "the liquidus slope {m} K/wt% is not the straight liquidus from the melting point to the eutectic ({chord:.3} K/wt%)"
                ));
            }
        }
        let k = self.partition_coefficient.value;
        if let Some(chord) = self.chord_partition() {
            if (k / chord - 1.0).abs() > PHASE_DIAGRAM_TOLERANCE {
                out.push(format!(
                    "the partition coefficient {k} is not the maximum solubility over the eutectic composition ({chord:.4})"
                ));
            }
        }
        (!out.is_empty()).then(|| {
            format!(
                "coarsening parameters inconsistent with their phase diagram: {}; M is off by about the same ratio",
                out.join("; ")
            )
        })
    }

    /// The parameters (by their names in a correlation file) whose status
    /// is "from memory": the prefactor, those of M, and the phase diagram's
    /// points a derived slope or partition coefficient rests on.
    pub fn recalled(&self) -> Vec<&'static str> {
        let from_memory = |p: &Param| p.status.as_deref() == Some("from memory");
        [
            ("prefactor", Some(&self.prefactor)),
            ("gibbs_thomson_K_m", Some(&self.gibbs_thomson_k_m)),
            ("diffusivity_m2_per_s", Some(&self.diffusivity_m2_per_s)),
            (
                "liquidus_slope_K_per_wt_pct",
                Some(&self.liquidus_slope_k_per_wt_pct),
            ),
            ("partition_coefficient", Some(&self.partition_coefficient)),
            ("ce_wt_pct", Some(&self.ce_wt_pct)),
            ("melting_point_degC", self.melting_point_degc.as_ref()),
            (
                "eutectic_temperature_degC",
                self.eutectic_temperature_degc.as_ref(),
            ),
            ("max_solubility_wt_pct", self.max_solubility_wt_pct.as_ref()),
        ]
        .into_iter()
        .filter(|(_, p)| p.is_some_and(from_memory))
        .map(|(name, _)| name)
        .collect()
    }

    /// The coarsening constant M (m^3/s) at nominal composition c0 (wt%).
    pub fn m_constant(&self, c0: f64) -> Result<f64> {
        let ce = self.ce_wt_pct.value;
        if !(c0.is_finite() && c0 > 0.0 && c0 < ce) {
            return Err(Error::Correlation {
                reason: format!(
                    "coarsening needs 0 < C0 < CE = {ce} wt% {}; got C0 = {c0}",
                    self.solute
                ),
            });
        }
        let k = self.partition_coefficient.value;
        Ok(
            self.gibbs_thomson_k_m.value * self.diffusivity_m2_per_s.value * (ce / c0).ln()
                / (self.liquidus_slope_k_per_wt_pct.value.abs() * (1.0 - k) * (ce - c0)),
        )
    }

    /// B of lambda2 (um) = B t_f^(1/3) with t_f in seconds, at C0 (the given
    /// content of the solute, or the entry's default).
    pub fn coefficient_um(&self, c0: Option<f64>) -> Result<f64> {
        let c0 = match (c0, &self.c0_wt_pct) {
            (Some(c), _) => c,
            (None, Some(d)) => d.value,
            (None, None) => {
                return Err(Error::Correlation {
                    reason: format!(
                        "needs the {s} content: give it with --composition {s}=<wt%>",
                        s = self.solute
                    ),
                })
            }
        };
        let m = self.m_constant(c0)?;
        Ok(self.prefactor.value * m.cbrt() * 1e6)
    }
}
