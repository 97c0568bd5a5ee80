//! Two-phase segmentation of a prepared micrograph: Otsu's threshold, removal
//! of specks and pin-holes, and the choice of the phase that carries the arm
//! pattern.
//!
//! * Threshold: N. Otsu, "A threshold selection method from gray-level
//!   histograms", IEEE Trans. Systems, Man, and Cybernetics 9 (1979) 62-66.
//!   The threshold maximises the between-class variance
//!   w1 w2 (mu1 - mu2)^2 over a histogram. The histogram convention follows
//!   scikit-image's `threshold_otsu` (which this module is checked against,
//!   tests/intercept_otsu.rs): bins of equal width over a range, the
//!   threshold is the *centre* of the last bin of the lower class, and a
//!   pixel belongs to the upper class when its value is strictly greater.
//! * Range of the histogram (our choice): the 0.5th to 99.5th percentiles of
//!   the unmasked values, 256 bins, values outside clipped into the end bins.
//!   Dust, burned-in labels and saturated specks cover far less than 0.5 % of
//!   a field but can stretch the minimum and maximum by many spreads, which
//!   would crowd both phases into a few bins; clipping keeps them in their
//!   class without letting them set the bin width.
//! * Clean-up: connected components (4-connectivity) of either phase smaller
//!   than `min_object_px` are given to the surrounding phase, which removes
//!   specks of the one phase and fills pin-holes in the other.
//! * Phase choice: see [`PhaseChoice`].

use crate::blocks::blur::gaussian_blur_without_unit_boxes;
use crate::blocks::components::{label_runs, Runs};
use crate::blocks::select::select_ranks;
use crate::preprocess::Prepared;

/// Number of histogram bins (the scikit-image default for float images).
pub const OTSU_BINS: usize = 256;

/// Percentiles bounding the histogram range of [`otsu_threshold`].
pub const OTSU_RANGE_PERCENTILES: (f64, f64) = (0.5, 99.5);

/// Which phase is taken as the one carrying the arm pattern (the foreground).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PhaseChoice {
    /// The phase covering more of the unmasked field. SDAS is measured in
    /// hypoeutectic alloys, where the primary dendrite phase is the majority
    /// (about 55-75 % of area in cast hypoeutectic Al-Si; common practice, no
    /// single source). The rule depends only on the geometry, so it gives
    /// the same phase whatever the contrast (bright or dark dendrites).
    /// Where it picks the interdendritic phase instead (a sparse drawing,
    /// a near-eutectic alloy), intercept spacings are unchanged to first
    /// order: along a line across a row of arms the runs of the two phases
    /// alternate, so the centres of either phase are one spacing apart.
    Majority,
    /// The brighter phase (values above the threshold).
    Bright,
    /// The darker phase (values at or below the threshold).
    Dark,
}

/// Parameters of [`segment`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SegmentParams {
    /// Standard deviation, in pixels, of the Gaussian applied before
    /// thresholding. One pixel suppresses pixel-to-pixel noise (which would
    /// otherwise fray every phase boundary) while leaving any structure of
    /// period 3 px or more, the finest any method resolves, essentially intact.
    pub smooth_sigma_px: f64,
    /// Connected components (of either phase) smaller than this many pixels
    /// are merged into the surrounding phase. The default, 9 px (a 3 x 3
    /// block), is about the footprint of the pre-smoothing kernel (+-1 sigma
    /// plus the centre pixel): anything smaller is not resolved structure.
    /// 0 disables the clean-up.
    pub min_object_px: usize,
    pub phase: PhaseChoice,
}

impl Default for SegmentParams {
    fn default() -> Self {
        Self {
            smooth_sigma_px: 1.0,
            min_object_px: 9,
            phase: PhaseChoice::Majority,
        }
    }
}

/// A binary segmentation of a prepared image.
#[derive(Clone, Debug, PartialEq)]
pub struct Segmentation {
    pub width: usize,
    pub height: usize,
    /// `true` for pixels of the phase carrying the arm pattern (after the
    /// clean-up); masked pixels are `false`.
    pub foreground: Vec<bool>,
    /// Otsu's threshold on the smoothed prepared values (the units of
    /// [`Prepared`]: zero median, unit robust spread).
    pub threshold: f32,
    /// `true` when the foreground is the darker phase (values <= threshold).
    pub inverted: bool,
    /// Foreground fraction of the unmasked pixels, after the clean-up.
    pub fraction: f64,
    /// Otsu's separability measure eta = between-class variance / total
    /// variance at the threshold (Otsu 1979, eq. 12 and section III), on the
    /// smoothed values before the clean-up: 1 for two sharp levels, 0.75 for
    /// a uniform histogram, 2/pi = 0.64 for a single Gaussian (split at its
    /// mean: class means +-sigma sqrt(2/pi)).
    pub separability: f64,
    /// The smoothed prepared values that were thresholded (masked pixels 0).
    pub smoothed: Vec<f32>,
}

