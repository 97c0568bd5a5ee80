//! The coarse scale ladder of the FFT method: tiles of sizes about 1.5
//! apart, and the period two neighbouring sizes reproduce (module docs of
//! [`super`]).

use super::*;

/// Statistics of the tiles of one size in the coarse scale ladder.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScaleStat {
    /// Tile side, pixels.
    pub n: usize,
    /// Quality-weighted median period of the reliable tiles (NaN if none).
    pub period_px: f64,
    /// Fraction of the analysed tiles that are reliable and agree with
    /// `period_px` within `LADDER_AGREEMENT`.
    pub support: f64,
    /// Number of tiles analysed.
    pub n_tiles: usize,
}

/// Ratio between successive tile sizes of the coarse ladder. A factor 1.5
/// (32, 48, 64, 96, ...) keeps neighbouring scales close enough that a real
/// period is within the search range of both, and far enough apart that
/// their spectra differ in resolution (common practice, no single source).
pub(crate) const LADDER_RATIO: f64 = 1.5;

/// Smallest tile of the ladder: below 32 px a tile cannot hold several
/// periods of anything above the 3 px search floor with a resolved peak.
pub(crate) const LADDER_MIN_PX: usize = 32;

/// Relative tolerance for two periods to count as the same: the spacing of
/// secondary arms itself scatters by 10-20 % along a trunk, and a tile of 4-6
/// periods locates its peak to about a quarter bin, i.e. 4-6 % (common
/// practice, no single source).
pub(crate) const LADDER_AGREEMENT: f64 = 0.15;

/// Smallest fraction of a scale's tiles that must agree on one period for
/// the scale to support it. Noise alone makes about 1-3 % of tiles reliable
/// (quality >= 6) and scatters their periods over the whole band, so a
/// quarter of the tiles agreeing within 15 % is far beyond chance; it still
/// allows the dendrites to cover only part of the field.
pub(crate) const MIN_SUPPORT: f64 = 0.25;

/// Support with which a scale may confirm its neighbour's period: one scale
/// of a pair must carry the full `MIN_SUPPORT`; its neighbour, which only
/// has to confirm the period, a tenth of its tiles (noise gives 1-3 % of
/// tiles, scattered over the whole band, so even that is several times what
/// chance gives, and at the same period as the other scale).
pub(crate) const WEAK_SUPPORT: f64 = 0.1;

/// Fewest periods a tile must span for its period to be supported at that
/// scale: a Hann window resolves a peak from the zero-frequency leakage (main
/// lobe half-width 2 bins) from about 4 bins on (Harris 1978).
pub(crate) const MIN_PERIODS_PER_TILE: f64 = 4.0;

/// The tile sizes of the coarse ladder, from `LADDER_MIN_PX` up to the
/// largest smooth size that fits, about `LADDER_RATIO` apart. The largest
/// size that fits ends the ladder when it is at least `LAST_RUNG_RATIO`
/// above the previous rung: otherwise the largest periods the image can hold
/// (which need the largest tiles for `MIN_PERIODS_PER_TILE` periods) would
/// have no larger neighbour to reproduce them.
pub(crate) fn ladder_sizes(sizes: &[usize]) -> Vec<usize> {
    let mut out: Vec<usize> = Vec::new();
    for &s in sizes.iter().filter(|&&s| s >= LADDER_MIN_PX) {
        match out.last() {
            Some(&l) if (s as f64) < (l as f64) * LADDER_RATIO * 0.99 => {}
            _ => out.push(s),
        }
    }
    if let (Some(&last), Some(&largest)) = (out.last(), sizes.last()) {
        if largest as f64 >= last as f64 * LAST_RUNG_RATIO {
            out.push(largest);
        }
    }
    out
}

/// Smallest ratio of the last rung to the one before it: periods are read
/// at 4 bins or more (`MIN_PERIODS_PER_TILE`), where a tile 25 % larger
/// moves a resolution artefact by at least one bin, so the two rungs still
/// differ in resolution.
pub(crate) const LAST_RUNG_RATIO: f64 = 1.25;

/// Most tiles analysed at one scale of the ladder.
pub(crate) const LADDER_MAX_TILES: usize = 64;

