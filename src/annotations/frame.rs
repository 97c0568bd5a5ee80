//! What frames a micrograph without being part of it: a band of one flat
//! level along an edge (the microscope's data bar, a caption band), and the
//! flat outside of a round field of view (a photograph through an eyepiece,
//! whose field stop leaves the corners dark). Both are left out of every
//! measurement: the band's straight inner edge and the field stop's rim
//! are no structure, and a flat region holds no arm spacing.
//!
//! Finding flat regions by row statistics and a circle by a least-squares
//! fit of its rim is common practice in image analysis, no single source.
//! The rules, each with its reason:
//!
//! * **Flat.** A pixel lies at a level when it is within a tolerance of it:
//!   [`TOL_SIGMA`] times the image's noise, estimated as a robust spread of
//!   horizontal pixel-to-pixel differences (their median absolute value
//!   scaled to a standard deviation; most neighbours in a micrograph differ
//!   by noise only, edges being a small share of the pixels), and at least
//!   [`TOL_FLOOR`] (one 8-bit step and the rounding of a level stored at 8
//!   bits). A photographed band carries the field's noise, and four
//!   standard deviations hold all but about one in 10 000 of its pixels.
//! * **Band.** Scanning from an edge, the band's rows are those in which at
//!   least [`BAND_ROW`] of the pixels outside the text regions lie at the
//!   level of the edge row's median (undetected text or a logo may take the
//!   rest of a row, not more than half of it), and at least a third of them
//!   are plain, [`PLAIN_ROW`] at the level (lines of type are set with at
//!   least about half a letter height of ground between and around them,
//!   common practice, no single source: half a height of ground for one and
//!   a half heights of line). It is at least [`MIN_BAND_PX`] deep (a
//!   thinner line is a border, which the methods' own edge handling
//!   already meets) and at most [`MAX_BAND_FRACTION`] of the image (a bar
//!   is a strip beside the field, not most of the picture). It ends in a
//!   step: in the field's second row (the first may be the bar's
//!   anti-aliased or resampled edge) at most [`MAX_EDGE_ROW`] of the pixels
//!   lie at its level, whereas a slow gradient of illumination crosses the
//!   tolerance over many rows.
//! * **Its own level.** At most [`MAX_FIELD_SHARE`] of the field beyond the
//!   band (outside text regions) lies at the band's level. This is the rule
//!   that keeps structure out: a trunk or a phase that runs along an edge
//!   has the level of one of the field's phases, which covers a sizeable
//!   share of the field, whereas a bar is drawn in a level of its own. A
//!   bar in exactly the level of a phase (a black bar on a two-phase
//!   picture with a black phase) is therefore not found.
//! * **Round field.** The four corners lie at one level (a field stop's
//!   outside reaches every corner of the photograph). In each row the run
//!   of pixels at that level from either side ends on the rim; an
//!   axis-aligned ellipse (a circle, or a circle seen through pixels that
//!   are not square) is fitted to these ends by least squares, refitted on
//!   the ends within [`RIM_TOL_PX`] (or [`RIM_TOL_REL`] of the radius, the
//!   blur of an out-of-focus stop) of it, and accepted when at least
//!   [`MIN_RIM_INLIERS`] of the ends lie on it, the ends lie in all four
//!   quadrants around its centre (a ragged edge of structure along one side
//!   fits a short arc of almost any circle), its centre lies in the image,
//!   its axes differ by at most the ratio [`MAX_AXIS_RATIO`], and the inside
//!   holds at most [`MAX_FIELD_SHARE`] of its pixels at the outside's level
//!   (as for a band). The outside, grown inward by [`RIM_PAD_PX`] (the
//!   rim's blur), is left out.

use super::{Annotation, AnnotationKind};
use crate::load::GrayImage;

