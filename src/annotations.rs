//! Annotations burned into a micrograph (captions, labels, magnifications,
//! sample codes, the text of a data bar), found so that they are left out of
//! every measurement: a line of letters has a pitch of its own, which the
//! spacing methods would otherwise read as an arm spacing.
//!
//! The search is a connected-component text finder (the general idea of
//! grouping glyph-like components into lines is common practice in text
//! detection, no single source). Its rules, each with its reason:
//!
//! * **Levels.** Annotation ink is drawn in one flat colour, darker or
//!   lighter than what lies around it, but the image may hold a micrograph
//!   whose phases span the same levels. The image is therefore cut at
//!   [`LEVELS`] grey levels spread evenly between its 0.5th and 99.5th
//!   percentiles, and the components darker and lighter than each level are
//!   examined: ink with sharp edges separates from its background at some
//!   level.
//! * **Glyphs.** A component is a glyph candidate when it is at least
//!   [`MIN_GLYPH_PX`] px high (smaller text can be read neither by a user
//!   nor told from specks and stubs of fine structure), no
//!   wider than [`MAX_GLYPH_WIDTH`] times its height (one letter, or two
//!   that touch), does not touch the image's edge (a cut-off shape cannot
//!   be judged), and is drawn in strokes: its mean stroke width, estimated as
//!   twice its area over its boundary length, is at most
//!   [`MAX_STROKE_RATIO`] of its height. The stems of type faces are about
//!   0.1 to 0.2 of the capital height, bold faces near the upper end
//!   (common practice, no single source), while a filled round spot (a
//!   secondary arm cut across) gives about 0.4 and an elongated one more.
//! * **Lines.** Letters of one line stand on one baseline (or hang from one
//!   top line when some have descenders) with about the same height, and
//!   follow each other at less than about one letter height (word spaces
//!   included). Two candidates are linked when their bottoms or tops agree
//!   within [`ALIGN_TOL`] of the taller's height (at least
//!   [`ALIGN_TOL_MIN_PX`], the anti-aliasing of an edge), their heights
//!   differ by less than the ratio [`MIN_HEIGHT_RATIO`] (lower case letters
//!   against capitals: the x-height is about 0.5-0.75 of the capital height,
//!   common practice), and the gap between them is less than [`MAX_GAP`]
//!   heights. A line needs [`MIN_LINE_GLYPHS`] linked glyphs: shapes of
//!   structure rarely meet all the conditions at once, and the chance that
//!   they do for every link of a chain falls geometrically with its length.
//!   The line's median letter must be at least [`MIN_MEDIAN_ASPECT`] of
//!   its height wide: the median letter of a line of type is about 0.5 to
//!   0.8 of the capital height wide (common practice, no single source),
//!   whereas a comb of arms seen end-on along a trunk is a row of thin bars.
//!   Vertical lines of text (a caption turned by 90 degrees) are found by
//!   the same rules with the axes swapped.
//! * **Regions.** Each line's box is padded by [`PAD`] of its letter height
//!   (anti-aliasing, accents, descenders and dots that are no candidates) and
//!   overlapping boxes are merged.
//!
//! What it does not find: text drawn over the structure itself with no
//! margin (its strokes join the structure's components), text at an angle,
//! and single characters or short labels of fewer than
//! [`MIN_LINE_GLYPHS`] letters.
//!
//! Data bars, caption bands and the outside of a round field of view are
//! found by [`find_frame`] (`annotations/frame.rs`, with its own notes).

use crate::blocks::components::{label_runs, Runs};
use crate::load::GrayImage;

mod frame;
use frame::add_outside_to_mask;
pub use frame::find_frame;

