//! Gaussian blurs by cascades of box filters (P. Kovesi, "Fast
//! almost-Gaussian filtering", Proc. DICTA 2010): the one blur of the
//! crate, in its plain, in-place, masked and indicator forms.

/// Widths of `n` successive box filters whose cascade approximates a Gaussian
/// of standard deviation `sigma`: P. Kovesi, "Fast almost-Gaussian filtering",
/// Proc. DICTA 2010. Widths are odd.
pub fn box_widths(sigma: f64, n: usize) -> Vec<usize> {
    let nf = n as f64;
    let w_ideal = (12.0 * sigma * sigma / nf + 1.0).sqrt();
    let mut wl = w_ideal.floor() as i64;
    if wl % 2 == 0 {
        wl -= 1;
    }
    let wl = wl.max(1);
    let wu = wl + 2;
    let wlf = wl as f64;
    let m = ((12.0 * sigma * sigma - nf * wlf * wlf - 4.0 * nf * wlf - 3.0 * nf)
        / (-4.0 * wlf - 4.0))
        .round()
        .clamp(0.0, nf) as usize;
    (0..n)
        .map(|i| if i < m { wl as usize } else { wu as usize })
        .collect()
}

/// Gaussian blur approximated by three box filters per axis; near the borders
/// each box averages only the samples inside the image.
pub fn gaussian_blur(data: &[f32], width: usize, height: usize, sigma: f64) -> Vec<f32> {
    let mut out = Vec::new();
    gaussian_blur_into(data, &mut out, width, height, sigma);
    out
}

/// [`gaussian_blur`] of `src` written into `dst` (resized as needed): the
/// first pass reads `src` directly, so no copy of the input is made, and
/// callers that blur several images of one size reuse `dst` instead of
/// allocating it per blur. Same result, bit for bit.
pub fn gaussian_blur_into(
    src: &[f32],
    dst: &mut Vec<f32>,
    width: usize,
    height: usize,
    sigma: f64,
) {
    dst.resize(src.len(), 0.0);
    blur_passes(Some(src), dst, width, height, sigma, false);
}

/// [`gaussian_blur`] of `data` in place: callers that own an image they no
/// longer need avoid allocating (and the kernel zeroing) a fresh copy of
/// the whole image per blur. Same result, bit for bit.
pub fn gaussian_blur_in_place(data: &mut [f32], width: usize, height: usize, sigma: f64) {
    blur_passes(None, data, width, height, sigma, false);
}

/// [`gaussian_blur_in_place`] of an image whose values are all 0.0 or 1.0
/// (an indicator). Small sigmas give boxes of width 1 (sigma = 1: widths
/// 1, 1, 3); a box of width 1 returns its input, and on such an image the
/// running sums are sums of small integers, exact in f64, so it returns it
/// bit for bit and is skipped (the phase field blurs such an image at
/// sigma 1: four of its six passes). Same result as [`gaussian_blur_in_place`].
pub fn gaussian_blur_indicator_in_place(data: &mut [f32], width: usize, height: usize, sigma: f64) {
    debug_assert!(data.iter().all(|v| v.to_bits() == 0 || *v == 1.0));
    blur_passes(None, data, width, height, sigma, true);
}

/// The box cascade on `data` in place, or, with `src`, on `src` with the
/// result in `data` (the first pass reads `src`; `data` has its length).
fn blur_passes(
    src: Option<&[f32]>,
    data: &mut [f32],
    width: usize,
    height: usize,
    sigma: f64,
    skip_width_one: bool,
) {
    let mode = if skip_width_one {
        UnitBoxes::SkipLeading
    } else {
        UnitBoxes::Run
    };
    blur_passes_mode(src, data, width, height, sigma, mode);
}

fn blur_passes_mode(
    src: Option<&[f32]>,
    data: &mut [f32],
    width: usize,
    height: usize,
    sigma: f64,
    mode: UnitBoxes,
) {
    let mut src = src;
    if sigma > 0.0 && width > 0 && height > 0 {
        // With `SkipLeading`, width-1 boxes are skipped only while the image
        // is still the indicator (`box_widths` puts the narrower boxes
        // first).
        let mut still_indicator = mode == UnitBoxes::SkipLeading;
        for w in box_widths(sigma, 3) {
            let r = w / 2;
            if r == 0 && (still_indicator || mode == UnitBoxes::SkipAll) {
                continue;
            }
            still_indicator = false;
            // Each pass in place on `data` (the first reading `src` when
            // given): no second whole image (see `box_cols_in_place`).
            box_rows(src.take(), data, width, height, r);
            box_cols_in_place(data, width, height, r);
        }
    }
    // No pass ran: the blur is the identity.
    if let Some(s) = src {
        data.copy_from_slice(s);
    }
}

