//! Reading the length printed beside a scale bar ("50 µm", "0,5 mm",
//! "200nm"), so that `--scale-bar auto` calibrates from the image alone.
//!
//! A wrong reading is worse than none (a confident wrong calibration scales
//! every result by a factor), so the reader is strict and says why it gives
//! no reading:
//!
//! 1. **Where.** The text is looked for around the bar found by
//!    `scale_bar::detect`: above or below it (overlapping its columns), or
//!    beside it (overlapping its rows), within a few letter heights and bar
//!    thicknesses; labels are printed next to their bar (common practice,
//!    no single source).
//! 2. **Ink.** The label is printed in the bar's ink (the same drawing
//!    step writes both; common practice, no single source). A pixel is ink
//!    when it lies at least 30 % of the way from the bar's surround to the
//!    bar's own level (which keeps the thin, blurred arches of a small m
//!    joined to its stems), and, in further passes, half-way, 70 % and 85 %
//!    of the way (which separate text printed in its flat ink from
//!    structure whose grey comes near the ink's): the passes must not read
//!    two different lengths.
//! 3. **Line.** Connected components of the ink, cut free from the bar and
//!    anything touching it (its ticks), are grouped into a line: glyphs of
//!    similar height overlapping in rows, at most one letter height apart
//!    (a word space is about half a letter height; common practice). Small
//!    components between them on the baseline (a decimal point or comma)
//!    join the line. The line's frame is its digits' top and baseline.
//! 4. **Glyphs.** Each glyph, cut out by its own component (so that
//!    neighbours and structure do not enter), is sampled in the line's
//!    frame (scaled by the digit height, so its size and height on the line
//!    count) and compared by zero-mean normalised cross-correlation with
//!    templates of `0-9 . , n u µ m` rendered at run time from the bundled
//!    DejaVu Sans at the line's own height (`ab_glyph`), shifted by up to a
//!    cell. Its reading is the best match; its confidence is how far the
//!    best beats the best of any other meaning (`glyph_confidence`).
//! 5. **Grammar.** The glyphs must read NUMBER [space] UNIT exactly:
//!    digits, at most one decimal point or comma followed by digits, and
//!    one of nm, um, µm, mm. Anything else (more text, a letter that is no
//!    unit, a glyph that matches nothing) is no reading, with the reason. A
//!    separator followed by exactly three digits after a non-zero integer
//!    part ("1,000 µm", "2.500 mm") is a thousands separator in some
//!    countries and a decimal one in others: no reading.
//! 6. **Plausibility.** The calibration the reading gives must put the
//!    image's width within [`FIELD_WIDTH_RANGE_UM`].
//!
//! The label's confidence is that of its least certain glyph; under
//! [`MIN_CONFIDENCE`] the image has no reading.

/// A line of the `ARMSPACE_LABEL_DEBUG` trace on stderr; a closed or full
/// stderr loses the line, never the run (`eprintln!` would panic).
macro_rules! dbg_line {
    ($($t:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stderr(), $($t)*);
    }};
}

use super::scale_bar::{Polarity, ScaleBar};
use crate::blocks::components::label_runs;
use crate::load::GrayImage;
use crate::units::Micrometres;
use ab_glyph::{point, Font, FontRef, PxScale};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

static DEJAVU_SANS: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// The range of field-of-view widths of optical and scanning electron
/// micrographs of cast structures, in um: from about 10 um (several
/// thousand times) to about 100 mm (a macro-etched section photographed
/// whole). Common practice, no single source.
pub const FIELD_WIDTH_RANGE_UM: [f64; 2] = [10.0, 100_000.0];

/// Least label confidence for a reading to be used (see
/// `glyph_confidence`): the best match must close at least a third of the
/// gap between the runner-up of another meaning and a perfect match. With
/// less, the glyph is nearly as much like another character as like the
/// one it is read as, and a wrong length is the worse outcome.
pub const MIN_CONFIDENCE: f64 = 1.0 / 3.0;

/// Least correlation of a glyph with its best template: at 0.7 the
/// template accounts for about half of the glyph's variance (r^2 = 0.49);
/// a glyph less like any character than that is not read.
const MIN_MATCH: f64 = 0.7;

/// Digit heights read, px: the issue asks for 8 to 40 px; a little is
/// allowed either side for anti-aliasing, which adds up to a pixel at top
/// and bottom.
const MIN_HEIGHT_PX: usize = 7;
const MAX_HEIGHT_PX: usize = 44;

/// Shares of the way from the bar's surround to its ink at which the text
/// is cut (see the module notes).
const INK_FRACTIONS: [f32; 4] = [0.3, 0.5, 0.7, 0.85];

/// Grid the glyphs are compared on, in digit heights: from 0.2 above the
/// digits' top to 0.35 below the baseline (descenders of µ and the comma),
/// 0.8 either side of the glyph's centre (the widest glyph, m, is about
/// 1.1 digit heights wide), in cells of 1/12 of the height (a stroke of a
/// regular face is about 0.13 of the digit height wide, so one to two
/// cells).
const GRID_UP: f64 = 0.2;
/// A gap wider than this many digit heights is a word space (see
/// `read_line`).
const SPACE: f64 = 0.45;
/// Coverage under which a column of a line is a gap between glyphs (see
/// `column_segments`): a quarter of the way to the ink, the least that
/// anti-aliasing of a stroke's edge leaves within a pixel of it.
const GAP_COVERAGE: f32 = 0.25;
/// Depth of a valley between two glyphs blurred together (see `valleys`):
/// a column holding at most 0.6 of the ink of the strokes on either side.
/// Two blurred edges of strokes a pixel apart give about half the ink of a
/// stroke (a Gaussian edge is at half height at the edge); a stroke itself
/// gives nearly all of it.
const VALLEY: f32 = 0.6;
const GRID_DOWN: f64 = 0.35;
const GRID_HALF_W: f64 = 0.8;
const CELLS_PER_H: f64 = 12.0;

/// A label read beside the bar.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
pub struct Label {
    /// The text as read, e.g. "50 µm" (a space where the glyphs leave one).
    pub text: String,
    /// The length it states, um.
    pub length_um: f64,
    /// 0 to 1: the least certain glyph's confidence (`MIN_CONFIDENCE` is
    /// the least used).
    pub confidence: f64,
    /// The text's box, [x0, y0, x1, y1], inclusive pixel indices.
    pub rect: [u32; 4],
    /// Height of its digits, px.
    pub height_px: f64,
}

impl Label {
    pub fn length(&self) -> Micrometres {
        Micrometres(self.length_um)
    }
}

/// What a glyph means.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Meaning {
    Digit(u8),
    Separator,
    Nano,
    Micro,
    Milli,
}

/// The characters read and what each means (`u` and `µ` both mean micro;
/// `.` and `,` both mark the decimal).
const CHARS: [(char, Meaning); 16] = [
    ('0', Meaning::Digit(0)),
    ('1', Meaning::Digit(1)),
    ('2', Meaning::Digit(2)),
    ('3', Meaning::Digit(3)),
    ('4', Meaning::Digit(4)),
    ('5', Meaning::Digit(5)),
    ('6', Meaning::Digit(6)),
    ('7', Meaning::Digit(7)),
    ('8', Meaning::Digit(8)),
    ('9', Meaning::Digit(9)),
    ('.', Meaning::Separator),
    (',', Meaning::Separator),
    ('n', Meaning::Nano),
    ('u', Meaning::Micro),
    ('\u{00b5}', Meaning::Micro),
    ('m', Meaning::Milli),
];

