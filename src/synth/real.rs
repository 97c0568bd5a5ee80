//! The styles drawn to look like real sections rather than like what the
//! methods assume: `cut`, `dense`, `lace`, `binary` (and the dispatch to
//! `featureless`).
//!
//! These styles have their own random streams (derived from `spec.seed`),
//! so adding them changed nothing in the `clean` and `etched` images.
//! Every random choice that is not a field of [`FieldSpec`] (row spacing,
//! fusion rate, lace size law, area fraction, which style a binary field
//! thresholds) is drawn from the seed, so a spec renders to the same pixels
//! every time, and the choices that matter are written into the truth.

use super::geom::{self, Item, Shape, Wobble};
use super::layout::{self, capsule, rotate, step};
use super::{
    featureless, mix, post, q, FieldSpec, Gray16, Morphology, StemTruth, Style, SynthError, Truth,
};
use image::ImageBuffer;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use std::f64::consts::PI;

const STREAM_GEOMETRY: u64 = 0x5EC7_1000;
const STREAM_LACE: u64 = 0x1ACE_0000;
const STREAM_LOOK: u64 = 0x100C_0000;
const STREAM_BINARY: u64 = 0xB1AA_0000;
pub(crate) const STREAM_TEXTURE2: u64 = 0x7E57_1000;

/// Arm geometry with its truth.
struct Drawn {
    items: Vec<Item>,
    clip: Option<Vec<u32>>,
    spacings: Vec<f64>,
    row_spacings: Vec<f64>,
    row_angles: Vec<f64>,
    stems: Vec<[f64; 5]>,
}

