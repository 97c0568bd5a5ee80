//! Fields with no dendritic structure (style `featureless`), for the
//! false-positive test: whatever a method reports on them is invented.
//!
//! Each field has one main content and, by chance, others on top, as real
//! images of a bad polish or a blank area do:
//! * `noise`: a sum of Gaussian-correlated noises of several correlation
//!   lengths (grain of the camera, etch stain, uneven polish);
//! * `two-phase`: smoothed noise at one to three scales thresholded to two
//!   grey levels (a random two-phase structure with no preferred spacing,
//!   like a porous or stained area);
//! * `scratches`: a family of near-parallel polishing marks at random
//!   (not periodic) positions plus scratches in random directions;
//! * `gradient`: a strong smooth shading (uneven illumination, a stain);
//! * `text`: lines of annotation text drawn with a stroke font.
//!
//! `sdas_px` of the spec sets no spacing here; `primary_angle_deg` gives
//! the direction of the scratch family.

use super::geom::{self, Item, Wobble};
use super::glyphs;
use super::layout::capsule;
use super::{mix, post, FieldSpec, Gray16, SynthError, Truth};
use image::ImageBuffer;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use std::f64::consts::PI;

const STREAM_FEATURELESS: u64 = 0xF1A7_0000;

const KINDS: [&str; 5] = ["noise", "two-phase", "scratches", "gradient", "text"];

