//! From coverage field to grey image: grey levels, texture, illumination,
//! blur, noise, quantisation and the burned-in scale bar.

use super::{
    hash01, mix, Corner, FieldSpec, LabelSide, Polarity, ScaleBarSpec, ScaleBarTruth, Style,
    SynthError,
};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use rayon::prelude::*;

const STREAM_TEXTURE: u64 = 0x7E57_0000;
const STREAM_NOISE: u64 = 0xA015_E000;
const STREAM_GRAIN: u64 = 0x06A1_2000;

/// Per-image appearance parameters (drawn from the geometry stream).
pub(crate) struct Looks {
    dendrite: f32,
    eutectic: f32,
    grain_amp: f32,
    tex_amp: f32,
    /// Illumination polynomial coefficients for x, y, x^2, xy, y^2, normalised.
    illum: [f64; 5],
    seed: u64,
}

impl Looks {
    pub(crate) fn draw<R: Rng + ?Sized>(spec: &FieldSpec, rng: &mut R) -> Looks {
        let dendrite = rng.random_range(0.65..0.8) as f32;
        let eutectic = rng.random_range(0.25..0.4) as f32;
        let etched = spec.style == Style::Etched;
        let mut illum = [0.0f64; 5];
        for c in illum.iter_mut() {
            *c = rng.random_range(-1.0..1.0);
        }
        // Normalise so the field spans at most [-1, 1] over the image.
        let mut peak = 0.0f64;
        for j in 0..=16 {
            for i in 0..=16 {
                let x = i as f64 / 8.0 - 1.0;
                let y = j as f64 / 8.0 - 1.0;
                peak = peak.max(poly(&illum, x, y).abs());
            }
        }
        if peak > 1e-9 {
            for c in illum.iter_mut() {
                *c /= peak;
            }
        }
        Looks {
            dendrite,
            eutectic,
            grain_amp: if etched {
                rng.random_range(0.05..0.09)
            } else {
                0.0
            },
            tex_amp: if etched {
                rng.random_range(0.035..0.06)
            } else {
                0.0
            },
            illum,
            seed: spec.seed,
        }
    }
}

fn poly(c: &[f64; 5], x: f64, y: f64) -> f64 {
    c[0] * x + c[1] * y + c[2] * x * x + c[3] * x * y + c[4] * y * y
}

/// Standard normal white noise, one ChaCha stream per row (parallel and reproducible).
pub(crate) fn white_noise(w: usize, h: usize, seed: u64, stream: u64) -> Vec<f32> {
    let mut out = vec![0.0f32; w * h];
    out.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        let mut rng = ChaCha8Rng::seed_from_u64(mix(mix(seed, stream), y as u64));
        for v in row.iter_mut() {
            let z: f64 = StandardNormal.sample(&mut rng);
            *v = z as f32;
        }
    });
    out
}

fn kernel(sigma: f64) -> Vec<f32> {
    let r = (3.0 * sigma).ceil().max(1.0) as i64;
    let mut k: Vec<f64> = (-r..=r)
        .map(|i| (-(i as f64).powi(2) / (2.0 * sigma * sigma)).exp())
        .collect();
    let s: f64 = k.iter().sum();
    for v in k.iter_mut() {
        *v /= s;
    }
    k.into_iter().map(|v| v as f32).collect()
}

