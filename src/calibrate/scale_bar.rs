//! Detection of a scale bar burned into a micrograph, and its length in
//! pixels to sub-pixel precision.
//!
//! A scale bar is a solid, straight, horizontal rectangle of one flat ink
//! near one extreme of the grey range (dark on light or light on dark). It
//! may stand on a contrasting backing box or lie directly on the structure,
//! touched by either phase, with end ticks and a label beside it. What sets
//! it apart from the structure is its own shape, not a plain surround: a
//! long band of one flat level with two parallel, straight, horizontal
//! edges and two straight vertical ends, far straighter and longer than any
//! outline the structure shows.
//!
//! A bar set off from its surroundings (on a backing box or a plain part
//! of the field) is looked for first, as before (`clear.rs`), and taken
//! when it is at least `MIN_BAR_LEN` long. Otherwise, for each polarity:
//!
//! 1. pixels within 25 % (then 45 %, for thin bars that blur has lifted) of
//!    the grey range of the image's extreme are bar candidates;
//! 2. horizontal runs of candidates stacked over consecutive rows form
//!    rectangles: the columns every row of the stack covers (a touching
//!    feature widens some rows, never all of them);
//! 3. a rectangle is a bar when it is at least 2 px thick and 4 times longer
//!    than thick, clear of the image border, its ink flat (pixel noise and
//!    drift along the bar small against its contrast), both long edges
//!    located column by column on one straight horizontal line wherever
//!    the structure does not hide them, and seen along the whole length
//!    (see `examine` for each rule and its reason);
//! 4. of the bars found, the longest is taken, when it is at least twice as
//!    long as any other straight band away from it. A band that passes the
//!    shape tests but whose ends cannot be measured (hidden in every row by
//!    structure of its own grey, or with the bar's long edges hidden next
//!    to an end, where the ink may be a touching feature's) is named in
//!    the error instead.
//!
//! Whichever search found it, a bar without a backing box must then stand
//! out from every band of its ink in the image, tested or not
//! (`rival_band`): a band of the structure at least half its thickness and
//! more than half its length elsewhere, a longer band beside it, or a band
//! over it more than twice its length (of which it is a piece) leaves the
//! image without a bar, with the reason. The tests of a bar are passed now
//! and then by a stretch of a busy field; the drawn bar is the one band no
//! stretch of the structure comes near.
//!
//! In the set-off search the length is measured edge to edge on every
//! interior row of the bar: each
//! end is located at the centroid of the row's step into (or out of) the bar:
//! the differences of neighbouring pixels with the bar's sign, over the run
//! around the largest of them. Rows whose length strays more than 1 px from
//! the rows' median (a feature of the micrograph touching an end) are left
//! out of the mean. A sharp bar covering pixels x0..=x1 thus
//! measures x1 - x0 + 1, and a blur that is the same on both sides of an end
//! (Gaussian, box, defocus) does not move it; a step of the other sign just
//! beyond (the edge of a backing box) is ignored. On the structure each end
//! is placed on its own, as the mean over the rows that show it clearly
//! (the grey beyond plain and not the ink's) and agree within 0.75 px.

use crate::load::GrayImage;

mod clear;
use schemars::JsonSchema;
use serde::Serialize;

/// Which way the bar contrasts with what surrounds it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, serde::Deserialize, JsonSchema)]
#[serde(rename_all = "kebab-case")]
pub enum Polarity {
    // A dark bar on lighter surroundings.
    DarkOnLight,
    // A light bar on darker surroundings.
    LightOnDark,
}

/// A detected scale bar. Pixel coordinates from the top-left corner; the box
/// corners are inclusive pixel indices.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ScaleBar {
    /// Edge-to-edge length, mean over the bar's interior rows.
    pub length_px: f64,
    /// Standard deviation of the per-row lengths.
    pub length_sd_px: f64,
    pub rows: usize,
    pub x0: u32,
    pub y0: u32,
    pub x1: u32,
    pub y1: u32,
    pub thickness_px: u32,
    pub polarity: Polarity,
    /// 0 to 1: for a bar set off from its surroundings the weakest of the
    /// fill, uniformity and edge-contrast tests; for a bar on the structure
    /// the share of its located edges on their lines (0.7 at the least
    /// share accepted).
    pub confidence: f64,
    /// Contrasting box behind the bar, when there is one: [x0, y0, x1, y1].
    pub backing_box: Option<[u32; 4]>,
    /// Region excluded from measurement: bar, box and room for a label.
    pub mask: [u32; 4],
}

/// Smallest confidence for a bar to be used.
pub const MIN_CONFIDENCE: f64 = 0.7;

/// Candidate thresholds tried, as fractions of the grey range from the
/// extreme: the second catches thin bars whose level blur has lifted.
const CANDIDATE_FRACTIONS: [f32; 2] = [0.25, 0.45];
const END_TOLERANCE_PX: i64 = 2;

/// Least share of a bar's located edge positions on its edge's line (see
/// `examine`).
const MIN_ON_LINE: f64 = 0.8;

/// Shortest bar taken, px. A bar is read to about half a pixel at each
/// end; under 32 px that is more than 1.5 % of the calibration, and a
/// band that short is no more than a few arm spacings of a fine
/// structure, whose straight stretches it could not be told from.
const MIN_BAR_LEN: usize = 32;

/// How many times longer than any other straight band of the image the bar
/// must be: a bar is drawn to stand out, and the structure's straight
/// stretches come in families of similar lengths, of which the longest is
/// only a little longer than the next.
const STAND_OUT: f64 = 2.0;

/// A rectangle of candidate pixels: rows `y0..=y1` all candidates over
/// columns `x0..=x1`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Rect {
    x0: usize,
    x1: usize,
    y0: usize,
    y1: usize,
}

/// Why a band that looked like a bar was not taken: kept for the message
/// when no bar is found, so that a technician learns what was seen.
#[derive(Clone, Debug)]
struct NearMiss {
    length: usize,
    x: usize,
    y: usize,
    why: &'static str,
}