/// [`gaussian_blur`] without the boxes of width 1 of its cascade (sigma = 1
/// has widths 1, 1, 3): such a box is the identity in exact arithmetic, so
/// the result is the same Gaussian approximation. In floating point the
/// running sum of a width-1 box, (previous + next) - previous in f64, gives
/// back the next value exactly unless two neighbours differ in magnitude by
/// more than 2^29; then the skipped pass would have left a difference of
/// order 1e-16 of the larger one. For callers that threshold the result
/// (the segmentation), that is far below any grey level that matters.
pub fn gaussian_blur_without_unit_boxes(
    data: &[f32],
    width: usize,
    height: usize,
    sigma: f64,
) -> Vec<f32> {
    let mut out = vec![0.0f32; data.len()];
    blur_passes_mode(
        Some(data),
        &mut out,
        width,
        height,
        sigma,
        UnitBoxes::SkipAll,
    );
    out
}

/// Which boxes of width 1 (the identity in exact arithmetic) a cascade runs.
#[derive(Clone, Copy, PartialEq)]
enum UnitBoxes {
    Run,
    /// Only those before any wider box (exact on an indicator image).
    SkipLeading,
    SkipAll,
}

/// Normalised convolution: blur of the unmasked values divided by the blur of
/// the unmasked indicator, so excluded pixels do not pull the background.
pub fn masked_gaussian_blur(
    data: &[f32],
    mask: &[bool],
    width: usize,
    height: usize,
    sigma: f64,
) -> Vec<f32> {
    let mut den: Vec<f32> = mask.iter().map(|&m| if m { 0.0 } else { 1.0 }).collect();
    let mut num: Vec<f32> = data.iter().zip(&den).map(|(v, w)| v * w).collect();
    gaussian_blur_in_place(&mut num, width, height, sigma);
    gaussian_blur_in_place(&mut den, width, height, sigma);
    for ((n, d), v) in num.iter_mut().zip(&den).zip(data) {
        *n = if *d > 1e-6 { *n / d } else { *v };
    }
    num
}

/// The box of radius `r` along each row of `src` into `dst`, or of `dst`
/// in place when `src` is `None` (each block of rows is copied into the
/// tile before its results are written).
fn box_rows(src: Option<&[f32]>, dst: &mut [f32], width: usize, height: usize, r: usize) {
    // Rows in blocks of ROWS, transposed into a column-major tile so that
    // the running sums of the block's rows sit side by side in memory and
    // proceed as vector operations (the running sum of one row is a serial
    // chain of additions, and its division per pixel is the slowest step).
    // Every row still sees exactly the operations of `box_1d`, in the same
    // order, so the result is bit for bit the same.
    const ROWS: usize = 8;
    let groups = height / ROWS;
    let mut tile = vec![0.0f64; width * ROWS];
    let mut out = vec![0.0f32; width * ROWS];
    for g in 0..groups {
        let y0 = g * ROWS;
        let src_g = match src {
            Some(s) => &s[y0 * width..(y0 + ROWS) * width],
            None => &dst[y0 * width..(y0 + ROWS) * width],
        };
        // Column by column, so the tile is written in order (the source is
        // read in ROWS short streams).
        for (x, t) in tile.chunks_exact_mut(ROWS).enumerate() {
            for (k, v) in t.iter_mut().enumerate() {
                *v = src_g[k * width + x] as f64;
            }
        }
        box_1d_tile::<ROWS>(&tile, &mut out, width, r);
        let dst_g = &mut dst[y0 * width..(y0 + ROWS) * width];
        for (x, o) in out.chunks_exact(ROWS).enumerate() {
            for (k, v) in o.iter().enumerate() {
                dst_g[k * width + x] = *v;
            }
        }
    }
    let mut line = vec![0.0f32; if src.is_none() { width } else { 0 }];
    for y in groups * ROWS..height {
        let out_range = y * width..(y + 1) * width;
        match src {
            Some(s) => box_1d(&s[out_range.clone()], &mut dst[out_range], r),
            None => {
                line.copy_from_slice(&dst[out_range.clone()]);
                box_1d(&line, &mut dst[out_range], r);
            }
        }
    }
}

