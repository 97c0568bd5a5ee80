//! Laying the test lines along the trunks (module docs of [`super`], steps
//! 3 and 4).

use super::*;
use fixedbitset::FixedBitSet;

/// A counted line with the traced segment it was sampled on.
pub(crate) struct Traced {
    pub(crate) line: Line,
    /// The sampled line, for the pooled recounts.
    pub(crate) profile: Profile,
    pub(crate) count: Count,
}

/// Scratch reused by the scales tried on one image: the smoothed tensor
/// and the map of pixels already taken by a line (a bit a pixel: 8 MB
/// rather than 64 MB on a 64-megapixel image).
pub(crate) struct LayScratch {
    pub(crate) tensor: Tensor,
    pub(crate) occupied: FixedBitSet,
}

/// Lays test lines along the trunks at the scale `lambda` (px): candidate
/// starts on a grid of one spacing where the structure tensor is coherent
/// (and agrees with a direction hint when one is given), strongest first;
/// each line is traced along the local arm direction, sampled, counted, and
/// marks its pixels as taken so that no two lines share a stretch.
pub(crate) fn lay_lines(
    img: &Prepared,
    seg: &PhaseField,
    grads: &GradientProducts,
    lambda: f64,
    p: &InterceptParams,
    scratch: &mut LayScratch,
) -> Vec<Traced> {
    let (w, h) = (seg.w, seg.h);
    let mask = img.mask.as_deref().filter(|m| m.len() == w * h);
    let LayScratch { tensor, occupied } = scratch;
    tensor.rebuild(grads, (p.tensor_sigma_spacings * lambda).max(1.0));
    let tensor = &*tensor;
    let max_turn = p.max_turn_deg.to_radians();
    // Hint in image axes: y up -> y down flips the angle's sign.
    let hint = p
        .direction_hint_deg
        .filter(|d| d.is_finite())
        .map(|d| -d.to_radians());
    // Keep a margin of one tensor window from the border, where the
    // smoothing saw only part of its neighbourhood.
    let margin = (2.0 * p.tensor_sigma_spacings * lambda).ceil().max(2.0) as usize;
    if 2 * margin + 4 >= w || 2 * margin + 4 >= h {
        return vec![];
    }
    let pitch = lambda.max(2.0);
    let mut cands: Vec<(f64, usize, usize)> = Vec::new();
    let mut yf = margin as f64;
    while yf < (h - margin) as f64 {
        let mut xf = margin as f64;
        while xf < (w - margin) as f64 {
            let (x, y) = (xf as usize, yf as usize);
            let j = tensor.components(x, y);
            let coh = j.coherence();
            if coh >= p.min_coherence
                && hint.is_none_or(|hd| axial_diff(j.theta(), hd) <= max_turn)
                && !mask.is_some_and(|m| m[y * w + x])
            {
                cands.push((coh, x, y));
            }
            xf += pitch;
        }
        yf += pitch;
    }
    // Most coherent first; ties by raster position, so the order is total.
    cands.sort_by(|a, b| b.0.total_cmp(&a.0).then((a.2, a.1).cmp(&(b.2, b.1))));

    occupied.clear();
    occupied.grow(w * h);
    let half_max = 0.5 * p.max_line_spacings * lambda;
    let min_len = 0.5 * (p.min_arms.saturating_sub(1)) as f64 * lambda;
    let band = p.line_separation_spacings * lambda;
    let mut lines = Vec::new();
    for &(_, cx, cy) in &cands {
        if occupied.contains(cy * w + cx) {
            continue;
        }
        let (theta, _) = tensor.at(cx, cy);
        let (ux, uy) = (theta.cos(), theta.sin());
        let inside = |x: f64, y: f64| {
            x >= margin as f64
                && y >= margin as f64
                && x <= (w - 1 - margin) as f64
                && y <= (h - 1 - margin) as f64
        };
        let mut ends = [0.0f64; 2];
        for (k, sign) in [-1.0f64, 1.0].into_iter().enumerate() {
            let mut s = 0.0;
            while s + 1.0 <= half_max {
                let (x, y) = (
                    cx as f64 + sign * (s + 1.0) * ux,
                    cy as f64 + sign * (s + 1.0) * uy,
                );
                if !inside(x, y) {
                    break;
                }
                let (xi, yi) = (x.round() as usize, y.round() as usize);
                let i = yi * w + xi;
                if occupied.contains(i) || mask.is_some_and(|m| m[i]) {
                    break;
                }
                let j = tensor.components(xi, yi);
                if j.coherence() < p.min_coherence || axial_diff(j.theta(), theta) > max_turn {
                    break;
                }
                s += 1.0;
            }
            ends[k] = s;
        }
        let (a, b) = (-ends[0], ends[1]);
        if b - a < min_len {
            continue;
        }
        let (x0, y0) = (cx as f64 + a * ux, cy as f64 + a * uy);
        let (x1, y1) = (cx as f64 + b * ux, cy as f64 + b * uy);
        let Some(profile) = sample_line(seg, (x0, y0), (x1, y1), p) else {
            continue;
        };
        let Some((line, count)) = count_profile(&profile, seg.neck_depth, p, None) else {
            continue;
        };
        mark_band(occupied, w, h, (x0, y0), (x1, y1), band);
        lines.push(Traced {
            line,
            profile,
            count,
        });
    }
    lines
}