/// Grey levels at which the image is cut (see the module notes).
pub const LEVELS: usize = 5;
/// Smallest glyph height examined (px).
pub const MIN_GLYPH_PX: usize = 8;
/// Widest glyph candidate, in heights.
pub const MAX_GLYPH_WIDTH: f64 = 1.6;
/// Largest mean stroke width, as a fraction of the glyph's height.
pub const MAX_STROKE_RATIO: f64 = 0.25;
/// Tolerance on a shared baseline or top line, in letter heights.
pub const ALIGN_TOL: f64 = 0.12;
/// Smallest tolerance on a shared baseline (px).
pub const ALIGN_TOL_MIN_PX: f64 = 1.5;
/// Smallest ratio of two linked letters' heights.
pub const MIN_HEIGHT_RATIO: f64 = 0.6;
/// Largest gap between linked letters, in letter heights (negative gaps
/// down to -[`MAX_OVERLAP`] are kerned letters).
pub const MAX_GAP: f64 = 0.9;
/// Largest horizontal overlap of linked letters, in letter heights.
pub const MAX_OVERLAP: f64 = 0.25;
/// Smallest median width of a line's letters, in letter heights (see the
/// module notes).
pub const MIN_MEDIAN_ASPECT: f64 = 0.35;
/// Fewest letters in a line of text.
pub const MIN_LINE_GLYPHS: usize = 4;
/// Largest ink in a line's padded box outside its letters, as a fraction of
/// the letters' own (see the module notes).
pub const MAX_STRAY: f64 = 0.2;
/// Largest move of a line's box edges between neighbouring levels, in
/// letter heights, for the line to count as stable (see the module notes).
pub const STABLE_TOL: f64 = 0.1;
/// Width of the plain ground checked around a line, in letter heights:
/// lines of type are set at least about half a capital height apart, and
/// a label stands clear of what it labels (common practice, no single
/// source).
pub const MARGIN: f64 = 0.5;
/// Padding of a line's box, in letter heights.
pub const PAD: f64 = 0.3;

/// What an annotation is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AnnotationKind {
    /// One or more lines of letters or digits.
    Text,
    /// A band of one flat level along an edge: a data bar or caption band
    /// (see [`find_frame`]).
    Band,
    /// The flat outside of a round field of view (see [`find_frame`]).
    OutsideField,
}

impl AnnotationKind {
    pub fn as_str(self) -> &'static str {
        match self {
            AnnotationKind::Text => "text",
            AnnotationKind::Band => "band",
            AnnotationKind::OutsideField => "outside_field",
        }
    }
}

/// A region left out of the measurement, with what was found in it.
#[derive(Clone, Debug, PartialEq)]
pub struct Annotation {
    pub kind: AnnotationKind,
    /// [x0, y0, x1, y1], inclusive px.
    pub rect: [u32; 4],
    /// Letters found in it (the largest count of any one cut level).
    pub glyphs: usize,
    /// Median letter height (px; 0 for a band or an outside field).
    pub letter_height_px: f64,
    /// The round field of view kept, [cx, cy, semi-axis x, semi-axis y] in
    /// px, for [`AnnotationKind::OutsideField`] (whose `rect` is the whole
    /// image: it is left out by this ellipse, not by its rectangle).
    pub field_px: Option<[f64; 4]>,
    /// Why it was left out, when it is no text.
    pub why: Option<String>,
}

impl Annotation {
    /// Why it was left out, for the report.
    pub fn reason(&self) -> String {
        if let Some(w) = &self.why {
            return w.clone();
        }
        format!(
            "{} glyph-like shapes about {:.0} px high standing in lines: annotation text, whose letter pitch is no arm spacing",
            self.glyphs, self.letter_height_px
        )
    }
}

/// A line of text found at one cut (level, polarity and orientation).
#[derive(Clone)]
struct Line {
    /// [x0, y0, x1, y1] in image coordinates.
    rect: [f64; 4],
    glyphs: usize,
    letter_height_px: f64,
    cut: usize,
    /// The level's index (1..=LEVELS).
    level: usize,
    /// Polarity and orientation.
    kind: usize,
}