/// Tolerance of a flat level, in noise standard deviations.
pub const TOL_SIGMA: f32 = 4.0;
/// Smallest tolerance of a flat level (grey values in [0, 1]).
pub const TOL_FLOOR: f32 = 2.0 / 255.0;
/// Smallest share of a band's row at its level.
pub const BAND_ROW: f64 = 0.5;
/// Share of a plain row at the band's level.
pub const PLAIN_ROW: f64 = 0.98;
/// Thinnest band (px).
pub const MIN_BAND_PX: usize = 4;
/// Deepest band, as a fraction of the image across it.
pub const MAX_BAND_FRACTION: f64 = 1.0 / 3.0;
/// Largest share of the field at a band's (or the outside's) level.
pub const MAX_FIELD_SHARE: f64 = 0.05;
/// Largest share of the field's second row at the band's level.
pub const MAX_EDGE_ROW: f64 = 0.25;
/// Rows of the field next to a band also left out (an anti-aliased or
/// resampled edge spreads over about one pixel).
pub const EDGE_PAD_PX: usize = 1;
/// Largest distance of a rim point from the fitted ellipse (px): a
/// digitised edge lies within half a pixel of the true one, plus about a
/// pixel of blur.
pub const RIM_TOL_PX: f64 = 2.0;
/// Largest distance of a rim point from the ellipse, as a fraction of its
/// smaller semi-axis.
pub const RIM_TOL_REL: f64 = 0.01;
/// Smallest share of rim points on the ellipse.
pub const MIN_RIM_INLIERS: f64 = 0.9;
/// Largest ratio of the ellipse's axes.
pub const MAX_AXIS_RATIO: f64 = 1.5;
/// Width of the rim left out with the outside (px).
pub const RIM_PAD_PX: f64 = 2.0;

/// The image's noise as a standard deviation: the median absolute
/// horizontal difference of neighbours (of every other row: the estimate
/// needs no more) scaled to a standard deviation (1.4826 for the median
/// absolute deviation of a normal distribution, over the square root of 2
/// for a difference of two pixels).
fn noise_sd(img: &GrayImage, mask: Option<&[bool]>) -> f32 {
    let w = img.width;
    let mut d: Vec<f32> = Vec::with_capacity(img.data.len() / 2);
    for y in (0..img.height).step_by(2) {
        let row = &img.data[y * w..(y + 1) * w];
        for x in 1..w {
            let i = y * w + x;
            if mask.is_some_and(|m| m[i] || m[i - 1]) {
                continue;
            }
            let v = (row[x] - row[x - 1]).abs();
            if v.is_finite() {
                d.push(v);
            }
        }
    }
    let mad = crate::stats::median_in_place(&mut d).unwrap_or(0.0) as f32;
    1.4826 * mad / std::f32::consts::SQRT_2
}

fn tolerance(img: &GrayImage, mask: Option<&[bool]>) -> f32 {
    (TOL_SIGMA * noise_sd(img, mask)).max(TOL_FLOOR)
}

/// One of the four edges.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Side {
    Top,
    Bottom,
    Left,
    Right,
}

impl Side {
    fn name(self) -> &'static str {
        match self {
            Side::Top => "top",
            Side::Bottom => "bottom",
            Side::Left => "left",
            Side::Right => "right",
        }
    }
}

/// A band found along one side: its depth (px from the edge) and level.
struct Band {
    side: Side,
    depth: usize,
    level: f32,
    share: f64,
}

impl Band {
    /// [x0, y0, x1, y1] of the band with its edge padding.
    fn rect(&self, w: usize, h: usize) -> [u32; 4] {
        let d = (self.depth + EDGE_PAD_PX).max(1);
        let r = match self.side {
            Side::Top => [0, 0, w - 1, d.min(h) - 1],
            Side::Bottom => [0, h.saturating_sub(d), w - 1, h - 1],
            Side::Left => [0, 0, d.min(w) - 1, h - 1],
            Side::Right => [w.saturating_sub(d), 0, w - 1, h - 1],
        };
        r.map(|v| v as u32)
    }
}