/// Render one field of a style other than `clean` / `etched`.
pub(crate) fn render(spec: &FieldSpec) -> Result<(Gray16, Truth), SynthError> {
    if spec.style == Style::Featureless {
        return featureless::render(spec);
    }
    let w = spec.width as usize;
    let h = spec.height as usize;
    let bar = match &spec.scale_bar {
        Some(b) => Some(post::place_scale_bar(spec, b)?),
        None => None,
    };
    let excluded = bar.as_ref().map(|b| b.overlay_rect());

    let mut brng = ChaCha8Rng::seed_from_u64(mix(spec.seed, STREAM_BINARY));
    let (drawn_as, target) = if spec.style == Style::Binary {
        let base = [Style::Cut, Style::Dense, Style::Lace][brng.random_range(0..3)];
        // Thresholded real sections span a wide range of arm-phase
        // fractions: the lever rule gives about half primary phase for a
        // hypoeutectic Al-7Si alloy and more for leaner alloys (from
        // memory), and the threshold itself moves the boundary.
        (base, brng.random_range(0.35..0.80))
    } else {
        let t = match spec.style {
            // spots cover less than whole arms: the plane cuts each arm once
            Style::Cut => brng.random_range(0.40..0.62),
            Style::Dense => brng.random_range(0.55..0.72),
            _ => brng.random_range(0.45..0.70),
        };
        (spec.style, t)
    };

    let mut rng = ChaCha8Rng::seed_from_u64(mix(spec.seed, STREAM_GEOMETRY));
    let d = match drawn_as {
        Style::Cut => cut(spec, &mut rng),
        Style::Dense => from_layout(layout::dense(spec, &mut rng)),
        _ => from_layout(match spec.morphology {
            Morphology::Columnar => layout::columnar(spec, &mut rng),
            Morphology::Equiaxed => layout::equiaxed(spec, &mut rng),
        }),
    };
    if d.spacings.is_empty() {
        return Err(SynthError::InvalidSpec(
            "no pair of consecutive arms fits inside the image; enlarge it or reduce sdas_px"
                .into(),
        ));
    }
    let (phase, owner, fraction) = tune_fraction(&d, target, w, h, excluded)?;

    // The lace: the same law for every style, its size range set by style.
    let mut lrng = ChaCha8Rng::seed_from_u64(mix(spec.seed, STREAM_LACE));
    let (particles, holes) = lace(spec, drawn_as, &phase, &mut lrng);

    let mut look_rng = ChaCha8Rng::seed_from_u64(mix(spec.seed, STREAM_LOOK));
    let look = Look::draw(&mut look_rng);
    let grey = compose(spec, &look, &phase, &owner, &particles, &holes);

    let (pixels, light) = if spec.style == Style::Binary {
        let (px, light) = threshold(spec, &look, grey, w, h, excluded, &mut look_rng);
        (px, Some(light))
    } else {
        let mut grey = grey;
        gradient(&mut grey, w, h, spec.illumination, &mut look_rng);
        let mut grey = post::gaussian_blur(&grey, w, h, spec.blur_sigma_px);
        post::add_noise(&mut grey, w, spec.noise_sd, spec.seed);
        (post::quantise(&grey), None)
    };
    let mut pixels = pixels;
    let bar_truth = bar.map(|b| b.draw(&mut pixels, w));
    let img = ImageBuffer::from_raw(spec.width, spec.height, pixels).ok_or_else(|| {
        SynthError::InvalidSpec("pixel buffer does not match the image size".into())
    })?;

    let (mean, sd) = mean_sd(&d.spacings);
    let row = if d.row_spacings.is_empty() {
        None
    } else {
        Some(mean_sd(&d.row_spacings).0)
    };
    let stems = if d.stems.is_empty() {
        None
    } else {
        Some(
            d.stems
                .iter()
                .map(|s| StemTruth {
                    x: q(s[0], 6),
                    y: q(s[1], 6),
                    angle_deg: q((-s[3]).atan2(s[2]).to_degrees().rem_euclid(360.0), 6),
                    length_px: q(s[4], 6),
                })
                .collect(),
        )
    };
    let columnar = drawn_as == Style::Lace && spec.morphology == Morphology::Columnar;
    let truth = Truth {
        file: String::new(),
        morphology: spec.morphology,
        style: spec.style,
        sdas_um: q(mean * spec.um_per_px, 9),
        sdas_px: q(mean, 9),
        sdas_sd_px: q(sd, 9),
        sdas_count: d.spacings.len(),
        um_per_px: spec.um_per_px,
        primary_angle_deg: columnar.then(|| q(spec.primary_angle_deg.rem_euclid(180.0), 9)),
        scale_bar: bar_truth,
        dendrite_area_fraction: q(fraction, 9),
        spec: spec.clone(),
        featureless: false,
        contents: None,
        row_spacing_um: row.map(|r| q(r * spec.um_per_px, 9)),
        row_spacing_px: row.map(|r| q(r, 9)),
        row_angles_deg: (!d.row_angles.is_empty())
            .then(|| d.row_angles.iter().map(|a| q(*a, 6)).collect()),
        stems,
        drawn_as: (spec.style == Style::Binary).then_some(drawn_as),
        light_phase_fraction: light.map(|l| q(l, 9)),
        bands: None,
        gradient_um_per_mm: None,
    };
    Ok((img, truth))
}

fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|s| (s - mean).powi(2)).sum::<f64>() / n;
    (mean, var.sqrt())
}

fn from_layout(l: layout::Layout) -> Drawn {
    Drawn {
        items: l.items,
        clip: l.clip,
        spacings: l.spacings,
        row_spacings: Vec::new(),
        row_angles: Vec::new(),
        stems: l.stems,
    }
}

/// Rasterise with the width scale that brings the arm coverage closest to
/// `target` (arms thicken or thin about fixed centres, so the spacing
/// drawn does not change).
#[allow(clippy::type_complexity)]
fn tune_fraction(
    d: &Drawn,
    target: f64,
    w: usize,
    h: usize,
    excluded: Option<(usize, usize, usize, usize)>,
) -> Result<(Vec<f32>, Vec<u32>, f64), SynthError> {
    let clip = d.clip.as_deref();
    let mut k = 1.0f32;
    let mut best: Option<(Vec<f32>, Vec<u32>, f64)> = None;
    for _ in 0..12 {
        let (ph, ow) = geom::rasterize(&d.items, k, w, h, clip);
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
        k = (k * (ratio as f32).powf(1.15)).clamp(0.3, 3.5);
    }
    best.ok_or_else(|| SynthError::InvalidSpec("rasterisation failed".into()))
}