/// What `examine` concluded about one rectangle.
enum Verdict {
    Bar(Box<ScaleBar>),
    /// Not a bar, and not worth mentioning (too short, curved edges, ...).
    No,
    /// A long, straight, flat band that could not be measured.
    Unmeasurable(&'static str),
}

/// Finds the scale bar, or says why there is none: first a bar set off
/// from its surroundings (`clear`), then one lying on the structure.
pub fn detect(img: &GrayImage) -> crate::Result<ScaleBar> {
    let none = |reason: String| crate::Error::Calibration { reason };
    let (w, h) = (img.width, img.height);
    if w < 16 || h < 8 || img.data.len() != w * h {
        return Err(none("the image is too small to hold a scale bar".into()));
    }
    if img.data.iter().any(|v| !v.is_finite()) {
        return Err(none(
            "the image holds grey values that are not numbers; no scale bar can be read".into(),
        ));
    }
    // First a bar set off from its surroundings: where its tests hold
    // (a plain surround a few pixels out, rows of nearly equal ends) they
    // are the stronger evidence, and bars on backing boxes are measured as
    // before; but it must be long enough (MIN_BAR_LEN), which that search
    // alone does not ask (on busy fields it took short straight stretches
    // of the structure for bars). Otherwise a bar lying on the structure.
    let bar = match clear::detect(img) {
        Ok(bar) if bar.length_px >= MIN_BAR_LEN as f64 => bar,
        _ => detect_on_structure(img).0?,
    };
    // A bar on a contrasting box is set apart by the box, which the
    // structure does not draw; any other bar must stand out from the bands
    // of its own ink that the structure shows (`rival_band`).
    if bar.backing_box.is_none() {
        if let Some(why) = rival_band(img, &bar) {
            return Err(none(why));
        }
    }
    Ok(bar)
}

/// Why a bar without a backing box does not stand out from the structure,
/// or `None` when it does.
///
/// The tests of `examine` and `clear` ask a band to be flat, straight and
/// square-ended, but a field of many features offers many chances: a row
/// of fused spots in a thresholded section, or a straight channel between
/// two rows of arms, passes them now and then over a few tens of pixels
/// (on the bar sweep of DEVELOPERS.md every band taken elsewhere than the
/// drawn bar, and every bar reported on a field without one, was such a
/// stretch). Those stretches come from a population of bands of the same
/// ink, most of which fail some test by a little; a drawn bar is no member
/// of it. So the bar is compared with every band of its ink elsewhere in
/// the image, tested or not: the rectangles of candidate pixels
/// (`rectangles`) not over the bar, clear of the border, four times longer
/// than thick (a band, as a bar is, not a patch), at least half the bar's
/// thickness (a bar is told from a channel by its thickness as much as by
/// its length) and of the bar's grey (see `of_ink` below). The bar stands
/// out when at some candidate level at which its own band is seen whole
/// (a rectangle over it of at least four fifths of its length, and not
/// more than STAND_OUT times it, of which it would be a piece) it is at
/// least STAND_OUT times as long as every such band away from it, and
/// longer than every such band beside it (within its mask, where its own
/// label and ticks are expected): the same factor of two the bar asks of
/// the straight bands that pass every test, now in both dimensions.
fn rival_band(img: &GrayImage, bar: &ScaleBar) -> Option<String> {
    let (w, h) = (img.width, img.height);
    let (lo, hi) = extremes(img);
    let range = hi - lo;
    let [mx0, my0, mx1, my1] = bar.mask.map(|v| v as usize);
    let (bx0, by0, bx1, by1) = (
        bar.x0 as usize,
        bar.y0 as usize,
        bar.x1 as usize,
        bar.y1 as usize,
    );
    let thickness = bar.thickness_px as usize;
    // The bar's ink: the median grey of its interior rows (the outer rows
    // of a thick bar carry the blur of its edges). A rival is a band of
    // that ink: its median grey within a tenth of the grey range of it,
    // the tolerance of a bar's level in the set-off search (`clear`). A
    // candidate level reaches from the image's extreme far into the
    // structure's greys (a blurred thin bar is seen only at the looser
    // one), where a shaded channel of the structure is no band of a
    // drawn ink.
    let (iy0, iy1) = if thickness >= 3 {
        (by0 + 1, by1 - 1)
    } else {
        (by0, by1)
    };
    let median_in = |r: &Rect| {
        median_f32(
            (r.y0..=r.y1)
                .flat_map(|y| img.row(y)[r.x0..=r.x1].iter().copied())
                .collect(),
        )
    };
    let ink = median_in(&Rect {
        x0: bx0,
        x1: bx1,
        y0: iy0,
        y1: iy1,
    })?;
    let of_ink = |r: &Rect| median_in(r).is_some_and(|m| (m - ink).abs() <= 0.1 * range);
    // What each candidate level shows: the bar's own band (the longest
    // rectangle over the bar's box) and the longest rival band.
    enum Level {
        NotSeen,
        RunsOn(Rect),
        Rival(Rect),
        StandsOut,
    }
    let len = |r: &Rect| r.x1 + 1 - r.x0;
    let mut levels: Vec<Level> = Vec::new();
    for fraction in CANDIDATE_FRACTIONS {
        let is_cand = candidate(bar.polarity, fraction, lo, hi);
        let rects = rectangles(img, &is_cand);
        // Over the bar or touching its rows: the bar's own ink (the found
        // rows may leave out an outer row that a touching feature widens).
        let over_bar = |r: &Rect| r.x0 <= bx1 && bx0 <= r.x1 && r.y0 <= by1 + 1 && by0 <= r.y1 + 1;
        let own = rects.iter().filter(|r| over_bar(r)).max_by_key(|r| len(r));
        let Some(own) = own.filter(|r| 5.0 * (len(r) as f64) >= 4.0 * bar.length_px) else {
            levels.push(Level::NotSeen);
            continue;
        };
        // A band of the bar's ink over it more than STAND_OUT times as
        // long as the length measured: the measured ends lie inside a
        // longer band (a piece of the bar between features that touch
        // it), so they are no ends. A feature touching an end across all
        // of the bar's rows lengthens the band by its own width, never by
        // the bar's length.
        if len(own) as f64 > STAND_OUT * bar.length_px {
            levels.push(Level::RunsOn(*own));
            continue;
        }
        let in_mask = |r: &Rect| r.x0 <= mx1 && mx0 <= r.x1 && r.y0 <= my1 && my0 <= r.y1;
        let rival = rects
            .iter()
            .filter(|r| {
                let t = r.y1 + 1 - r.y0;
                !over_bar(r)
                    && len(r) >= 4 * t
                    && 2 * t >= thickness
                    && of_ink(r)
                    && (len(r) as f64) <= 0.9 * w as f64
                    && r.x0 >= 9
                    && r.x1 + 9 < w
                    && r.y0 >= 6
                    && r.y1 + 6 < h
                    // Beside the bar (within its mask) its own label and
                    // ticks are expected, shorter than the bar; a longer
                    // band there is a bar beside which this one is a piece
                    // of the drawing. Farther away, the factor STAND_OUT.
                    && if in_mask(r) {
                        len(r) as f64 > bar.length_px
                    } else {
                        len(r) as f64 * STAND_OUT > bar.length_px
                    }
            })
            .max_by_key(|r| len(r));
        levels.push(match rival {
            Some(r) => Level::Rival(*r),
            None => Level::StandsOut,
        });
    }
    if levels.iter().any(|l| matches!(l, Level::StandsOut)) {
        return None;
    }
    let what = format!(
        "the band taken for a scale bar ({:.0} x {} px at x = {}, y = {})",
        bar.length_px, bar.thickness_px, bar.x0, bar.y0
    );
    let why = if let Some(r) = levels.iter().find_map(|l| match l {
        Level::Rival(r) => Some(r),
        _ => None,
    }) {
        format!(
            "no bar stands out: {what} is less than twice as long as a band of the same ink \
             and comparable thickness elsewhere ({} x {} px at x = {}, y = {})",
            len(r),
            r.y1 + 1 - r.y0,
            r.x0,
            r.y0
        )
    } else if let Some(r) = levels.iter().find_map(|l| match l {
        Level::RunsOn(r) => Some(r),
        _ => None,
    }) {
        format!(
            "{what} is a piece of a band of the same ink more than twice as long (x = {} to {}): \
             its ends are not the bar's",
            r.x0, r.x1
        )
    } else {
        format!("{what} is not one band of one ink at any level, so it cannot be told from the structure")
    };
    // The caller adds what the user can give instead (it depends on
    // whether a length was given or the label was to be read).
    Some(why)
}

/// The darkest and lightest grey of the image.
pub(super) fn extremes(img: &GrayImage) -> (f32, f32) {
    img.data
        .iter()
        .fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), v| {
            (a.min(*v), b.max(*v))
        })
}