/// Separable Gaussian blur with clamp-to-edge borders.
pub(crate) fn gaussian_blur(src: &[f32], w: usize, h: usize, sigma: f64) -> Vec<f32> {
    if sigma < 0.05 {
        return src.to_vec();
    }
    let k = kernel(sigma);
    let r = (k.len() / 2) as i64;
    let mut tmp = vec![0.0f32; w * h];
    tmp.par_chunks_mut(w).enumerate().for_each(|(y, out)| {
        let row = &src[y * w..(y + 1) * w];
        for (x, o) in out.iter_mut().enumerate() {
            let mut acc = 0.0f32;
            for (i, kv) in k.iter().enumerate() {
                let xx = (x as i64 + i as i64 - r).clamp(0, w as i64 - 1) as usize;
                acc += kv * row[xx];
            }
            *o = acc;
        }
    });
    let mut dst = vec![0.0f32; w * h];
    dst.par_chunks_mut(w).enumerate().for_each(|(y, out)| {
        for (i, kv) in k.iter().enumerate() {
            let yy = (y as i64 + i as i64 - r).clamp(0, h as i64 - 1) as usize;
            let row = &tmp[yy * w..(yy + 1) * w];
            for (o, v) in out.iter_mut().zip(row) {
                *o += kv * v;
            }
        }
    });
    dst
}

/// Grey levels from coverage, per-grain etching contrast and eutectic texture.
pub(crate) fn compose(spec: &FieldSpec, looks: &Looks, phase: &[f32], owner: &[u32]) -> Vec<f32> {
    let w = spec.width as usize;
    let h = spec.height as usize;
    let texture = if looks.tex_amp > 0.0 {
        let sigma = 0.8;
        let k = kernel(sigma);
        let norm: f32 = k.iter().map(|v| v * v).sum();
        let mut t = gaussian_blur(&white_noise(w, h, looks.seed, STREAM_TEXTURE), w, h, sigma);
        for v in t.iter_mut() {
            *v /= norm;
        }
        Some(t)
    } else {
        None
    };
    let mut out = vec![0.0f32; w * h];
    out.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        for (x, o) in row.iter_mut().enumerate() {
            let i = y * w + x;
            let p = phase[i];
            let t = texture.as_ref().map_or(0.0, |t| t[i]);
            // Eutectic: fine speckle plus dark particles where the texture dips.
            let particle = (-t - 1.0).max(0.0) * 0.1;
            let e = looks.eutectic + looks.tex_amp * t - particle;
            let goff = if looks.grain_amp > 0.0 && owner[i] != u32::MAX {
                let u = hash01(mix(looks.seed, STREAM_GRAIN), owner[i] as u64) as f32;
                (2.0 * u - 1.0) * looks.grain_amp
            } else {
                0.0
            };
            let d = looks.dendrite + goff + 0.2 * looks.tex_amp * t;
            let mut v = e + (d - e) * p;
            if spec.invert {
                v = 1.0 - v;
            }
            *o = v;
        }
    });
    out
}

/// Add the smooth uneven-illumination field.
pub(crate) fn illuminate(grey: &mut [f32], w: usize, h: usize, amp: f64, looks: &Looks) {
    if amp == 0.0 {
        return;
    }
    let sx = 2.0 / (w.max(2) - 1) as f64;
    let sy = 2.0 / (h.max(2) - 1) as f64;
    grey.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        let yy = y as f64 * sy - 1.0;
        for (x, v) in row.iter_mut().enumerate() {
            let xx = x as f64 * sx - 1.0;
            *v += (amp * poly(&looks.illum, xx, yy)) as f32;
        }
    });
}

pub(crate) fn add_noise(grey: &mut [f32], w: usize, sd: f64, seed: u64) {
    if sd == 0.0 {
        return;
    }
    grey.par_chunks_mut(w).enumerate().for_each(|(y, row)| {
        let mut rng = ChaCha8Rng::seed_from_u64(mix(mix(seed, STREAM_NOISE), y as u64));
        for v in row.iter_mut() {
            let z: f64 = StandardNormal.sample(&mut rng);
            *v += (sd * z) as f32;
        }
    });
}

pub(crate) fn quantise(grey: &[f32]) -> Vec<u16> {
    grey.par_iter()
        .map(|&v| (v.clamp(0.0, 1.0) * 65535.0).round() as u16)
        .collect()
}

