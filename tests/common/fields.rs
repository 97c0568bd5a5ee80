//! Fields for the scale-bar tests (`bars_on_structure`, `label_reading`):
//! a seeded uniform stream, 16-bit renderings as grey images, and the
//! camera's softening.

use armspace::blocks::blur::gaussian_blur;
use armspace::load::GrayImage;

pub fn mix(a: u64, b: u64) -> u64 {
    let mut z = a
        .wrapping_add(b.wrapping_mul(0x9E37_79B9_7F4A_7C15))
        .wrapping_add(0x632B_E59B_D9B4_E019);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// Uniform in [0, 1) from (seed, index, stream).
pub fn u01(seed: u64, i: u64, k: u64) -> f64 {
    (mix(mix(seed, i), k) >> 11) as f64 / (1u64 << 53) as f64
}

pub fn gray(img: &image::ImageBuffer<image::Luma<u16>, Vec<u16>>) -> GrayImage {
    GrayImage::from_vec(
        img.width() as usize,
        img.height() as usize,
        img.as_raw().iter().map(|v| *v as f32 / 65535.0).collect(),
    )
    .unwrap()
}

/// The image after a Gaussian blur of `sigma` px and added noise of
/// standard deviation `sd` (a sum of four uniforms, scaled): a bar drawn
/// before the camera's or the compression's softening.
pub fn soften(g: &GrayImage, sigma: f64, sd: f64, seed: u64) -> GrayImage {
    let mut data = if sigma > 0.0 {
        gaussian_blur(&g.data, g.width, g.height, sigma)
    } else {
        g.data.clone()
    };
    for (k, v) in data.iter_mut().enumerate() {
        let s: f64 = (0..4).map(|j| u01(seed, k as u64, j) - 0.5).sum::<f64>();
        // Sum of four U(-1/2, 1/2): variance 4/12, so scale by sqrt(3).
        *v = (*v as f64 + sd * s * 3f64.sqrt()).clamp(0.0, 1.0) as f32;
    }
    GrayImage::from_vec(g.width, g.height, data).unwrap()
}