/// Finds data bars and caption bands along the edges, and the outside of a
/// round field of view. `mask` (true = excluded: the scale bar, text) is
/// not examined; the text regions `text` are counted into the band that
/// holds them.
pub fn find_frame(img: &GrayImage, mask: Option<&[bool]>, text: &[Annotation]) -> Vec<Annotation> {
    let (w, h) = (img.width, img.height);
    if w < 4 * MIN_BAND_PX || h < 4 * MIN_BAND_PX {
        return vec![];
    }
    let tol = tolerance(img, mask);
    let usable = |i: usize| !mask.is_some_and(|m| m[i]) && img.data[i].is_finite();
    let mut bands: Vec<Band> = [Side::Top, Side::Bottom, Side::Left, Side::Right]
        .into_iter()
        .filter_map(|s| band(img, mask, s, tol))
        .collect();
    // Its own level: the field beyond all bands found, outside the mask.
    let rects: Vec<[u32; 4]> = bands.iter().map(|b| b.rect(w, h)).collect();
    let in_rects = |x: usize, y: usize| {
        rects.iter().any(|r| {
            r[0] as usize <= x && x <= r[2] as usize && r[1] as usize <= y && y <= r[3] as usize
        })
    };
    for b in bands.iter_mut() {
        let (mut n, mut at) = (0usize, 0usize);
        for y in 0..h {
            for x in 0..w {
                let i = y * w + x;
                if !usable(i) || in_rects(x, y) {
                    continue;
                }
                n += 1;
                at += usize::from((img.data[i] - b.level).abs() <= tol);
            }
        }
        b.share = if n == 0 { 1.0 } else { at as f64 / n as f64 };
    }
    bands.retain(|b| b.share <= MAX_FIELD_SHARE);
    let mut out: Vec<Annotation> = bands
        .iter()
        .map(|b| {
            let rect = b.rect(w, h);
            let inside = |a: &Annotation| {
                a.rect[0] >= rect[0]
                    && a.rect[1] >= rect[1]
                    && a.rect[2] <= rect[2]
                    && a.rect[3] <= rect[3]
            };
            let glyphs: usize = text.iter().filter(|a| inside(a)).map(|a| a.glyphs).sum();
            let across = if matches!(b.side, Side::Top | Side::Bottom) {
                "width"
            } else {
                "height"
            };
            Annotation {
                kind: AnnotationKind::Band,
                rect,
                glyphs,
                letter_height_px: 0.0,
                field_px: None,
                why: Some(format!(
                    "a band {} px deep along the {} edge, of one flat level ({:.3}) across the whole {across}{}, a level only {:.1} % of the field beyond it holds: a data bar or caption band, no structure",
                    b.depth,
                    b.side.name(),
                    b.level,
                    if glyphs > 0 {
                        format!(" with {glyphs} letters in it")
                    } else {
                        String::new()
                    },
                    100.0 * b.share
                )),
            }
        })
        .collect();
    if let Some(o) = outside_field(img, mask, tol) {
        out.push(o);
    }
    out
}

/// The band along `side`, before its level is checked against the field.
fn band(img: &GrayImage, mask: Option<&[bool]>, side: Side, tol: f32) -> Option<Band> {
    let (w, h) = (img.width, img.height);
    let horizontal = matches!(side, Side::Top | Side::Bottom);
    let (len, depth_max) = if horizontal { (w, h) } else { (h, w) };
    // Pixel index of position `u` along row `d` (counted from the edge).
    let at = |d: usize, u: usize| match side {
        Side::Top => d * w + u,
        Side::Bottom => (h - 1 - d) * w + u,
        Side::Left => u * w + d,
        Side::Right => u * w + (w - 1 - d),
    };
    let usable = |i: usize| !mask.is_some_and(|m| m[i]) && img.data[i].is_finite();
    let mut edge: Vec<f32> = (0..len)
        .map(|u| at(0, u))
        .filter(|&i| usable(i))
        .map(|i| img.data[i])
        .collect();
    // An edge row mostly hidden by the mask says nothing about a band.
    if edge.len() * 2 < len {
        return None;
    }
    let level = crate::stats::median_in_place(&mut edge)? as f32;
    let limit = (depth_max as f64 * MAX_BAND_FRACTION) as usize;
    // The share of row `d` at the level; a row all under the mask (text
    // across it) continues the band.
    let frac = |d: usize| {
        let (mut n, mut k) = (0usize, 0usize);
        for u in 0..len {
            let i = at(d, u);
            if usable(i) {
                n += 1;
                k += usize::from((img.data[i] - level).abs() <= tol);
            }
        }
        if n == 0 {
            1.0
        } else {
            k as f64 / n as f64
        }
    };
    let (mut depth, mut plain) = (None, 0usize);
    for d in 0..=limit {
        let f = frac(d);
        if f < BAND_ROW {
            depth = Some(d);
            break;
        }
        plain += usize::from(f >= PLAIN_ROW);
    }
    let depth = depth?;
    // A step: one row past the first row of the field, the level is rare.
    let step = depth + 1 < depth_max && frac(depth + 1) <= MAX_EDGE_ROW;
    (depth >= MIN_BAND_PX && plain * 3 >= depth && step).then_some(Band {
        side,
        depth,
        level,
        share: 1.0,
    })
}