impl Segmentation {
    /// Whether a smoothed value belongs to the foreground phase.
    #[inline]
    pub fn is_foreground_value(&self, v: f32) -> bool {
        (v > self.threshold) != self.inverted
    }
}

/// Otsu's threshold of the unmasked values (mask `true` = excluded), over
/// [`OTSU_BINS`] bins between the [`OTSU_RANGE_PERCENTILES`] of the values.
/// `None` when there are no finite unmasked values or they are all equal
/// within the range (nothing to separate).
pub fn otsu_threshold(values: &[f32], mask: Option<&[bool]>) -> Option<f32> {
    let n = unmasked(values, mask).count();
    if n == 0 {
        return None;
    }
    // Nearest-rank percentiles.
    let rank = |p: f64| -> usize { (((p / 100.0) * (n - 1) as f64).round() as usize).min(n - 1) };
    let [lo, hi] = nth_smallest(
        values,
        mask,
        n,
        [
            rank(OTSU_RANGE_PERCENTILES.0),
            rank(OTSU_RANGE_PERCENTILES.1),
        ],
    );
    otsu_threshold_binned(values, mask, lo, hi, OTSU_BINS)
}

/// The values of ranks `ranks` (0-based, in `f32::total_cmp` order, each
/// below `n`) among the `n` unmasked finite values, by radix selection (see
/// [`select_ranks`]).
fn nth_smallest<const K: usize>(
    values: &[f32],
    mask: Option<&[bool]>,
    n: usize,
    ranks: [usize; K],
) -> [f32; K] {
    select_ranks(|| unmasked(values, mask), n, ranks)
}

/// Otsu's threshold over `nbins` equal bins spanning `[lo, hi]` (values
/// outside are clipped into the end bins). With `lo`, `hi` the minimum and
/// maximum of the values this is scikit-image's `threshold_otsu(image,
/// nbins)` for a float image: the returned value is the centre of the last
/// bin of the lower class. `None` for an empty or degenerate range.
pub fn otsu_threshold_binned(
    values: &[f32],
    mask: Option<&[bool]>,
    lo: f32,
    hi: f32,
    nbins: usize,
) -> Option<f32> {
    if nbins < 2 || !lo.is_finite() || !hi.is_finite() || hi <= lo {
        return None;
    }
    let (lo64, hi64) = (lo as f64, hi as f64);
    let width = (hi64 - lo64) / nbins as f64;
    let mut counts = vec![0u64; nbins];
    for v in unmasked(values, mask) {
        // numpy.histogram: bins are half-open [a, b) except the last, which
        // includes its right edge.
        // For x >= 0 truncation is the floor; below 0 the bin is 0 either
        // way (no call to libm's floor per value).
        let x = (v as f64 - lo64) / width;
        let b = if x > 0.0 {
            (x as usize).min(nbins - 1)
        } else {
            0
        };
        counts[b] += 1;
    }
    let centre = |i: usize| lo64 + width * (i as f64 + 0.5);
    let total: u64 = counts.iter().sum();
    if total == 0 {
        return None;
    }
    let sum_all: f64 = counts
        .iter()
        .enumerate()
        .map(|(i, &c)| c as f64 * centre(i))
        .sum();
    // Between-class variance (up to the constant factor 1/total^2) for a
    // split after bin i: w1 w2 (mu1 - mu2)^2 (Otsu 1979, eq. 14 and 18).
    let mut w1 = 0.0f64;
    let mut s1 = 0.0f64;
    let mut best: Option<(usize, f64)> = None;
    for (i, &c) in counts.iter().enumerate().take(nbins - 1) {
        w1 += c as f64;
        s1 += c as f64 * centre(i);
        let w2 = total as f64 - w1;
        if w1 <= 0.0 || w2 <= 0.0 {
            continue;
        }
        let d = s1 / w1 - (sum_all - s1) / w2;
        let var = w1 * w2 * d * d;
        // numpy.argmax takes the first maximum.
        let better = match best {
            None => true,
            Some((_, b)) => var > b,
        };
        if better {
            best = Some((i, var));
        }
    }
    best.map(|(i, _)| centre(i) as f32)
}

fn unmasked<'a>(values: &'a [f32], mask: Option<&'a [bool]>) -> impl Iterator<Item = f32> + 'a {
    values
        .iter()
        .enumerate()
        .filter(move |(i, v)| {
            v.is_finite() && mask.is_none_or(|m| m.get(*i).copied() != Some(true))
        })
        .map(|(_, v)| *v)
}