/// Voronoi grains from a jittered grid of pitch `g`.
struct Grains {
    nuclei: Vec<(f64, f64)>,
    cols: usize,
    rows: usize,
    g: f64,
}

impl Grains {
    fn new<R: Rng + ?Sized>(w: f64, h: f64, g: f64, rng: &mut R) -> Grains {
        let cols = (w / g).ceil() as usize + 2;
        let rows = (h / g).ceil() as usize + 2;
        let mut nuclei = Vec::with_capacity(cols * rows);
        for j in 0..rows {
            for i in 0..cols {
                let x = (i as f64 - 0.5 + rng.random_range(-0.4..0.4)) * g;
                let y = (j as f64 - 0.5 + rng.random_range(-0.4..0.4)) * g;
                nuclei.push((x, y));
            }
        }
        Grains {
            nuclei,
            cols,
            rows,
            g,
        }
    }

    /// Nearest nucleus; each lies within 0.4 g of its cell centre, so a
    /// 5x5 search is exhaustive.
    fn nearest(&self, x: f64, y: f64) -> u32 {
        let ci = (x / self.g).floor() as i64 + 1;
        let cj = (y / self.g).floor() as i64 + 1;
        let mut best = (f64::INFINITY, 0u32);
        for j in (cj - 2).max(0)..=(cj + 2).min(self.rows as i64 - 1) {
            for i in (ci - 2).max(0)..=(ci + 2).min(self.cols as i64 - 1) {
                let id = j as usize * self.cols + i as usize;
                let (nx, ny) = self.nuclei[id];
                let d = (nx - x).powi(2) + (ny - y).powi(2);
                if d < best.0 {
                    best = (d, id as u32);
                }
            }
        }
        best.1
    }

    fn map(&self, w: usize, h: usize) -> Vec<u32> {
        let mut clip = vec![0u32; w * h];
        clip.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
            for (x, out) in row.iter_mut().enumerate() {
                *out = self.nearest(x as f64, y as f64);
            }
        });
        clip
    }
}

type Spot = (f64, f64, f64);