/// The outside of a round field of view (see the module notes).
fn outside_field(img: &GrayImage, mask: Option<&[bool]>, tol: f32) -> Option<Annotation> {
    let (w, h) = (img.width, img.height);
    let usable = |i: usize| !mask.is_some_and(|m| m[i]) && img.data[i].is_finite();
    // The corners' level: the median of 3 x 3 patches at each corner, all
    // four within the tolerance of their median.
    let corner = |x0: usize, y0: usize| {
        let mut v: Vec<f32> = (y0..y0 + 3)
            .flat_map(|y| (x0..x0 + 3).map(move |x| y * w + x))
            .filter(|&i| usable(i))
            .map(|i| img.data[i])
            .collect();
        crate::stats::median_in_place(&mut v)
    };
    let mut c = [
        corner(0, 0)?,
        corner(w - 3, 0)?,
        corner(0, h - 3)?,
        corner(w - 3, h - 3)?,
    ];
    c.sort_by(f64::total_cmp);
    let level = (0.5 * (c[1] + c[2])) as f32;
    if c.iter().any(|&v| (v as f32 - level).abs() > tol) {
        return None;
    }
    let flat = |i: usize| (img.data[i] - level).abs() <= tol;
    // The ends of the runs at the level from either side of each row; a
    // run that meets the mask ends nowhere known.
    let mut pts: Vec<(f64, f64)> = Vec::new();
    let mut outside_px = 0usize;
    for y in 0..h {
        let row = y * w;
        let l = (0..w).find(|&x| !usable(row + x) || !flat(row + x));
        let Some(l) = l else {
            outside_px += w;
            continue;
        };
        let r = (0..w)
            .rev()
            .find(|&x| !usable(row + x) || !flat(row + x))
            .unwrap_or(l);
        outside_px += l + (w - 1 - r);
        if l > 0 && usable(row + l) {
            pts.push((l as f64 - 0.5, y as f64));
        }
        if r + 1 < w && usable(row + r) {
            pts.push((r as f64 + 0.5, y as f64));
        }
    }
    // A rim is many rows long; a few flat corner pixels are no outside.
    if pts.len() < 20 || (outside_px as f64) < 0.01 * (w * h) as f64 {
        return None;
    }
    let mut e = fit_ellipse(&pts)?;
    let tol_px = |e: &Ellipse| RIM_TOL_PX.max(RIM_TOL_REL * e.ax.min(e.ay));
    let inl: Vec<(f64, f64)> = pts
        .iter()
        .copied()
        .filter(|&p| e.distance(p) <= 3.0 * tol_px(&e))
        .collect();
    e = fit_ellipse(&inl)?;
    let t = tol_px(&e);
    let on: Vec<&(f64, f64)> = pts.iter().filter(|&&p| e.distance(p) <= t).collect();
    if (on.len() as f64) < MIN_RIM_INLIERS * pts.len() as f64 {
        return None;
    }
    let mut quadrants = [0usize; 4];
    for &&(x, y) in &on {
        quadrants[usize::from(x >= e.cx) + 2 * usize::from(y >= e.cy)] += 1;
    }
    let ratio = e.ax.max(e.ay) / e.ax.min(e.ay);
    let centred = (0.0..w as f64).contains(&e.cx) && (0.0..h as f64).contains(&e.cy);
    if quadrants.iter().any(|&q| q * 20 < on.len()) || ratio > MAX_AXIS_RATIO || !centred {
        return None;
    }
    // Its own level inside.
    let (mut n, mut k) = (0usize, 0usize);
    for y in 0..h {
        for x in 0..w {
            let i = y * w + x;
            if usable(i) && !e.outside(x, y, RIM_PAD_PX) {
                n += 1;
                k += usize::from(flat(i));
            }
        }
    }
    let share = if n == 0 { 1.0 } else { k as f64 / n as f64 };
    if share > MAX_FIELD_SHARE {
        return None;
    }
    Some(Annotation {
        kind: AnnotationKind::OutsideField,
        rect: [0, 0, (w - 1) as u32, (h - 1) as u32],
        glyphs: 0,
        letter_height_px: 0.0,
        field_px: Some([e.cx, e.cy, e.ax, e.ay]),
        why: Some(format!(
            "the flat outside ({:.3}) of a round field of view centred at ({:.0}, {:.0}) px with semi-axes {:.0} and {:.0} px, {} of {} rim points within {:.1} px of it: no structure",
            level,
            e.cx,
            e.cy,
            e.ax,
            e.ay,
            on.len(),
            pts.len(),
            t
        )),
    })
}

/// An axis-aligned ellipse.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Ellipse {
    pub cx: f64,
    pub cy: f64,
    pub ax: f64,
    pub ay: f64,
}