/// `box_1d` on K lines of length `n` at once, stored column-major in `tile`
/// (sample x of line k at `x * K + k`; `out` likewise). Same arithmetic, in
/// the same order, for each line.
fn box_1d_tile<const K: usize>(tile: &[f64], out: &mut [f32], n: usize, r: usize) {
    let mut acc = [0.0f64; K];
    let mut count = 0usize;
    let at = |x: usize| -> &[f64] { &tile[x * K..(x + 1) * K] };
    for x in 0..=r.min(n - 1) {
        for (a, v) in acc.iter_mut().zip(at(x)) {
            *a += *v;
        }
        count += 1;
    }
    for x in 0..n {
        let c = count as f64;
        for (d, a) in out[x * K..(x + 1) * K].iter_mut().zip(&acc) {
            *d = (*a / c) as f32;
        }
        let add = x + r + 1;
        if add < n {
            for (a, v) in acc.iter_mut().zip(at(add)) {
                *a += *v;
            }
            count += 1;
        }
        if x >= r {
            for (a, v) in acc.iter_mut().zip(at(x - r)) {
                *a -= *v;
            }
            count -= 1;
        }
    }
}

/// Running-sum box filter of radius `r` on one line, averaging only the
/// samples inside the line.
fn box_1d(src: &[f32], dst: &mut [f32], r: usize) {
    let n = src.len();
    let mut acc = 0.0f64;
    let mut count = 0usize;
    // Window for x = 0 covers [0, r].
    for v in src.iter().take(r.min(n - 1) + 1) {
        acc += *v as f64;
        count += 1;
    }
    for x in 0..n {
        dst[x] = (acc / count as f64) as f32;
        let add = x + r + 1;
        if add < n {
            acc += src[add] as f64;
            count += 1;
        }
        if x >= r {
            acc -= src[x - r] as f64;
            count -= 1;
        }
    }
}

/// The box of radius `r` down each column of `data`, in place: the same
/// arithmetic as [`box_cols`] from a copy, with only the `r + 1` latest
/// original rows kept aside (the rows leaving the window have been
/// overwritten by then; the rows entering it not yet). A blur then needs no
/// second whole image: at 64 megapixels that is 256 MB less at the peak.
fn box_cols_in_place(data: &mut [f32], width: usize, height: usize, r: usize) {
    let slots = r + 1;
    // Ring of original rows: row y in slot y % slots, at most slots rows.
    let mut ring = vec![0.0f32; width * slots.min(height)];
    let mut acc = vec![0.0f64; width];
    let mut count = 0usize;
    for y in 0..=r.min(height - 1) {
        for (a, v) in acc.iter_mut().zip(&data[y * width..(y + 1) * width]) {
            *a += *v as f64;
        }
        count += 1;
    }
    for y in 0..height {
        let inv = 1.0 / count as f64;
        let slot = y % slots;
        ring[slot * width..(slot + 1) * width].copy_from_slice(&data[y * width..(y + 1) * width]);
        let add = y + r + 1;
        let has_add = add < height;
        let has_sub = y >= r;
        let (head, tail) = data.split_at_mut((y + 1) * width);
        let d_row = &mut head[y * width..];
        let ad = if has_add {
            &tail[(add - y - 1) * width..(add - y) * width]
        } else {
            &[][..]
        };
        let sb = if has_sub {
            let s = (y - r) % slots;
            &ring[s * width..(s + 1) * width]
        } else {
            &[][..]
        };
        match (has_add, has_sub) {
            (true, true) => {
                let (d_row, acc, ad, sb) = (
                    &mut d_row[..width],
                    &mut acc[..width],
                    &ad[..width],
                    &sb[..width],
                );
                for x in 0..width {
                    let a = acc[x];
                    d_row[x] = (a * inv) as f32;
                    acc[x] = (a + ad[x] as f64) - sb[x] as f64;
                }
            }
            (true, false) => {
                for ((d, a), p) in d_row.iter_mut().zip(acc.iter_mut()).zip(ad) {
                    *d = (*a * inv) as f32;
                    *a += *p as f64;
                }
            }
            (false, true) => {
                for ((d, a), m) in d_row.iter_mut().zip(acc.iter_mut()).zip(sb) {
                    *d = (*a * inv) as f32;
                    *a -= *m as f64;
                }
            }
            (false, false) => {
                for (d, a) in d_row.iter_mut().zip(&acc) {
                    *d = (*a * inv) as f32;
                }
            }
        }
        if has_add {
            count += 1;
        }
        if has_sub {
            count -= 1;
        }
    }
}