/// A connected component of ink: its box (inclusive, image coordinates)
/// and its pixels' runs (row, first column, one past the last).
#[derive(Clone, Debug)]
struct Comp {
    x0: usize,
    y0: usize,
    x1: usize,
    y1: usize,
    runs: Vec<(usize, usize, usize)>,
}

impl Comp {
    fn h(&self) -> usize {
        self.y1 + 1 - self.y0
    }
    fn w(&self) -> usize {
        self.x1 + 1 - self.x0
    }
    fn merge(&mut self, o: &Comp) {
        self.x0 = self.x0.min(o.x0);
        self.y0 = self.y0.min(o.y0);
        self.x1 = self.x1.max(o.x1);
        self.y1 = self.y1.max(o.y1);
        self.runs.extend_from_slice(&o.runs);
    }
}

/// A glyph's image in the line's frame: coverage 0..1 on the grid, and
/// its ink box in digit heights.
struct Sampled {
    grid: Vec<f32>,
    w_h: f64,
    h_h: f64,
}

/// The frame of a line: its digits' top (the first row of ink) and its
/// baseline (one past the last row of the digits' ink), px.
#[derive(Clone, Copy, Debug)]
struct Frame {
    top: f64,
    base: f64,
}

impl Frame {
    fn height(&self) -> f64 {
        self.base - self.top
    }
}

fn grid_dims() -> (usize, usize) {
    let rows = ((1.0 + GRID_UP + GRID_DOWN) * CELLS_PER_H).round() as usize;
    let cols = (2.0 * GRID_HALF_W * CELLS_PER_H).round() as usize;
    (rows, cols)
}

/// Samples coverage `cov(x, y)` (pixel indices, 0 outside) on the grid of
/// `frame` centred on `cx`, its columns `stretch` times as wide as its
/// rows are high: each cell the mean of 3 x 3 points.
fn sample(cov: &dyn Fn(i64, i64) -> f32, frame: Frame, cx: f64, stretch: f64) -> Vec<f32> {
    let (rows, cols) = grid_dims();
    let h = frame.height();
    let s = h / CELLS_PER_H;
    let sx = s * stretch;
    let (ya, xa) = (frame.top - GRID_UP * h, cx - GRID_HALF_W * h * stretch);
    let mut g = vec![0.0f32; rows * cols];
    for r in 0..rows {
        for c in 0..cols {
            let mut acc = 0.0f32;
            for j in 0..3 {
                for i in 0..3 {
                    let y = ya + (r as f64 + (j as f64 + 0.5) / 3.0) * s;
                    let x = xa + (c as f64 + (i as f64 + 0.5) / 3.0) * sx;
                    acc += cov(x.floor() as i64, y.floor() as i64);
                }
            }
            g[r * cols + c] = acc / 9.0;
        }
    }
    g
}

/// Zero-mean normalised cross-correlation of a glyph with a template,
/// the best over shifts of the template by up to a cell each way (the
/// frame and centre are located to about a pixel).
fn zncc(g: &[f32], t: &[f32]) -> f64 {
    let (rows, cols) = grid_dims();
    let channels = g.len() / (rows * cols);
    let mut best = -1.0f64;
    for dy in -1i64..=1 {
        for dx in -1i64..=1 {
            let tv = |k: usize, r: usize, c: usize| -> f64 {
                let (rr, cc) = (r as i64 + dy, c as i64 + dx);
                if rr < 0 || cc < 0 || rr >= rows as i64 || cc >= cols as i64 {
                    0.0
                } else {
                    t[(k * rows + rr as usize) * cols + cc as usize] as f64
                }
            };
            let gv = |k: usize, r: usize, c: usize| g[(k * rows + r) * cols + c] as f64;
            let n = (channels * rows * cols) as f64;
            let (mut sg, mut st) = (0.0, 0.0);
            for k in 0..channels {
                for r in 0..rows {
                    for c in 0..cols {
                        sg += gv(k, r, c);
                        st += tv(k, r, c);
                    }
                }
            }
            let (mg, mt) = (sg / n, st / n);
            let (mut sgt, mut sgg, mut stt) = (0.0, 0.0, 0.0);
            for k in 0..channels {
                for r in 0..rows {
                    for c in 0..cols {
                        let a = gv(k, r, c) - mg;
                        let b = tv(k, r, c) - mt;
                        sgt += a * b;
                        sgg += a * a;
                        stt += b * b;
                    }
                }
            }
            if sgg > 0.0 && stt > 0.0 {
                best = best.max(sgt / (sgg * stt).sqrt());
            }
        }
    }
    best
}

/// The holes of a glyph: the pixels of a `w` x `h` box (its ink box with
/// a margin of one) that are not ink and cannot be reached from the box's
/// border through other such pixels (4-connectivity). Holes tell apart
/// what the outline alone hardly does at small sizes and in bold cuts: the
/// one tall counter of 0, the two of 8, the upper one of 9 and the lower
/// one of 6 (common practice in character recognition, no single source).
fn holes(w: usize, h: usize, ink: &dyn Fn(usize, usize) -> bool) -> Vec<bool> {
    let mut outside = vec![false; w * h];
    let mut stack: Vec<(usize, usize)> = Vec::new();
    for x in 0..w {
        stack.push((x, 0));
        stack.push((x, h - 1));
    }
    for y in 0..h {
        stack.push((0, y));
        stack.push((w - 1, y));
    }
    while let Some((x, y)) = stack.pop() {
        if outside[y * w + x] || ink(x, y) {
            continue;
        }
        outside[y * w + x] = true;
        if x > 0 {
            stack.push((x - 1, y));
        }
        if x + 1 < w {
            stack.push((x + 1, y));
        }
        if y > 0 {
            stack.push((x, y - 1));
        }
        if y + 1 < h {
            stack.push((x, y + 1));
        }
    }
    (0..w * h)
        .map(|i| !outside[i] && !ink(i % w, i / w))
        .collect()
}

/// A glyph's two channels on the grid: its ink, and its holes (1 in a
/// hole, see `holes`), one after the other.
fn two_channels(
    cov: &dyn Fn(i64, i64) -> f32,
    bbox: [i64; 4],
    frame: Frame,
    cx: f64,
    stretch: f64,
) -> Vec<f32> {
    let [x0, y0, x1, y1] = bbox;
    let (ox, oy) = (x0 - 1, y0 - 1);
    let (w, h) = ((x1 - x0 + 3) as usize, (y1 - y0 + 3) as usize);
    let hole = holes(w, h, &|x, y| cov(ox + x as i64, oy + y as i64) >= 0.5);
    let hole_cov = |x: i64, y: i64| -> f32 {
        let (lx, ly) = (x - ox, y - oy);
        if lx < 0 || ly < 0 || lx as usize >= w || ly as usize >= h {
            0.0
        } else {
            f32::from(u8::from(hole[ly as usize * w + lx as usize]))
        }
    };
    let mut g = sample(cov, frame, cx, stretch);
    g.extend(sample(&hole_cov, frame, cx, stretch));
    g
}

/// Templates of the characters at one digit height.
struct Templates {
    glyphs: Vec<(char, Meaning, Sampled)>,
}

/// A character rendered alone: its coverage (row-major, `w` wide) and
/// where the baseline row boundary lies.
struct Rendered {
    cov: Vec<f32>,
    w: usize,
    h: usize,
}

/// Supersampling of the templates' rendering: outlines are drawn at 4
/// times the size and box-averaged down, so that they can be emboldened to
/// a quarter of a pixel.
const SUPER: usize = 4;