/// Whether a grey is a bar candidate: within `fraction` of the grey range
/// (`lo` to `hi`) of the extreme the polarity's bar is drawn in.
pub(super) fn candidate(
    polarity: Polarity,
    fraction: f32,
    lo: f32,
    hi: f32,
) -> impl Fn(f32) -> bool {
    let range = hi - lo;
    move |v: f32| match polarity {
        Polarity::DarkOnLight => v <= lo + fraction * range,
        Polarity::LightOnDark => v >= hi - fraction * range,
    }
}

fn not_standing_out(b: &ScaleBar, rival: &ScaleBar) -> String {
    format!(
        "no bar stands out: straight bands of similar length ({:.0} px at x = {}, y = {} \
         and {:.0} px at x = {}, y = {}) belong to the structure or to a drawing",
        b.length_px, b.x0, b.y0, rival.length_px, rival.x0, rival.y0
    )
}

/// A bar lying on the structure (see the module notes and `examine`), and
/// every straight band found, box strips left out.
fn detect_on_structure(img: &GrayImage) -> (crate::Result<ScaleBar>, Vec<ScaleBar>) {
    let none = |reason: String| crate::Error::Calibration { reason };
    let (lo, hi) = extremes(img);
    let range = hi - lo;
    if range.is_nan() || range < 0.05 {
        return (
            Err(none(
                "the image has too little contrast to show a scale bar".into(),
            )),
            Vec::new(),
        );
    }
    let mut found: Vec<ScaleBar> = Vec::new();
    let mut near: Option<NearMiss> = None;
    for fraction in CANDIDATE_FRACTIONS {
        for polarity in [Polarity::DarkOnLight, Polarity::LightOnDark] {
            let is_cand = candidate(polarity, fraction, lo, hi);
            for r in rectangles(img, &is_cand) {
                match examine(img, r, polarity, range) {
                    Verdict::Bar(b) => found.push(*b),
                    Verdict::No => {}
                    Verdict::Unmeasurable(why) => {
                        let len = r.x1 - r.x0 + 1;
                        if near.as_ref().is_none_or(|n| len > n.length) {
                            near = Some(NearMiss {
                                length: len,
                                x: r.x0,
                                y: r.y0,
                                why,
                            });
                        }
                    }
                }
            }
        }
    }
    let best = best_bar(&found);
    let bands: Vec<ScaleBar> = found
        .iter()
        .filter(|a| !is_box_strip(&found, a))
        .cloned()
        .collect();
    // The bar stands out: no other straight band of the image, away from
    // it, is more than half its length (see STAND_OUT).
    if let Some(b) = best {
        let near_bar =
            |a: &ScaleBar| a.x0 <= b.x1 && b.x0 <= a.x1 && a.y0 <= b.y1 + 6 && b.y0 <= a.y1 + 6;
        if let Some(rival) = bands.iter().find(|a| {
            !near_bar(a)
                && a.length_px >= MIN_BAR_LEN as f64
                && a.length_px * STAND_OUT > b.length_px
        }) {
            return (Err(none(not_standing_out(b, rival))), bands);
        }
    }
    let result = match (best, near) {
        (Some(b), _) => Ok(b.clone()),
        (None, Some(n)) => Err(none(format!(
            "a straight band of one level, {} px long, at x = {}, y = {}, looks like a scale \
             bar but cannot be measured: {}",
            n.length, n.x, n.y, n.why
        ))),
        (None, None) => Err(none(
            "no solid horizontal bar stands out from the image".into(),
        )),
    };
    (result, bands)
}

/// The bar's backing box, if it has one, and the region left out of
/// measurement around the bar: the bar padded by room for its ticks and its
/// label (twice its thickness to the sides, at least 8 px; five times above
/// and below, at least 16 px), grown to cover the box.
fn box_and_mask(
    img: &GrayImage,
    bar: [usize; 4],
    thickness: usize,
    surround: f32,
    range: f32,
) -> (Option<[usize; 4]>, [usize; 4]) {
    let (w, h) = (img.width, img.height);
    let [x0, y0, x1, y1] = bar;
    let backing_box = grow_box(img, bar, surround, 0.15 * range);
    let (pad_x, pad_y) = ((2 * thickness).max(8), (5 * thickness).max(16));
    let mut mask = [
        x0.saturating_sub(pad_x),
        y0.saturating_sub(pad_y),
        (x1 + pad_x).min(w - 1),
        (y1 + pad_y).min(h - 1),
    ];
    if let Some(b) = backing_box {
        mask = [
            mask[0].min(b[0]),
            mask[1].min(b[1]),
            mask[2].max(b[2]),
            mask[3].max(b[3]),
        ];
    }
    (backing_box, mask)
}

