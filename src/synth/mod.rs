//! Synthetic dendritic micrographs with known truth (test oracle and demo data).
//!
//! The generator draws dendrite phase (primary aluminium) into an antialiased
//! coverage field, maps it to grey levels, adds the usual nuisances of a real
//! micrograph (texture, uneven illumination, blur, noise, an optional inverted
//! contrast) and finally burns in a scale bar. Every image comes with a
//! [`Truth`] record whose `sdas_px` is measured from the arm centre positions
//! that were actually placed, not merely the requested value.
//!
//! Conventions:
//! * pixel `(x, y)` has its centre at the continuous coordinate `(x, y)`,
//!   `x` to the right, `y` downwards;
//! * `primary_angle_deg` is the trunk direction in degrees, counter-clockwise
//!   from the +x axis *as seen on screen* (so 90° is a vertical trunk), taken
//!   modulo 180°;
//! * everything is driven by `ChaCha8Rng` streams derived from `spec.seed`, so
//!   the same spec always renders to the same pixels.

mod featureless;
pub use featureless::draw_text;
mod geom;
mod glyphs;
mod graded;
mod io;
mod layout;
mod post;
mod real;
mod spec;

use image::{ImageBuffer, Luma};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use serde::{Deserialize, Serialize};
use std::path::PathBuf;

pub use graded::{BandTruth, Gradient};
pub use io::{
    write_image, write_set, write_set_graded, write_set_styled, write_specs, BitDepth, NamedSpec,
    SpecFile, TRUTH_SCHEMA,
};
pub use spec::{random_spec, random_spec_styled};

/// 16-bit grey image as produced by [`render`].
pub type Gray16 = ImageBuffer<Luma<u16>, Vec<u16>>;

/// Solidification morphology of the simulated section.
#[derive(Serialize, Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum Morphology {
    /// Parallel primary trunks carrying secondary arms on both sides.
    Columnar,
    /// Four-armed crosses (one per grain) filling the field.
    Equiaxed,
}

/// Drawing style.
#[derive(Serialize, Deserialize, Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
#[serde(rename_all = "lowercase")]
pub enum Style {
    /// Idealised comb of smooth bars on a flat background.
    Clean,
    /// Look of a real etched section: packed, coarsened, partly sectioned arms.
    Etched,
    /// A section that cuts the secondary arms across: rows of rounded or
    /// oval spots, spots fused along a row in places, rows of several
    /// orientations in different grains (`morphology` is not used).
    Cut,
    /// Packed equiaxed rosettes whose grains touch: four to six primary arms
    /// per grain, arms fused at their roots, coarsened shapes, shading per
    /// grain, eutectic in the channels (`morphology` is not used).
    Dense,
    /// Columnar or equiaxed arms (after `morphology`) with the
    /// interdendritic region drawn as a eutectic lace: dark particles and
    /// light holes over a wide range of sizes.
    Lace,
    /// One of `cut`, `dense` or `lace` (drawn per field, see
    /// `Truth::drawn_as`) thresholded to two phases, with an arm-phase area
    /// fraction drawn from 35 % to 80 %.
    Binary,
    /// No dendritic structure at all (noise, two-phase blobs, scratches,
    /// gradients, text): the truth has `sdas_um: null`, `featureless: true`.
    Featureless,
}

/// Contrast of the scale bar against its surroundings: the calibration's
/// own type (a black bar is drawn at grey level 0, on a light backing box if
/// one is drawn; a white bar at full scale, on a dark box).
pub use crate::calibrate::scale_bar::Polarity;

/// Lower corner holding the scale bar.
#[derive(Serialize, Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "kebab-case")]
pub enum Corner {
    BottomLeft,
    BottomRight,
}

/// Burned-in scale bar request.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct ScaleBarSpec {
    pub length_um: f64,
    pub thickness_px: u32,
    pub polarity: Polarity,
    pub corner: Corner,
    pub backing_box: bool,
    /// End ticks: a stroke of the bar's ink across each end, flush with the
    /// bar's end (the bar's length edge to edge is unchanged), reaching
    /// `max(3, thickness)` px above and below it.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub ticks: bool,
    /// A label ("50 um") in the bar's ink, centred above or below the bar.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub label: Option<LabelSide>,
    /// The bar's ink as a fraction of full scale, instead of the extreme of
    /// its polarity (0 for a dark bar, 1 for a light one): an ink as dark
    /// (or as light) as the structure's own phase.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ink: Option<f64>,
    /// Distance of the bar (its box, ticks and label included) from the
    /// image's bottom and side edges, px, instead of 3 % of the shorter
    /// side: a bar further inside the structure.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub inset_px: Option<u32>,
}