/// `c` rendered at `px` (ab_glyph's scale), its strokes thickened by
/// `bold` px on each side (a grey dilation of the supersampled coverage by
/// a square of that half-width: a bold cut of a face is, to first order,
/// its regular cut with every stroke widened; common practice, no single
/// source).
fn render_char(font: &FontRef, c: char, px: f32, bold: f32) -> Option<Rendered> {
    let sp = px * SUPER as f32;
    let pad = (4.0 + 2.0 * bold) * SUPER as f32;
    let base = sp * 1.2 + pad;
    let glyph = font
        .glyph_id(c)
        .with_scale_and_position(PxScale::from(sp), point(pad, base));
    let og = font.outline_glyph(glyph)?;
    let b = og.px_bounds();
    let round_up = |v: f32| (v.ceil() as usize).div_ceil(SUPER) * SUPER;
    let (w, h) = (round_up(b.max.x + pad + 1.0), round_up(base + sp + pad));
    let mut cov = vec![0.0f32; w * h];
    let (ox, oy) = (b.min.x as i64, b.min.y as i64);
    og.draw(|x, y, v| {
        let (xx, yy) = (ox + x as i64, oy + y as i64);
        if xx >= 0 && yy >= 0 && (xx as usize) < w && (yy as usize) < h {
            cov[yy as usize * w + xx as usize] = v.clamp(0.0, 1.0);
        }
    });
    let r = (bold * SUPER as f32).round() as usize;
    if r > 0 {
        cov = max_filter(&cov, w, h, r);
    }
    let (dw, dh) = (w / SUPER, h / SUPER);
    let mut down = vec![0.0f32; dw * dh];
    for y in 0..dh {
        for x in 0..dw {
            let mut acc = 0.0;
            for j in 0..SUPER {
                for i in 0..SUPER {
                    acc += cov[(y * SUPER + j) * w + x * SUPER + i];
                }
            }
            down[y * dw + x] = acc / (SUPER * SUPER) as f32;
        }
    }
    Some(Rendered {
        cov: down,
        w: dw,
        h: dh,
    })
}

/// Grey dilation by a square of half-width `r` (rows, then columns), each
/// pass a running maximum over a window clipped at the edges (a monotone
/// queue: linear in the pixels whatever `r`; exactly the maximum over the
/// window, see the test against the window-by-window maximum).
fn max_filter(v: &[f32], w: usize, h: usize, r: usize) -> Vec<f32> {
    let mut tmp = vec![0.0f32; w * h];
    let mut line = Vec::new();
    let mut out_line = Vec::new();
    for y in 0..h {
        running_max(&v[y * w..(y + 1) * w], r, &mut tmp[y * w..(y + 1) * w]);
    }
    let mut out = vec![0.0f32; w * h];
    for x in 0..w {
        line.clear();
        line.extend((0..h).map(|y| tmp[y * w + x]));
        out_line.clear();
        out_line.resize(h, 0.0);
        running_max(&line, r, &mut out_line);
        for (y, m) in out_line.iter().enumerate() {
            out[y * w + x] = *m;
        }
    }
    out
}

/// `out[i]` = the maximum of `v[i - r ..= i + r]` (clipped to `v`; 0 for
/// an all-negative window is never needed: coverage is at least 0).
fn running_max(v: &[f32], r: usize, out: &mut [f32]) {
    let n = v.len();
    let mut q: std::collections::VecDeque<usize> = std::collections::VecDeque::new();
    let mut next = 0;
    for (i, o) in out.iter_mut().enumerate().take(n) {
        let hi = (i + r).min(n - 1);
        while next <= hi {
            while q.back().is_some_and(|&k| v[k] <= v[next]) {
                q.pop_back();
            }
            q.push_back(next);
            next += 1;
        }
        let lo = i.saturating_sub(r);
        while q.front().is_some_and(|&k| k < lo) {
            q.pop_front();
        }
        *o = q.front().map_or(0.0, |&k| v[k].max(0.0));
    }
}

/// Mean stroke width of glyphs, px: twice the ink (the sum of coverage)
/// over the length of the outline (the edges between pixels at least half
/// covered and the others); for a long stroke of width s, area s L over an
/// outline of 2 L. Measured the same way on the templates and the glyphs
/// read, so that the pixel outline's own bias cancels.
fn stroke_width(cov: &dyn Fn(i64, i64) -> f32, boxes: &[[i64; 4]]) -> Option<f64> {
    let (mut area, mut edges) = (0.0f64, 0usize);
    for &[x0, y0, x1, y1] in boxes {
        for y in y0 - 1..=y1 + 1 {
            for x in x0 - 1..=x1 + 1 {
                area += cov(x, y) as f64;
                let on = cov(x, y) >= 0.5;
                edges += usize::from(on != (cov(x + 1, y) >= 0.5));
                edges += usize::from(on != (cov(x, y + 1) >= 0.5));
            }
        }
    }
    (edges > 0).then(|| 2.0 * area / edges as f64)
}

/// Ink box of a rendered character (coverage at least `cut`), inclusive.
fn ink_box(r: &Rendered, cut: f32) -> Option<[usize; 4]> {
    let mut b: Option<[usize; 4]> = None;
    for y in 0..r.h {
        for x in 0..r.w {
            if r.cov[y * r.w + x] >= cut {
                b = Some(match b {
                    None => [x, y, x, y],
                    Some([a, c, d, e]) => [a.min(x), c.min(y), d.max(x), e.max(y)],
                });
            }
        }
    }
    b
}

impl Templates {
    /// The characters rendered so that their digits are `height` px high
    /// when cut at half coverage (as the glyphs read are cut at half the
    /// way to the ink), sampled in their own frame; when `stroke` (the
    /// glyphs' stroke width, px, see `stroke_width`) is more than 15 % over
    /// the face's at that height, emboldened to it (a bold label), by at
    /// most 0.15 of the height (the heaviest weights of common faces; common
    /// practice, no single source).
    fn at(height: f64, stroke: Option<f64>) -> Option<Templates> {
        let font = FontRef::try_from_slice(DEJAVU_SANS).ok()?;
        let digits = |px: f32, bold: f32| -> Option<(Frame, f64)> {
            let (mut top, mut bottoms) = (usize::MAX, Vec::new());
            let mut widths = Vec::new();
            for d in '0'..='9' {
                let r = render_char(&font, d, px, bold)?;
                let b = ink_box(&r, 0.5)?;
                top = top.min(b[1]);
                bottoms.push(b[3]);
                let cov = |x: i64, y: i64| -> f32 { at(&r, x, y) };
                let bx = [b[0] as i64, b[1] as i64, b[2] as i64, b[3] as i64];
                widths.push(stroke_width(&cov, &[bx])?);
            }
            bottoms.sort_unstable();
            let frame = Frame {
                top: top as f64,
                base: (bottoms[(bottoms.len() - 1) / 2] + 1) as f64,
            };
            Some((frame, widths.iter().sum::<f64>() / widths.len() as f64))
        };
        // The face's digit height at a large reference size, rendered
        // once per run (it depends on nothing read): at 100 px, four times
        // supersampled, it is most of the cost of a line's templates.
        static REFERENCE: std::sync::OnceLock<Option<Frame>> = std::sync::OnceLock::new();
        let reference = 100.0f32;
        let f0 = (*REFERENCE.get_or_init(|| digits(reference, 0.0).map(|(f, _)| f)))?;
        let px = reference * (height / f0.height()) as f32;
        let (_, own_stroke) = digits(px, 0.0)?;
        let bold = match stroke {
            Some(s) if s > 1.15 * own_stroke => ((s - own_stroke) / 2.0).min(0.15 * height),
            _ => 0.0,
        };
        // Emboldened, the digits grow by the bold on each side: drawn
        // smaller by as much.
        let px = if bold > 0.0 {
            let (f1, _) = digits(px, bold as f32)?;
            px * (height / f1.height()) as f32
        } else {
            px
        };
        let bold = bold as f32;
        let (frame, _) = digits(px, bold)?;
        let mut glyphs = Vec::new();
        for (c, m) in CHARS {
            let r = render_char(&font, c, px, bold)?;
            let b = ink_box(&r, 0.5)?;
            let cx = (b[0] + b[2] + 1) as f64 / 2.0;
            let cov = |x: i64, y: i64| -> f32 { at(&r, x, y) };
            let h = frame.height();
            let bbox = [b[0] as i64, b[1] as i64, b[2] as i64, b[3] as i64];
            glyphs.push((
                c,
                m,
                Sampled {
                    grid: two_channels(&cov, bbox, frame, cx, 1.0),
                    w_h: (b[2] + 1 - b[0]) as f64 / h,
                    h_h: (b[3] + 1 - b[1]) as f64 / h,
                },
            ));
        }
        Some(Templates { glyphs })
    }
}