/// Horizontal runs of candidates at least `min_len` long, row by row.
fn row_runs(row: &[f32], min_len: usize, is_cand: &impl Fn(f32) -> bool) -> Vec<(usize, usize)> {
    let w = row.len();
    let mut runs = Vec::new();
    // A run of at least `min_len` candidates covers a multiple of
    // `min_len`: only runs through those columns are traced, so a row
    // with none of them a candidate is passed over in w / min_len tests
    // (the same runs, in the same order, as a scan of every pixel).
    let mut next = 0;
    for k in (0..w).step_by(min_len.max(1)) {
        if k < next || !is_cand(row[k]) {
            continue;
        }
        let mut s = k;
        while s > next && is_cand(row[s - 1]) {
            s -= 1;
        }
        let mut e = k + 1;
        while e < w && is_cand(row[e]) {
            e += 1;
        }
        if e - s >= min_len {
            runs.push((s, e - 1));
        }
        next = e;
    }
    runs
}

/// Rectangles of candidates: rows whose long runs stack over one another.
///
/// A bar lying on the structure shares its ink with whatever of the
/// structure touches it, so a row of the bar may run on into a touching
/// feature: rows are not required to end where their neighbours do.
/// Instead each stack keeps the columns that every one of its rows covers
/// (the intersection of its runs): the bar's own columns are ink in all of
/// its rows, a touching feature only in some. When a row narrows the
/// intersection by more than `END_TOLERANCE_PX`, the stack so far is one
/// rectangle and the narrower stack goes on as another; a run that no stack
/// already follows starts a stack of its own (the first row of a bar under
/// a feature that touched the rows above it).
fn rectangles(img: &GrayImage, is_cand: &impl Fn(f32) -> bool) -> Vec<Rect> {
    /// Stacks followed at once; a field of long runs in every row (a dark
    /// band, a frame) would otherwise grow them without bound.
    const MAX_OPEN: usize = 256;
    let (w, h) = (img.width, img.height);
    let min_len = 16usize.max(w / 64);
    let tol = END_TOLERANCE_PX as usize;
    let mut open: Vec<Rect> = Vec::new();
    let mut done: Vec<Rect> = Vec::new();
    let emit = |r: Rect, done: &mut Vec<Rect>| {
        if r.y1 > r.y0 && r.x1 + 1 - r.x0 >= min_len {
            done.push(r);
        }
    };
    for y in 0..h {
        let runs = row_runs(img.row(y), min_len, is_cand);
        let mut next_open: Vec<Rect> = Vec::new();
        for g in open.drain(..) {
            // The run sharing most columns with the stack continues it.
            let cont = runs
                .iter()
                .map(|&(s, e)| (s.max(g.x0), e.min(g.x1)))
                .filter(|(s, e)| e >= s && e + 1 - s >= min_len)
                .max_by_key(|(s, e)| e - s);
            match cont {
                Some((s, e)) => {
                    if s > g.x0 + tol || e + tol < g.x1 {
                        emit(g, &mut done);
                        next_open.push(Rect {
                            x0: s,
                            x1: e,
                            y0: g.y0,
                            y1: y,
                        });
                    } else {
                        next_open.push(Rect { y1: y, ..g });
                    }
                }
                None => emit(g, &mut done),
            }
        }
        for &(s, e) in &runs {
            let followed = next_open.iter().any(|g| {
                g.y1 == y
                    && g.x0 + tol >= s
                    && g.x1 <= e + tol
                    && 2 * (g.x1 + 1 - g.x0) >= e + 1 - s
            });
            if !followed && next_open.len() < MAX_OPEN {
                next_open.push(Rect {
                    x0: s,
                    x1: e,
                    y0: y,
                    y1: y,
                });
            }
        }
        // Two stacks that became the same rectangle are one.
        next_open.sort_by_key(|r| (r.x0, r.x1, std::cmp::Reverse(r.y1 - r.y0)));
        next_open.dedup_by(|a, b| a.x0 == b.x0 && a.x1 == b.x1);
        open = next_open;
    }
    for g in open {
        emit(g, &mut done);
    }
    done
}

fn median_f32(mut v: Vec<f32>) -> Option<f32> {
    crate::stats::median_in_place(&mut v).map(|m| m as f32)
}

fn median_f64(v: &[f64]) -> Option<f64> {
    crate::stats::median(v)
}