/// A section that cuts the secondary arms across (style `cut`).
///
/// Physical picture: when the plane of polish is close to normal to the
/// secondary arms, each arm it meets shows as a rounded spot, oval where
/// the plane meets the arm obliquely (the long axis then lies across the
/// row, along the projection of the arm). The spots stand in rows along
/// the trunk they grew from, at the arm spacing lambda2: this is what a
/// metallographer counts. Neighbouring rows are the arms on the two sides
/// of one trunk (separated by the trunk and the arm roots) and the arms of
/// the next trunk, so rows lie 1.4 to 2.1 spacings apart, drawn once per
/// field; their phases along the row are unrelated (arms on alternate sides
/// and on different trunks do not line up). Coarsening fuses some
/// neighbours along a row and dissolves others, and the grains of a
/// section hold trunks of unrelated orientation.
fn cut<R: Rng + ?Sized>(spec: &FieldSpec, rng: &mut R) -> Drawn {
    let lam = spec.sdas_px;
    let (w, h) = (spec.width as f64, spec.height as f64);
    // several trunks (rows) per grain, several grains per field
    let g = 2.0 * spec.primary_spacing_px;
    let grains = Grains::new(w, h, g, rng);
    let clip = grains.map(spec.width as usize, spec.height as usize);
    let ratio = rng.random_range(1.4..2.1);
    let fuse_p = rng.random_range(0.05..0.25);
    let r_base = rng.random_range(0.26..0.36);
    let row_pitch = ratio * lam;
    let inside = |x: f64, y: f64| x >= 0.0 && y >= 0.0 && x <= w - 1.0 && y <= h - 1.0;
    let in_grain = |x: f64, y: f64, id: u32| inside(x, y) && grains.nearest(x, y) == id;

    let mut items = Vec::new();
    let mut spacings = Vec::new();
    let mut row_spacings = Vec::new();
    let mut row_angles = Vec::new();
    // a Voronoi cell reaches at most (0.5 + 0.4) * sqrt(2) g from its nucleus
    let ext = 1.3 * g + 2.0 * lam;
    for (id, &(gx, gy)) in grains.nuclei.iter().enumerate() {
        let id = id as u32;
        let th = rng.random_range(0.0..PI);
        if gx < -ext || gy < -ext || gx > w + ext || gy > h + ext {
            continue;
        }
        let (ux, uy) = (th.cos(), -th.sin());
        let (nx, ny) = (-uy, ux);
        let before = spacings.len();
        let mut off = -ext + rng.random::<f64>() * row_pitch;
        let mut prev_row: Option<f64> = None;
        while off < ext {
            // trunks are not perfectly parallel
            let (rx, ry) = rotate(ux, uy, rng.random_range(-2.0f64..2.0).to_radians());
            let (bx, by) = (gx + nx * off, gy + ny * off);
            let mut s = -ext - rng.random::<f64>() * lam;
            // previous position: stem coordinate, inside the grain, and the
            // spot drawn there (centre x, y and its half-width across the row)
            let mut prev: Option<(f64, bool, Option<Spot>)> = None;
            let mut row_in = false;
            while s <= ext {
                let (cx, cy) = (bx + rx * s, by + ry * s);
                let here_in = in_grain(cx, cy, id);
                row_in |= here_in;
                if let Some((ps, p_in, _)) = prev {
                    if p_in && here_in {
                        spacings.push(s - ps);
                    }
                }
                let missing = rng.random::<f64>() < spec.missing_arm_fraction;
                let size = r_base * lam * rng.random_range(0.75..1.3);
                let a = size * rng.random_range(0.85..1.1);
                let b = size * rng.random_range(0.95..1.5);
                let tilt = rng.random_range(-0.2..0.2);
                let fused = rng.random_bool(fuse_p);
                let near = here_in
                    || [(1.0, 0.0), (-1.0, 0.0), (0.0, 1.0), (0.0, -1.0)]
                        .iter()
                        .any(|(p, q)| in_grain(cx + p * lam, cy + q * lam, id));
                let mut drawn = None;
                if !missing && near {
                    let (dx, dy) = rotate(rx, ry, tilt);
                    items.push(Item::arm(
                        Shape::Blob {
                            cx: cx as f32,
                            cy: cy as f32,
                            dx: dx as f32,
                            dy: dy as f32,
                            a: a as f32,
                            b: b as f32,
                        },
                        id,
                    ));
                    drawn = Some((cx, cy, b));
                    // coarsened neighbours joined by a neck along the row
                    if fused {
                        if let Some((_, _, Some((px, py, pb)))) = prev {
                            let (ddx, ddy) = (cx - px, cy - py);
                            let l = ddx.hypot(ddy);
                            let r = 0.55 * pb.min(b);
                            items.push(Item::arm(
                                capsule(px, py, ddx / l, ddy / l, l, r, r, 0.0, Wobble::NONE),
                                id,
                            ));
                        }
                    }
                }
                prev = Some((s, here_in, drawn));
                s += step(rng, lam, spec.spacing_jitter);
            }
            if row_in {
                if let Some(po) = prev_row {
                    row_spacings.push(off - po);
                }
                prev_row = Some(off);
            } else {
                prev_row = None;
            }
            off += step(rng, row_pitch, 0.5 * spec.spacing_jitter);
        }
        if spacings.len() > before {
            row_angles.push(th.to_degrees());
        }
    }
    Drawn {
        items,
        clip: Some(clip),
        spacings,
        row_spacings,
        row_angles,
        stems: Vec::new(),
    }
}