/// Mean coverage of the pixels outside the (inclusive) excluded rectangle.
pub(crate) fn area_fraction(
    phase: &[f32],
    w: usize,
    excluded: Option<(usize, usize, usize, usize)>,
) -> f64 {
    let (sum, n) = phase
        .par_chunks(w)
        .enumerate()
        .map(|(y, row)| {
            let mut s = 0.0f64;
            let mut n = 0usize;
            for (x, &v) in row.iter().enumerate() {
                if let Some((x0, y0, x1, y1)) = excluded {
                    if x >= x0 && x <= x1 && y >= y0 && y <= y1 {
                        continue;
                    }
                }
                s += v as f64;
                n += 1;
            }
            (s, n)
        })
        .reduce(|| (0.0, 0), |a, b| (a.0 + b.0, a.1 + b.1));
    if n == 0 {
        0.0
    } else {
        sum / n as f64
    }
}

pub(crate) const BAR_DARK: u16 = 0;
pub(crate) const BAR_LIGHT: u16 = u16::MAX;
const BOX_LIGHT: u16 = 60_395; // 0.92 of full scale
const BOX_DARK: u16 = 5_243; // 0.08 of full scale

/// Where the scale bar (and its backing box) go, decided before rendering.
pub(crate) struct BarPlacement {
    spec: ScaleBarSpec,
    length: u32,
    bar: (usize, usize, usize, usize),
    backing: Option<(usize, usize, usize, usize)>,
}

/// Reach of a bar's ticks beyond its top and bottom edges (0 without
/// ticks), its label's capital height and the label's gap to the bar
/// (0, 0 without a label), px.
fn bar_extras(b: &ScaleBarSpec) -> (i64, i64, i64) {
    let thick = b.thickness_px as i64;
    let reach = if b.ticks { thick.max(3) } else { 0 };
    let (label_h, gap) = match b.label {
        Some(_) => ((2 * thick + 6).clamp(10, 40), (thick / 2).max(3)),
        None => (0, 0),
    };
    (reach, label_h, gap)
}

pub(crate) fn place_scale_bar(
    spec: &FieldSpec,
    b: &ScaleBarSpec,
) -> Result<BarPlacement, SynthError> {
    let bad = |m: String| Err(SynthError::InvalidSpec(m));
    if !(b.length_um.is_finite() && b.length_um > 0.0) {
        return bad(format!(
            "scale bar length_um must be > 0, got {}",
            b.length_um
        ));
    }
    let len_f = (b.length_um / spec.um_per_px).round();
    let (w, h) = (spec.width as i64, spec.height as i64);
    if !(len_f >= 1.0 && len_f <= w as f64) {
        return bad(format!(
            "scale bar of {} um is {} px, which does not fit a {} px wide image",
            b.length_um, len_f, w
        ));
    }
    let len = len_f as i64;
    let thick = b.thickness_px as i64;
    if thick < 1 {
        return bad("scale bar thickness_px must be >= 1".into());
    }
    if let Some(ink) = b.ink {
        if !(0.0..=1.0).contains(&ink) {
            return bad(format!("scale bar ink {ink} outside 0..=1"));
        }
    }
    let margin = match b.inset_px {
        Some(m) => m as i64,
        None => ((0.03 * w.min(h) as f64).round() as i64).max(4),
    };
    let pad = if b.backing_box { thick.max(4) } else { 0 };
    // Room below the bar for its ticks and its label (none without them,
    // so plain bars sit where they always did).
    let (tick_reach, label_h, label_gap) = bar_extras(b);
    let label_room = tick_reach.max(label_gap) + label_h;
    let below = match b.label {
        Some(LabelSide::Below) => label_room,
        _ => tick_reach,
    };
    let above = match b.label {
        Some(LabelSide::Above) => label_room,
        _ => tick_reach,
    };
    let x0 = match b.corner {
        Corner::BottomLeft => margin + pad,
        Corner::BottomRight => w - margin - pad - len,
    };
    let y1 = h - 1 - margin - pad - below;
    let y0 = y1 + 1 - thick;
    let x1 = x0 + len - 1;
    if x0 - pad < 0 || y0 - pad - above < 0 || x1 + pad > w - 1 || x0 > x1 || y1 < y0 {
        return bad(format!(
            "scale bar ({len} x {thick} px plus margins) does not fit a {w} x {h} image"
        ));
    }
    let backing = if b.backing_box {
        Some((
            (x0 - pad) as usize,
            (y0 - pad) as usize,
            (x1 + pad) as usize,
            (y1 + pad) as usize,
        ))
    } else {
        None
    };
    Ok(BarPlacement {
        spec: b.clone(),
        length: len as u32,
        bar: (x0 as usize, y0 as usize, x1 as usize, y1 as usize),
        backing,
    })
}

