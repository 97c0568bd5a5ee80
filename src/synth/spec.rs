//! Spec validation and random (but sane) spec generation.

use super::{q, Corner, FieldSpec, Morphology, Polarity, ScaleBarSpec, Style, SynthError};
use rand::Rng;

const MAX_SIDE: u32 = 8192;
const MAX_PIXELS: u64 = 8192 * 4096;
const MAX_ARMS: f64 = 4.0e6;

/// Reject specs that cannot be rendered meaningfully (or would need
/// unreasonable memory).
pub(crate) fn validate(s: &FieldSpec) -> Result<(), SynthError> {
    let bad = |m: String| Err(SynthError::InvalidSpec(m));
    if !(16..=MAX_SIDE).contains(&s.width) || !(16..=MAX_SIDE).contains(&s.height) {
        return bad(format!(
            "image size {}x{} outside 16..={MAX_SIDE}",
            s.width, s.height
        ));
    }
    if s.width as u64 * s.height as u64 > MAX_PIXELS {
        return bad(format!(
            "image of {}x{} pixels exceeds the {MAX_PIXELS} pixel limit",
            s.width, s.height
        ));
    }
    let finite = [
        ("sdas_px", s.sdas_px),
        ("um_per_px", s.um_per_px),
        ("primary_angle_deg", s.primary_angle_deg),
        ("primary_spacing_px", s.primary_spacing_px),
        ("spacing_jitter", s.spacing_jitter),
        ("missing_arm_fraction", s.missing_arm_fraction),
        ("noise_sd", s.noise_sd),
        ("blur_sigma_px", s.blur_sigma_px),
        ("illumination", s.illumination),
    ];
    for (name, v) in finite {
        if !v.is_finite() {
            return bad(format!("{name} must be finite, got {v}"));
        }
    }
    let min_side = s.width.min(s.height) as f64;
    if !(s.sdas_px >= 3.0 && s.sdas_px <= min_side / 3.0) {
        return bad(format!(
            "sdas_px {} outside 3..={} (a third of the shorter image side)",
            s.sdas_px,
            min_side / 3.0
        ));
    }
    if s.um_per_px <= 0.0 {
        return bad(format!("um_per_px must be > 0, got {}", s.um_per_px));
    }
    if !(s.primary_spacing_px >= 2.0 * s.sdas_px && s.primary_spacing_px <= 20.0 * s.sdas_px) {
        return bad(format!(
            "primary_spacing_px {} must be 2..=20 times sdas_px {}",
            s.primary_spacing_px, s.sdas_px
        ));
    }
    // Rough number of secondary arms (two per lattice position per stem);
    // bounds memory for shape lists.
    let arms = 2.0 * s.width as f64 * s.height as f64 / (s.sdas_px * s.primary_spacing_px) * 2.0;
    if arms > MAX_ARMS {
        return bad(format!(
            "about {arms:.0} arms would be drawn (limit {MAX_ARMS}); increase sdas_px or primary_spacing_px"
        ));
    }
    let ranges = [
        ("spacing_jitter", s.spacing_jitter, 0.0, 0.5),
        ("missing_arm_fraction", s.missing_arm_fraction, 0.0, 0.9),
        ("noise_sd", s.noise_sd, 0.0, 0.5),
        ("blur_sigma_px", s.blur_sigma_px, 0.0, 50.0),
        ("illumination", s.illumination, 0.0, 1.0),
    ];
    for (name, v, lo, hi) in ranges {
        if !(lo..=hi).contains(&v) {
            return bad(format!("{name} {v} outside {lo}..={hi}"));
        }
    }
    Ok(())
}

const NICE_UM: [f64; 10] = [1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 200.0, 500.0, 1000.0];