/// The interdendritic eutectic as a lace of dark particles and light
/// holes: coverage fields `(particles, holes)`.
///
/// Physical picture: the eutectic forms from the last liquid, in pockets
/// and films of every width between the arms; its silicon grows as plates
/// (needles in section) and, with modification or heat treatment, as
/// rounded particles that ripen, so particle sizes spread over more than a
/// decade: from below the resolution up to nearly the arm width in the wide
/// pockets. Light holes are aluminium of the eutectic and small arm tips cut
/// by the plane. Sizes follow a power law (fragmentation) or a log-normal
/// law (ripening), drawn per field; `lace` fields reach up to the arm
/// width, `cut`/`dense` fields stay finer.
fn lace<R: Rng + ?Sized>(
    spec: &FieldSpec,
    drawn_as: Style,
    phase: &[f32],
    rng: &mut R,
) -> (Vec<f32>, Vec<f32>) {
    let (w, h) = (spec.width as usize, spec.height as usize);
    let lam = spec.sdas_px;
    let r_min = 0.45f64;
    let r_max = match drawn_as {
        // particle diameter up to 0.5-0.7 lambda2: about an arm's width
        Style::Lace => lam * rng.random_range(0.25..0.35),
        _ => lam * rng.random_range(0.08..0.15),
    }
    .max(r_min * 2.0);
    let power = rng.random_bool(0.5);
    let alpha = rng.random_range(1.6..2.8);
    let med_lo = (1.5 * r_min).ln();
    let ln_med = rng.random_range(med_lo..(0.5 * r_max).ln().max(med_lo + 0.1));
    let ln_sd = rng.random_range(0.5..1.0);
    let draw_r = |rng: &mut R| -> f64 {
        if power {
            // inverse CDF of n(r) ~ r^-alpha on [r_min, r_max]
            let u: f64 = rng.random();
            let e = 1.0 - alpha;
            let (a, b) = (r_min.powf(e), r_max.powf(e));
            (a + u * (b - a)).powf(1.0 / e)
        } else {
            let z: f64 = rand_distr::Distribution::sample(&rand_distr::StandardNormal, rng);
            (ln_med + ln_sd * z).exp().clamp(r_min, r_max)
        }
    };
    let inter: usize = phase.par_iter().filter(|&&p| p < 0.5).count();
    let mut out = Vec::new();
    for (cover, aspect_hi) in [
        (rng.random_range(0.2..0.4), 4.0f64),
        (rng.random_range(0.05..0.2), 1.8),
    ] {
        let goal = cover * inter as f64;
        let mut area = 0.0;
        let mut items = Vec::new();
        let mut tries = 0usize;
        while area < goal && items.len() < 400_000 && tries < 4_000_000 {
            tries += 1;
            let x = rng.random_range(0.0..w as f64 - 1.0);
            let y = rng.random_range(0.0..h as f64 - 1.0);
            let r = draw_r(rng);
            let asp = rng.random_range(0.0..aspect_hi.ln()).exp();
            let ang = rng.random_range(0.0..PI);
            if phase[y.round() as usize * w + x.round() as usize] >= 0.5 {
                continue;
            }
            let (a, b) = (r * asp.sqrt(), r / asp.sqrt());
            area += PI * a * b;
            items.push(Item::arm(
                Shape::Blob {
                    cx: x as f32,
                    cy: y as f32,
                    dx: ang.cos() as f32,
                    dy: ang.sin() as f32,
                    a: a as f32,
                    b: b as f32,
                },
                0,
            ));
        }
        out.push(geom::rasterize(&items, 1.0, w, h, None).0);
    }
    let holes = out.pop().unwrap_or_default();
    let particles = out.pop().unwrap_or_default();
    (particles, holes)
}

/// Grey levels of one field.
struct Look {
    arm: f32,
    matrix: f32,
    particle: f32,
    grain_amp: f32,
    tex_amp: f32,
    seed: u64,
}

impl Look {
    fn draw<R: Rng + ?Sized>(rng: &mut R) -> Look {
        Look {
            arm: rng.random_range(0.66..0.82) as f32,
            matrix: rng.random_range(0.3..0.42) as f32,
            particle: rng.random_range(0.05..0.18) as f32,
            // etching attacks grains of different orientation differently
            grain_amp: rng.random_range(0.04..0.1) as f32,
            tex_amp: rng.random_range(0.02..0.05) as f32,
            seed: rng.random(),
        }
    }
}