/// A component's box and shape figures.
#[derive(Clone, Copy, Debug)]
struct Shape {
    x0: usize,
    y0: usize,
    x1: usize,
    y1: usize,
    area: usize,
    /// Boundary length in pixel edges (4-connected crack length).
    edges: usize,
    touches_edge: bool,
}

/// A glyph candidate in line coordinates: `u` along the line, `v` across
/// it (down the letter).
#[derive(Clone, Copy, Debug)]
struct Glyph {
    u0: f64,
    u1: f64,
    v0: f64,
    v1: f64,
    area: usize,
}

impl Glyph {
    fn height(&self) -> f64 {
        self.v1 - self.v0 + 1.0
    }

    /// The fraction of its box inside the box `e` = [u0, u1, v0, v1].
    fn overlap(&self, e: &[f64; 4]) -> f64 {
        let du = (self.u1.min(e[1]) - self.u0.max(e[0]) + 1.0).max(0.0);
        let dv = (self.v1.min(e[3]) - self.v0.max(e[2]) + 1.0).max(0.0);
        du * dv / ((self.u1 - self.u0 + 1.0) * (self.v1 - self.v0 + 1.0))
    }
}

/// Finds lines of annotation text. `mask` (true = excluded, e.g. the scale
/// bar's box) is left alone: masked pixels belong to no component.
pub fn find_text(img: &GrayImage, mask: Option<&[bool]>) -> Vec<Annotation> {
    let (w, h) = (img.width, img.height);
    if w < MIN_GLYPH_PX || h < MIN_GLYPH_PX {
        return vec![];
    }
    let Some((lo, hi)) = percentile_range(&img.data, mask) else {
        return vec![];
    };
    let levels: Vec<f32> = (1..=LEVELS)
        .map(|k| lo + (hi - lo) * k as f32 / (LEVELS + 1) as f32)
        .collect();
    // Each pixel's place among the levels, once: the low four bits count the
    // levels at or below it (it is darker than level k when fewer than k),
    // the high four those strictly below it (lighter than level k when at
    // least k). Masked and non-finite pixels are neither.
    const NEITHER: u8 = 0x0F;
    let code: Vec<u8> = img
        .data
        .iter()
        .enumerate()
        .map(|(i, &v)| {
            if mask.is_some_and(|m| m[i]) || !v.is_finite() {
                return NEITHER;
            }
            let at_or_below = levels.iter().filter(|&&t| v >= t).count() as u8;
            let below = levels.iter().filter(|&&t| v > t).count() as u8;
            at_or_below | (below << 4)
        })
        .collect();
    let mut lines: Vec<Line> = Vec::new();
    for k in 1..=LEVELS {
        for (p, dark) in [true, false].into_iter().enumerate() {
            let kk = k as u8;
            let is = |x: usize, y: usize| {
                let c = code[y * w + x];
                if dark {
                    c & 0x0F < kk
                } else {
                    c >> 4 >= kk
                }
            };
            let shapes = shapes(w, h, &is);
            for (o, vertical) in [false, true].into_iter().enumerate() {
                let mut glyphs: Vec<Glyph> = shapes
                    .iter()
                    .filter_map(|s| glyph(s, vertical, w, h, false))
                    .collect();
                let n_single = glyphs.len();
                let mut groups = text_lines(&glyphs);
                // Letters run together into one wide shape continue a line
                // (they never start one).
                glyphs.extend(shapes.iter().filter_map(|s| glyph(s, vertical, w, h, true)));
                for g in groups.iter_mut() {
                    extend(g, &glyphs, n_single);
                }
                for g in &groups {
                    let (bx, n, lh) = (g.bx, g.members.len(), g.letter_height_px);
                    let area: usize = g.members.iter().map(|&i| glyphs[i].area).sum();
                    // Plain ground: within the line's box widened by MARGIN
                    // letter heights, ink that belongs to no line of text is
                    // at most MAX_STRAY of the line's own.
                    let m = MARGIN * lh;
                    let e = [bx[0] - m, bx[1] + m, bx[2] - m, bx[3] + m];
                    let own: f64 = groups
                        .iter()
                        .flat_map(|q| q.members.iter())
                        .map(|&i| glyphs[i].area as f64 * glyphs[i].overlap(&e))
                        .sum();
                    let r = to_image([e[0], e[1], e[2], e[3]], vertical);
                    let x0 = r[0].max(0.0) as usize;
                    let y0 = r[1].max(0.0) as usize;
                    let x1 = (r[2].max(0.0) as usize).min(w - 1);
                    let y1 = (r[3].max(0.0) as usize).min(h - 1);
                    let ink = (y0..=y1)
                        .map(|y| (x0..=x1).filter(|&x| is(x, y)).count())
                        .sum::<usize>();
                    let stray = (ink as f64 - own).max(0.0) / area.max(1) as f64;
                    let r = to_image(bx, vertical);
                    if stray > MAX_STRAY {
                        continue;
                    }
                    lines.push(Line {
                        rect: r,
                        glyphs: n,
                        letter_height_px: lh,
                        cut: (k * 2 + p) * 2 + o,
                        level: k,
                        kind: p * 2 + o,
                    });
                }
            }
        }
    }
    // Stable lines only: the same line (box within STABLE_TOL) is found at
    // a neighbouring level with the same polarity and orientation.
    let stable: Vec<Line> = lines
        .iter()
        .filter(|a| {
            lines.iter().any(|b| {
                b.kind == a.kind && b.level.abs_diff(a.level) == 1 && {
                    let tol = (STABLE_TOL * a.letter_height_px).max(ALIGN_TOL_MIN_PX + 0.5);
                    (0..4).all(|i| (a.rect[i] - b.rect[i]).abs() <= tol)
                }
            })
        })
        .cloned()
        .collect();
    merge(stable, w, h)
}

