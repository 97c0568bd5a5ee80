//! Sanity ranges: an SDAS or a field of view that no cast metal and no
//! microscope gives says that something upstream (most often the
//! calibration: `--scale-bar 50mm` typed for `50um`) is wrong. Such a value
//! is questioned in a warning, and an implausible SDAS decides nothing.

use crate::error::Warning;
use crate::units::Micrometres;

/// The range of secondary dendrite arm spacings of cast metals, in um.
///
/// Common practice, no single source; the figures behind it are from
/// memory: high-pressure die castings about 5-15 um, permanent-mould
/// aluminium 20-50 um, sand castings 50-100 um and more, and the slowest
/// steel ingots several hundred um (the Won & Thomas correlation gives
/// about 940 um at 0.01 K/s for 0.1 wt% C). Thin rapidly solidified
/// sections reach down to about 1 um. Below 1 um or above 1 mm the value is
/// far more likely a calibration or unit error than a structure.
pub const SDAS_RANGE_UM: [f64; 2] = [1.0, 1000.0];

/// The range of field-of-view widths of micrographs, um (defined with
/// the calibration, whose label reader checks it too).
pub use crate::calibrate::label::FIELD_WIDTH_RANGE_UM;

/// The warning for an SDAS outside [`SDAS_RANGE_UM`], or `None`.
pub fn sdas_warning(value: Micrometres) -> Option<Warning> {
    let [lo, hi] = SDAS_RANGE_UM;
    (!(lo..=hi).contains(&value.0)).then(|| {
        Warning::new(
            "sdas.implausible",
            format!(
                "SDAS {:.4} um lies outside the {lo}-{hi} um that cast metals show: check the calibration and its unit (um, mm, nm); the image is not decided",
                value.0
            ),
        )
    })
}

/// The warning for an image whose calibrated width lies outside
/// [`FIELD_WIDTH_RANGE_UM`], or `None`.
pub fn field_warning(width_px: u32, um_per_px: f64) -> Option<Warning> {
    let width = width_px as f64 * um_per_px;
    let [lo, hi] = FIELD_WIDTH_RANGE_UM;
    (!(lo..=hi).contains(&width)).then(|| {
        Warning::new(
            "calibration.implausible-field",
            format!(
                "with {um_per_px} um/px the image is {:.4} mm wide, outside the {} um to {} mm of micrographs: check the calibration and its unit",
                width / 1000.0,
                lo,
                hi / 1000.0
            ),
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_unit_slip_is_questioned() {
        // `--scale-bar 50mm` for 50um: a value 1000 times too large (the
        // case of the issue: 11824.55 um).
        assert!(sdas_warning(Micrometres(11824.55)).is_some());
        assert!(sdas_warning(Micrometres(0.3)).is_some());
        assert!(sdas_warning(Micrometres(35.0)).is_none());
        // A 1000 px image at 59 um/px is 59 mm wide: plausible for a macro
        // section; at 590 um/px (590 mm) it is not.
        assert!(field_warning(1000, 59.0).is_none());
        assert!(field_warning(1000, 590.0).is_some());
        assert!(field_warning(1000, 0.005).is_some());
    }
}