/// A "nice" bar length giving 8-25 % of the image width (closest to ~15 %
/// when none fits that window).
fn nice_bar_um<R: Rng + ?Sized>(rng: &mut R, width: u32, um_per_px: f64) -> f64 {
    let frac = |um: f64| um / um_per_px / width as f64;
    let preferred: Vec<f64> = NICE_UM[3..9]
        .iter()
        .copied()
        .filter(|&um| (0.08..=0.25).contains(&frac(um)))
        .collect();
    if !preferred.is_empty() {
        return preferred[rng.random_range(0..preferred.len())];
    }
    let mut best = NICE_UM[0];
    for &um in &NICE_UM {
        if (frac(um) - 0.15).abs() < (frac(best) - 0.15).abs() {
            best = um;
        }
    }
    best
}

/// A varied but sane spec. `index` cycles morphology and style so that any
/// four consecutive indices cover all four combinations.
pub fn random_spec(rng: &mut impl Rng, index: usize) -> FieldSpec {
    random_spec_styled(rng, index, None)
}

/// `random_spec` with every field drawn in `style` when one is given. The
/// random draws are the same whatever the style, so a seed gives the same
/// fields (sizes, spacings, nuisances) in either style.
pub fn random_spec_styled(rng: &mut impl Rng, index: usize, style: Option<Style>) -> FieldSpec {
    let morphology = if index.is_multiple_of(2) {
        Morphology::Columnar
    } else {
        Morphology::Equiaxed
    };
    let style = style.unwrap_or(if index % 4 < 2 {
        Style::Etched
    } else {
        Style::Clean
    });
    let width: u32 = rng.random_range(384..=1024);
    let height: u32 = rng.random_range(384..=1024);
    let min_side = width.min(height) as f64;
    let ratio = match morphology {
        Morphology::Columnar => rng.random_range(3.0..5.5),
        Morphology::Equiaxed => rng.random_range(5.0..8.0),
    };
    // at least ~8 arm spacings and ~2 grains / 2.5 trunks across the short side
    let sdas_hi = (min_side / 8.0).min(min_side / (2.2 * ratio)).min(80.0);
    let sdas_px = q((rng.random_range(6f64.ln()..sdas_hi.ln())).exp(), 4);
    let sdas_um: f64 = (rng.random_range(5f64.ln()..120f64.ln())).exp();
    let um_per_px = q((sdas_um / sdas_px).clamp(0.05, 10.0), 6);
    let blur_sigma_px = if rng.random_bool(0.3) {
        0.0
    } else {
        q(rng.random_range(0.3..2.0), 3)
    };
    let scale_bar = if rng.random_bool(0.8) {
        let length_um = nice_bar_um(rng, width, um_per_px);
        let thickness_px = rng.random_range(3..=(height / 80).max(4));
        Some(ScaleBarSpec {
            length_um,
            thickness_px,
            polarity: if rng.random_bool(0.5) {
                Polarity::DarkOnLight
            } else {
                Polarity::LightOnDark
            },
            corner: if rng.random_bool(0.5) {
                Corner::BottomLeft
            } else {
                Corner::BottomRight
            },
            backing_box: rng.random_bool(0.5),
            ticks: false,
            label: None,
            ink: None,
            inset_px: None,
        })
    } else {
        None
    };
    FieldSpec {
        width,
        gradient: None,

        height,
        morphology,
        style,
        sdas_px,
        um_per_px,
        primary_angle_deg: q(rng.random_range(0.0..180.0), 4),
        primary_spacing_px: q(sdas_px * ratio, 4),
        spacing_jitter: q(rng.random_range(0.0..0.2), 4),
        missing_arm_fraction: if rng.random_bool(0.5) {
            0.0
        } else {
            q(rng.random_range(0.0..0.1), 4)
        },
        invert: rng.random_bool(0.3),
        noise_sd: q(rng.random_range(0.0..0.05), 4),
        blur_sigma_px,
        illumination: q(rng.random_range(0.0..0.2), 4),
        scale_bar,
        seed: rng.random(),
    }
}