/// The 0.5th and 99.5th percentiles of the finite unmasked values, from a
/// histogram of 1024 bins over their range; `None` when the values are
/// missing or all equal.
fn percentile_range(data: &[f32], mask: Option<&[bool]>) -> Option<(f32, f32)> {
    let vals = || {
        data.iter()
            .enumerate()
            .filter(move |(i, v)| v.is_finite() && !mask.is_some_and(|m| m[*i]))
            .map(|(_, &v)| v)
    };
    let (mut mn, mut mx) = (f32::INFINITY, f32::NEG_INFINITY);
    let mut n = 0usize;
    for v in vals() {
        mn = mn.min(v);
        mx = mx.max(v);
        n += 1;
    }
    if n == 0 || mx.partial_cmp(&mn) != Some(std::cmp::Ordering::Greater) {
        return None;
    }
    const BINS: usize = 1024;
    let scale = (BINS - 1) as f64 / (mx as f64 - mn as f64);
    let mut hist = vec![0usize; BINS];
    for v in vals() {
        let b = ((v as f64 - mn as f64) * scale) as usize;
        hist[b.min(BINS - 1)] += 1;
    }
    let at = |q: f64| {
        let target = (q * n as f64).ceil().max(1.0) as usize;
        let mut c = 0;
        for (b, &k) in hist.iter().enumerate() {
            c += k;
            if c >= target {
                return mn + (b as f64 / scale) as f32;
            }
        }
        mx
    };
    let (a, b) = (at(0.005), at(0.995));
    (b > a).then_some((a, b))
}

