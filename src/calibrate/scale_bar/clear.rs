//! The first search: a bar set off from its surroundings (on a backing
//! box, or on a plain part of the field). Each row of such a bar ends where
//! its neighbours do, and some row a few pixels above and below it, and a
//! few pixels beyond each end, is unlike the bar along its whole length.
//! This search was the whole finder before bars lying on the structure
//! were looked for (`super::on_structure`); it is kept first, unchanged,
//! because where its tests hold they are the stronger evidence.

use super::{edge, Polarity, ScaleBar, MIN_CONFIDENCE};
use crate::load::GrayImage;

const CANDIDATE_FRACTIONS: [f32; 2] = [0.25, 0.45];
const END_TOLERANCE_PX: i64 = 2;

#[derive(Clone, Debug)]
struct Group {
    y0: usize,
    starts: Vec<usize>,
    ends: Vec<usize>,
}

impl Group {
    fn last_y(&self) -> usize {
        self.y0 + self.starts.len() - 1
    }
}

/// Finds a bar set off from its surroundings, or says why there is none.
pub(super) fn detect(img: &GrayImage) -> crate::Result<ScaleBar> {
    let none = |reason: &str| crate::Error::Calibration {
        reason: reason.into(),
    };
    let (w, h) = (img.width, img.height);
    if w < 16 || h < 8 {
        return Err(none("the image is too small to hold a scale bar"));
    }
    let (lo, hi) = super::extremes(img);
    let range = hi - lo;
    if range < 0.05 {
        return Err(none(
            "the image has too little contrast to show a scale bar",
        ));
    }
    let mut found: Vec<ScaleBar> = Vec::new();
    for fraction in CANDIDATE_FRACTIONS {
        for polarity in [Polarity::DarkOnLight, Polarity::LightOnDark] {
            let is_cand = super::candidate(polarity, fraction, lo, hi);
            found.extend(
                groups(img, &is_cand)
                    .iter()
                    .filter_map(|g| examine(img, g, polarity, &is_cand, range)),
            );
        }
    }
    let best = super::best_bar(&found);
    best.cloned()
        .ok_or_else(|| none("no solid horizontal bar stands out from the image"))
}

/// Stacks of horizontal candidate runs with nearly equal ends.
fn groups(img: &GrayImage, is_cand: &impl Fn(f32) -> bool) -> Vec<Group> {
    let (w, h) = (img.width, img.height);
    let min_len = 16usize.max(w / 64);
    let mut open: Vec<Group> = Vec::new();
    let mut done: Vec<Group> = Vec::new();
    for y in 0..h {
        let row = img.row(y);
        let runs = super::row_runs(row, min_len, is_cand);
        let mut next_open = Vec::new();
        let mut used = vec![false; runs.len()];
        for mut g in open.drain(..) {
            let (ls, le) = (*g.starts.last().unwrap_or(&0), *g.ends.last().unwrap_or(&0));
            let m = runs.iter().enumerate().find(|(i, (s, e))| {
                !used[*i]
                    && (*s as i64 - ls as i64).abs() <= END_TOLERANCE_PX
                    && (*e as i64 - le as i64).abs() <= END_TOLERANCE_PX
            });
            match m {
                Some((i, (s, e))) => {
                    used[i] = true;
                    g.starts.push(*s);
                    g.ends.push(*e);
                    next_open.push(g);
                }
                None => done.push(g),
            }
        }
        for (i, (s, e)) in runs.iter().enumerate() {
            if !used[i] {
                next_open.push(Group {
                    y0: y,
                    starts: vec![*s],
                    ends: vec![*e],
                });
            }
        }
        open = next_open;
    }
    done.extend(open);
    done.retain(|g| g.starts.len() >= 2);
    done
}

/// The middle of the rows' end positions: the order statistic of rank
/// n/2 (the upper middle one for an even count), not the crate's median,
/// because a bar's end must be a pixel some row really has (the mean of two
/// middle ones may fall between them). `None` for no rows.
fn middle_position(v: &[usize]) -> Option<usize> {
    let mut s = v.to_vec();
    let mid = s.len() / 2;
    (!s.is_empty()).then(|| *s.select_nth_unstable(mid).1)
}

fn median_f32(mut v: Vec<f32>) -> Option<f32> {
    crate::stats::median_in_place(&mut v).map(|m| m as f32)
}

