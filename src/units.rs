//! Quantities that carry their unit in their type.
//!
//! A spacing in micrometres and one in pixels are different types, so that a
//! pixel count can never be reported as a length by mistake. Conversion needs
//! an explicit [`UmPerPx`] calibration.

use serde::{Deserialize, Serialize};
use std::fmt;

/// A number for a message: as written when of ordinary size, in exponent
/// form when very large or very small (`1e300`, not three hundred digits).
pub fn fmt_num(v: f64) -> String {
    if v != 0.0 && v.is_finite() && !(1e-6..1e9).contains(&v.abs()) {
        format!("{v:e}")
    } else {
        format!("{v}")
    }
}

/// A length in micrometres.
#[derive(Clone, Copy, Debug, PartialEq, PartialOrd, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Micrometres(pub f64);

/// A length in pixels of the image being measured.
#[derive(Clone, Copy, Debug, PartialEq, PartialOrd, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Pixels(pub f64);

/// An image calibration: micrometres per pixel. Always finite and positive.
#[derive(Clone, Copy, Debug, PartialEq, PartialOrd, Serialize)]
#[serde(transparent)]
pub struct UmPerPx(f64);

impl UmPerPx {
    /// Checks that the value is a usable calibration.
    pub fn new(value: f64) -> crate::Result<Self> {
        let unusable = |reason: String| Err(crate::Error::Value { reason });
        if !value.is_finite() {
            return unusable(format!("{} is not a finite number", fmt_num(value)));
        }
        if value <= 0.0 {
            return unusable(format!("{} is not positive", fmt_num(value)));
        }
        if !(1e-6..=1e6).contains(&value) {
            return unusable(format!(
                "{} um/px is outside the plausible range 1e-6 to 1e6",
                fmt_num(value)
            ));
        }
        Ok(Self(value))
    }

    pub fn get(self) -> f64 {
        self.0
    }

    pub fn to_um(self, px: Pixels) -> Micrometres {
        Micrometres(px.0 * self.0)
    }

    pub fn to_px(self, um: Micrometres) -> Pixels {
        Pixels(um.0 / self.0)
    }
}

/// A cooling rate in kelvin per second (numerically equal to degC/s).
#[derive(Clone, Copy, Debug, PartialEq, PartialOrd, Serialize, Deserialize)]
#[serde(transparent)]
pub struct KelvinPerSecond(pub f64);

/// A duration in seconds (a local solidification time).
#[derive(Clone, Copy, Debug, PartialEq, PartialOrd, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Seconds(pub f64);

/// A temperature interval in kelvin (a freezing range).
#[derive(Clone, Copy, Debug, PartialEq, PartialOrd, Serialize, Deserialize)]
#[serde(transparent)]
pub struct Kelvin(pub f64);

/// The link between the two forms of a correlation: over a freezing range
/// dT, the local solidification time is t_f = dT / CR (a constant cooling
/// rate through the freezing range; common practice, no single source).
impl std::ops::Div<KelvinPerSecond> for Kelvin {
    type Output = Seconds;
    fn div(self, rate: KelvinPerSecond) -> Seconds {
        Seconds(self.0 / rate.0)
    }
}

/// The same link the other way: CR = dT / t_f.
impl std::ops::Div<Seconds> for Kelvin {
    type Output = KelvinPerSecond;
    fn div(self, time: Seconds) -> KelvinPerSecond {
        KelvinPerSecond(self.0 / time.0)
    }
}

impl fmt::Display for Micrometres {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{:.3} um", self.0)
    }
}

impl fmt::Display for Pixels {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{:.3} px", self.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn freezing_range_links_rate_and_time() {
        // 50 K at 5 K/s takes 10 s, and 50 K in 10 s is 5 K/s.
        assert_eq!(Kelvin(50.0) / KelvinPerSecond(5.0), Seconds(10.0));
        assert_eq!(Kelvin(50.0) / Seconds(10.0), KelvinPerSecond(5.0));
    }

    #[test]
    fn conversion_round_trips() {
        let cal = UmPerPx::new(0.345).unwrap();
        let um = cal.to_um(Pixels(100.0));
        assert!((um.0 - 34.5).abs() < 1e-12);
        assert!((cal.to_px(um).0 - 100.0).abs() < 1e-12);
    }

    #[test]
    fn rejects_unusable_calibrations() {
        for bad in [0.0, -1.0, f64::NAN, f64::INFINITY, 1e9] {
            assert!(UmPerPx::new(bad).is_err(), "{bad} accepted");
        }
    }
}