/// Boxes, areas and boundary lengths of the components of `is`.
fn shapes(w: usize, h: usize, is: &impl Fn(usize, usize) -> bool) -> Vec<Shape> {
    let Runs { runs, root } = label_runs(w, h, is);
    // First run of each row (runs are in row-major order), and one past.
    let mut row_start = vec![runs.len(); h + 1];
    for (i, &(y, _, _)) in runs.iter().enumerate().rev() {
        row_start[y] = i;
    }
    for y in (0..h).rev() {
        row_start[y] = row_start[y].min(row_start[y + 1]);
    }
    // Pixels of each run covered by the runs of the row above and below:
    // both rows are sorted by x, so one pointer per neighbour row walks each
    // once.
    let cover = |dy_up: bool| {
        let mut c = vec![0usize; runs.len()];
        for y in 0..h {
            let ny = if dy_up {
                y.checked_sub(1)
            } else {
                Some(y + 1).filter(|&v| v < h)
            };
            let Some(ny) = ny else { continue };
            let (mut j, j_end) = (row_start[ny], row_start[ny + 1]);
            for (i, ci) in c
                .iter_mut()
                .enumerate()
                .take(row_start[y + 1])
                .skip(row_start[y])
            {
                let (_, a0, a1) = runs[i];
                while j < j_end && runs[j].2 <= a0 {
                    j += 1;
                }
                let mut k = j;
                while k < j_end && runs[k].1 < a1 {
                    *ci += runs[k].2.min(a1) - runs[k].1.max(a0);
                    k += 1;
                }
            }
        }
        c
    };
    let (above, below) = (cover(true), cover(false));
    let mut by_root: Vec<Option<usize>> = vec![None; runs.len()];
    let mut out: Vec<Shape> = Vec::new();
    for (i, (&(y, x0, x1), &r)) in runs.iter().zip(&root).enumerate() {
        // Exposed top and bottom pixel edges of this run, and its two ends.
        let len = x1 - x0;
        let (top, bottom) = (len - above[i], len - below[i]);
        let k = *by_root[r].get_or_insert_with(|| {
            out.push(Shape {
                x0,
                y0: y,
                x1: x1 - 1,
                y1: y,
                area: 0,
                edges: 0,
                touches_edge: false,
            });
            out.len() - 1
        });
        let s = &mut out[k];
        s.x0 = s.x0.min(x0);
        s.x1 = s.x1.max(x1 - 1);
        s.y1 = s.y1.max(y);
        s.area += len;
        s.edges += top + bottom + 2;
        s.touches_edge |= y == 0 || y + 1 == h || x0 == 0 || x1 == w;
    }
    out
}

/// The shape as a glyph candidate of a horizontal (or, `vertical`, a turned)
/// line, or `None` when it is no candidate (see the module notes).
fn glyph(s: &Shape, vertical: bool, w: usize, h: usize, joined: bool) -> Option<Glyph> {
    if s.touches_edge {
        return None;
    }
    let (u0, u1, v0, v1) = if vertical {
        (s.y0, s.y1, s.x0, s.x1)
    } else {
        (s.x0, s.x1, s.y0, s.y1)
    };
    let height = (v1 - v0 + 1) as f64;
    let width = (u1 - u0 + 1) as f64;
    // A letter is a small part of the field: text higher than a fifth of the
    // field's short side is no annotation the field could still be measured
    // around.
    let max_height = (w.min(h) as f64 / 5.0).max(MIN_GLYPH_PX as f64);
    if height < MIN_GLYPH_PX as f64 || height > max_height {
        return None;
    }
    // One letter (or two touching) is at most MAX_GLYPH_WIDTH heights wide;
    // `joined` asks for the wider shapes instead: letters run together.
    if (width > MAX_GLYPH_WIDTH * height) != joined {
        return None;
    }
    let stroke = 2.0 * s.area as f64 / s.edges.max(1) as f64;
    if stroke > MAX_STROKE_RATIO * height {
        return None;
    }
    Some(Glyph {
        u0: u0 as f64,
        u1: u1 as f64,
        v0: v0 as f64,
        v1: v1 as f64,
        area: s.area,
    })
}

/// A group of linked glyphs.
struct Group {
    /// Box in line coordinates [u0, u1, v0, v1].
    bx: [f64; 4],
    /// Indices of its glyphs.
    members: Vec<usize>,
    /// Median letter height (px).
    letter_height_px: f64,
}