pub(crate) fn render(spec: &FieldSpec) -> Result<(Gray16, Truth), SynthError> {
    let (w, h) = (spec.width as usize, spec.height as usize);
    let bar = match &spec.scale_bar {
        Some(b) => Some(post::place_scale_bar(spec, b)?),
        None => None,
    };
    let mut rng = ChaCha8Rng::seed_from_u64(mix(spec.seed, STREAM_FEATURELESS));
    let main = rng.random_range(0..KINDS.len());
    let mut contents = vec![KINDS[main].to_string()];
    let base: f32 = rng.random_range(0.3..0.7);
    let mut grey = vec![base; w * h];
    let mut stream = 1u64;
    let mut next = || {
        stream += 1;
        mix(spec.seed, STREAM_FEATURELESS + stream)
    };
    for (k, kind) in KINDS.iter().enumerate() {
        // the main content, and each other one with a chance of 0.3
        let extra = rng.random_bool(0.3);
        if k != main && !extra {
            continue;
        }
        if k != main {
            contents.push(kind.to_string());
        }
        match *kind {
            "noise" => noise(&mut grey, w, h, &mut rng, next()),
            "two-phase" => two_phase(&mut grey, w, h, &mut rng, next()),
            "scratches" => scratches(&mut grey, spec, &mut rng),
            "gradient" => gradient(&mut grey, w, h, &mut rng),
            _ => text(&mut grey, w, h, &mut rng),
        }
    }
    if spec.invert {
        for v in grey.iter_mut() {
            *v = 1.0 - *v;
        }
    }
    let mut grey = post::gaussian_blur(&grey, w, h, spec.blur_sigma_px);
    post::add_noise(&mut grey, w, spec.noise_sd, spec.seed);
    let mut pixels = post::quantise(&grey);
    let bar_truth = bar.map(|b| b.draw(&mut pixels, w));
    let img = ImageBuffer::from_raw(spec.width, spec.height, pixels).ok_or_else(|| {
        SynthError::InvalidSpec("pixel buffer does not match the image size".into())
    })?;
    let truth = Truth {
        file: String::new(),
        morphology: spec.morphology,
        style: spec.style,
        sdas_um: f64::NAN,
        sdas_px: f64::NAN,
        sdas_sd_px: f64::NAN,
        sdas_count: 0,
        um_per_px: spec.um_per_px,
        primary_angle_deg: None,
        scale_bar: bar_truth,
        dendrite_area_fraction: 0.0,
        spec: spec.clone(),
        featureless: true,
        contents: Some(contents),
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

/// Unit-variance noise with Gaussian correlation of standard deviation
/// `sigma` pixels.
fn correlated(w: usize, h: usize, sigma: f64, seed: u64) -> Vec<f32> {
    let mut n = post::gaussian_blur(&post::white_noise(w, h, seed, 0), w, h, sigma);
    let m = n.iter().map(|&v| v as f64).sum::<f64>() / n.len() as f64;
    let var = n.iter().map(|&v| (v as f64 - m).powi(2)).sum::<f64>() / n.len() as f64;
    let s = var.sqrt().max(1e-12);
    for v in n.iter_mut() {
        *v = ((*v as f64 - m) / s) as f32;
    }
    n
}

/// Correlation lengths from a pixel up to a twentieth of the image (capped
/// so the blur stays cheap).
fn sigma<R: Rng + ?Sized>(w: usize, h: usize, rng: &mut R) -> f64 {
    let hi = (0.05 * w.min(h) as f64).clamp(2.0, 32.0);
    rng.random_range(0.7f64.ln()..hi.ln()).exp()
}

fn noise<R: Rng + ?Sized>(grey: &mut [f32], w: usize, h: usize, rng: &mut R, seed: u64) {
    let n = rng.random_range(2..=4);
    for i in 0..n {
        let s = sigma(w, h, rng);
        let amp = rng.random_range(0.02..0.1) as f32;
        let f = correlated(w, h, s, mix(seed, i));
        grey.par_iter_mut().zip(f.par_iter()).for_each(|(g, v)| {
            *g += amp * v;
        });
    }
}

fn two_phase<R: Rng + ?Sized>(grey: &mut [f32], w: usize, h: usize, rng: &mut R, seed: u64) {
    let n = rng.random_range(1..=3);
    let mut sum = vec![0.0f32; w * h];
    for i in 0..n {
        let s = sigma(w, h, rng).max(1.5);
        let wt = rng.random_range(0.3..1.0) as f32;
        let f = correlated(w, h, s, mix(seed, 10 + i));
        sum.par_iter_mut().zip(f.par_iter()).for_each(|(a, v)| {
            *a += wt * v;
        });
    }
    // threshold at the quantile that gives a light fraction of 30-70 %
    let frac = rng.random_range(0.3..0.7);
    let mut sorted = sum.clone();
    sorted.sort_by(|a, b| a.total_cmp(b));
    let cut = sorted[((1.0 - frac) * (sorted.len() - 1) as f64) as usize];
    let contrast = rng.random_range(0.15..0.4) as f32;
    grey.par_iter_mut().zip(sum.par_iter()).for_each(|(g, v)| {
        *g += if *v > cut { 0.5 } else { -0.5 } * contrast;
    });
}

/// Polishing marks: a family of scratches near one direction at random
/// positions (abrasive grains run together across the section), plus a few
/// in any direction.
fn scratches<R: Rng + ?Sized>(grey: &mut [f32], spec: &FieldSpec, rng: &mut R) {
    let (w, h) = (spec.width as usize, spec.height as usize);
    let diag = (w as f64).hypot(h as f64);
    let (cx, cy) = (w as f64 / 2.0, h as f64 / 2.0);
    let th = spec.primary_angle_deg.to_radians();
    let n_par = rng.random_range(5..60);
    let n_rand = rng.random_range(0..15);
    let mut items = Vec::new();
    for i in 0..n_par + n_rand {
        let a = if i < n_par {
            th + rng.random_range(-0.05..0.05)
        } else {
            rng.random_range(0.0..PI)
        };
        let (ux, uy) = (a.cos(), -a.sin());
        let off = rng.random_range(-0.5..0.5) * diag;
        let len = rng.random_range(0.2..1.2) * diag;
        let start = rng.random_range(-0.6..0.6) * diag - 0.5 * len;
        let r = rng.random_range(0.4..2.5);
        let (x0, y0) = (cx - uy * off + ux * start, cy + ux * off + uy * start);
        items.push(Item::arm(
            capsule(x0, y0, ux, uy, len, r, r, 0.0, Wobble::NONE),
            0,
        ));
    }
    let (cov, _) = geom::rasterize(&items, 1.0, w, h, None);
    // a scratch is dark in bright field (it scatters light away) or bright
    // where its edge catches the light
    let depth = if rng.random_bool(0.7) {
        -rng.random_range(0.1..0.35)
    } else {
        rng.random_range(0.1..0.25)
    } as f32;
    grey.par_iter_mut().zip(cov.par_iter()).for_each(|(g, c)| {
        *g += depth * c;
    });
}

fn gradient<R: Rng + ?Sized>(grey: &mut [f32], w: usize, h: usize, rng: &mut R) {
    let a = rng.random_range(0.0..2.0 * PI);
    let amp = rng.random_range(0.15..0.45);
    let vig = rng.random_range(-0.2..0.2);
    grey.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        let yy = 2.0 * y as f64 / (h.max(2) - 1) as f64 - 1.0;
        for (x, g) in row.iter_mut().enumerate() {
            let xx = 2.0 * x as f64 / (w.max(2) - 1) as f64 - 1.0;
            let f = 0.5 * amp * (a.cos() * xx + a.sin() * yy) + vig * (xx * xx + yy * yy);
            *g += f as f32;
        }
    });
}