/// The tiles of every size of the ladder (the sizes from [`ladder_sizes`]).
pub(crate) fn ladder_tiles(
    img: &Prepared,
    sizes: &[usize],
    params: &FftParams,
) -> Vec<(usize, Vec<TileResult>)> {
    let (w, h) = (img.image.width, img.image.height);
    let cap = params.coarse_window_max_px.max(LADDER_MIN_PX);
    let capped: Vec<usize> = sizes.iter().copied().filter(|&s| s <= cap).collect();
    let rungs = ladder_sizes(&capped);
    let mut out: Vec<(usize, Vec<TileResult>)> = Vec::with_capacity(rungs.len());
    for (i, &n) in rungs.iter().enumerate() {
        // The short last rung can only pair with the rung before it on a
        // period that rung supports and that is too large for the regular
        // rungs (`ladder_candidates`); when there is none its tiles, the
        // largest of all, cannot change the result and are not analysed.
        let short_last = i + 1 == rungs.len()
            && i >= 1
            && (n as f64) < rungs[i - 1] as f64 * LADDER_RATIO * 0.99;
        if short_last {
            let prev = scale_stat(rungs[i - 1], &out[i - 1].1, params);
            let p = prev.period_px;
            let useful = p.is_finite()
                && prev.support >= WEAK_SUPPORT
                && (prev.n as f64) >= MIN_PERIODS_PER_TILE * p
                && (i < 3 || (rungs[i - 3] as f64) < MIN_PERIODS_PER_TILE * p);
            if !useful {
                break;
            }
        }
        let count = |stride: usize| origins(w, n, stride).len() * origins(h, n, stride).len();
        let mut stride = if count(n) >= 9 { n } else { (n / 2).max(1) };
        // A scale's support is a fraction of its tiles; about 64 tiles
        // spread evenly over the field estimate it to a few per cent, so
        // the small scales need not cover every pixel.
        while count(stride) > LADDER_MAX_TILES {
            stride += stride / 2;
        }
        out.push((n, analyse_tiles_with(img, n, stride, params, true)));
    }
    out
}

/// Weighted median period of a scale's reliable tiles and the fraction of
/// its tiles that agree with it.
pub(crate) fn scale_stat(n: usize, tiles: &[TileResult], params: &FftParams) -> ScaleStat {
    let good: Vec<&TileResult> = tiles
        .iter()
        .filter(|t| t.quality >= params.min_quality && t.spacing_px.is_finite())
        .collect();
    let period = stats::weighted_median(
        &good.iter().map(|t| t.spacing_px).collect::<Vec<_>>(),
        &good.iter().map(|t| t.quality.ln()).collect::<Vec<_>>(),
    )
    .unwrap_or(f64::NAN);
    let agree = good
        .iter()
        .filter(|t| (t.spacing_px / period - 1.0).abs() <= LADDER_AGREEMENT)
        .count();
    ScaleStat {
        n,
        period_px: period,
        support: if tiles.is_empty() {
            0.0
        } else {
            agree as f64 / tiles.len() as f64
        },
        n_tiles: tiles.len(),
    }
}

/// The period that sets the tile size: the finest period that two
/// neighbouring scales of the ladder agree on (within `LADDER_AGREEMENT`),
/// one of them supporting it with at least `MIN_SUPPORT` of its tiles and the
/// other with at least a tenth, the smaller one's tiles spanning at least
/// `MIN_PERIODS_PER_TILE` periods.
///
/// A real period stays put when the tile grows, while noise peaks and the
/// window's leakage lobes move with the tile's resolution, so reproduction
/// across scales separates them. (The side lobes of an arm's own form factor
/// stay put too; the ladder's tiles keep them out, see `MAX_RAY_EXCESS`.)
/// The finest such period is taken because secondary arms are finer than the primary spacing
/// (the trunk spacing is also reproduced, at the larger scales). Larger tiles
/// average more periods, so the larger scale's estimate is returned.
#[cfg(test)]
pub fn ladder_period(ladder: &[ScaleStat], _params: &FftParams) -> Option<f64> {
    ladder_candidates(ladder).first().map(|c| c.0)
}