/// Where a scale bar's label goes.
#[derive(Serialize, Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum LabelSide {
    Above,
    Below,
}

impl ScaleBarSpec {
    /// A plain bar (no ticks, no label, ink at the polarity's extreme, the
    /// default inset), as drawn before the options were added.
    pub fn plain(
        length_um: f64,
        thickness_px: u32,
        polarity: Polarity,
        corner: Corner,
        backing_box: bool,
    ) -> Self {
        ScaleBarSpec {
            length_um,
            thickness_px,
            polarity,
            corner,
            backing_box,
            ticks: false,
            label: None,
            ink: None,
            inset_px: None,
        }
    }
}

/// Everything needed to render one image.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct FieldSpec {
    pub width: u32,
    pub height: u32,
    pub morphology: Morphology,
    pub style: Style,
    /// Requested mean secondary arm spacing in pixels.
    pub sdas_px: f64,
    pub um_per_px: f64,
    /// Columnar trunk direction (ignored for equiaxed), see module docs.
    pub primary_angle_deg: f64,
    /// Trunk-to-trunk spacing (columnar) or grain size (equiaxed), pixels.
    pub primary_spacing_px: f64,
    /// Relative standard deviation of individual arm spacings (0..0.25).
    pub spacing_jitter: f64,
    /// Fraction of arm positions left without an arm.
    pub missing_arm_fraction: f64,
    /// Dendrites dark on a light background instead of light on dark.
    pub invert: bool,
    /// Gaussian noise, fraction of full scale.
    pub noise_sd: f64,
    pub blur_sigma_px: f64,
    /// Amplitude of the smooth illumination gradient (fraction of full scale).
    pub illumination: f64,
    pub scale_bar: Option<ScaleBarSpec>,
    pub seed: u64,
    /// A spacing that steps across the image from the left edge (bands of
    /// their own spacing); absent for a field of one spacing.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gradient: Option<Gradient>,
}

/// Where the scale bar was drawn.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct ScaleBarTruth {
    /// Exact drawn length in pixels (an integer here: bar ends are sharp).
    pub length_px: f64,
    pub length_um: f64,
    /// Inclusive pixel bounding box of the bar itself.
    pub x0: u32,
    pub y0: u32,
    pub x1: u32,
    pub y1: u32,
    pub thickness_px: u32,
    pub polarity: Polarity,
    pub corner: Corner,
    /// Inclusive bounding box `[x0, y0, x1, y1]` of the backing box, if drawn.
    pub backing_box: Option<[u32; 4]>,
    /// 16-bit grey level of every bar pixel.
    pub bar_level: u16,
}

/// A primary arm of an equiaxed grain, or a columnar trunk, as drawn.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct StemTruth {
    /// Root (the grain's nucleus), pixel coordinates.
    pub x: f64,
    pub y: f64,
    /// Direction, degrees counter-clockwise from +x as seen on screen.
    pub angle_deg: f64,
    pub length_px: f64,
}

/// `null` in JSON reads as NaN (a spacing that does not exist); serde_json
/// writes a non-finite number as `null`.
fn f64_or_nan<'de, D: serde::Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
}