/// Coverage of a rendered character at (x, y), 0 outside.
fn at(r: &Rendered, x: i64, y: i64) -> f32 {
    if x < 0 || y < 0 || x as usize >= r.w || y as usize >= r.h {
        0.0
    } else {
        r.cov[y as usize * r.w + x as usize]
    }
}

/// One glyph's reading: the character, its meaning, the best correlation
/// and the best correlation with a character of another meaning.
#[derive(Clone, Copy, Debug)]
struct GlyphRead {
    c: char,
    meaning: Meaning,
    best: f64,
    other: f64,
    /// The character of that other meaning.
    other_c: char,
    /// Whether its ink box is the template's size (see `classify`).
    size_ok: bool,
    /// Whether its ink alone and its ink with its holes read the same
    /// meaning (see `read_comp`).
    agree: bool,
}

/// A glyph's confidence: the share of the gap from the best match of
/// another meaning up to a perfect match that its own best match closes,
/// `(best - other) / (1 - other)`; 0 when the best match is under
/// `MIN_MATCH`, its size is not the character's or its two views disagree
/// (`read_comp`). 1 for a glyph that is
/// exactly its template; 0 for one as much like two meanings.
fn glyph_confidence(g: &GlyphRead) -> f64 {
    if g.best < MIN_MATCH || !g.size_ok || !g.agree {
        return 0.0;
    }
    ((g.best - g.other) / (1.0 - g.other).max(1e-9)).clamp(0.0, 1.0)
}

/// Reads a glyph: `sample(stretch)` samples it with its columns
/// `stretch` times as wide (see `sample`), `w_h` and `h_h` are its ink box
/// in digit heights. Each template is compared with the glyph stretched
/// to the template's width: faces differ most in their widths (condensed,
/// regular and wide cuts of one design; common practice, no single source),
/// far less in their shapes. The width itself must agree within a factor
/// of 1.6 either way (a condensed cut is about 0.8 of the regular width, a
/// wide one about 1.2; common practice, no single source), and the height
/// within a quarter of the digit height (or half the character's own
/// height, for the dot and comma): a speck or a blob of another size is no
/// such character.
fn classify(
    sample: &dyn Fn(f64) -> Vec<f32>,
    w_h: f64,
    h_h: f64,
    t: &Templates,
    ink_only: bool,
) -> GlyphRead {
    const WIDTH_FACTOR: f64 = 1.6;
    let half = grid_dims().0 * grid_dims().1;
    // The digits' height in the templates' frame (lining figures are all
    // of one height).
    let digit_hs: Vec<f64> = t
        .glyphs
        .iter()
        .filter(|(_, m, _)| matches!(m, Meaning::Digit(_)))
        .map(|(_, _, tg)| tg.h_h)
        .collect();
    let digit_h = digit_hs.iter().sum::<f64>() / digit_hs.len().max(1) as f64;
    let scores: Vec<(f64, bool)> = t
        .glyphs
        .iter()
        .map(|(_, m, tg)| {
            let ratio = w_h / tg.w_h.max(1e-9);
            let width_ok = (1.0 / WIDTH_FACTOR..=WIDTH_FACTOR).contains(&ratio)
                || (w_h - tg.w_h).abs() <= 0.15;
            // Half its own height for the dot and comma (their height is a
            // few pixels, and a pixel of blur is a large share of it); a
            // letter or digit within a quarter of the digit height.
            let tol = if *m == Meaning::Separator {
                0.25_f64.max(0.5 * tg.h_h)
            } else {
                0.25
            };
            // A lowercase letter shorter than the digits (n, u, m: the
            // x-height, about 0.7 to 0.8 of the digit height in sans
            // faces; common practice, no single source) must also be
            // nearer its own height than the digits': a blob as tall as
            // the digits is no such letter (two digits fused read as an m
            // otherwise; seed 15208, case 23: "100 um" read "1mm").
            let short_letter =
                !matches!(m, Meaning::Digit(_) | Meaning::Separator) && tg.h_h < digit_h;
            let height_ok = (h_h - tg.h_h).abs() <= tol
                && (!short_letter || (h_h - tg.h_h).abs() < (h_h - digit_h).abs());
            if !(width_ok && height_ok) {
                return (-1.0, false);
            }
            let g = sample(ratio);
            let score = if ink_only {
                zncc(&g[..half], &tg.grid[..half])
            } else {
                zncc(&g, &tg.grid)
            };
            (score, true)
        })
        .collect();
    let (bi, &(best, size_ok)) = scores
        .iter()
        .enumerate()
        .max_by(|a, b| a.1 .0.total_cmp(&b.1 .0))
        // `Templates::at` holds one template for each of CHARS (a constant,
        // non-empty list) or gives no templates at all: never empty here,
        // whatever the image.
        .expect("templates are not empty");
    let (c, meaning, _) = &t.glyphs[bi];
    let (mut other, mut other_c) = scores
        .iter()
        .zip(&t.glyphs)
        .filter(|(_, (_, m, _))| m != meaning)
        .map(|(s, (k, _, _))| (s.0, *k))
        .fold((-1.0, ' '), |a, b| if b.0 > a.0 { b } else { a });
    if size_ok && other <= -1.0 {
        // Its size admits no character of another meaning, so the margin
        // would be over nothing and any match above MIN_MATCH would be
        // near-certain. The runner-up is then the best of the other
        // meanings' shapes, each stretched to its width as above: a blob
        // that only its size makes an m (two digits fused) is then no more
        // an m than a 0.
        for ((_, m, tg), (k, _, _)) in t.glyphs.iter().zip(&t.glyphs) {
            if m == meaning {
                continue;
            }
            let g = sample(w_h / tg.w_h.max(1e-9));
            let score = if ink_only {
                zncc(&g[..half], &tg.grid[..half])
            } else {
                zncc(&g, &tg.grid)
            };
            if score > other {
                (other, other_c) = (score, *k);
            }
        }
    }
    GlyphRead {
        c: *c,
        meaning: *meaning,
        best,
        other,
        other_c,
        size_ok,
        agree: true,
    }
}

