//! Calibration: how many micrometres one pixel spans, and where that came from.

use crate::units::UmPerPx;
use serde::Serialize;

/// Where a calibration came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum CalibrationSource {
    /// Given by the user as micrometres per pixel.
    Manual,
}

/// The calibration applied to one image.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Calibration {
    pub um_per_px: UmPerPx,
    pub source: CalibrationSource,
}

impl Calibration {
    pub fn manual(um_per_px: UmPerPx) -> Self {
        Self {
            um_per_px,
            source: CalibrationSource::Manual,
        }
    }
}

/// Parses a user-given micrometres-per-pixel value, naming the problem.
pub fn parse_um_per_px(text: &str) -> Result<UmPerPx, String> {
    let v: f64 = text
        .trim()
        .parse()
        .map_err(|_| format!("'{text}' is not a number"))?;
    UmPerPx::new(v)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_and_rejects() {
        assert_eq!(parse_um_per_px("0.5").unwrap().get(), 0.5);
        assert_eq!(parse_um_per_px(" 2e-1 ").unwrap().get(), 0.2);
        for bad in ["", "abc", "0", "-0.3", "nan", "inf", "1,5"] {
            assert!(parse_um_per_px(bad).is_err(), "{bad:?} accepted");
        }
    }
}