/// Ground truth for one rendered image.
///
/// For `featureless` fields `sdas_um`, `sdas_px` and `sdas_sd_px` are NaN
/// in Rust and `null` in `truth.json` (so two such records never compare
/// equal with `==`). Fields added after the first schema are left out of
/// the JSON when they do not apply, so records of the `clean` and `etched`
/// styles are written exactly as before.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct Truth {
    pub file: String,
    pub morphology: Morphology,
    pub style: Style,
    /// True mean spacing of the drawn arm lattice, micrometres.
    #[serde(deserialize_with = "f64_or_nan")]
    pub sdas_um: f64,
    /// True mean spacing of the drawn arm lattice, pixels (mean of the
    /// centre-to-centre distances of consecutive arm positions along the
    /// trunks / primary arms / rows of spots, positions of missing arms
    /// included).
    #[serde(deserialize_with = "f64_or_nan")]
    pub sdas_px: f64,
    /// Standard deviation of the individual spacings, pixels.
    #[serde(deserialize_with = "f64_or_nan")]
    pub sdas_sd_px: f64,
    /// Number of individual spacings averaged into `sdas_px`.
    pub sdas_count: usize,
    pub um_per_px: f64,
    /// Trunk direction in [0, 180) degrees for columnar fields.
    pub primary_angle_deg: Option<f64>,
    pub scale_bar: Option<ScaleBarTruth>,
    /// Fraction of non-overlay pixels that are dendrite phase (coverage,
    /// before texture, noise and blur).
    pub dendrite_area_fraction: f64,
    pub spec: FieldSpec,
    /// The field has no dendritic structure (style `featureless`).
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub featureless: bool,
    /// What a featureless field holds (e.g. "noise", "two-phase", "text").
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub contents: Option<Vec<String>>,
    /// Style `cut`: mean distance between neighbouring rows of spots,
    /// measured normal to the rows (never the SDAS).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub row_spacing_um: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub row_spacing_px: Option<f64>,
    /// Style `cut`: row direction of each grain holding a counted spacing,
    /// degrees in [0, 180), counter-clockwise from +x as seen on screen.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub row_angles_deg: Option<Vec<f64>>,
    /// Styles `dense` and `lace` (and `binary` of them): the primary arms
    /// (equiaxed) or trunks (columnar, running across the field) drawn.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub stems: Option<Vec<StemTruth>>,
    /// Style `binary`: the style that was drawn and then thresholded.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub drawn_as: Option<Style>,
    /// Style `binary`: fraction of non-overlay pixels in the light phase
    /// (arms plus light holes of the lace), before any inversion.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub light_phase_fraction: Option<f64>,
    /// A field with a gradient (`FieldSpec::gradient`): each band as drawn,
    /// left to right. `sdas_px` and `sdas_um` are then over all bands.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub bands: Option<Vec<BandTruth>>,
    /// A field with a gradient: the least-squares slope of the bands' drawn
    /// spacing against the distance of their centres from the left edge,
    /// um of spacing per mm.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gradient_um_per_mm: Option<f64>,
}