/// Components of the predicate within `rect` (inclusive, image
/// coordinates).
fn components(img: &GrayImage, rect: [usize; 4], is_ink: &dyn Fn(f32) -> bool) -> Vec<Comp> {
    let [x0, y0, x1, y1] = rect;
    let (w, h) = (x1 + 1 - x0, y1 + 1 - y0);
    let runs = label_runs(w, h, |x, y| is_ink(img.get(x0 + x, y0 + y)));
    let mut index = std::collections::HashMap::new();
    let mut comps: Vec<Comp> = Vec::new();
    for (k, &(y, a, b)) in runs.runs.iter().enumerate() {
        let root = runs.root[k];
        let i = *index.entry(root).or_insert_with(|| {
            comps.push(Comp {
                x0: usize::MAX,
                y0: usize::MAX,
                x1: 0,
                y1: 0,
                runs: Vec::new(),
            });
            comps.len() - 1
        });
        let c = &mut comps[i];
        let (yy, aa, bb) = (y0 + y, x0 + a, x0 + b);
        c.x0 = c.x0.min(aa);
        c.x1 = c.x1.max(bb - 1);
        c.y0 = c.y0.min(yy);
        c.y1 = c.y1.max(yy);
        c.runs.push((yy, aa, bb));
    }
    comps
}

/// Reads a component's glyph, sampled as coverage of the ink (0 at the
/// surround, 1 at the ink level) within the component's pixels grown by one
/// (its anti-aliased rim), 0 elsewhere.
fn read_comp(
    img: &GrayImage,
    c: &Comp,
    frame: Frame,
    ink: f32,
    surround: f32,
    t: &Templates,
) -> GlyphRead {
    let (bx0, by0) = (c.x0 as i64 - 1, c.y0 as i64 - 1);
    let (bw, bh) = (c.w() + 2, c.h() + 2);
    let mut own = vec![false; bw * bh];
    for &(y, a, b) in &c.runs {
        let yy = (y as i64 - by0) as usize;
        for x in a..b {
            own[yy * bw + (x as i64 - bx0) as usize] = true;
        }
    }
    let grown = grow(&own, bw, bh);
    let span = ink - surround;
    let cov = |x: i64, y: i64| -> f32 {
        let (lx, ly) = (x - bx0, y - by0);
        if lx < 0 || ly < 0 || lx as usize >= bw || ly as usize >= bh {
            return 0.0;
        }
        if !grown[ly as usize * bw + lx as usize] {
            return 0.0;
        }
        if x < 0 || y < 0 || x as usize >= img.width || y as usize >= img.height {
            return 0.0;
        }
        ((img.get(x as usize, y as usize) - surround) / span).clamp(0.0, 1.0)
    };
    let h = frame.height();
    let cx = (c.x0 + c.x1 + 1) as f64 / 2.0;
    let bbox = [c.x0 as i64, c.y0 as i64, c.x1 as i64, c.y1 as i64];
    let sampled = |stretch: f64| two_channels(&cov, bbox, frame, cx, stretch);
    // Two views: the ink alone, and the ink with the holes (which small or
    // blurred glyphs may have lost). They must read the same meaning; the
    // more confident gives the reading.
    let (w_h, h_h) = (c.w() as f64 / h, c.h() as f64 / h);
    let ink = classify(&sampled, w_h, h_h, t, true);
    let both = classify(&sampled, w_h, h_h, t, false);
    if ink.meaning != both.meaning {
        return GlyphRead {
            agree: false,
            ..both
        };
    }
    if glyph_confidence(&ink) > glyph_confidence(&both) {
        ink
    } else {
        both
    }
}

/// A line of glyphs near the bar and its frame.
struct Line {
    glyphs: Vec<Comp>,
    frame: Frame,
    rect: [usize; 4],
    /// Whether ink that is not on the line lies just before its first
    /// glyph, level with it: a digit or mark there (missed by the
    /// grouping, or fainter than the cut) could belong to the number.
    crowded_left: bool,
}

/// Groups components into lines of text near the bar (module notes, 3).
fn lines_near(comps: &[Comp], bar: &ScaleBar, cov: &dyn Fn(usize, usize) -> f32) -> Vec<Line> {
    let tall: Vec<usize> = (0..comps.len())
        .filter(|&i| {
            (6..=MAX_HEIGHT_PX).contains(&comps[i].h()) && comps[i].w() <= 2 * MAX_HEIGHT_PX
        })
        .collect();
    let mut parent: Vec<usize> = (0..tall.len()).collect();
    fn find(p: &mut [usize], mut i: usize) -> usize {
        while p[i] != i {
            p[i] = p[p[i]];
            i = p[i];
        }
        i
    }
    for a in 0..tall.len() {
        for b in a + 1..tall.len() {
            let (p, q) = (&comps[tall[a]], &comps[tall[b]]);
            let (hp, hq) = (p.h() as f64, q.h() as f64);
            let (hmax, hmin) = (hp.max(hq), hp.min(hq));
            if hmin < 0.5 * hmax {
                continue;
            }
            let overlap = p.y1.min(q.y1) as f64 - p.y0.max(q.y0) as f64 + 1.0;
            if overlap < 0.6 * hmin {
                continue;
            }
            let gap = p.x0.max(q.x0) as f64 - p.x1.min(q.x1) as f64 - 1.0;
            if gap < -0.15 * hmax || gap > hmax {
                continue;
            }
            let (ra, rb) = (find(&mut parent, a), find(&mut parent, b));
            if ra != rb {
                parent[ra.max(rb)] = ra.min(rb);
            }
        }
    }
    let mut groups: std::collections::BTreeMap<usize, Vec<usize>> = Default::default();
    for (k, &i) in tall.iter().enumerate() {
        let r = find(&mut parent, k);
        groups.entry(r).or_default().push(i);
    }
    let t = bar.thickness_px as f64;
    let mut lines = Vec::new();
    for members in groups.into_values() {
        // A label has at least a digit and a two-letter unit, over two digit
        // heights wide; small blurred text may join its letters into one or
        // two components, which the column segmentation cuts apart.
        let width = members.iter().map(|&i| comps[i].x1).max().unwrap_or(0) + 1
            - members.iter().map(|&i| comps[i].x0).min().unwrap_or(0);
        let tallest = members.iter().map(|&i| comps[i].h()).max().unwrap_or(0);
        if (width as f64) < 1.5 * tallest as f64 {
            continue;
        }
        let top = members.iter().map(|&i| comps[i].y0).min().unwrap_or(0);
        let mut bottoms: Vec<usize> = members.iter().map(|&i| comps[i].y1).collect();
        bottoms.sort_unstable();
        let base = bottoms[(bottoms.len() - 1) / 2] + 1;
        if base <= top {
            continue;
        }
        let frame = Frame {
            top: top as f64,
            base: base as f64,
        };
        let hh = frame.height();
        if hh < MIN_HEIGHT_PX as f64 || hh > MAX_HEIGHT_PX as f64 {
            continue;
        }
        let lx0 = members.iter().map(|&i| comps[i].x0).min().unwrap_or(0);
        let lx1 = members.iter().map(|&i| comps[i].x1).max().unwrap_or(0);
        let ly1 = members.iter().map(|&i| comps[i].y1).max().unwrap_or(0);
        // Beside the bar: above or below it over its columns, within one
        // and a half letter heights plus two bar thicknesses (room for end
        // ticks, which reach about a thickness beyond the bar); or level
        // with it to a side, within two letter heights.
        let (bx0, by0, bx1, by1) = (bar.x0 as f64, bar.y0 as f64, bar.x1 as f64, bar.y1 as f64);
        let reach = 1.5 * hh + 2.0 * t + 4.0;
        let over_cols = (lx1 as f64) >= bx0 - hh && (lx0 as f64) <= bx1 + hh;
        let above = over_cols && ly1 as f64 <= by0 - 1.0 && by0 - ly1 as f64 - 1.0 <= reach;
        let below = over_cols && top as f64 >= by1 + 1.0 && top as f64 - by1 - 1.0 <= reach;
        let over_rows = (ly1 as f64) >= by0 - hh && (top as f64) <= by1 + hh;
        let side_gap = if (lx0 as f64) > bx1 {
            lx0 as f64 - bx1 - 1.0
        } else if (lx1 as f64) < bx0 {
            bx0 - lx1 as f64 - 1.0
        } else {
            f64::INFINITY
        };
        let beside = over_rows && side_gap <= 2.0 * hh + 4.0;
        if !(above || below || beside) {
            continue;
        }
        // Small components on the baseline between the line's glyphs: a
        // decimal point or comma.
        let mut glyphs: Vec<Comp> = members.iter().map(|&i| comps[i].clone()).collect();
        for c in comps {
            let cx = (c.x0 + c.x1) as f64 / 2.0;
            if (c.h() as f64) < 0.6 * hh
                && cx > lx0 as f64
                && cx < lx1 as f64
                && c.y0 as f64 >= frame.top + 0.4 * hh
                && (c.y1 as f64) < frame.base + 0.45 * hh
                && !members.iter().any(|&i| {
                    let m = &comps[i];
                    m.x0 == c.x0 && m.y0 == c.y0 && m.x1 == c.x1 && m.y1 == c.y1
                })
            {
                glyphs.push(c.clone());
            }
        }
        glyphs.sort_by_key(|c| (c.x0, c.y0));
        // Pieces of one glyph (a stroke broken at the cut) overlap in
        // columns: joined.
        let mut merged: Vec<Comp> = Vec::new();
        for g in glyphs {
            if let Some(last) = merged.last_mut() {
                let ov = last.x1.min(g.x1) as f64 - last.x0.max(g.x0) as f64 + 1.0;
                if ov >= 0.6 * last.w().min(g.w()) as f64 {
                    last.merge(&g);
                    continue;
                }
            }
            merged.push(g);
        }
        let rect = [
            merged.iter().map(|c| c.x0).min().unwrap_or(0),
            merged.iter().map(|c| c.y0).min().unwrap_or(0),
            merged.iter().map(|c| c.x1).max().unwrap_or(0),
            merged.iter().map(|c| c.y1).max().unwrap_or(0),
        ];
        let first = merged.first().map_or(rect[0], |c| c.x0);
        // Within the widest gap inside a number (either side of a decimal
        // point, about 0.3 of the digit height; see SPACE), and a pixel of
        // anti-aliasing.
        let reach = (0.35 * hh).ceil() as usize + 1;
        // Any ink at all there, however faint (a quarter of the way to
        // the ink, as a glyph's gaps are told): a first digit printed
        // fainter than the rest is not found at the cut that finds them.
        // Row by row, past the first glyph's own anti-aliased rim (the ink
        // running on left of the component, which a high cut leaves out;
        // at most a fifth of the digit height and two pixels of blur, or
        // the ink runs on into something else).
        let rows = (frame.top.max(0.0) as usize)..(frame.base as usize);
        let rim = (0.2 * hh).ceil() as usize + 2;
        let crowded_left = rows.into_iter().any(|y| {
            let mut x = first;
            while x > 0 && cov(x - 1, y) >= GAP_COVERAGE {
                x -= 1;
                if first - x > rim {
                    return true;
                }
            }
            (x.saturating_sub(reach)..x).any(|xx| cov(xx, y) >= GAP_COVERAGE)
        });
        lines.push(Line {
            glyphs: merged,
            frame,
            rect,
            crowded_left,
        });
    }
    lines
}