/// Segments a prepared image into the arm-carrying phase and the rest.
/// `None` when the image has no contrast or no unmasked pixels, or when one
/// phase is empty.
pub fn segment(img: &Prepared, params: &SegmentParams) -> Option<Segmentation> {
    let (w, h) = (img.image.width, img.image.height);
    if w == 0 || h == 0 || img.image.data.len() != w * h || img.contrast <= 1e-6 {
        return None;
    }
    let mask = img.mask.as_deref().filter(|m| m.len() == w * h);
    let smoothed =
        gaussian_blur_without_unit_boxes(&img.image.data, w, h, params.smooth_sigma_px.max(0.0));
    let threshold = otsu_threshold(&smoothed, mask)?;
    let excluded = |i: usize| mask.is_some_and(|m| m[i]);
    let separability = separability(&smoothed, mask, threshold)?;
    let mut bright: Vec<bool> = (0..w * h)
        .map(|i| !excluded(i) && smoothed[i] > threshold)
        .collect();
    if params.min_object_px > 0 {
        remove_small(&mut bright, mask, w, h, params.min_object_px);
    }
    let n_valid = (0..w * h).filter(|&i| !excluded(i)).count();
    if n_valid == 0 {
        return None;
    }
    let n_bright = bright.iter().filter(|&&b| b).count();
    let bright_fraction = n_bright as f64 / n_valid as f64;
    if n_bright == 0 || n_bright == n_valid {
        return None;
    }
    let inverted = match params.phase {
        PhaseChoice::Bright => false,
        PhaseChoice::Dark => true,
        // Ties (exactly half) go to the bright phase so the choice is defined.
        PhaseChoice::Majority => bright_fraction < 0.5,
    };
    let foreground: Vec<bool> = if inverted {
        (0..w * h).map(|i| !excluded(i) && !bright[i]).collect()
    } else {
        bright
    };
    let fraction = if inverted {
        1.0 - bright_fraction
    } else {
        bright_fraction
    };
    Some(Segmentation {
        width: w,
        height: h,
        foreground,
        threshold,
        inverted,
        fraction,
        separability,
        smoothed,
    })
}

/// Between-class over total variance of the unmasked values split at `t`
/// (upper class: values > t). `None` without variance.
pub fn separability(values: &[f32], mask: Option<&[bool]>, t: f32) -> Option<f64> {
    let (mut n, mut s, mut s2, mut n1, mut s1) = (0.0f64, 0.0f64, 0.0f64, 0.0f64, 0.0f64);
    for v in unmasked(values, mask) {
        let x = v as f64;
        n += 1.0;
        s += x;
        s2 += x * x;
        if v > t {
            n1 += 1.0;
            s1 += x;
        }
    }
    let n0 = n - n1;
    if n0 <= 0.0 || n1 <= 0.0 {
        return None;
    }
    let mean = s / n;
    let total = s2 / n - mean * mean;
    if total <= 0.0 {
        return None;
    }
    let d = s1 / n1 - (s - s1) / n0;
    Some((n0 / n) * (n1 / n) * d * d / total)
}