/// Lines of annotation text in a block, dark or light.
fn text<R: Rng + ?Sized>(grey: &mut [f32], w: usize, h: usize, rng: &mut R) {
    let height = rng.random_range(8.0..(0.08 * h as f64).max(9.0));
    let lines = rng.random_range(1..=6);
    let pitch = height * rng.random_range(1.4..2.0);
    let x0 = rng.random_range(0.0..0.5) * w as f64;
    let y0 = rng.random_range(0.0..0.6) * h as f64;
    let weight = rng.random_range(0.3..0.55);
    let texts: Vec<String> = (0..lines)
        .map(|_| {
            let words = rng.random_range(2..=6);
            (0..words)
                .map(|_| glyphs::WORDS[rng.random_range(0..glyphs::WORDS.len())])
                .collect::<Vec<_>>()
                .join(" ")
        })
        .collect();
    let level = if rng.random_bool(0.5) { 0.05 } else { 0.95 };
    for (l, line) in texts.iter().enumerate() {
        draw_text(
            grey,
            w,
            h,
            line,
            x0,
            y0 + l as f64 * pitch,
            height,
            weight,
            level,
        );
    }
}

/// Draws `line` in the generator's stroke font into `grey` (`w` x `h`,
/// values 0-1): its top left corner at (`x`, `y`) px, capitals `height` px
/// high (the stroke's radius is `weight` of a sixth of that), in the grey
/// `level`, anti-aliased over about a pixel. Characters the font lacks are
/// drawn as boxes. For annotating test fields: captions, data bars, labels.
#[allow(clippy::too_many_arguments)]
pub fn draw_text(
    grey: &mut [f32],
    w: usize,
    h: usize,
    line: &str,
    x: f64,
    y: f64,
    height: f64,
    weight: f64,
    level: f32,
) {
    let unit = height / 6.0;
    let r = unit * weight;
    let mut items = Vec::new();
    let mut x = x;
    for c in line.chars() {
        for (a, b, c2, d) in glyphs::strokes(c) {
            let (ax, ay) = (x + a as f64 * unit, y + b as f64 * unit);
            let (bx, by) = (x + c2 as f64 * unit, y + d as f64 * unit);
            let len = (bx - ax).hypot(by - ay);
            let (ux, uy) = if len > 1e-9 {
                ((bx - ax) / len, (by - ay) / len)
            } else {
                (1.0, 0.0)
            };
            items.push(Item::arm(
                capsule(ax, ay, ux, uy, len, r, r, 0.0, Wobble::NONE),
                0,
            ));
        }
        x += glyphs::advance(c) as f64 * unit;
    }
    let (cov, _) = geom::rasterize(&items, 1.0, w, h, None);
    grey.par_iter_mut().zip(cov.par_iter()).for_each(|(g, c)| {
        *g += (level - *g) * c;
    });
}