/// The length a sequence of meanings states, or why it states none.
fn parse(reads: &[(GlyphRead, f64)]) -> Result<f64, String> {
    let m: Vec<Meaning> = reads.iter().map(|(g, _)| g.meaning).collect();
    let n = m.len();
    if n < 3 {
        return Err("too few characters for a number and a unit".into());
    }
    let unit = match (m[n - 2], m[n - 1]) {
        (Meaning::Nano, Meaning::Milli) => 1e-3,
        (Meaning::Micro, Meaning::Milli) => 1.0,
        (Meaning::Milli, Meaning::Milli) => 1e3,
        _ => return Err("it does not end in a unit (nm, um, µm or mm)".into()),
    };
    let num = &m[..n - 2];
    let mut int = String::new();
    let mut frac: Option<String> = None;
    for (k, x) in num.iter().enumerate() {
        match x {
            Meaning::Digit(d) => match frac.as_mut() {
                Some(f) => f.push(char::from(b'0' + d)),
                None => int.push(char::from(b'0' + d)),
            },
            Meaning::Separator if frac.is_none() && !int.is_empty() && k + 1 < num.len() => {
                frac = Some(String::new())
            }
            _ => return Err("its number is not digits with at most one decimal mark".into()),
        }
    }
    if int.is_empty() || frac.as_ref().is_some_and(|f| f.is_empty()) {
        return Err("it has no number before the unit".into());
    }
    if int.len() > 1 && int.starts_with('0') {
        return Err(format!("'{int}' is no way of writing a length"));
    }
    if let Some(f) = &frac {
        if f.len() == 3 && int != "0" {
            return Err(format!(
                "'{int}?{f}' could be read with a thousands separator or a decimal mark"
            ));
        }
    }
    let text = match &frac {
        Some(f) => format!("{int}.{f}"),
        None => int,
    };
    let v: f64 = text
        .parse()
        .map_err(|_| format!("'{text}' is not a number"))?;
    if !(v > 0.0 && v.is_finite()) {
        return Err("it states no positive length".into());
    }
    Ok(v * unit)
}

/// One line's reading: its text, length and confidence, or why not.
struct Attempt {
    text: String,
    result: Result<f64, String>,
    confidence: f64,
    rect: [usize; 4],
    height: f64,
}

/// The glyphs of a line cut at the columns its ink leaves empty: a second
/// segmentation beside the components, for small text whose thin strokes
/// (the arches of an m, the bowl of a µ) break at any cut while the gaps
/// between letters stay light. The ink is the coverage (0 at the surround,
/// 1 at the ink) within the line's components grown by a pixel; a column
/// whose ink stays under [`GAP_COVERAGE`] is a gap.
fn column_segments(
    img: &GrayImage,
    line: &Line,
    ink: f32,
    surround: f32,
    at_valleys: bool,
) -> Vec<Comp> {
    let [rx0, ry0, rx1, ry1] = line.rect;
    let (bx0, by0) = (rx0.saturating_sub(1), ry0.saturating_sub(1));
    let (bx1, by1) = ((rx1 + 1).min(img.width - 1), (ry1 + 1).min(img.height - 1));
    let (bw, bh) = (bx1 + 1 - bx0, by1 + 1 - by0);
    let mut own = vec![false; bw * bh];
    for c in &line.glyphs {
        for &(y, a, b) in &c.runs {
            for x in a..b {
                own[(y - by0) * bw + (x - bx0)] = true;
            }
        }
    }
    let grown = grow(&own, bw, bh);
    let span = ink - surround;
    let cov = |x: usize, y: usize| ((img.get(bx0 + x, by0 + y) - surround) / span).clamp(0.0, 1.0);
    let inked = |x: usize, y: usize| grown[y * bw + x] && cov(x, y) >= GAP_COVERAGE;
    // Each column's greatest coverage; the runs of inked columns, each
    // cut again at its valleys.
    let colmax: Vec<f32> = (0..bw)
        .map(|x| {
            (0..bh)
                .filter(|&y| grown[y * bw + x])
                .map(|y| cov(x, y))
                .fold(0.0, f32::max)
        })
        .collect();
    let mut cuts: Vec<(usize, usize)> = Vec::new();
    let mut x = 0;
    while x < bw {
        if colmax[x] < GAP_COVERAGE {
            x += 1;
            continue;
        }
        let start = x;
        while x < bw && colmax[x] >= GAP_COVERAGE {
            x += 1;
        }
        let mut from = start;
        let cut_at = if at_valleys {
            valleys(&colmax[start..x])
        } else {
            Vec::new()
        };
        for v in cut_at {
            cuts.push((from, start + v));
            from = start + v + 1;
        }
        cuts.push((from, x));
    }
    let mut out = Vec::new();
    for (start, end) in cuts {
        let x = end;
        let mut c = Comp {
            x0: usize::MAX,
            y0: usize::MAX,
            x1: 0,
            y1: 0,
            runs: Vec::new(),
        };
        for y in 0..bh {
            let mut xx = start;
            while xx < x {
                if !inked(xx, y) {
                    xx += 1;
                    continue;
                }
                let a = xx;
                while xx < x && inked(xx, y) {
                    xx += 1;
                }
                c.runs.push((by0 + y, bx0 + a, bx0 + xx));
                c.x0 = c.x0.min(bx0 + a);
                c.x1 = c.x1.max(bx0 + xx - 1);
                c.y0 = c.y0.min(by0 + y);
                c.y1 = c.y1.max(by0 + y);
            }
        }
        if !c.runs.is_empty() {
            out.push(c);
        }
    }
    out
}