/// A box in line coordinates [u0, u1, v0, v1] as [x0, y0, x1, y1].
fn to_image(b: [f64; 4], vertical: bool) -> [f64; 4] {
    if vertical {
        [b[2], b[0], b[3], b[1]]
    } else {
        [b[0], b[2], b[1], b[3]]
    }
}

/// Lines of at least [`MIN_LINE_GLYPHS`] linked glyphs.
fn text_lines(glyphs: &[Glyph]) -> Vec<Group> {
    let n = glyphs.len();
    if n < MIN_LINE_GLYPHS {
        return vec![];
    }
    let mut order: Vec<usize> = (0..n).collect();
    order.sort_by(|&a, &b| glyphs[a].u0.total_cmp(&glyphs[b].u0).then(a.cmp(&b)));
    let mut parent: Vec<usize> = (0..n).collect();
    for (oi, &i) in order.iter().enumerate() {
        let a = glyphs[i];
        let reach = a.u1 + MAX_GAP * a.height().max(MIN_GLYPH_PX as f64) / MIN_HEIGHT_RATIO;
        for &j in order[oi + 1..].iter() {
            let b = glyphs[j];
            if b.u0 > reach {
                break;
            }
            if linked(&a, &b) {
                let (ra, rb) = (find(&mut parent, i), find(&mut parent, j));
                if ra != rb {
                    parent[ra.max(rb)] = ra.min(rb);
                }
            }
        }
    }
    let mut groups: std::collections::BTreeMap<usize, Vec<usize>> = Default::default();
    for i in 0..n {
        let r = find(&mut parent, i);
        groups.entry(r).or_default().push(i);
    }
    groups
        .into_values()
        .filter(|g| g.len() >= MIN_LINE_GLYPHS)
        .filter(|g| {
            let aspects: Vec<f64> = g
                .iter()
                .map(|&i| (glyphs[i].u1 - glyphs[i].u0 + 1.0) / glyphs[i].height())
                .collect();
            crate::stats::median(&aspects).is_some_and(|a| a >= MIN_MEDIAN_ASPECT)
        })
        .map(|g| {
            let mut bx = [
                f64::INFINITY,
                f64::NEG_INFINITY,
                f64::INFINITY,
                f64::NEG_INFINITY,
            ];
            let mut heights: Vec<f64> = Vec::with_capacity(g.len());
            for &i in &g {
                let q = glyphs[i];
                bx[0] = bx[0].min(q.u0);
                bx[1] = bx[1].max(q.u1);
                bx[2] = bx[2].min(q.v0);
                bx[3] = bx[3].max(q.v1);
                heights.push(q.height());
            }
            let lh = crate::stats::median(&heights).unwrap_or(MIN_GLYPH_PX as f64);
            Group {
                bx,
                members: g,
                letter_height_px: lh,
            }
        })
        .collect()
}

/// Adds to the line `g` the run-together letters (`glyphs[first..]`) that
/// stand on its baseline or top line, with its letters' height, at most
/// [`MAX_GAP`] letter heights from either end; until none is left.
fn extend(g: &mut Group, glyphs: &[Glyph], first: usize) {
    let mut taken = vec![false; glyphs.len()];
    loop {
        let lh = g.letter_height_px;
        let tol = (ALIGN_TOL * lh).max(ALIGN_TOL_MIN_PX);
        let mut grown = false;
        for (i, q) in glyphs.iter().enumerate().skip(first) {
            if taken[i] {
                continue;
            }
            let hq = q.height();
            let sized = hq.min(lh) >= MIN_HEIGHT_RATIO * hq.max(lh);
            let aligned = (q.v1 - g.bx[3]).abs() <= tol || (q.v0 - g.bx[2]).abs() <= tol;
            let gap = (q.u0 - g.bx[1] - 1.0).max(g.bx[0] - q.u1 - 1.0);
            if sized && aligned && gap <= MAX_GAP * lh && gap >= -MAX_OVERLAP * lh {
                taken[i] = true;
                g.members.push(i);
                g.bx = [
                    g.bx[0].min(q.u0),
                    g.bx[1].max(q.u1),
                    g.bx[2].min(q.v0),
                    g.bx[3].max(q.v1),
                ];
                grown = true;
            }
        }
        if !grown {
            break;
        }
    }
}