/// Every period reproduced by a pair of neighbouring scales (see
/// `ladder_period`), finest first: (period at the larger scale, index of the
/// larger scale).
pub(crate) fn ladder_candidates(ladder: &[ScaleStat]) -> Vec<(f64, usize)> {
    let supported = |s: &ScaleStat, min: f64| s.period_px.is_finite() && s.support >= min;
    let same = |a: f64, b: f64| (a / b - 1.0).abs() <= LADDER_AGREEMENT;
    let weak = WEAK_SUPPORT;
    let mut out: Vec<(f64, usize)> = (1..ladder.len())
        .filter(|&i| {
            let (a, b) = (&ladder[i - 1], &ladder[i]);
            ((supported(a, MIN_SUPPORT) && supported(b, weak))
                || (supported(a, weak) && supported(b, MIN_SUPPORT)))
                && (a.n as f64) >= MIN_PERIODS_PER_TILE * a.period_px
                && same(b.period_px, a.period_px)
                && (!short_last_rung(ladder, i)
                    || i < 3
                    || (ladder[i - 3].n as f64) < MIN_PERIODS_PER_TILE * a.period_px)
        })
        .map(|i| (ladder[i].period_px, i))
        .collect();
    out.sort_by(|a, b| a.0.total_cmp(&b.0));
    out
}

/// Whether scale i is the short last rung of the ladder (closer than
/// `LADDER_RATIO` to the one before, see `ladder_sizes`). It is there for the
/// largest periods, which at most one pair of regular rungs holds
/// `MIN_PERIODS_PER_TILE` times (the rung three below the last is too small
/// for them), and pairs only on those: finer periods have had two or more
/// regular pairs to be reproduced on, and the few, largely overlapping tiles
/// of the last two rungs would otherwise let a handful of tiles "reproduce" a
/// fine period (a harmonic, or noise near the search floor, where periods
/// crowd) that the smaller scales, with many more tiles, do not support.
pub(crate) fn short_last_rung(ladder: &[ScaleStat], i: usize) -> bool {
    i + 1 == ladder.len()
        && i >= 2
        && (ladder[i].n as f64) < ladder[i - 1].n as f64 * LADDER_RATIO * 0.99
}

/// Largest median axial angle between a fine period's tiles and the coarser
/// period's tiles that contain them for the fine one to count as parallel:
/// 45 degrees, midway between parallel and perpendicular.
pub(crate) const PARALLEL_DEG: f64 = 45.0;

/// The ladder period, with a check on direction: the finest reproduced
/// period is dropped when, where a coarser reproduced period is seen, it
/// repeats in the same direction as that coarser one.
///
/// Secondary arms repeat along their trunk, while the primary spacing repeats
/// across the trunks, perpendicular to it; a finer period parallel to a
/// coarser one at the same place is instead a feature of the same rows (a
/// harmonic whose fundamental the small tile could not resolve, or a side
/// lobe of the arms' width), not a finer spacing. Without tiles to compare
/// (no coarser period, or none overlapping), the finest period stands.
pub(crate) fn resolve_ladder(
    ladder: &[ScaleStat],
    scales: &[(usize, Vec<TileResult>)],
    params: &FftParams,
) -> Option<f64> {
    let cands = ladder_candidates(ladder);
    let agreeing = |i: usize, p: f64| -> Vec<&TileResult> {
        scales.get(i).map_or(vec![], |(_, tiles)| {
            tiles
                .iter()
                .filter(|t| {
                    t.quality >= params.min_quality
                        && (t.spacing_px / p - 1.0).abs() <= LADDER_AGREEMENT
                })
                .collect()
        })
    };
    'fine: for (k, &(p, i)) in cands.iter().enumerate() {
        let fine = agreeing(i, p);
        for &(q, j) in &cands[k + 1..] {
            // A harmonic or a side lobe lies at least twice as fine as what
            // it belongs to (side lobes of arms up to 0.6 of the spacing wide:
            // 2.4 times), so only coarser periods from twice the fine one,
            // within the agreement, can explain it away.
            if q < 2.0 * p / (1.0 + LADDER_AGREEMENT) || ladder[j].n < ladder[i].n {
                continue;
            }
            let reach = (ladder[j].n - ladder[i].n) as f64 / 2.0;
            let mut diffs: Vec<f64> = Vec::new();
            for big in agreeing(j, q) {
                for small in &fine {
                    if (small.cx_px - big.cx_px).abs() <= reach
                        && (small.cy_px - big.cy_px).abs() <= reach
                    {
                        diffs.push(axial_difference(small.dir_deg, big.dir_deg));
                    }
                }
            }
            if diffs.len() >= 3 && stats::median(&diffs).is_some_and(|m| m < PARALLEL_DEG) {
                continue 'fine;
            }
        }
        return Some(p);
    }
    None
}