/// Columns of a profile of greatest coverage that separate two glyphs
/// blurred together: local minima at most [`VALLEY`] of the smaller of
/// the highest columns on either side. Within a glyph of the label's
/// characters every column crosses a stroke (the arches of m and n, the
/// bowls of 0 and µ), so its greatest coverage stays near the strokes';
/// between two glyphs a column holds only their blurred edges.
fn valleys(p: &[f32]) -> Vec<usize> {
    let n = p.len();
    let mut out = Vec::new();
    let mut last = 0;
    for i in 1..n.saturating_sub(1) {
        if !(p[i] <= p[i - 1] && p[i] <= p[i + 1]) {
            continue;
        }
        let left = p[last..i].iter().copied().fold(0.0, f32::max);
        let right = p[i + 1..].iter().copied().fold(0.0, f32::max);
        if p[i] <= VALLEY * left.min(right) {
            out.push(i);
            last = i + 1;
        }
    }
    out
}

/// A mask grown by one pixel (8-neighbourhood).
fn grow(own: &[bool], bw: usize, bh: usize) -> Vec<bool> {
    (0..bw * bh)
        .map(|i| {
            let (x, y) = ((i % bw) as i64, (i / bw) as i64);
            (-1..=1).any(|dy| {
                (-1..=1).any(|dx| {
                    let (xx, yy) = (x + dx, y + dy);
                    xx >= 0
                        && yy >= 0
                        && (xx as usize) < bw
                        && (yy as usize) < bh
                        && own[yy as usize * bw + xx as usize]
                })
            })
        })
        .collect()
}

/// Reads a line as its components, as its column segments, and as its
/// column segments cut again at valleys (each segmentation fails on some
/// text: components break thin strokes, plain column gaps miss letters
/// blurred together, valleys cut the faint arches of a small m).
fn read_line(img: &GrayImage, line: &Line, ink: f32, surround: f32) -> Vec<Attempt> {
    let hh = line.frame.height();
    let span = ink - surround;
    let cov = |x: i64, y: i64| -> f32 {
        if x < 0 || y < 0 || x as usize >= img.width || y as usize >= img.height {
            0.0
        } else {
            ((img.get(x as usize, y as usize) - surround) / span).clamp(0.0, 1.0)
        }
    };
    // The stroke width of the line's digit-high glyphs (the small ones,
    // points and commas, are mostly outline).
    let boxes: Vec<[i64; 4]> = line
        .glyphs
        .iter()
        .filter(|c| c.h() as f64 >= 0.6 * hh)
        .map(|c| [c.x0 as i64, c.y0 as i64, c.x1 as i64, c.y1 as i64])
        .collect();
    let stroke = stroke_width(&cov, &boxes);
    let Some(t) = Templates::at(hh, stroke) else {
        return vec![Attempt {
            text: String::new(),
            result: Err("the glyph templates could not be drawn".into()),
            confidence: 0.0,
            rect: line.rect,
            height: hh,
        }];
    };
    let mut out = read_glyphs(img, &line.glyphs, line, ink, surround, &t);
    let mut seen: Vec<Vec<(usize, usize)>> =
        vec![line.glyphs.iter().map(|c| (c.x0, c.x1)).collect()];
    for at_valleys in [false, true] {
        let segments = column_segments(img, line, ink, surround, at_valleys);
        let key: Vec<(usize, usize)> = segments.iter().map(|c| (c.x0, c.x1)).collect();
        if !seen.contains(&key) {
            out.extend(read_glyphs(img, &segments, line, ink, surround, &t));
            seen.push(key);
        }
    }
    out
}

/// Reads a sequence of glyphs of a line: the text, and each stretch of it
/// that could be a label with its reading or why it is none.
///
/// The line is split into words at gaps wider than [`SPACE`] digit
/// heights. A label is one word (NUMBER UNIT) or a number and a unit as two
/// words; other words on the line (other text, or structure that joined
/// the line) are not read. A word just before the label must end in a
/// letter read with confidence: a digit, a mark or a glyph not read there
/// could be part of the label's number; so could ink off the line just
/// before its first word (`Line::crowded_left`).
fn read_glyphs(
    img: &GrayImage,
    glyphs: &[Comp],
    line: &Line,
    ink: f32,
    surround: f32,
    t: &Templates,
) -> Vec<Attempt> {
    let hh = line.frame.height();
    let reads: Vec<(GlyphRead, f64)> = glyphs
        .iter()
        .map(|c| {
            let g = read_comp(img, c, line.frame, ink, surround, t);
            (g, glyph_confidence(&g))
        })
        .collect();
    let n = reads.len();
    // Words: split at gaps wider than SPACE digit heights.
    let mut words: Vec<std::ops::Range<usize>> = Vec::new();
    let mut start = 0;
    for k in 1..=n {
        if k == n || (glyphs[k].x0 as f64 - glyphs[k - 1].x1 as f64 - 1.0) > SPACE * hh {
            words.push(start..k);
            start = k;
        }
    }
    let show = |r: std::ops::Range<usize>| -> String {
        let mut s = String::new();
        for k in r.clone() {
            if k > r.start && words.iter().any(|w| w.start == k) {
                s.push(' ');
            }
            let (g, c) = &reads[k];
            s.push(if *c > 0.0 { g.c } else { '?' });
        }
        s
    };
    let whole = show(0..n);
    if std::env::var_os("ARMSPACE_LABEL_DEBUG").is_some() {
        dbg_line!("line {:?} h {hh:.1} '{whole}'", line.rect);
        for ((g, c), comp) in reads.iter().zip(glyphs) {
            dbg_line!(
                "  {} best {:.3} other {:.3} ({}) size {} conf {:.2} box {}x{}",
                g.c,
                g.best,
                g.other,
                g.other_c,
                g.size_ok,
                c,
                comp.w(),
                comp.h()
            );
        }
    }
    let is_letter = |k: usize| {
        let (g, c) = &reads[k];
        *c >= MIN_CONFIDENCE && matches!(g.meaning, Meaning::Nano | Meaning::Micro | Meaning::Milli)
    };
    let mut out = Vec::new();
    for i in 0..words.len() {
        let mut spans = vec![words[i].clone()];
        if i + 1 < words.len() && words[i + 1].len() == 2 {
            spans.push(words[i].start..words[i + 1].end);
        }
        for span in spans {
            let text = show(span.clone());
            let confidence = reads[span.clone()]
                .iter()
                .map(|(_, c)| *c)
                .fold(1.0, f64::min);
            let bx = [
                glyphs[span.clone()].iter().map(|c| c.x0).min().unwrap_or(0),
                glyphs[span.clone()].iter().map(|c| c.y0).min().unwrap_or(0),
                glyphs[span.clone()].iter().map(|c| c.x1).max().unwrap_or(0),
                glyphs[span.clone()].iter().map(|c| c.y1).max().unwrap_or(0),
            ];
            let attempt = |result: Result<f64, String>| Attempt {
                text: text.clone(),
                result,
                confidence,
                rect: bx,
                height: hh,
            };
            if let Some(k) = span.clone().find(|&k| reads[k].1 < MIN_CONFIDENCE) {
                out.push(attempt(Err(format!(
                    "in '{whole}', character {} of '{text}' is not clearly any of 0-9 . , n u µ m (confidence {:.2}, {:.2} needed)",
                    k - span.start + 1,
                    reads[k].1,
                    MIN_CONFIDENCE
                ))));
                continue;
            }
            if i == 0 && line.crowded_left {
                out.push(attempt(Err(format!(
                    "in '{whole}', ink just before '{text}' could belong to its number"
                ))));
                continue;
            }
            if i > 0 && !is_letter(words[i - 1].end - 1) {
                out.push(attempt(Err(format!(
                    "in '{whole}', the text before '{text}' could belong to its number"
                ))));
                continue;
            }
            match parse(&reads[span.clone()]) {
                Ok(um) => out.push(attempt(Ok(um))),
                Err(why) => out.push(attempt(Err(format!("'{text}': {why}")))),
            }
        }
    }
    out
}