/// Tests one rectangle of candidates for a drawn bar and measures it.
///
/// What makes a bar, whatever lies around it: a long band of one flat ink
/// level, with two parallel straight horizontal edges over its whole
/// length, and two straight vertical ends. Nothing is asked of its
/// surroundings: the structure may touch it anywhere (a feature of the
/// bar's own level hides a stretch of an edge, which is then simply not
/// seen), so the tests look at the bar's own edges and ink:
///
/// * the ink is flat: its pixel noise (from differences of neighbouring
///   pixels, which a smooth shading does not reach) and the drift of its
///   level along the bar are small against the bar's contrast. Structure
///   (a dark channel between arms) is shaded, textured and etched
///   unevenly; a drawn bar is one grey value;
/// * both long edges, where they are seen, lie on one straight horizontal
///   line to sub-pixel precision, and are seen along the whole length. The
///   outline of a phase is curved on the scale of the arm spacing; a
///   straight edge many arm spacings long, paired with a parallel one,
///   is drawn;
/// * each end is a step out of the ink at the same column in every row.
fn examine(img: &GrayImage, r: Rect, polarity: Polarity, range: f32) -> Verdict {
    let (w, h) = (img.width, img.height);
    let Rect { x0, x1, y0, y1 } = r;
    let thickness = y1 - y0 + 1;
    let length = x1 - x0 + 1;
    // Shape: thick enough to be drawn on purpose, much longer than thick
    // (a bar is read for its length), not spanning the image, clear of
    // the border (a frame or a data band along the edge is no bar).
    if thickness < 2
        || length < 4 * thickness
        || length < MIN_BAR_LEN
        || length as f64 > 0.9 * w as f64
    {
        return Verdict::No;
    }
    if x0 < 9 || x1 + 9 >= w || y0 < 6 || y1 + 6 >= h {
        return Verdict::No;
    }
    // Entering a dark bar the grey falls; leaving it, it rises.
    let into = match polarity {
        Polarity::DarkOnLight => -1.0,
        Polarity::LightOnDark => 1.0,
    };
    // Interior rows: the top and bottom rows of a thick bar carry the blur
    // of its edges.
    let (iy0, iy1) = if thickness >= 3 {
        (y0 + 1, y1 - 1)
    } else {
        (y0, y1)
    };
    let n_rows = iy1 - iy0 + 1;
    let interior: Vec<f32> = (iy0..=iy1)
        .flat_map(|y| img.row(y)[x0 + 1..x1].iter().copied())
        .collect();
    let Some(ink) = median_f32(interior) else {
        return Verdict::No;
    };
    let ink = ink as f64;
    // Pixel noise of the ink: the median absolute difference of horizontal
    // neighbours, as a standard deviation (1.4826 MAD for a normal law,
    // over sqrt 2 for a difference of two pixels). Robust to a feature
    // touching the bar's end, which adds only a few large differences.
    let diffs: Vec<f64> = (iy0..=iy1)
        .flat_map(|y| {
            let row = &img.row(y)[x0 + 1..x1];
            row.windows(2)
                .map(|p| (p[1] - p[0]).abs() as f64)
                .collect::<Vec<_>>()
        })
        .collect();
    let Some(mad) = median_f64(&diffs) else {
        return Verdict::No;
    };
    let noise = 1.4826 * mad / std::f64::consts::SQRT_2;

    // Each column's step at the top and at the bottom edge: the grey
    // three rows outside (past the blur of a drawn edge) against the ink.
    let col_mean =
        |x: usize| (iy0..=iy1).map(|y| img.get(x, y) as f64).sum::<f64>() / n_rows as f64;
    let means: Vec<f64> = (x0..=x1).map(col_mean).collect();
    let step_top: Vec<f64> = (x0..=x1)
        .zip(&means)
        .map(|(x, m)| -into * (img.get(x, y0 - 3) as f64 - m))
        .collect();
    let step_bottom: Vec<f64> = (x0..=x1)
        .zip(&means)
        .map(|(x, m)| -into * (img.get(x, y1 + 3) as f64 - m))
        .collect();
    // The bar's contrast: the step where its edges are free. Features of
    // the structure touching the bar lower the step where they touch, so a
    // high order statistic (the 80th percentile of both edges' steps) is
    // taken, which holds as long as a fifth of the edges is free.
    let mut steps: Vec<f64> = step_top.iter().chain(&step_bottom).copied().collect();
    steps.sort_by(f64::total_cmp);
    let contrast = steps[(steps.len() * 4 / 5).min(steps.len() - 1)];
    if !(contrast > 0.0 && contrast.is_finite()) {
        return Verdict::No;
    }
    // A step that is to be located to a fraction of a pixel must stand well
    // above the noise: four standard deviations of it (a 4-sigma step is
    // seen wherever it is; located to noise / slope, a small fraction of a
    // pixel).
    if contrast < 4.0 * noise {
        return Verdict::No;
    }
    // Flat ink along the bar: the spread of the column means (10th to 90th
    // percentile; 2.56 standard deviations of a normal law) within what the
    // pixel noise gives a mean of `n_rows` pixels, with a margin of 30 %,
    // plus a fifth of the contrast for the blur of touching features on a
    // thin bar's single interior row and for the lightest shading a drawn
    // ink shows after compression. Shading of the structure across a long
    // stretch exceeds this.
    {
        let mut m = means.clone();
        m.sort_by(f64::total_cmp);
        let n = m.len();
        let spread = m[(n * 9 / 10).min(n - 1)] - m[n / 10];
        let allowed = 1.3 * 2.56 * noise / (n_rows as f64).sqrt() + 0.2 * contrast;
        if spread > allowed {
            return Verdict::No;
        }
    }

    // Straight edges. A column shows an edge when its step is at least half
    // the bar's contrast (a feature touching the bar there leaves a smaller
    // one). Where shown, the edge is located to sub-pixel precision along
    // the column; the located edges of the whole bar must lie on one
    // horizontal line.
    // A column shows the bar's edge when its step is at least half the
    // bar's contrast (a feature touching the bar there leaves a smaller
    // one) and the grey just outside is plain over three rows (y +- 2..=4
    // within a quarter of the contrast): a feature ending a pixel or two
    // off the edge would share the edge's blur and pull the located
    // position, so such columns are no evidence either way.
    let plain_outside = |x: usize, ys: [usize; 3]| {
        let v = ys.map(|y| img.get(x, y) as f64);
        let (lo, hi) = v
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), q| {
                (a.min(*q), b.max(*q))
            });
        hi - lo <= 0.25 * contrast
    };
    let shown_at = |steps: &[f64], i: usize, ys: [usize; 3]| {
        steps[i] >= 0.5 * contrast && steps[i] >= 4.0 * noise && plain_outside(x0 + i, ys)
    };
    let column = |x: usize| -> Vec<f32> { (y0 - 5..=y1 + 5).map(|y| img.get(x, y)).collect() };
    // Indices in a column: y0 is at 5, y1 at 5 + thickness - 1. The top
    // edge, entering the bar going down, lies between y0 - 2 and y0 + 1
    // (differences 3..=5); the bottom one, leaving it, between y1 - 1 and
    // y1 + 2 (differences 4 + thickness - 1 ..= 6 + thickness - 1).
    let mut top = Vec::new();
    let mut bottom = Vec::new();
    let mut shown_any = vec![false; length];
    for (i, x) in (x0..=x1).enumerate() {
        let c = column(x);
        if shown_at(&step_top, i, [y0 - 2, y0 - 3, y0 - 4]) {
            if let Some(p) = edge(&c, 3, 5, into) {
                top.push(p);
                shown_any[i] = true;
            }
        }
        if shown_at(&step_bottom, i, [y1 + 2, y1 + 3, y1 + 4]) {
            let b = 4 + thickness - 1;
            if let Some(p) = edge(&c, b, b + 2, -into) {
                bottom.push(p);
                shown_any[i] = true;
            }
        }
    }
    // Evidence along the whole length: each edge seen over at least a fifth
    // of the bar, and no stretch longer than a quarter of the bar where
    // neither edge is seen (structure of the bar's own ink touching both
    // edges there would make the bar's extent a guess).
    if (top.len() as f64) < 0.2 * length as f64 || (bottom.len() as f64) < 0.2 * length as f64 {
        return Verdict::No;
    }
    let mut gap = 0usize;
    let mut worst_gap = 0usize;
    for s in &shown_any {
        gap = if *s { 0 } else { gap + 1 };
        worst_gap = worst_gap.max(gap);
    }
    if 4 * worst_gap > length {
        return Verdict::No;
    }
    // Straightness: four in five located positions within 0.5 px of the
    // edge's median line. A drawn edge with a plain outside, blurred or
    // compressed, is one line to a few tenths of a pixel in nearly every
    // column (one in five is left for noise, compression and features
    // beyond the rows looked at); the outline of a phase wanders by pixels
    // over an arm spacing and puts no such share of a band many spacings
    // long on one line.
    let straight = |pos: &[f64]| -> Option<(f64, f64)> {
        let mid = median_f64(pos)?;
        let inl = pos.iter().filter(|p| (*p - mid).abs() <= 0.5).count() as f64;
        Some((mid, inl / pos.len() as f64))
    };
    let (Some((top_y, top_in)), Some((bot_y, bot_in))) = (straight(&top), straight(&bottom)) else {
        return Verdict::No;
    };
    if top_in < MIN_ON_LINE || bot_in < MIN_ON_LINE || bot_y - top_y < 1.5 {
        return Verdict::No;
    }

    // A long, flat, straight-edged band: from here on a failure is worth
    // telling the user about.
    //
    // Its ends, each on its own (a feature may touch one end in some rows
    // and the other end in others). On every interior row: walk out from
    // inside the band while the grey is the ink's (within 5 noise
    // deviations, or 5 % of the contrast for quantisation and compression
    // of a drawn ink, which is one grey), then locate the step out of it
    // (`edge`, over the three differences beyond the last ink pixel, which
    // hold a blurred step). The row shows the end when the five pixels
    // beyond the last ink pixel all lie on the far side of the ink from the
    // bar's polarity (a touching feature of another grey leaves the step
    // where it is, only smaller; one lighter than a light bar, or darker
    // than a dark one, would turn the profile back and could hide a sliver
    // of the bar's own grey), and the second and third of them, past the
    // blur of a drawn step, are plain (within a quarter of the contrast)
    // and clearly not the ink (twice the tolerance). An end that a feature of the bar's own grey covers in
    // every row cannot be placed: the ink runs on, and where the feature
    // ends says nothing about the bar.
    let level_tol = (5.0 * noise).max(0.05 * contrast);
    let at_ink = |v: f32| (v as f64 - ink).abs() <= level_tol;
    // Beyond the ink, on the far side from the bar's polarity: for a dark
    // bar not darker than the ink, for a light bar not lighter.
    let far_side = |v: f32| -into * (v as f64 - ink) >= -level_tol;
    // One row's end: the last ink pixel walking outward from just inside
    // the band's end (to the left or to the right), the five beyond it checked,
    // the step located.
    let locate = |row: &[f32], left: bool| -> Option<f64> {
        let mut i = if left {
            (x0 + 3).min(x1)
        } else {
            x1.saturating_sub(3).max(x0)
        };
        if !at_ink(row[i]) {
            return None;
        }
        let beyond = |i: usize, k: usize| if left { i.checked_sub(k) } else { Some(i + k) };
        while beyond(i, 7).is_some_and(|j| j < w) {
            let next = beyond(i, 1)?;
            if !at_ink(row[next]) {
                break;
            }
            i = next;
        }
        if beyond(i, 7).is_none_or(|j| j >= w) {
            return None;
        }
        let out: Vec<f32> = (1..=5)
            .filter_map(|k| beyond(i, k))
            .map(|j| row[j])
            .collect();
        if out.len() < 5 || !out.iter().all(|v| far_side(*v)) {
            return None;
        }
        let (o1, o2) = (out[1] as f64, out[2] as f64);
        if (o1 - o2).abs() > 0.25 * contrast || -into * (o1 - ink) < 2.0 * level_tol {
            return None;
        }
        if left {
            edge(row, i - 3, i - 1, into)
        } else {
            edge(row, i, i + 2, -into)
        }
    };
    let end_of = |left: bool| -> Option<(Vec<f64>, f64, f64)> {
        let pos: Vec<f64> = (iy0..=iy1)
            .filter_map(|y| locate(img.row(y), left))
            .collect();
        // A drawn end is vertical: the rows' positions within 0.75 px of
        // their median (the located steps of one straight end scatter by a
        // few tenths of a pixel); at least half of the rows that show the
        // end must agree.
        let mid = median_f64(&pos)?;
        let kept: Vec<f64> = pos
            .iter()
            .copied()
            .filter(|p| (p - mid).abs() <= 0.75)
            .collect();
        if kept.is_empty() || 2 * kept.len() < pos.len() {
            return None;
        }
        let n = kept.len() as f64;
        let mean = kept.iter().sum::<f64>() / n;
        let var = kept.iter().map(|p| (p - mean).powi(2)).sum::<f64>() / n;
        Some((kept, mean, var))
    };
    let (Some((lk, left, lvar)), Some((rk, right, rvar))) = (end_of(true), end_of(false)) else {
        return Verdict::Unmeasurable(
            "an end is hidden in every row by structure of the bar's own grey, or is not straight",
        );
    };
    let mean_len = right - left;
    let sd_len = (lvar + rvar).sqrt();
    if !(mean_len.is_finite() && mean_len > 0.0) {
        return Verdict::No;
    }
    // Each end is the bar's only where the bar's own long edges are seen
    // up to it: a located end with neither edge seen over the last
    // thickness of the band (at least 3 px, past the blur of a drawn
    // corner) may be the far side of a feature of the bar's ink that
    // touches the end over all of the bar's rows (a rounded body of a
    // thresholded field has a nearly vertical side over a few rows), and
    // says nothing about where the bar ends.
    let reach = thickness.max(3) as f64;
    let edge_near = |from: f64, to: f64| {
        (x0..=x1)
            .zip(&shown_any)
            .any(|(x, s)| *s && x as f64 >= from && x as f64 <= to)
    };
    if !edge_near(left, left + reach) || !edge_near(right - reach, right) {
        return Verdict::Unmeasurable(
            "the bar's long edges are hidden next to an end, so the end may belong to \
             structure of the bar's own grey touching it",
        );
    }
    // The bar's box from its measured ends.
    let bx0 = (left + 0.5).round().max(0.0) as usize;
    let bx1 = (right - 0.5).round().max(bx0 as f64) as usize;
    // Confidence: the edges' straightness (the share of located edges on
    // the line, mapped so that the least accepted share gives
    // MIN_CONFIDENCE).
    let on_line = MIN_CONFIDENCE
        + (1.0 - MIN_CONFIDENCE) * (top_in.min(bot_in) - MIN_ON_LINE) / (1.0 - MIN_ON_LINE);
    let confidence = on_line.clamp(0.0, 1.0);
    let rows = lk.len().min(rk.len());
    let (x0, x1) = (bx0, bx1);

    // Backing box: grow from the bar while the new line is mostly the
    // surround's level.
    let Some(surround) = median_f32(
        [y0 - 2, y1 + 2]
            .iter()
            .flat_map(|&y| img.row(y)[x0..=x1].iter().copied())
            .collect(),
    ) else {
        return Verdict::No;
    };
    let (backing_box, mask) = box_and_mask(img, [x0, y0, x1, y1], thickness, surround, range);
    let u = |v: usize| v as u32;
    Verdict::Bar(Box::new(ScaleBar {
        length_px: mean_len,
        length_sd_px: sd_len,
        rows,
        x0: u(x0),
        y0: u(y0),
        x1: u(x1),
        y1: u(y1),
        thickness_px: u(thickness),
        polarity,
        confidence,
        backing_box: backing_box.map(|b| b.map(u)),
        mask: mask.map(u),
    }))
}