fn examine(
    img: &GrayImage,
    g: &Group,
    polarity: Polarity,
    is_cand: &impl Fn(f32) -> bool,
    range: f32,
) -> Option<ScaleBar> {
    let (w, h) = (img.width, img.height);
    let x0 = middle_position(&g.starts)?;
    let x1 = middle_position(&g.ends)?;
    let (y0, y1) = (g.y0, g.last_y());
    let thickness = y1 - y0 + 1;
    let length = x1 - x0 + 1;
    // Straight ends.
    if g.starts
        .iter()
        .chain(&g.ends)
        .zip(g.starts.iter().map(|_| x0).chain(g.ends.iter().map(|_| x1)))
        .any(|(a, b)| (*a as i64 - b as i64).abs() > END_TOLERANCE_PX)
    {
        return None;
    }
    // Shape: thick enough to be drawn on purpose, much longer than thick,
    // not spanning the image, clear of the border (a frame is no bar).
    if thickness < 2 || length < 4 * thickness || length as f64 > 0.9 * w as f64 {
        return None;
    }
    if x0 < 9 || x1 + 9 >= w || y0 < 4 || y1 + 4 >= h {
        return None;
    }
    // Fill of the rectangle, and uniformity of its interior rows (the top
    // and bottom rows of a thick bar carry the blur of its edges).
    let fill = (y0..=y1)
        .flat_map(|y| img.row(y)[x0..=x1].iter())
        .filter(|v| is_cand(**v))
        .count() as f64
        / (thickness * length) as f64;
    let (iy0, iy1) = if thickness >= 3 {
        (y0 + 1, y1 - 1)
    } else {
        (y0, y1)
    };
    let interior: Vec<f32> = (iy0..=iy1)
        .flat_map(|y| img.row(y)[x0 + 1..x1].iter().copied())
        .collect();
    let mean = interior.iter().map(|v| *v as f64).sum::<f64>() / interior.len() as f64;
    let sd = (interior
        .iter()
        .map(|v| (*v as f64 - mean).powi(2))
        .sum::<f64>()
        / interior.len() as f64)
        .sqrt();
    let uniformity = (1.0 - sd / (0.1 * range as f64)).clamp(0.0, 1.0);
    // Set off above and below: some row two to four rows out (past any blur
    // of the edge) is, along the whole bar, at least 90 % unlike the bar's
    // own level. A strip of a larger region (a backing box around a bar of
    // the other polarity) is not: its neighbouring row continues at its level
    // beyond the bar it frames.
    let level_tol = (0.1 * range as f64).max(4.0 * sd);
    let unlike = |y: usize| {
        let row = &img.row(y)[x0..=x1];
        row.iter()
            .filter(|v| (**v as f64 - mean).abs() > level_tol)
            .count() as f64
            / row.len() as f64
    };
    let above = (2..=4)
        .filter_map(|d| y0.checked_sub(d))
        .map(unlike)
        .fold(0.0, f64::max);
    let below = (2..=4)
        .map(|d| y1 + d)
        .filter(|&y| y < h)
        .map(unlike)
        .fold(0.0, f64::max);
    if above < 0.9 || below < 0.9 {
        return None;
    }
    // Set off at both ends.
    let ends_clear = {
        let mut clear = 0usize;
        for y in y0..=y1 {
            let row = img.row(y);
            clear += usize::from(!is_cand(row[x0 - 3])) + usize::from(!is_cand(row[x1 + 3]));
        }
        clear as f64 / (2 * thickness) as f64
    };
    let confidence = fill.min(uniformity).min(ends_clear);
    if confidence < MIN_CONFIDENCE {
        return None;
    }

    // Sub-pixel length on interior rows.
    let rows: Vec<usize> = if thickness >= 3 {
        (y0 + 1..y1).collect()
    } else {
        (y0..=y1).collect()
    };
    let mut lengths = Vec::new();
    let mut lefts = Vec::new();
    let mut rights = Vec::new();
    // Entering a dark bar the profile falls; leaving it, it rises.
    let into = match polarity {
        Polarity::DarkOnLight => -1.0,
        Polarity::LightOnDark => 1.0,
    };
    let at_level = |v: f32| (v as f64 - mean).abs() <= level_tol;
    for &y in &rows {
        let row = img.row(y);
        // Walk out from the bar's middle while the row keeps the bar's level:
        // the bar's own step is where it leaves it, even when a feature of
        // the micrograph of similar darkness touches the end.
        let mid = (x0 + x1) / 2;
        let mut l = mid;
        while l > 1 && at_level(row[l - 1]) {
            l -= 1;
        }
        let mut r = mid;
        while r + 2 < w && at_level(row[r + 1]) {
            r += 1;
        }
        let xl = edge(row, l.saturating_sub(2), l, into)?;
        let xr = edge(row, r, (r + 2).min(w - 2), -into)?;
        lengths.push(xr - xl);
        lefts.push(xl);
        rights.push(xr);
    }
    if lengths.is_empty() {
        return None;
    }
    let mid = crate::stats::median(&lengths)?;
    let keep: Vec<bool> = lengths.iter().map(|l| (l - mid).abs() <= 1.0).collect();
    let pick = |v: &[f64]| -> Vec<f64> {
        v.iter()
            .zip(&keep)
            .filter(|(_, k)| **k)
            .map(|(x, _)| *x)
            .collect()
    };
    let (lengths, lefts, rights) = (pick(&lengths), pick(&lefts), pick(&rights));
    // With an even count the median is the mean of the two middle lengths,
    // and when those differ by more than 2 px no row is within 1 px of it:
    // no row is kept. Such a candidate has no measurable length; it is no
    // bar (a mean over no rows is NaN, which no later comparison can rank,
    // so it would also have hidden a real bar found after it).
    if lengths.is_empty() {
        return None;
    }
    let mean_of = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    // The bar's box from its measured ends.
    let x0 = (mean_of(&lefts) + 0.5).round().max(0.0) as usize;
    let x1 = (mean_of(&rights) - 0.5).round().max(x0 as f64) as usize;
    let n = lengths.len() as f64;
    let mean_len = lengths.iter().sum::<f64>() / n;
    let sd_len = (lengths.iter().map(|l| (l - mean_len).powi(2)).sum::<f64>() / n).sqrt();

    // Backing box: grow from the bar while the new line is mostly the
    // surround's level.
    let surround = median_f32(
        [y0 - 2, y1 + 2]
            .iter()
            .flat_map(|&y| img.row(y)[x0..=x1].iter().copied())
            .collect(),
    )?;
    let (backing_box, mask) =
        super::box_and_mask(img, [x0, y0, x1, y1], thickness, surround, range);
    let u = |v: usize| v as u32;
    Some(ScaleBar {
        length_px: mean_len,
        length_sd_px: sd_len,
        rows: lengths.len(),
        x0: u(x0),
        y0: u(y0),
        x1: u(x1),
        y1: u(y1),
        thickness_px: u(thickness),
        polarity,
        confidence,
        backing_box: backing_box.map(|b| b.map(u)),
        mask: mask.map(u),
    })
}