/// The column pass from a copy, as the blur ran before it worked in place:
/// the reference [`box_cols_in_place`] is checked against.
#[cfg(test)]
fn box_cols(src: &[f32], dst: &mut [f32], width: usize, height: usize, r: usize) {
    let mut acc = vec![0.0f64; width];
    let mut count = 0usize;
    let row = |y: usize| &src[y * width..(y + 1) * width];
    for y in 0..=r.min(height - 1) {
        for (a, v) in acc.iter_mut().zip(row(y)) {
            *a += *v as f64;
        }
        count += 1;
    }
    for y in 0..height {
        let inv = 1.0 / count as f64;
        let d_row = &mut dst[y * width..(y + 1) * width];
        let add = y + r + 1;
        let add = (add < height).then(|| row(add));
        let sub = (y >= r).then(|| row(y - r));
        // One pass over the row per output line: write the mean, then add
        // the entering row, then subtract the leaving one (per column, the
        // same operations in the same order as three separate passes).
        match (add, sub) {
            (Some(ad), Some(sb)) => {
                // Indexed over equal-length slices so the loop vectorises.
                let (d_row, acc, ad, sb) = (
                    &mut d_row[..width],
                    &mut acc[..width],
                    &ad[..width],
                    &sb[..width],
                );
                for x in 0..width {
                    let a = acc[x];
                    d_row[x] = (a * inv) as f32;
                    acc[x] = (a + ad[x] as f64) - sb[x] as f64;
                }
            }
            (Some(ad), None) => {
                for ((d, a), p) in d_row.iter_mut().zip(acc.iter_mut()).zip(ad) {
                    *d = (*a * inv) as f32;
                    *a += *p as f64;
                }
            }
            (None, Some(sb)) => {
                for ((d, a), m) in d_row.iter_mut().zip(acc.iter_mut()).zip(sb) {
                    *d = (*a * inv) as f32;
                    *a -= *m as f64;
                }
            }
            (None, None) => {
                for (d, a) in d_row.iter_mut().zip(&acc) {
                    *d = (*a * inv) as f32;
                }
            }
        }
        if add.is_some() {
            count += 1;
        }
        if sub.is_some() {
            count -= 1;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn grouped_rows_filter_like_single_rows() {
        // The blocked row filter must give, bit for bit, what the plain
        // running sum gives row by row (same operations in the same order).
        let (w, h) = (37, 11);
        let data: Vec<f32> = (0..w * h)
            .map(|i| ((i * 7919) % 113) as f32 / 17.0)
            .collect();
        for r in [0, 1, 2, 5, 36, 40] {
            let mut grouped = vec![0.0f32; w * h];
            box_rows(Some(&data), &mut grouped, w, h, r);
            for y in 0..h {
                let mut single = vec![0.0f32; w];
                box_1d(&data[y * w..(y + 1) * w], &mut single, r);
                assert_eq!(&grouped[y * w..(y + 1) * w], &single[..], "r {r} row {y}");
            }
        }
    }

    /// The column pass as first written (three passes over each row):
    /// the reference the fused pass must reproduce bit for bit.
    fn box_cols_reference(src: &[f32], dst: &mut [f32], width: usize, height: usize, r: usize) {
        let mut acc = vec![0.0f64; width];
        let mut count = 0usize;
        for y in 0..=r.min(height - 1) {
            for (a, v) in acc.iter_mut().zip(&src[y * width..(y + 1) * width]) {
                *a += *v as f64;
            }
            count += 1;
        }
        for y in 0..height {
            let inv = 1.0 / count as f64;
            for (d, a) in dst[y * width..(y + 1) * width].iter_mut().zip(&acc) {
                *d = (*a * inv) as f32;
            }
            let add = y + r + 1;
            if add < height {
                for (a, v) in acc.iter_mut().zip(&src[add * width..(add + 1) * width]) {
                    *a += *v as f64;
                }
                count += 1;
            }
            if y >= r {
                let sub = y - r;
                for (a, v) in acc.iter_mut().zip(&src[sub * width..(sub + 1) * width]) {
                    *a -= *v as f64;
                }
                count -= 1;
            }
        }
    }

    #[test]
    fn fused_column_pass_matches_reference() {
        for (w, h) in [(37, 11), (5, 64), (64, 3), (1, 1)] {
            let data: Vec<f32> = (0..w * h)
                .map(|i| ((i * 7919) % 113) as f32 / 17.0 - 3.0)
                .collect();
            for r in [0, 1, 2, 5, 40] {
                let mut fused = vec![0.0f32; w * h];
                let mut reference = vec![0.0f32; w * h];
                box_cols(&data, &mut fused, w, h, r);
                box_cols_reference(&data, &mut reference, w, h, r);
                let same = fused
                    .iter()
                    .zip(&reference)
                    .all(|(a, b)| a.to_bits() == b.to_bits());
                assert!(same, "{w}x{h} r {r}");
                // In place: the same numbers, bit for bit, for both passes.
                let mut cols = data.clone();
                box_cols_in_place(&mut cols, w, h, r);
                assert!(
                    cols.iter()
                        .zip(&fused)
                        .all(|(a, b)| a.to_bits() == b.to_bits()),
                    "columns in place {w}x{h} r {r}"
                );
                let mut rows_from = vec![0.0f32; w * h];
                box_rows(Some(&data), &mut rows_from, w, h, r);
                let mut rows = data.clone();
                box_rows(None, &mut rows, w, h, r);
                assert!(
                    rows.iter()
                        .zip(&rows_from)
                        .all(|(a, b)| a.to_bits() == b.to_bits()),
                    "rows in place {w}x{h} r {r}"
                );
            }
        }
    }

    #[test]
    fn indicator_blur_skips_only_identity_passes() {
        // A 0/1 image blurred with and without skipping the width-1 boxes:
        // bit for bit the same (sigma 1 has widths 1, 1, 3; 0.5 only 1s).
        let (w, h) = (41, 23);
        let ind: Vec<f32> = (0..w * h)
            .map(|i| if (i * 7919) % 13 < 6 { 1.0 } else { 0.0 })
            .collect();
        for sigma in [0.5, 1.0, 1.5, 3.0] {
            let full = gaussian_blur(&ind, w, h, sigma);
            let mut skipped = ind.clone();
            gaussian_blur_indicator_in_place(&mut skipped, w, h, sigma);
            let same = full
                .iter()
                .zip(&skipped)
                .all(|(a, b)| a.to_bits() == b.to_bits());
            assert!(same, "sigma {sigma}");
        }
    }

    #[test]
    fn blur_into_matches_blur_in_place() {
        // Reading the source in the first pass instead of a copy of it:
        // bit for bit the same, also when no pass runs (sigma 0).
        let (w, h) = (29, 17);
        let data: Vec<f32> = (0..w * h)
            .map(|i| ((i * 7919) % 113) as f32 / 17.0 - 3.0)
            .collect();
        let mut dst = Vec::new();
        for sigma in [0.0, 0.5, 1.0, 2.5, 9.0] {
            let mut in_place = data.clone();
            gaussian_blur_in_place(&mut in_place, w, h, sigma);
            gaussian_blur_into(&data, &mut dst, w, h, sigma);
            let same = in_place
                .iter()
                .zip(&dst)
                .all(|(a, b)| a.to_bits() == b.to_bits());
            assert!(same && dst.len() == data.len(), "sigma {sigma}");
        }
    }

    #[test]
    fn box_cascade_matches_gaussian_variance() {
        // A box of odd width w has variance (w^2 - 1) / 12; the cascade's
        // variances add (Kovesi 2010, eq. 1-3). The total must be sigma^2
        // within the granularity of odd widths.
        for sigma in [8.0, 17.0, 33.3, 80.0] {
            let var: f64 = box_widths(sigma, 3)
                .iter()
                .map(|&w| ((w * w) as f64 - 1.0) / 12.0)
                .sum();
            assert!(
                (var.sqrt() - sigma).abs() / sigma < 0.03,
                "sigma {sigma}: cascade sigma {}",
                var.sqrt()
            );
        }
    }

    #[test]
    fn blur_preserves_constant_and_mean_of_impulse() {
        let (w, h) = (64, 48);
        let flat = vec![0.7f32; w * h];
        let b = gaussian_blur(&flat, w, h, 6.0);
        assert!(b.iter().all(|v| (v - 0.7).abs() < 1e-5));
        let mut imp = vec![0.0f32; w * h];
        imp[24 * w + 32] = 1.0;
        let b = gaussian_blur(&imp, w, h, 3.0);
        let total: f32 = b.iter().sum();
        assert!((total - 1.0).abs() < 1e-3, "mass {total}");
        // (Odd box widths make small sigmas coarse: 3.0 is realised as about 2.9.)
        // Second moment along x equals sigma^2 (definition of a Gaussian's variance).
        let var: f64 = (0..h)
            .flat_map(|y| (0..w).map(move |x| (x, y)))
            .map(|(x, y)| b[y * w + x] as f64 * ((x as f64 - 32.0).powi(2)))
            .sum();
        assert!((var.sqrt() - 3.0).abs() < 0.3, "sigma {}", var.sqrt());
    }
}