/// Position, in pixel-centre coordinates, of a step of a row whose largest
/// difference lies between samples a and b, going in the direction `sign`
/// (+1 rising, -1 falling): the centroid of the differences
/// d(x) = sign (row[x + 1] - row[x]), each placed at x + 0.5, over the
/// contiguous run, at most 2 px either side of the largest, where d is at
/// least half of it (the core of the step; a feature just beyond the end of a
/// bar lying on the micrograph adds only a weaker tail).
fn edge(row: &[f32], a: usize, b: usize, sign: f64) -> Option<f64> {
    let n = row.len();
    if n < 2 || a >= b || b + 1 >= n {
        return None;
    }
    let d = |x: usize| sign * (row[x + 1] - row[x]) as f64;
    let peak = (a..=b).max_by(|p, q| d(*p).total_cmp(&d(*q)))?;
    let top = d(peak);
    if !(top > 0.0 && top.is_finite()) {
        return None;
    }
    let floor = 0.5 * top;
    let mut lo = peak;
    while lo > 0 && lo + 2 > peak && d(lo - 1) >= floor {
        lo -= 1;
    }
    let mut hi = peak;
    while hi + 2 < n && hi < peak + 2 && d(hi + 1) >= floor {
        hi += 1;
    }
    let (mut sum, mut moment) = (0.0, 0.0);
    for x in lo..=hi {
        sum += d(x);
        moment += d(x) * (x as f64 + 0.5);
    }
    let x = moment / sum;
    x.is_finite().then_some(x)
}