/// Whether `b` (starting right of `a`'s start) follows `a` in one line.
fn linked(a: &Glyph, b: &Glyph) -> bool {
    let (ha, hb) = (a.height(), b.height());
    let hmax = ha.max(hb);
    if ha.min(hb) < MIN_HEIGHT_RATIO * hmax {
        return false;
    }
    let tol = (ALIGN_TOL * hmax).max(ALIGN_TOL_MIN_PX);
    let aligned = (a.v1 - b.v1).abs() <= tol || (a.v0 - b.v0).abs() <= tol;
    let gap = b.u0 - a.u1 - 1.0;
    aligned && gap <= MAX_GAP * hmax && gap >= -MAX_OVERLAP * hmax
}

fn find(parent: &mut [usize], mut i: usize) -> usize {
    while parent[i] != i {
        parent[i] = parent[parent[i]];
        i = parent[i];
    }
    i
}

/// Pads each line's box, clips it to the image and merges boxes that
/// overlap, until none do. A region's letter count is the largest of its
/// cuts' (the same letters are found at several levels).
fn merge(lines: Vec<Line>, w: usize, h: usize) -> Vec<Annotation> {
    // Each region: its box, its lines' letter counts per cut, letter height.
    let mut regions: Vec<([u32; 4], std::collections::BTreeMap<usize, usize>, f64)> = lines
        .into_iter()
        .map(|l| {
            let p = PAD * l.letter_height_px;
            let clip = |v: f64, max: usize| v.clamp(0.0, (max - 1) as f64).round() as u32;
            let r = l.rect;
            (
                [
                    clip(r[0] - p, w),
                    clip(r[1] - p, h),
                    clip(r[2] + p, w),
                    clip(r[3] + p, h),
                ],
                [(l.cut, l.glyphs)].into_iter().collect(),
                l.letter_height_px,
            )
        })
        .collect();
    loop {
        let mut merged = false;
        'outer: for i in 0..regions.len() {
            for j in i + 1..regions.len() {
                let (a, b) = (regions[i].0, regions[j].0);
                if a[0] <= b[2] && b[0] <= a[2] && a[1] <= b[3] && b[1] <= a[3] {
                    let (_, counts, lh) = regions.swap_remove(j);
                    let ri = &mut regions[i];
                    ri.0 = [
                        a[0].min(b[0]),
                        a[1].min(b[1]),
                        a[2].max(b[2]),
                        a[3].max(b[3]),
                    ];
                    for (cut, n) in counts {
                        *ri.1.entry(cut).or_default() += n;
                    }
                    ri.2 = ri.2.max(lh);
                    merged = true;
                    break 'outer;
                }
            }
        }
        if !merged {
            break;
        }
    }
    let mut out: Vec<Annotation> = regions
        .into_iter()
        .map(|(rect, counts, lh)| Annotation {
            kind: AnnotationKind::Text,
            rect,
            glyphs: counts.values().copied().max().unwrap_or(0),
            letter_height_px: lh,
            field_px: None,
            why: None,
        })
        .collect();
    out.sort_by_key(|a| (a.rect[1], a.rect[0]));
    out
}

/// The exclusion mask of `regions` (true = excluded), or'ed into `mask`.
pub fn add_to_mask(regions: &[Annotation], mask: &mut [bool], w: usize) {
    for a in regions {
        // The outside of a round field is left out by its ellipse.
        if let Some(f) = a.field_px {
            add_outside_to_mask(f, mask, w, mask.len() / w.max(1));
            continue;
        }
        let [x0, y0, x1, y1] = a.rect.map(|v| v as usize);
        for y in y0..=y1 {
            mask[y * w + x0..=y * w + x1].fill(true);
        }
    }
}
