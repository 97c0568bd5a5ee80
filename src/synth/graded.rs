//! Fields whose spacing changes across the image, as from a chilled wall
//! at the left edge (x = 0) inwards: vertical bands of constant spacing,
//! stepping from one factor of the spec's spacing to another. Each band is
//! a field of its own (drawn as [`super::render`] draws any field, with the
//! spacing and the primary spacing scaled by its factor and a seed of its
//! own), set side by side; the scale bar is burned in over the whole.

use super::{mix, post, q, render, FieldSpec, Gray16, Style, SynthError, Truth};
use image::ImageBuffer;
use serde::{Deserialize, Serialize};

/// A spacing that steps across the image from the left edge.
#[derive(Serialize, Deserialize, Clone, Copy, Debug, PartialEq)]
pub struct Gradient {
    /// Factor on `sdas_px` and `primary_spacing_px` in the first band
    /// (at the left edge, the wall).
    pub from_factor: f64,
    /// Factor in the last band (at the right edge).
    pub to_factor: f64,
    /// Number of bands of equal width; the factor steps evenly from the
    /// first to the last (2: two parts of different spacing).
    pub bands: u32,
}

/// One band as drawn.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct BandTruth {
    /// Columns of the band, pixels: `x0_px` inclusive, `x1_px` exclusive.
    pub x0_px: u32,
    pub x1_px: u32,
    /// The factor on the spec's spacing.
    pub factor: f64,
    /// The band's drawn spacing (as `Truth::sdas_px` of a field).
    pub sdas_px: f64,
    pub sdas_um: f64,
    pub sdas_count: usize,
}

impl Gradient {
    /// Parses `F0:F1[:N]` (N bands, 8 when not given).
    pub fn parse(s: &str) -> Result<Self, String> {
        let parts: Vec<&str> = s.split(':').collect();
        let num = |t: &str| t.trim().parse::<f64>().ok().filter(|v| v.is_finite());
        let g = match parts.as_slice() {
            [a, b] => num(a).zip(num(b)).map(|(a, b)| (a, b, 8)),
            [a, b, n] => num(a)
                .zip(num(b))
                .zip(n.trim().parse::<u32>().ok())
                .map(|((a, b), n)| (a, b, n)),
            _ => None,
        };
        let Some((from_factor, to_factor, bands)) = g else {
            return Err(format!(
                "'{s}': expected F0:F1[:N] (the spacing's factor at the left and right edges, and the number of bands)"
            ));
        };
        let g = Self {
            from_factor,
            to_factor,
            bands,
        };
        g.check().map_err(|e| format!("'{s}': {e}"))?;
        Ok(g)
    }

    fn check(&self) -> Result<(), String> {
        for f in [self.from_factor, self.to_factor] {
            if !(f.is_finite() && (0.1..=10.0).contains(&f)) {
                return Err(format!("factor {f} outside 0.1..=10"));
            }
        }
        if !(1..=64).contains(&self.bands) {
            return Err(format!("{} bands outside 1..=64", self.bands));
        }
        Ok(())
    }

    /// The factor of band `i`.
    pub fn factor(&self, i: u32) -> f64 {
        if self.bands < 2 {
            return self.from_factor;
        }
        self.from_factor + (self.to_factor - self.from_factor) * i as f64 / (self.bands - 1) as f64
    }
}