/// The largest rectangle around `bar` whose border lines are at least 75 %
/// within `tol` of `level`, when it extends at least 3 px beyond the bar on
/// every side; `None` otherwise.
fn grow_box(img: &GrayImage, bar: [usize; 4], level: f32, tol: f32) -> Option<[usize; 4]> {
    let (w, h) = (img.width, img.height);
    let near = |v: f32| (v - level).abs() <= tol;
    let [mut x0, mut y0, mut x1, mut y1] = bar;
    let line_ok = |pixels: &mut dyn Iterator<Item = f32>| {
        let (mut ok, mut n) = (0usize, 0usize);
        for v in pixels {
            n += 1;
            ok += usize::from(near(v));
        }
        n > 0 && ok as f64 >= 0.75 * n as f64
    };
    let mut grown = true;
    while grown {
        grown = false;
        if y0 > 0 && line_ok(&mut img.row(y0 - 1)[x0..=x1].iter().copied()) {
            y0 -= 1;
            grown = true;
        }
        if y1 + 1 < h && line_ok(&mut img.row(y1 + 1)[x0..=x1].iter().copied()) {
            y1 += 1;
            grown = true;
        }
        if x0 > 0 && line_ok(&mut (y0..=y1).map(|y| img.get(x0 - 1, y))) {
            x0 -= 1;
            grown = true;
        }
        if x1 + 1 < w && line_ok(&mut (y0..=y1).map(|y| img.get(x1 + 1, y))) {
            x1 += 1;
            grown = true;
        }
        // A box never covers most of the image.
        if (x1 - x0) > w / 2 || (y1 - y0) > h / 2 {
            return None;
        }
    }
    let margin = 3;
    (bar[0] >= x0 + margin
        && bar[1] >= y0 + margin
        && x1 >= bar[2] + margin
        && y1 >= bar[3] + margin)
        .then_some([x0, y0, x1, y1])
}

/// Marks the scale bar's mask region in a mask of the image's size.
pub fn mask_of(bar: &ScaleBar, width: usize, height: usize) -> Vec<bool> {
    let mut m = vec![false; width * height];
    let [x0, y0, x1, y1] = bar.mask.map(|v| v as usize);
    for y in y0..=y1.min(height.saturating_sub(1)) {
        for x in x0..=x1.min(width.saturating_sub(1)) {
            m[y * width + x] = true;
        }
    }
    m
}

/// Whether candidate `a` is a strip of another's backing box. A strip of a
/// backing box above or below a bar looks like a bar of the opposite
/// polarity, longer than the bar. A box is always larger than the bar it
/// backs, so a candidate that spans a vertically adjacent candidate of
/// opposite polarity is a piece of that one's box.
fn is_box_strip(found: &[ScaleBar], a: &ScaleBar) -> bool {
    found.iter().any(|b| {
        b.polarity != a.polarity
            && b.x0 >= a.x0
            && b.x1 <= a.x1
            && (b.y0.saturating_sub(a.y1) <= 4 && b.y0 > a.y1
                || a.y0.saturating_sub(b.y1) <= 4 && a.y0 > b.y1)
    })
}