impl BarPlacement {
    /// Rectangle covered by the overlay (box if any, else the bar).
    pub(crate) fn overlay_rect(&self) -> (usize, usize, usize, usize) {
        self.backing.unwrap_or(self.bar)
    }

    pub(crate) fn draw(self, px: &mut [u16], w: usize) -> ScaleBarTruth {
        let (bar_level, box_level) = match self.spec.polarity {
            Polarity::DarkOnLight => (BAR_DARK, BOX_LIGHT),
            Polarity::LightOnDark => (BAR_LIGHT, BOX_DARK),
        };
        let bar_level = match self.spec.ink {
            Some(ink) => (ink.clamp(0.0, 1.0) * u16::MAX as f64).round() as u16,
            None => bar_level,
        };
        let fill = |px: &mut [u16], (x0, y0, x1, y1): (usize, usize, usize, usize), v: u16| {
            for y in y0..=y1 {
                px[y * w + x0..=y * w + x1].fill(v);
            }
        };
        if let Some(r) = self.backing {
            fill(px, r, box_level);
        }
        fill(px, self.bar, bar_level);
        let (x0, y0, x1, y1) = self.bar;
        let h = px.len() / w.max(1);
        let (reach, label_h, gap) = bar_extras(&self.spec);
        if self.spec.ticks {
            // Ticks flush with the bar's ends: its outer edges are the bar's.
            let tw = (self.spec.thickness_px as usize / 2)
                .max(2)
                .min(x1 - x0 + 1);
            let (ty0, ty1) = (
                y0.saturating_sub(reach as usize),
                (y1 + reach as usize).min(h - 1),
            );
            fill(px, (x0, ty0, x0 + tw - 1, ty1), bar_level);
            fill(px, (x1 + 1 - tw, ty0, x1, ty1), bar_level);
        }
        if let Some(side) = self.spec.label {
            let text = format!("{} um", super::q(self.spec.length_um, 3));
            let unit = label_h as f64 / 6.0;
            let text_w: f64 = text
                .chars()
                .map(|c| super::glyphs::advance(c) as f64 * unit)
                .sum();
            let tx = (x0 + x1) as f64 / 2.0 - text_w / 2.0;
            let ty = match side {
                LabelSide::Above => y0 as f64 - (reach.max(gap) + label_h) as f64,
                LabelSide::Below => (y1 + 1) as f64 + (reach.max(gap)) as f64,
            };
            let mut grey: Vec<f32> = px.iter().map(|v| *v as f32 / u16::MAX as f32).collect();
            let level = bar_level as f32 / u16::MAX as f32;
            super::draw_text(&mut grey, w, h, &text, tx, ty, label_h as f64, 1.0, level);
            for (p, g) in px.iter_mut().zip(&grey) {
                *p = (g.clamp(0.0, 1.0) * u16::MAX as f32).round() as u16;
            }
        }
        ScaleBarTruth {
            length_px: self.length as f64,
            length_um: self.spec.length_um,
            x0: x0 as u32,
            y0: y0 as u32,
            x1: x1 as u32,
            y1: y1 as u32,
            thickness_px: self.spec.thickness_px,
            polarity: self.spec.polarity,
            corner: self.spec.corner,
            backing_box: self
                .backing
                .map(|(a, b, c, d)| [a as u32, b as u32, c as u32, d as u32]),
            bar_level,
        }
    }
}