/// Renders a field with a gradient: its bands, side by side.
pub(crate) fn render_graded(spec: &FieldSpec, g: &Gradient) -> Result<(Gray16, Truth), SynthError> {
    g.check().map_err(SynthError::InvalidSpec)?;
    if spec.style == Style::Featureless {
        return Err(SynthError::InvalidSpec(
            "a featureless field has no spacing to change across it".into(),
        ));
    }
    let (w, h) = (spec.width as usize, spec.height as usize);
    let mut pixels = vec![0u16; w * h];
    let mut bands = Vec::new();
    let mut first: Option<Truth> = None;
    let (mut n_all, mut sum, mut fraction) = (0usize, 0.0f64, 0.0f64);
    let mut stats: Vec<(usize, f64, f64)> = Vec::new();
    for i in 0..g.bands {
        let x0 = (i as u64 * spec.width as u64 / g.bands as u64) as u32;
        let x1 = ((i as u64 + 1) * spec.width as u64 / g.bands as u64) as u32;
        let f = g.factor(i);
        let band = FieldSpec {
            width: x1 - x0,
            sdas_px: q(spec.sdas_px * f, 6),
            primary_spacing_px: q(spec.primary_spacing_px * f, 6),
            scale_bar: None,
            gradient: None,
            seed: mix(spec.seed, u64::from(i) + 1),
            ..spec.clone()
        };
        let (img, t) = render(&band).map_err(|e| {
            let why = match e {
                SynthError::InvalidSpec(m) => m,
                other => other.to_string(),
            };
            SynthError::InvalidSpec(format!("band {} of {}: {why}", i + 1, g.bands))
        })?;
        let bw = (x1 - x0) as usize;
        for (y, row) in img.as_raw().chunks_exact(bw).enumerate() {
            pixels[y * w + x0 as usize..y * w + x1 as usize].copy_from_slice(row);
        }
        n_all += t.sdas_count;
        sum += t.sdas_px * t.sdas_count as f64;
        fraction += t.dendrite_area_fraction * bw as f64 / w as f64;
        stats.push((t.sdas_count, t.sdas_px, t.sdas_sd_px));
        bands.push(BandTruth {
            x0_px: x0,
            x1_px: x1,
            factor: q(f, 9),
            sdas_px: t.sdas_px,
            sdas_um: t.sdas_um,
            sdas_count: t.sdas_count,
        });
        first.get_or_insert(t);
    }
    let Some(first) = first else {
        return Err(SynthError::InvalidSpec(
            "a gradient needs at least one band".into(),
        ));
    };
    // The whole field's spacing: every drawn spacing of every band; its
    // spread pools the bands' own spreads and the differences between them.
    let mean = sum / n_all.max(1) as f64;
    let var = stats
        .iter()
        .map(|&(n, m, sd)| n as f64 * (sd * sd + (m - mean).powi(2)))
        .sum::<f64>()
        / n_all.max(1) as f64;
    let bar_truth = match &spec.scale_bar {
        Some(b) => Some(post::place_scale_bar(spec, b)?.draw(&mut pixels, w)),
        None => None,
    };
    let img = ImageBuffer::from_raw(spec.width, spec.height, pixels).ok_or_else(|| {
        SynthError::InvalidSpec("pixel buffer does not match the image size".into())
    })?;
    let slope = slope_um_per_mm(&bands, spec.um_per_px);
    let truth = Truth {
        sdas_um: q(mean * spec.um_per_px, 9),
        sdas_px: q(mean, 9),
        sdas_sd_px: q(var.sqrt(), 9),
        sdas_count: n_all,
        scale_bar: bar_truth,
        dendrite_area_fraction: q(fraction, 9),
        spec: spec.clone(),
        // What belongs to one band's drawing (its stems, rows) is not
        // carried over; the bands are.
        row_spacing_um: None,
        row_spacing_px: None,
        row_angles_deg: None,
        stems: None,
        light_phase_fraction: None,
        bands: Some(bands),
        gradient_um_per_mm: slope.map(|s| q(s, 6)),
        ..first
    };
    Ok((img, truth))
}

/// The least-squares slope of the bands' drawn spacing (um) against the
/// distance of their centres from the left edge (mm); none with one band.
pub(crate) fn slope_um_per_mm(bands: &[BandTruth], um_per_px: f64) -> Option<f64> {
    if bands.len() < 2 {
        return None;
    }
    let pts: Vec<(f64, f64)> = bands
        .iter()
        .map(|b| {
            let x_mm = 0.5 * (b.x0_px + b.x1_px) as f64 * um_per_px / 1000.0;
            (x_mm, b.sdas_um)
        })
        .collect();
    let n = pts.len() as f64;
    let (mx, my) = (
        pts.iter().map(|p| p.0).sum::<f64>() / n,
        pts.iter().map(|p| p.1).sum::<f64>() / n,
    );
    let sxx: f64 = pts.iter().map(|p| (p.0 - mx).powi(2)).sum();
    let sxy: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
    (sxx > 0.0).then(|| sxy / sxx)
}