/// The longest candidate that is no strip of a box; of two within half a
/// pixel of each other, the more confident.
fn best_bar(found: &[ScaleBar]) -> Option<&ScaleBar> {
    let mut best: Option<&ScaleBar> = None;
    for bar in found.iter().filter(|a| !is_box_strip(found, a)) {
        let better = match best {
            None => true,
            Some(b) => {
                bar.length_px > b.length_px + 0.5
                    || ((bar.length_px - b.length_px).abs() <= 0.5 && bar.confidence > b.confidence)
            }
        };
        if better {
            best = Some(bar);
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;

    fn field(w: usize, h: usize) -> GrayImage {
        // A textured mid-grey field (deterministic).
        let data = (0..w * h)
            .map(|i| 0.45 + 0.1 * (((i * 7919) % 97) as f32 / 97.0 - 0.5))
            .collect();
        GrayImage::from_vec(w, h, data).unwrap()
    }

    fn draw(img: &mut GrayImage, x0: usize, y0: usize, x1: usize, y1: usize, v: f32) {
        for y in y0..=y1 {
            for x in x0..=x1 {
                img.data[y * img.width + x] = v;
            }
        }
    }

    #[test]
    fn sharp_bar_measures_its_pixel_count() {
        let mut img = field(400, 300);
        draw(&mut img, 250, 270, 369, 275, 0.0);
        let bar = detect(&img).unwrap();
        assert!((bar.length_px - 120.0).abs() < 1e-9, "{}", bar.length_px);
        assert_eq!(
            (bar.x0, bar.y0, bar.x1, bar.y1, bar.thickness_px),
            (250, 270, 369, 275, 6)
        );
        assert_eq!(bar.polarity, Polarity::DarkOnLight);
        assert!(bar.backing_box.is_none());
    }

    #[test]
    fn light_bar_on_a_dark_box() {
        let mut img = field(400, 300);
        draw(&mut img, 20, 240, 160, 290, 0.02);
        draw(&mut img, 40, 262, 139, 265, 1.0);
        let bar = detect(&img).unwrap();
        assert_eq!(bar.polarity, Polarity::LightOnDark);
        assert!((bar.length_px - 100.0).abs() < 1e-9);
        assert_eq!(bar.backing_box, Some([20, 240, 160, 290]));
        assert!(bar.mask[0] <= 20 && bar.mask[3] >= 290);
    }

    /// The reason a band was refused, from `detect`'s error.
    fn refusal(img: &GrayImage) -> String {
        match detect(img) {
            Err(crate::Error::Calibration { reason }) => reason,
            other => panic!("expected no bar, got {other:?}"),
        }
    }

    #[test]
    fn a_bar_must_stand_out_from_bands_of_its_ink_elsewhere() {
        // The bar of `sharp_bar_measures_its_pixel_count` (120 x 6 px),
        // and elsewhere a band of the same ink, 70 x 4 px, broken by a
        // step in its edge so that it is no bar itself: more than half the
        // bar's length and thickness, so the bar does not stand out.
        let mut img = field(400, 300);
        draw(&mut img, 250, 270, 369, 275, 0.0);
        draw(&mut img, 40, 60, 109, 63, 0.0);
        draw(&mut img, 70, 64, 109, 66, 0.0);
        let why = refusal(&img);
        assert!(why.contains("no bar stands out"), "{why}");
        assert!(why.contains("x = 40, y = 60"), "{why}");
        // The same band a third as thick as the bar (2 px): a channel, not
        // a rival; and a band of the same thickness under half the bar's
        // length: the bar stands out in both.
        for (x1, y1) in [(109, 61), (99, 63)] {
            let mut img = field(400, 300);
            draw(&mut img, 250, 270, 369, 275, 0.0);
            draw(&mut img, 40, 60, x1, y1, 0.0);
            if y1 == 63 {
                draw(&mut img, 70, 64, 99, 66, 0.0);
            }
            let bar = detect(&img).unwrap();
            assert!((bar.length_px - 120.0).abs() < 1e-9, "{bar:?}");
        }
    }

    #[test]
    fn a_band_longer_than_the_bar_beside_it_refuses_it() {
        // A bar's own label is shorter than the bar: a band of the ink
        // within its mask longer than it (here a band of 166 x 4 px under a
        // 100 px bar, whose ends are hidden in squares of its ink so that
        // it cannot be measured itself) is the bar, of which the band
        // found is a piece of the drawing.
        let mut img = field(400, 300);
        draw(&mut img, 100, 200, 199, 205, 0.0);
        draw(&mut img, 80, 218, 229, 221, 0.0);
        draw(&mut img, 72, 212, 87, 227, 0.0);
        draw(&mut img, 222, 212, 237, 227, 0.0);
        let why = refusal(&img);
        assert!(why.contains("no bar stands out"), "{why}");
        assert!(why.contains("(166 x 4 px at x = 72, y = 218)"), "{why}");
        // Beside the bar a band shorter than it (76 px, a label's glyphs
        // run together) is expected and does not refuse it, although it
        // is more than half the bar's length: the factor of two holds
        // only away from the bar.
        let mut img = field(400, 300);
        draw(&mut img, 100, 200, 199, 205, 0.0);
        draw(&mut img, 110, 218, 169, 221, 0.0);
        draw(&mut img, 102, 212, 117, 227, 0.0);
        draw(&mut img, 162, 212, 177, 227, 0.0);
        let bar = detect(&img).unwrap();
        assert!((bar.length_px - 100.0).abs() < 1e-9, "{bar:?}");
    }

    #[test]
    fn an_end_hidden_by_a_feature_of_the_bars_ink_is_not_measured() {
        // A dark body of the bar's own ink, 16 px wide and taller than the
        // bar, touching its right end over all of its rows: the ink runs
        // on to the body's far side, where no edge of the bar is seen, so
        // the length (which would be 136 px) is not measured, and the
        // message says why.
        let mut img = field(400, 300);
        draw(&mut img, 250, 270, 369, 275, 0.0);
        draw(&mut img, 370, 262, 385, 283, 0.0);
        let why = refusal(&img);
        assert!(why.contains("hidden next to an end"), "{why}");
    }

    #[test]
    fn bar_touched_by_dark_structure_is_measured_edge_to_edge() {
        // A dark bar on a textured field, touched above, below and at one
        // end (over some of its rows) by features of a dark grey near its
        // own: measured as drawn (pixels 250..=369: 120 px), by the
        // set-off search or by the one on the structure.
        let mut img = field(400, 300);
        draw(&mut img, 250, 270, 369, 275, 0.0);
        draw(&mut img, 265, 258, 295, 269, 0.12);
        draw(&mut img, 310, 276, 345, 290, 0.12);
        draw(&mut img, 370, 262, 385, 272, 0.12);
        let bar = detect(&img).unwrap();
        assert!((bar.length_px - 120.0).abs() <= 0.5, "{bar:?}");
        // Its rows lie within the drawn ones (the set-off search keeps the
        // rows whose ends agree: those the end feature does not touch).
        assert!(bar.y0 >= 270 && bar.y1 <= 275, "{bar:?}");
    }

    #[test]
    fn no_bar_in_a_plain_field() {
        assert!(detect(&field(300, 200)).is_err());
    }

    #[test]
    fn the_image_border_is_no_bar() {
        let mut img = field(300, 200);
        draw(&mut img, 0, 190, 299, 199, 0.0);
        assert!(detect(&img).is_err());
    }

    #[test]
    fn edges_of_sharp_and_blurred_steps() {
        // A sharp rising step between samples 2 and 3 sits at 2.5.
        let row = [0.0f32, 0.0, 0.0, 1.0, 1.0, 1.0];
        assert!((edge(&row, 0, 4, 1.0).unwrap() - 2.5).abs() < 1e-12);
        // Looked for as a falling step, it is not there.
        assert!(edge(&row, 0, 4, -1.0).is_none());
        // A box-blurred step (a linear ramp over three pixels) is centred.
        let row = [0.0f32, 0.0, 1.0 / 3.0, 2.0 / 3.0, 1.0, 1.0, 1.0];
        assert!((edge(&row, 0, 5, 1.0).unwrap() - 2.5).abs() < 1e-6);
        // A falling step with a rising one (a box's edge) just before it.
        let row = [0.4f32, 0.9, 0.9, 0.9, 0.6, 0.3, 0.0, 0.0];
        assert!((edge(&row, 0, 6, -1.0).unwrap() - 4.5).abs() < 1e-6);
        // A weaker fall just before the bar's own step leaves it in place.
        let row = [0.9f32, 0.8, 0.7, 0.7, 0.0, 0.0, 0.0];
        assert!((edge(&row, 0, 5, -1.0).unwrap() - 3.5).abs() < 1e-6);
    }
}