/// Gives connected components (4-connectivity) of either phase smaller than
/// `min_px` to the other phase. Bright specks are removed first, then dark
/// pin-holes are filled (on the image with the specks removed). Masked
/// pixels belong to neither phase and are left unchanged.
///
/// Components are found on horizontal runs ([`label_runs`]).
pub fn remove_small(bright: &mut [bool], mask: Option<&[bool]>, w: usize, h: usize, min_px: usize) {
    if w == 0 || h == 0 || min_px == 0 {
        return;
    }
    let mut size: Vec<usize> = Vec::new();
    for phase in [true, false] {
        let is = |x: usize, y: usize| {
            let i = y * w + x;
            bright[i] == phase && !mask.is_some_and(|m| m[i])
        };
        let Runs { runs, root } = label_runs(w, h, is);
        size.clear();
        size.resize(runs.len(), 0);
        for (&(_, x0, x1), &r) in runs.iter().zip(&root) {
            size[r] += x1 - x0;
        }
        for (&(y, x0, x1), &r) in runs.iter().zip(&root) {
            if size[r] < min_px {
                bright[y * w + x0..y * w + x1].fill(!phase);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::blocks::select::median_by_selection;

    #[test]
    fn otsu_of_two_spikes_splits_them() {
        // Two equal populations at 0.2 and 0.8: any split between them
        // maximises the between-class variance; the first maximum is the bin
        // holding 0.2 (numpy.argmax convention), so the threshold is its centre.
        let mut v = vec![0.2f32; 100];
        v.extend(vec![0.8f32; 100]);
        let t = otsu_threshold_binned(&v, None, 0.0, 1.0, 10).unwrap();
        assert!((t - 0.25).abs() < 1e-6, "{t}");
        assert!(otsu_threshold(&[0.5; 10], None).is_none());
        assert!(otsu_threshold(&[], None).is_none());
    }

    #[test]
    fn radix_selection_matches_sorting() {
        // Ranks in f32::total_cmp order, against a full sort: negatives,
        // both zeros, ties, masked and non-finite values left out.
        let mut v: Vec<f32> = (0..5000)
            .map(|i| ((i * 7919) % 1009) as f32 / 37.0 - 13.0)
            .collect();
        v.extend([
            0.0,
            -0.0,
            -0.0,
            f32::NAN,
            f32::INFINITY,
            1e-30,
            -1e-30,
            3.5,
            3.5,
        ]);
        let mask: Vec<bool> = (0..v.len()).map(|i| i % 11 == 3).collect();
        for m in [None, Some(&mask[..])] {
            let mut sorted: Vec<f32> = unmasked(&v, m).collect();
            sorted.sort_by(|a, b| a.total_cmp(b));
            let n = sorted.len();
            let ranks = [0, 1, n / 200, n / 2, n - n / 200 - 1, n - 1];
            let got = nth_smallest(&v, m, n, ranks);
            for (r, g) in ranks.iter().zip(got) {
                assert_eq!(g.to_bits(), sorted[*r].to_bits(), "rank {r}");
            }
        }
    }

    /// The clean-up as first written, pixel by pixel: the reference the
    /// run-based labelling must reproduce exactly.
    fn remove_small_reference(
        bright: &mut [bool],
        mask: Option<&[bool]>,
        w: usize,
        h: usize,
        min_px: usize,
    ) {
        for phase in [true, false] {
            let mut seen = vec![false; w * h];
            for start in 0..w * h {
                if seen[start] || mask.is_some_and(|m| m[start]) || bright[start] != phase {
                    continue;
                }
                let (mut stack, mut comp) = (vec![start], Vec::new());
                seen[start] = true;
                while let Some(i) = stack.pop() {
                    comp.push(i);
                    let (x, y) = (i % w, i / w);
                    let mut nb = Vec::new();
                    if x > 0 {
                        nb.push(i - 1);
                    }
                    if x + 1 < w {
                        nb.push(i + 1);
                    }
                    if y > 0 {
                        nb.push(i - w);
                    }
                    if y + 1 < h {
                        nb.push(i + w);
                    }
                    for j in nb {
                        if !seen[j] && bright[j] == phase && !mask.is_some_and(|m| m[j]) {
                            seen[j] = true;
                            stack.push(j);
                        }
                    }
                }
                if comp.len() < min_px {
                    for &i in &comp {
                        bright[i] = !phase;
                    }
                }
            }
        }
    }

    #[test]
    fn run_labelling_matches_pixel_flood_fill() {
        for (w, h) in [(1, 1), (1, 40), (40, 1), (37, 23), (64, 64)] {
            for density in [3u64, 5, 7] {
                let field: Vec<bool> = (0..w * h)
                    .map(|i| (i as u64 * 2654435761 + 97) % 13 < density + 3)
                    .collect();
                let mask: Vec<bool> = (0..w * h).map(|i| (i * 31) % 17 == 0).collect();
                for m in [None, Some(&mask[..])] {
                    for min_px in [1, 4, 9, 30] {
                        let mut fast = field.clone();
                        let mut slow = field.clone();
                        remove_small(&mut fast, m, w, h, min_px);
                        remove_small_reference(&mut slow, m, w, h, min_px);
                        assert_eq!(fast, slow, "{w}x{h} density {density} min {min_px}");
                    }
                }
            }
        }
    }

    #[test]
    fn median_by_selection_matches_stats_median() {
        for n in [1usize, 2, 3, 10, 11, 1000, 1001] {
            let v: Vec<f32> = (0..n)
                .map(|i| ((i * 7919) % 997) as f32 / 31.0 - 9.0)
                .collect();
            let mut copy = v.clone();
            let reference = crate::stats::median_in_place(&mut copy);
            assert_eq!(
                median_by_selection(&v).map(f64::to_bits),
                reference.map(f64::to_bits),
                "n {n}"
            );
        }
        assert_eq!(median_by_selection(&[]), None);
    }

    #[test]
    fn specks_and_holes_are_removed() {
        let (w, h) = (20, 20);
        let mut b = vec![false; w * h];
        // A 10 x 10 bright square with a one-pixel hole, and a lone speck.
        for y in 5..15 {
            for x in 5..15 {
                b[y * w + x] = true;
            }
        }
        b[10 * w + 10] = false;
        b[2 * w + 2] = true;
        remove_small(&mut b, None, w, h, 4);
        assert!(b[10 * w + 10]);
        assert!(!b[2 * w + 2]);
        assert_eq!(b.iter().filter(|&&v| v).count(), 100);
    }
}