/// Reads the label beside `bar`, or says why it gives no reading.
pub fn read(img: &GrayImage, bar: &ScaleBar) -> Result<Label, String> {
    let (w, h) = (img.width, img.height);
    let (x0, y0, x1, y1) = (
        bar.x0 as usize,
        bar.y0 as usize,
        bar.x1 as usize,
        bar.y1 as usize,
    );
    if x1 >= w || y1 >= h || x0 > x1 || y0 > y1 {
        return Err("the bar lies outside the image".into());
    }
    // The bar's ink (its interior's median) and its surround (the median of
    // the rows three pixels above and below it, past the blur of its edges).
    let interior: Vec<f32> = (y0..=y1)
        .flat_map(|y| img.row(y)[x0..=x1].iter().copied())
        .collect();
    let surround_px: Vec<f32> = [y0.checked_sub(3), Some(y1 + 3)]
        .into_iter()
        .flatten()
        .filter(|&y| y < h)
        .flat_map(|y| img.row(y)[x0..=x1].iter().copied())
        .collect();
    let (Some(ink), Some(surround)) = (median(interior), median(surround_px)) else {
        return Err("the bar has no pixels to take its ink from".into());
    };
    let dark = bar.polarity == Polarity::DarkOnLight;
    if (surround - ink).abs() < 0.05 || (dark && ink > surround) || (!dark && ink < surround) {
        return Err("the bar's ink hardly differs from its surround".into());
    }
    // The search rectangle: room above and below for a line of the
    // largest height read at the farthest distance allowed (see
    // `lines_near`), and to the sides for 8 characters of that height
    // (each at most 0.9 of it wide) with its gap.
    let t = bar.thickness_px as usize;
    let reach_v = (2.5 * MAX_HEIGHT_PX as f64) as usize + 2 * t + 8;
    let reach_h = 10 * MAX_HEIGHT_PX;
    let rect = [
        x0.saturating_sub(reach_h),
        y0.saturating_sub(reach_v),
        (x1 + reach_h).min(w - 1),
        (y1 + reach_v).min(h - 1),
    ];
    let mut readings: Vec<Attempt> = Vec::new();
    let mut failures: Vec<Attempt> = Vec::new();
    for f in INK_FRACTIONS {
        let cut = surround + f * (ink - surround);
        let is_ink = |v: f32| if dark { v <= cut } else { v >= cut };
        let comps: Vec<Comp> = components(img, rect, &is_ink)
            .into_iter()
            .filter(|c| {
                // Cut off by the search rectangle, or touching the bar
                // (the bar itself, its ticks, structure joined to it): no
                // glyph of its label.
                let cut_off = c.x0 == rect[0] && rect[0] > 0
                    || c.y0 == rect[1] && rect[1] > 0
                    || c.x1 == rect[2] && rect[2] + 1 < w
                    || c.y1 == rect[3] && rect[3] + 1 < h;
                let touches_bar =
                    c.x0 <= x1 + 1 && c.x1 + 1 >= x0 && c.y0 <= y1 + 1 && c.y1 + 1 >= y0;
                !cut_off && !touches_bar
            })
            .collect();
        if std::env::var_os("ARMSPACE_LABEL_DEBUG").is_some() {
            dbg_line!(
                "cut {cut:.3} (ink {ink:.3}, surround {surround:.3}): {} components",
                comps.len()
            );
            for c in comps
                .iter()
                .filter(|c| c.y0 > y1 && c.y0 < y1 + 40 && c.x0 >= x0 && c.x1 <= x1)
            {
                dbg_line!("  comp {}..{} x {}..{}", c.x0, c.x1, c.y0, c.y1);
            }
        }
        let span = ink - surround;
        let cov = |x: usize, y: usize| -> f32 {
            if x >= w || y >= h {
                0.0
            } else {
                ((img.get(x, y) - surround) / span).clamp(0.0, 1.0)
            }
        };
        for line in lines_near(&comps, bar, &cov) {
            for a in read_line(img, &line, ink, surround) {
                if a.result.is_ok() {
                    readings.push(a);
                } else {
                    failures.push(a);
                }
            }
        }
    }
    let Some(best) = readings
        .iter()
        .max_by(|a, b| a.confidence.total_cmp(&b.confidence))
    else {
        return Err(
            match failures
                .iter()
                .max_by(|a, b| a.confidence.total_cmp(&b.confidence))
            {
                Some(a) => format!(
                    "the text beside the bar gives no length: {}",
                    a.result.as_ref().err().cloned().unwrap_or_default()
                ),
                None => "no line of text found beside the bar".into(),
            },
        );
    };
    // `readings` holds only the attempts whose result is Ok.
    let length = match &best.result {
        Ok(v) => *v,
        Err(e) => return Err(e.clone()),
    };
    if let Some(other) = readings.iter().find(|a| {
        a.result
            .as_ref()
            .is_ok_and(|v| (v / length - 1.0).abs() > 1e-9)
    }) {
        return Err(format!(
            "the text beside the bar reads two ways ('{}' and '{}')",
            best.text, other.text
        ));
    }
    // Plausibility: the field of view this calibration gives.
    let um_per_px = length / bar.length_px;
    let field = um_per_px * w as f64;
    let [lo, hi] = FIELD_WIDTH_RANGE_UM;
    if !(lo..=hi).contains(&field) {
        return Err(format!(
            "the label reads '{}', which makes the image {:.4} mm wide, outside the {} um to {} mm of micrographs",
            best.text,
            field / 1000.0,
            lo,
            hi / 1000.0
        ));
    }
    let u = |v: usize| v as u32;
    Ok(Label {
        text: best.text.clone(),
        length_um: length,
        confidence: (best.confidence * 1000.0).round() / 1000.0,
        rect: best.rect.map(u),
        height_px: best.height,
    })
}

fn median(mut v: Vec<f32>) -> Option<f32> {
    crate::stats::median_in_place(&mut v).map(|m| m as f32)
}

#[cfg(test)]
mod tests;