/// Marks every pixel within `band` of the segment (x0, y0)-(x1, y1).
pub(crate) fn mark_band(
    occ: &mut FixedBitSet,
    w: usize,
    h: usize,
    a: (f64, f64),
    b: (f64, f64),
    band: f64,
) {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let len2 = dx * dx + dy * dy;
    let xmin = (a.0.min(b.0) - band).floor().max(0.0) as usize;
    let ymin = (a.1.min(b.1) - band).floor().max(0.0) as usize;
    let xmax = ((a.0.max(b.0) + band).ceil().max(0.0) as usize).min(w - 1);
    let ymax = ((a.1.max(b.1) + band).ceil().max(0.0) as usize).min(h - 1);
    // Only the pixels of a row within band + 1 of the segment's line can
    // be within band of the segment: the exact test below searches that
    // stretch of the row (widened by a pixel) instead of the whole bounding
    // box. Pixels skipped are more than band + 1 from the line, far beyond
    // any rounding of the test.
    let len = len2.sqrt();
    for y in ymin..=ymax {
        let (mut x_lo, mut x_hi) = (xmin, xmax);
        if len > 0.0 && dy != 0.0 {
            // |(x - a.0) dy - (y - a.1) dx| / len <= band + 1.
            let c = a.0 + (y as f64 - a.1) * dx / dy;
            let half = ((band + 1.0) * len / dy).abs();
            let (lo, hi) = ((c - half).floor() - 1.0, (c + half).ceil() + 1.0);
            if hi < xmin as f64 || lo > xmax as f64 {
                continue;
            }
            x_lo = x_lo.max(lo.max(0.0) as usize);
            x_hi = x_hi.min(hi as usize);
        }
        let within = |x: usize| {
            let (px, py) = (x as f64 - a.0, y as f64 - a.1);
            let t = if len2 > 0.0 {
                ((px * dx + py * dy) / len2).clamp(0.0, 1.0)
            } else {
                0.0
            };
            let (ex, ey) = (px - t * dx, py - t * dy);
            ex * ex + ey * ey <= band * band
        };
        // The band is convex, so on a row its pixels are one stretch: find
        // its ends by the exact test from either side and fill between
        // (a pixel between two marked ones is nearer the segment than the
        // farther of them; only one within rounding, ~1e-12 px, of the
        // band's edge could be judged otherwise pixel by pixel).
        let Some(first) = (x_lo..=x_hi).find(|&x| within(x)) else {
            continue;
        };
        let last = (first..=x_hi).rev().find(|&x| within(x)).unwrap_or(first);
        occ.insert_range(y * w + first..y * w + last + 1);
    }
}