impl Ellipse {
    /// Distance of `p` from the ellipse, approximately (radially, in units
    /// of the smaller semi-axis).
    fn distance(&self, p: (f64, f64)) -> f64 {
        let r = ((p.0 - self.cx) / self.ax).hypot((p.1 - self.cy) / self.ay);
        (r - 1.0).abs() * self.ax.min(self.ay)
    }

    /// Whether pixel (x, y) lies outside the ellipse shrunk by `pad` px.
    pub fn outside(&self, x: usize, y: usize, pad: f64) -> bool {
        let s = (1.0 - pad / self.ax.min(self.ay)).max(0.0);
        let (dx, dy) = (
            (x as f64 - self.cx) / (self.ax * s),
            (y as f64 - self.cy) / (self.ay * s),
        );
        dx * dx + dy * dy > 1.0
    }
}

/// Least-squares fit of x^2 + A y^2 + B x + C y + D = 0 (an axis-aligned
/// ellipse), points centred and scaled first for a well-conditioned
/// system; `None` when the fit is no real ellipse.
fn fit_ellipse(pts: &[(f64, f64)]) -> Option<Ellipse> {
    if pts.len() < 5 {
        return None;
    }
    let n = pts.len() as f64;
    let (mx, my) = pts
        .iter()
        .fold((0.0, 0.0), |(a, b), p| (a + p.0 / n, b + p.1 / n));
    let s = pts.iter().map(|p| (p.0 - mx).hypot(p.1 - my)).sum::<f64>() / n;
    if s <= 0.0 {
        return None;
    }
    // Rows [y^2, x, y, 1] against -x^2, in centred, scaled coordinates.
    let mut m = [[0.0f64; 5]; 4];
    for p in pts {
        let (x, y) = ((p.0 - mx) / s, (p.1 - my) / s);
        let row = [y * y, x, y, 1.0];
        for i in 0..4 {
            for j in 0..4 {
                m[i][j] += row[i] * row[j];
            }
            m[i][4] -= row[i] * x * x;
        }
    }
    let [a, b, c, d] = solve4(m)?;
    if a <= 0.0 {
        return None;
    }
    let (cx, cy) = (-b / 2.0, -c / (2.0 * a));
    let ax2 = cx * cx + a * cy * cy - d;
    if ax2 <= 0.0 {
        return None;
    }
    let ax = ax2.sqrt();
    let ay = (ax2 / a).sqrt();
    Some(Ellipse {
        cx: mx + s * cx,
        cy: my + s * cy,
        ax: s * ax,
        ay: s * ay,
    })
}

/// Gaussian elimination with partial pivoting of a 4 x 4 system given as
/// its augmented matrix.
fn solve4(mut m: [[f64; 5]; 4]) -> Option<[f64; 4]> {
    for col in 0..4 {
        let p = (col..4).max_by(|&i, &j| m[i][col].abs().total_cmp(&m[j][col].abs()))?;
        if m[p][col].abs() < 1e-12 {
            return None;
        }
        m.swap(col, p);
        let pivot = m[col];
        for (r, row) in m.iter_mut().enumerate() {
            if r != col {
                let f = row[col] / pivot[col];
                for (a, b) in row.iter_mut().zip(pivot.iter()).skip(col) {
                    *a -= f * b;
                }
            }
        }
    }
    let x = [
        m[0][4] / m[0][0],
        m[1][4] / m[1][1],
        m[2][4] / m[2][2],
        m[3][4] / m[3][3],
    ];
    x.iter().all(|v| v.is_finite()).then_some(x)
}

/// The exclusion mask of the outside of `e` (grown inward by
/// [`RIM_PAD_PX`]), or'ed into `mask`.
pub fn add_outside_to_mask(field_px: [f64; 4], mask: &mut [bool], w: usize, h: usize) {
    let e = Ellipse {
        cx: field_px[0],
        cy: field_px[1],
        ax: field_px[2],
        ay: field_px[3],
    };
    for y in 0..h {
        for x in 0..w {
            if e.outside(x, y, RIM_PAD_PX) {
                mask[y * w + x] = true;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_ellipse_is_fitted_to_its_rim() {
        let pts: Vec<(f64, f64)> = (0..100)
            .map(|k| {
                let t = k as f64 * 0.0628;
                (300.0 + 200.0 * t.cos(), 250.0 + 180.0 * t.sin())
            })
            .collect();
        let e = fit_ellipse(&pts).unwrap();
        assert!((e.cx - 300.0).abs() < 1e-6 && (e.cy - 250.0).abs() < 1e-6);
        assert!((e.ax - 200.0).abs() < 1e-6 && (e.ay - 180.0).abs() < 1e-6);
    }
}