/// Errors of the synthetic generator.
#[derive(Debug, thiserror::Error)]
pub enum SynthError {
    #[error("invalid field spec: {0}")]
    InvalidSpec(String),
    #[error("I/O error on {path}: {source}")]
    Io {
        path: PathBuf,
        #[source]
        source: std::io::Error,
    },
    #[error("cannot encode image {path}: {source}")]
    Encode {
        path: PathBuf,
        #[source]
        source: image::ImageError,
    },
    #[error("unsupported image extension for {0} (use .png, .tif or .tiff)")]
    UnsupportedFormat(PathBuf),
    #[error("JSON error: {0}")]
    Json(#[from] serde_json::Error),
}

/// Render one synthetic micrograph and its truth record (`file` left empty).
pub fn render(spec: &FieldSpec) -> Result<(Gray16, Truth), SynthError> {
    spec::validate(spec)?;
    if let Some(g) = &spec.gradient {
        return graded::render_graded(spec, g);
    }
    if !matches!(spec.style, Style::Clean | Style::Etched) {
        return real::render(spec);
    }
    let w = spec.width as usize;
    let h = spec.height as usize;
    let etched = spec.style == Style::Etched;

    let bar = match &spec.scale_bar {
        Some(b) => Some(post::place_scale_bar(spec, b)?),
        None => None,
    };

    let mut rng = ChaCha8Rng::seed_from_u64(spec.seed);
    let lay = match spec.morphology {
        Morphology::Columnar => layout::columnar(spec, &mut rng),
        Morphology::Equiaxed => layout::equiaxed(spec, &mut rng),
    };
    if lay.spacings.is_empty() {
        return Err(SynthError::InvalidSpec(
            "no pair of consecutive arms fits inside the image; enlarge it or reduce sdas_px"
                .into(),
        ));
    }

    let excluded = bar.as_ref().map(|b| b.overlay_rect());
    let clip = lay.clip.as_deref();
    let (phase, owner, fraction) = if etched {
        let target = rng.random_range(0.58..0.68);
        let mut k = 1.0f32;
        let mut best: Option<(Vec<f32>, Vec<u32>, f64)> = None;
        for _ in 0..10 {
            let (ph, ow) = geom::rasterize(&lay.items, k, w, h, clip);
            let f = post::area_fraction(&ph, w, excluded);
            let better = match &best {
                Some((_, _, bf)) => (f - target).abs() < (bf - target).abs(),
                None => true,
            };
            if better {
                best = Some((ph, ow, f));
            }
            if (f - target).abs() < 0.012 {
                break;
            }
            let ratio = if f > 1e-6 { target / f } else { 2.0 };
            k = (k * (ratio as f32).powf(1.15)).clamp(0.3, 3.0);
        }
        match best {
            Some(b) => b,
            None => return Err(SynthError::InvalidSpec("rasterisation failed".into())),
        }
    } else {
        let (ph, ow) = geom::rasterize(&lay.items, 1.0, w, h, clip);
        let f = post::area_fraction(&ph, w, excluded);
        (ph, ow, f)
    };

    let looks = post::Looks::draw(spec, &mut rng);
    let mut grey = post::compose(spec, &looks, &phase, &owner);
    post::illuminate(&mut grey, w, h, spec.illumination, &looks);
    let mut grey = post::gaussian_blur(&grey, w, h, spec.blur_sigma_px);
    post::add_noise(&mut grey, w, spec.noise_sd, spec.seed);
    let mut pixels = post::quantise(&grey);
    let bar_truth = bar.map(|b| b.draw(&mut pixels, w));

    let img = ImageBuffer::from_raw(spec.width, spec.height, pixels).ok_or_else(|| {
        SynthError::InvalidSpec("pixel buffer does not match the image size".into())
    })?;

    let n = lay.spacings.len() as f64;
    let mean = lay.spacings.iter().sum::<f64>() / n;
    let var = lay.spacings.iter().map(|s| (s - mean).powi(2)).sum::<f64>() / n;
    let truth = Truth {
        file: String::new(),
        morphology: spec.morphology,
        style: spec.style,
        sdas_um: q(mean * spec.um_per_px, 9),
        sdas_px: q(mean, 9),
        sdas_sd_px: q(var.sqrt(), 9),
        sdas_count: lay.spacings.len(),
        um_per_px: spec.um_per_px,
        primary_angle_deg: match spec.morphology {
            Morphology::Columnar => Some(q(spec.primary_angle_deg.rem_euclid(180.0), 9)),
            Morphology::Equiaxed => None,
        },
        scale_bar: bar_truth,
        dendrite_area_fraction: q(fraction, 9),
        spec: spec.clone(),
        featureless: false,
        contents: None,
        row_spacing_um: None,
        row_spacing_px: None,
        row_angles_deg: None,
        stems: None,
        drawn_as: None,
        light_phase_fraction: None,
        bands: None,
        gradient_um_per_mm: None,
    };
    Ok((img, truth))
}

/// splitmix64 finaliser, used to derive independent, reproducible streams.
pub(crate) fn mix(a: u64, b: u64) -> u64 {
    let mut z = a
        .wrapping_add(b.wrapping_mul(0x9E37_79B9_7F4A_7C15))
        .wrapping_add(0x632B_E59B_D9B4_E019);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Round to `decimals` decimal places. Short decimals like these survive a
/// JSON round trip bit-exactly (serde_json parses <= 15 significant digits
/// exactly), so a spec read back from `truth.json` re-renders identically.
pub(crate) fn q(x: f64, decimals: i32) -> f64 {
    let s = 10f64.powi(decimals);
    let r = (x * s).round() / s;
    if r.is_finite() && r.abs() < 1e6 {
        r
    } else {
        x
    }
}

/// Uniform value in [0, 1) from a hash.
pub(crate) fn hash01(a: u64, b: u64) -> f64 {
    (mix(a, b) >> 11) as f64 / (1u64 << 53) as f64
}

#[cfg(test)]
mod tests;
