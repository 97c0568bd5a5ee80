//! Preprocessing shared by all measurement methods: flattening of uneven
//! illumination, robust contrast normalisation, and the exclusion mask.

use crate::blocks::blur::{gaussian_blur, masked_gaussian_blur};
use crate::load::GrayImage;

/// Parameters of preprocessing.
#[derive(Clone, Copy, Debug, PartialEq, Default)]
pub struct PreprocessParams {
    /// Standard deviation, in pixels, of the Gaussian that estimates the
    /// illumination background. `None` chooses one from the image size.
    pub background_sigma_px: Option<f64>,
}

/// An image ready for measurement: background removed, contrast normalised
/// to zero median and unit robust spread; excluded pixels are set to 0.
#[derive(Clone, Debug)]
pub struct Prepared {
    pub image: GrayImage,
    /// `true` where a pixel is excluded from measurement (scale bar, labels).
    pub mask: Option<Vec<bool>>,
    /// Robust spread (1.4826 x MAD) of the flattened image before scaling, in
    /// full-scale grey units. Near zero means there is nothing to measure.
    pub contrast: f64,
    /// The background sigma that was used, in pixels.
    pub background_sigma_px: f64,
}

impl Prepared {
    #[inline]
    pub fn is_masked(&self, i: usize) -> bool {
        self.mask.as_ref().is_some_and(|m| m[i])
    }
}

/// Background sigma chosen from the image size: wide enough that dendritic
/// detail passes untouched, narrow enough to follow vignetting.
pub fn default_background_sigma(width: usize, height: usize) -> f64 {
    (width.max(height) as f64 / 6.0).clamp(8.0, 256.0)
}

/// Flattens illumination and normalises contrast.
pub fn prepare(img: &GrayImage, mask: Option<Vec<bool>>, params: &PreprocessParams) -> Prepared {
    prepare_owned(img.clone(), mask, params)
}

/// [`prepare`] on an image that is no longer needed: its buffer becomes the
/// prepared image's (one float per pixel less than a copy).
pub fn prepare_owned(
    img: GrayImage,
    mask: Option<Vec<bool>>,
    params: &PreprocessParams,
) -> Prepared {
    let sigma = params
        .background_sigma_px
        .unwrap_or_else(|| default_background_sigma(img.width, img.height));
    let background = match &mask {
        None => gaussian_blur(&img.data, img.width, img.height, sigma),
        Some(m) => masked_gaussian_blur(&img.data, m, img.width, img.height, sigma),
    };
    let mut flat = img.data;
    for (v, b) in flat.iter_mut().zip(&background) {
        *v -= b;
    }
    drop(background);
    let (median, spread) = robust_location_scale(&flat, mask.as_deref());
    let scale = if spread > 1e-6 { 1.0 / spread } else { 0.0 };
    for (i, v) in flat.iter_mut().enumerate() {
        let excluded = mask.as_ref().is_some_and(|m| m[i]);
        *v = if excluded {
            0.0
        } else {
            ((*v as f64 - median) * scale) as f32
        };
    }
    Prepared {
        image: GrayImage {
            width: img.width,
            height: img.height,
            data: flat,
        },
        mask,
        contrast: spread,
        background_sigma_px: sigma,
    }
}

/// Median and 1.4826 x median absolute deviation of the unmasked values,
/// from a regular subsample of at most about 250 000 values.
pub fn robust_location_scale(data: &[f32], mask: Option<&[bool]>) -> (f64, f64) {
    let step = (data.len() / 250_000).max(1);
    let mut sample: Vec<f32> = data
        .iter()
        .enumerate()
        .step_by(step)
        .filter(|(i, _)| !mask.is_some_and(|m| m[*i]))
        .map(|(_, v)| *v)
        .collect();
    // The same medians as `stats::median_in_place`, by radix selection; an
    // empty sample (everything masked) has neither level nor spread.
    let Some(med) = crate::blocks::select::median_by_selection(&sample) else {
        return (0.0, 0.0);
    };
    for v in sample.iter_mut() {
        *v = (*v - med as f32).abs();
    }
    let mad = crate::blocks::select::median_by_selection(&sample).unwrap_or(0.0);
    (med, 1.4826 * mad)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn flattening_removes_a_ramp() {
        // A linear ramp under a period-8 pattern: after flattening, interior
        // points one whole number of periods apart have equal values.
        let (w, h) = (512, 64);
        let data: Vec<f32> = (0..w * h)
            .map(|i| {
                let x = (i % w) as f32;
                0.2 + 0.001 * x + 0.1 * (x * std::f32::consts::TAU / 8.0).sin()
            })
            .collect();
        let img = GrayImage::from_vec(w, h, data).unwrap();
        let p = prepare(&img, None, &PreprocessParams::default());
        for (a, b) in [(200, 304), (201, 297), (250, 330)] {
            let (va, vb) = (p.image.get(a, 32), p.image.get(b, 32));
            assert!(
                (va - vb).abs() < 0.02 * va.abs().max(1.0),
                "{a}: {va} vs {b}: {vb}"
            );
        }
    }
}