fn compose(
    spec: &FieldSpec,
    look: &Look,
    phase: &[f32],
    owner: &[u32],
    particles: &[f32],
    holes: &[f32],
) -> Vec<f32> {
    let (w, h) = (spec.width as usize, spec.height as usize);
    let tex = post::gaussian_blur(
        &post::white_noise(w, h, look.seed, STREAM_TEXTURE2),
        w,
        h,
        0.8,
    );
    // blurred unit white noise has sd about 1 / (2 sqrt(pi) sigma)
    let norm = (2.0 * PI.sqrt() * 0.8) as f32;
    let mut out = vec![0.0f32; w * h];
    out.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        for (x, o) in row.iter_mut().enumerate() {
            let i = y * w + x;
            let t = tex[i] * norm;
            let hole = holes.get(i).copied().unwrap_or(0.0);
            let part = particles.get(i).copied().unwrap_or(0.0);
            let goff = if owner[i] != u32::MAX {
                let u = super::hash01(mix(look.seed, 0x6A), owner[i] as u64) as f32;
                (2.0 * u - 1.0) * look.grain_amp
            } else {
                0.0
            };
            let mut e = look.matrix + look.tex_amp * t;
            e += (look.arm - 0.04 - e) * hole;
            e += (look.particle - e) * part;
            let a = look.arm + goff + 0.3 * look.tex_amp * t;
            let p = phase[i];
            let mut v = e + (a - e) * p;
            if spec.invert {
                v = 1.0 - v;
            }
            *o = v;
        }
    });
    out
}

/// Smooth uneven illumination: a random tilt plus a vignette.
fn gradient<R: Rng + ?Sized>(grey: &mut [f32], w: usize, h: usize, amp: f64, rng: &mut R) {
    let (ax, ay, v) = (
        rng.random_range(-1.0..1.0f64),
        rng.random_range(-1.0..1.0f64),
        rng.random_range(-1.0..1.0f64),
    );
    if amp == 0.0 {
        return;
    }
    let norm = (ax.abs() + ay.abs() + v.abs()).max(1e-9);
    grey.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        let yy = 2.0 * y as f64 / (h.max(2) - 1) as f64 - 1.0;
        for (x, g) in row.iter_mut().enumerate() {
            let xx = 2.0 * x as f64 / (w.max(2) - 1) as f64 - 1.0;
            let f = (ax * xx + ay * yy + v * 0.5 * (xx * xx + yy * yy)) / norm;
            *g += (amp * f) as f32;
        }
    });
}

/// Threshold to two phases as a lab does: after blur and a little noise,
/// at the midpoint between the arm and the eutectic matrix grey. Returns
/// 0 / full-scale pixels and the light-phase fraction (before inversion).
fn threshold<R: Rng + ?Sized>(
    spec: &FieldSpec,
    look: &Look,
    grey: Vec<f32>,
    w: usize,
    h: usize,
    excluded: Option<(usize, usize, usize, usize)>,
    rng: &mut R,
) -> (Vec<u16>, f64) {
    let mut g = post::gaussian_blur(&grey, w, h, rng.random_range(0.5..1.2));
    post::add_noise(&mut g, w, 0.5 * spec.noise_sd, spec.seed);
    let mid = 0.5 * (look.arm + look.matrix);
    let light: Vec<f32> = g
        .par_iter()
        .map(|&v| {
            let v = if spec.invert { 1.0 - v } else { v };
            if v > mid {
                1.0
            } else {
                0.0
            }
        })
        .collect();
    let frac = post::area_fraction(&light, w, excluded);
    let px = light
        .par_iter()
        .map(|&l| {
            let on = (l > 0.5) != spec.invert;
            if on {
                u16::MAX
            } else {
                0
            }
        })
        .collect();
    (px, frac)
}
