//! SDAS by FFT periodicity.
//!
//! Rows of secondary arms are periodic along their primary trunk, so the power
//! spectrum of a window over them peaks at the spatial frequency 1/lambda2 in
//! the trunk's direction. The image is cut into overlapping square tiles of
//! about `periods_per_tile` periods; each tile gives a spacing, a direction
//! and a quality, and the image's value is a robust aggregate of the reliable
//! tiles that agree with the coarse period.
//!
//! The coarse period comes from a ladder of tile sizes (32, 48, 72, ..., and
//! the largest that fits as a last rung for the largest periods): the
//! finest period on which a quarter of a scale's tiles agree and which the
//! next larger scale reproduces (`ladder_period`), unless it repeats parallel
//! to a coarser reproduced period at the same place (`resolve_ladder`: then
//! it is a harmonic or side lobe of the same rows). Noise peaks move with the
//! tile's resolution, and the primary spacing is coarser than the secondary
//! one and perpendicular to it; an image in which no period is reproduced
//! gets no value. The side lobes of an arm's own form factor (at about
//! 1.43 / width) do not move with the tile, and in tiles without a dominant
//! orientation (equiaxed fields) they outshine the fundamental in
//! prominence; there the ladder keeps a peak only when nothing much
//! stronger lies on its own ray at lower frequency (`MAX_RAY_EXCESS`).
//! Fine-pass tiles more than a factor sqrt 2 off the coarse period give no
//! value, and an image whose used tiles mostly also repeat
//! at twice the measured spacing gets none (that spacing would be a second
//! harmonic, see `HARMONIC_RATIO`).
//!
//! Peak choice in a tile, in order:
//! 1. candidates are local maxima of the 3x3-smoothed power spectrum with
//!    periods between `min_period_px` and half the tile, with their
//!    prominence over the larger of their frequency ring's median and the
//!    floor along their ray;
//! 2. when the spectrum has a dominant orientation, only candidates aligned
//!    with it are considered (secondary arms carry most of the edges);
//! 3. among reliable (prominence >= `min_quality`), narrow (relative
//!    half-power width <= 0.5: at least three repeats) candidates, the most
//!    powerful is taken;
//! 4. if a candidate lies near 1/k of its frequency vector, it was a harmonic
//!    and the fundamental is taken.
//!
//! The quality of a tile is the chosen peak's prominence. Under white noise
//! the smoothed spectrum's maximum prominence rarely exceeds 3, so the default
//! threshold of 6 keeps tiles whose peak noise alone would not explain.

use super::spectrum::{hann_peak_offset, smooth_sizes, SpectrumAnalyser};
use crate::preprocess::Prepared;
use crate::stats;
use rayon::prelude::*;

/// Parameters of the FFT method.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FftParams {
    /// Shortest period searched, in pixels.
    pub min_period_px: f64,
    /// Target number of periods across one tile.
    pub periods_per_tile: f64,
    /// Smallest peak prominence for a tile to count.
    pub min_quality: f64,
    /// Largest masked fraction of a tile for it to be analysed.
    pub max_masked_fraction: f64,
    /// Largest tile side of the first (coarse) pass's scale ladder, in pixels.
    pub coarse_window_max_px: usize,
}

impl Default for FftParams {
    fn default() -> Self {
        Self {
            min_period_px: 3.0,
            periods_per_tile: 6.0,
            min_quality: 6.0,
            max_masked_fraction: 0.25,
            coarse_window_max_px: 512,
        }
    }
}

/// One analysed tile.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct TileResult {
    /// Tile centre, pixels from the image's top-left corner.
    pub cx_px: f64,
    pub cy_px: f64,
    pub spacing_px: f64,
    /// Direction along which the spacing repeats (the trunk direction for a
    /// row of secondary arms), degrees counter-clockwise from the image's
    /// +x axis with y pointing up, in [0, 180).
    pub dir_deg: f64,
    pub quality: f64,
    /// Whether the tile entered the aggregate.
    pub used: bool,
    /// Smoothed power at half the chosen peak's frequency vector over the
    /// median of its frequency ring (NaN without a peak): how strongly the
    /// tile repeats at twice the spacing it gave, in the same direction.
    pub half_ratio: f64,
}

/// The method's result for one image, in pixels.
#[derive(Clone, Debug, PartialEq)]
pub struct FftOutcome {
    pub value_px: Option<f64>,
    pub ci95_px: Option<[f64; 2]>,
    /// Robust standard deviation of the used tiles' spacings.
    pub spread_px: Option<f64>,
    pub n_tiles_used: usize,
    /// Number of tiles whose spectra were analysed.
    pub n_tiles_analysed: usize,
    pub window_px: usize,
    pub orientation_deg: Option<f64>,
    /// Axial coherence of the used tiles' directions, 0 (all ways) to 1 (one way).
    pub orientation_coherence: Option<f64>,
    pub tiles: Vec<TileResult>,
    /// Why there is no value, when there is none.
    pub reason: Option<String>,
}

impl FftOutcome {
    fn none(reason: String, window_px: usize, tiles: Vec<TileResult>, n: usize) -> Self {
        Self {
            value_px: None,
            ci95_px: None,
            spread_px: None,
            n_tiles_used: 0,
            n_tiles_analysed: n,
            window_px,
            orientation_deg: None,
            orientation_coherence: None,
            tiles,
            reason: Some(reason),
        }
    }
}

impl FftOutcome {
    /// The outcome in the shape every method shares. Warnings: a value from
    /// tiles spanning fewer than three periods (a spectral peak of fewer
    /// periods is broad and its position shifts with the window), or from
    /// fewer than four reliable tiles (the robust median and its interval
    /// rest on a handful of overlapping tiles).
    pub fn into_outcome(self) -> super::Outcome {
        use super::{Detail, Local, Method, Outcome};
        use crate::error::Warning;
        use crate::units::Pixels;
        let mut warnings = Vec::new();
        if let Some(v) = self.value_px {
            let periods = self.window_px as f64 / v;
            if periods < 3.0 {
                warnings.push(Warning::new(
                    "fft.small-field",
                    format!(
                        "fft: the tiles span only {periods:.1} periods; the image is small for this spacing"
                    ),
                ));
            }
            if self.n_tiles_used < 4 {
                warnings.push(Warning::new(
                    "fft.few-tiles",
                    format!(
                        "fft: only {} reliable tile(s); the value rests on little data",
                        self.n_tiles_used
                    ),
                ));
            }
        }
        let local = self
            .tiles
            .iter()
            .filter(|t| t.spacing_px.is_finite())
            .map(|t| Local {
                x: Pixels(t.cx_px),
                y: Pixels(t.cy_px),
                spacing: Pixels(t.spacing_px),
                dir_deg: t.dir_deg,
                quality: Some(t.quality),
                used: t.used,
            })
            .collect();
        Outcome {
            method: Method::Fft,
            value: self.value_px.map(Pixels),
            ci95: self.ci95_px.map(|[a, b]| [Pixels(a), Pixels(b)]),
            n: self.n_tiles_used,
            spread: self.spread_px.map(Pixels),
            reason: self.reason.clone(),
            warnings,
            local,
            for_target: None,
            detail: Detail::Fft(self),
        }
    }
}

/// A spectral peak.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Peak {
    /// Frequency vector in cycles per pixel, image axes (y down).
    pub fx: f64,
    pub fy: f64,
    pub prominence: f64,
    /// Smoothed power at the peak.
    pub power: f64,
}

impl Peak {
    pub fn freq(&self) -> f64 {
        self.fx.hypot(self.fy)
    }
    pub fn period_px(&self) -> f64 {
        1.0 / self.freq()
    }
    /// Direction in degrees, counter-clockwise from +x with y up, in [0, 180).
    pub fn dir_deg(&self) -> f64 {
        (-self.fy).atan2(self.fx).to_degrees().rem_euclid(180.0)
    }
}

/// Measures the secondary arm spacing of a prepared image.
pub fn measure(img: &Prepared, params: &FftParams) -> FftOutcome {
    let (w, h) = (img.image.width, img.image.height);
    let side = w.min(h);
    let sizes = smooth_sizes(side);
    let Some(&largest) = sizes.last() else {
        return FftOutcome::none("image too small for spectral analysis".into(), 0, vec![], 0);
    };
    if img.contrast <= 1e-6 {
        return FftOutcome::none(
            "no reliable periodicity: the image has no contrast".into(),
            0,
            vec![],
            0,
        );
    }

    // Coarse pass: the period that tiles reproduce across a ladder of scales
    // sets the tile size (see `ladder_period`).
    let scales = ladder_tiles(img, &sizes, params);
    let ladder: Vec<ScaleStat> = scales
        .iter()
        .map(|(n, t)| scale_stat(*n, t, params))
        .collect();
    let coarse_n = ladder.last().map_or(largest, |s| s.n);
    let Some(coarse_period) = resolve_ladder(&ladder, &scales, params) else {
        let analysed = ladder.iter().map(|s| s.n_tiles).sum();
        return FftOutcome::none(
            "no reliable periodicity: no spectral period is reproduced by the tiles across scales"
                .into(),
            coarse_n,
            vec![],
            analysed,
        );
    };

    // Fine pass: tiles of about `periods_per_tile` periods, half overlapping.
    let target = params.periods_per_tile * coarse_period;
    let n = sizes
        .iter()
        .copied()
        .filter(|&s| s >= 32)
        .min_by(|a, b| {
            ((*a as f64) - target)
                .abs()
                .total_cmp(&((*b as f64) - target).abs())
        })
        .unwrap_or(largest);
    let mut tiles = analyse_tiles(img, n, (n / 2).max(1), params);
    for t in tiles.iter_mut() {
        if t.spacing_px.is_finite() && !compatible(t.spacing_px, coarse_period) {
            t.quality = 0.0;
        }
    }
    let out = aggregate(tiles, n, params);
    // A spacing at which most used tiles also repeat at twice its length is
    // the second harmonic of rows whose fundamental is weaker (see
    // `HARMONIC_RATIO`); half the true spacing is not reported.
    match out.value_px.map(|_| half_spacing_ratio(&out.tiles)) {
        Some(Some(r)) if r >= HARMONIC_RATIO => {
            let analysed = out.n_tiles_analysed;
            let mut tiles = out.tiles;
            for t in tiles.iter_mut() {
                t.used = false;
            }
            FftOutcome::none(
                format!(
                    "no reliable periodicity: most tiles also repeat at twice the spacing they give \
                     (median power there {r:.1} x its ring's median), so that spacing may be the \
                     second harmonic of a longer one"
                ),
                n,
                tiles,
                analysed,
            )
        }
        _ => out,
    }
}

/// Median, over the tiles used in the aggregate, of the power at half each
/// tile's peak frequency (twice its spacing, same direction) relative to its
/// frequency ring's median; `None` without such tiles.
fn half_spacing_ratio(tiles: &[TileResult]) -> Option<f64> {
    let r: Vec<f64> = tiles
        .iter()
        .filter(|t| t.used && t.half_ratio.is_finite())
        .map(|t| t.half_ratio)
        .collect();
    stats::median(&r)
}

/// Median power at twice the measured spacing, relative to its frequency
/// ring's median, above which the measured spacing is taken for a second
/// harmonic. A bin with nothing of its own sits at about its ring's median
/// (ratio 1; streaks of straight edges along the same direction raise it a
/// little); a ratio of 2 is what a spectral peak needs to become a
/// candidate at all, so when most used tiles reach it they repeat at twice
/// the spacing too: the rows' fundamental is there, weaker than its second
/// harmonic, and the measured spacing would be half the true one.
const HARMONIC_RATIO: f64 = 2.0;

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
const LADDER_RATIO: f64 = 1.5;

/// Smallest tile of the ladder: below 32 px a tile cannot hold several
/// periods of anything above the 3 px search floor with a resolved peak.
const LADDER_MIN_PX: usize = 32;

/// Relative tolerance for two periods to count as the same: the spacing of
/// secondary arms itself scatters by 10-20 % along a trunk, and a tile of 4-6
/// periods locates its peak to about a quarter bin, i.e. 4-6 % (common
/// practice, no single source).
const LADDER_AGREEMENT: f64 = 0.15;

/// Smallest fraction of a scale's tiles that must agree on one period for
/// the scale to support it. Noise alone makes about 1-3 % of tiles reliable
/// (quality >= 6) and scatters their periods over the whole band, so a
/// quarter of the tiles agreeing within 15 % is far beyond chance; it still
/// allows the dendrites to cover only part of the field.
const MIN_SUPPORT: f64 = 0.25;

/// Support with which a scale may confirm its neighbour's period: one scale
/// of a pair must carry the full `MIN_SUPPORT`; its neighbour, which only
/// has to confirm the period, a tenth of its tiles (noise gives 1-3 % of
/// tiles, scattered over the whole band, so even that is several times what
/// chance gives, and at the same period as the other scale).
const WEAK_SUPPORT: f64 = 0.1;

/// Fewest periods a tile must span for its period to be supported at that
/// scale: a Hann window resolves a peak from the zero-frequency leakage (main
/// lobe half-width 2 bins) from about 4 bins on (Harris 1978).
const MIN_PERIODS_PER_TILE: f64 = 4.0;

/// The tile sizes of the coarse ladder, from `LADDER_MIN_PX` up to the
/// largest smooth size that fits, about `LADDER_RATIO` apart. The largest
/// size that fits ends the ladder when it is at least `LAST_RUNG_RATIO`
/// above the previous rung: otherwise the largest periods the image can hold
/// (which need the largest tiles for `MIN_PERIODS_PER_TILE` periods) would
/// have no larger neighbour to reproduce them.
fn ladder_sizes(sizes: &[usize]) -> Vec<usize> {
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
const LAST_RUNG_RATIO: f64 = 1.25;

/// Analyses the image at every size of the ladder. Tiles do not overlap
/// unless that leaves fewer than 9 of them (then they half overlap, so a
/// support fraction still rests on several tiles), which keeps the cost of
/// each scale near that of one pass over the image.
pub fn scale_ladder(img: &Prepared, sizes: &[usize], params: &FftParams) -> Vec<ScaleStat> {
    ladder_tiles(img, sizes, params)
        .iter()
        .map(|(n, t)| scale_stat(*n, t, params))
        .collect()
}

/// Most tiles analysed at one scale of the ladder.
const LADDER_MAX_TILES: usize = 64;

/// The tiles of every size of the ladder (see `scale_ladder`).
fn ladder_tiles(
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
fn scale_stat(n: usize, tiles: &[TileResult], params: &FftParams) -> ScaleStat {
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
pub fn ladder_period(ladder: &[ScaleStat], _params: &FftParams) -> Option<f64> {
    ladder_candidates(ladder).first().map(|c| c.0)
}

/// Every period reproduced by a pair of neighbouring scales (see
/// `ladder_period`), finest first: (period at the larger scale, index of the
/// larger scale).
fn ladder_candidates(ladder: &[ScaleStat]) -> Vec<(f64, usize)> {
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
fn short_last_rung(ladder: &[ScaleStat], i: usize) -> bool {
    i + 1 == ladder.len()
        && i >= 2
        && (ladder[i].n as f64) < ladder[i - 1].n as f64 * LADDER_RATIO * 0.99
}

/// Largest median axial angle between a fine period's tiles and the coarser
/// period's tiles that contain them for the fine one to count as parallel:
/// 45 degrees, midway between parallel and perpendicular.
const PARALLEL_DEG: f64 = 45.0;

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
fn resolve_ladder(
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

/// Whether a tile's period is compatible with the period reproduced across
/// scales: within a factor sqrt 2, the geometric midpoint between that period
/// and its second harmonic or sub-harmonic. A tile outside it has locked on a
/// harmonic, on the primary spacing or on texture, not on the arms the other
/// scales agree on, so it gives no value.
fn compatible(spacing: f64, period: f64) -> bool {
    (spacing / period).ln().abs() <= std::f64::consts::SQRT_2.ln()
}

/// Tile origins along one axis: evenly spread, about `stride` apart, covering
/// [0, len) with tiles of size n.
fn origins(len: usize, n: usize, stride: usize) -> Vec<usize> {
    if len < n {
        return vec![];
    }
    let span = len - n;
    let count = span.div_ceil(stride) + 1;
    if count == 1 {
        return vec![span / 2];
    }
    (0..count)
        .map(|i| ((i * span) as f64 / (count - 1) as f64).round() as usize)
        .collect()
}

/// Analyses every tile of size n on a grid of about `stride` spacing.
pub fn analyse_tiles(
    img: &Prepared,
    n: usize,
    stride: usize,
    params: &FftParams,
) -> Vec<TileResult> {
    analyse_tiles_with(img, n, stride, params, false)
}

/// `analyse_tiles`; with `lone_peaks_only` a tile's peak must also be the
/// strongest feature of its own ray (see `choose_peak_with`).
fn analyse_tiles_with(
    img: &Prepared,
    n: usize,
    stride: usize,
    params: &FftParams,
    lone_peaks_only: bool,
) -> Vec<TileResult> {
    let (w, h) = (img.image.width, img.image.height);
    let xs = origins(w, n, stride);
    let ys = origins(h, n, stride);
    let grid: Vec<(usize, usize)> = ys
        .iter()
        .flat_map(|&y| xs.iter().map(move |&x| (x, y)))
        .filter(|&(x, y)| masked_fraction(img, x, y, n) <= params.max_masked_fraction)
        .collect();
    // Contiguous runs of tiles share one FFT plan, window and peak-search
    // geometry; each tile's result depends on that tile alone, so the
    // split (which follows the thread count) does not change any result.
    let run = grid.len().div_ceil(4 * rayon::current_num_threads()).max(1);
    grid.par_chunks(run)
        .flat_map_iter(|chunk| {
            let mut an = SpectrumAnalyser::new(n);
            let mut search = CandidateSearch::new(n, params.min_period_px);
            let mut buf = Vec::new();
            chunk
                .iter()
                .map(|&(x, y)| {
                    an.power(&img.image.data, w, x, y, &mut buf);
                    let peak = choose_peak_with(&mut search, &buf, params, lone_peaks_only);
                    let half_ratio =
                        peak.map_or(f64::NAN, |p| search.ratio_at(p.fx / 2.0, p.fy / 2.0));
                    let (cx, cy) = (x as f64 + n as f64 / 2.0, y as f64 + n as f64 / 2.0);
                    match peak {
                        Some(p) => TileResult {
                            cx_px: cx,
                            cy_px: cy,
                            spacing_px: p.period_px(),
                            dir_deg: p.dir_deg(),
                            quality: p.prominence,
                            used: false,
                            half_ratio,
                        },
                        None => TileResult {
                            cx_px: cx,
                            cy_px: cy,
                            spacing_px: f64::NAN,
                            dir_deg: f64::NAN,
                            quality: 0.0,
                            used: false,
                            half_ratio,
                        },
                    }
                })
                .collect::<Vec<_>>()
        })
        .collect()
}

fn masked_fraction(img: &Prepared, x0: usize, y0: usize, n: usize) -> f64 {
    let Some(mask) = &img.mask else { return 0.0 };
    let w = img.image.width;
    let count: usize = (y0..y0 + n)
        .map(|y| {
            mask[y * w + x0..y * w + x0 + n]
                .iter()
                .filter(|m| **m)
                .count()
        })
        .sum();
    count as f64 / (n * n) as f64
}

/// Finds the spectral peaks of a power spectrum, keeps those along the
/// spectrum's dominant orientation when it has one, and returns the
/// fundamental of the strongest; `None` when there is no candidate at all.
pub fn choose_peak(power: &[f64], n: usize, params: &FftParams) -> Option<Peak> {
    choose_peak_with(
        &mut CandidateSearch::new(n, params.min_period_px),
        power,
        params,
        false,
    )
}

/// `choose_peak` with the search geometry and buffers of the tile size.
fn choose_peak_with(
    search: &mut CandidateSearch,
    power: &[f64],
    params: &FftParams,
    lone_peaks_only: bool,
) -> Option<Peak> {
    let n = search.n;
    let (cands, orient) = search.run(power);
    let aligned = |p: &&Peak| {
        orient.anisotropy < MIN_ANISOTROPY
            || axial_difference(p.dir_deg(), orient.dir_deg) <= MAX_OFF_AXIS_DEG
    };
    let periodic = |p: &&Peak| relative_width(power, n, p) <= MAX_RELATIVE_WIDTH;
    // With `lone_peaks_only` (the ladder's tiles), a peak of a tile without
    // a dominant orientation must also be the strongest feature of its own
    // ray (`MAX_RAY_EXCESS`): not the side lobe of a single feature or the
    // harmonic of a row. Only there does the ring background misjudge
    // prominence (arms of every orientation fill the fundamental's ring);
    // a tile with a dominant orientation keeps its fundamental prominent and
    // its harmonics are read through `fundamental_of`. The fine pass needs no
    // such test: it only uses tiles within a factor sqrt 2 of the ladder's
    // period, which excludes side lobes (at about 2.9 times the arms'
    // frequency for arms half a period wide) and harmonics.
    let isotropic = orient.anisotropy < MIN_ANISOTROPY;
    let own_ray =
        |p: &&Peak| !(lone_peaks_only && isotropic) || search.ray_excess_below(p) < MAX_RAY_EXCESS;
    // Among reliable aligned peaks the one of most power: a row of arms puts
    // most of its power in its fundamental, while the ring background, which
    // sets prominence, falls steeply with frequency and would favour the
    // side lobes of the arms' width.
    let first = cands
        .iter()
        .filter(|p| p.prominence >= params.min_quality)
        .filter(aligned)
        .filter(periodic)
        .filter(own_ray)
        .max_by(|a, b| a.power.total_cmp(&b.power))
        .or_else(|| cands.iter().filter(own_ray).find(periodic))
        .copied()?;
    Some(fundamental_of(first, &cands, n, params))
}

/// Largest ratio of the strongest smoothed power on a peak's own ray, at
/// lower frequencies (from 3 bins, past the window's zero-frequency
/// leakage, to 1/1.5 of the peak's frequency), to the peak's smoothed power,
/// for the peak to be taken for a fundamental.
///
/// A fundamental is the strongest feature of its ray beyond that leakage.
/// A side lobe of a single feature's form factor is not: the first side lobe
/// of a bar of width w lies at 1.43 / w, 13.3 dB (a factor 21) below the
/// main lobe at lower frequency on the same ray (Harris 1978, rectangular
/// window); equiaxed tiles, where arms of several orientations fill the
/// fundamental's frequency ring, give such side lobes the larger prominence.
/// Nor is a harmonic of a row of bars of duty d, a factor 1 / cos^2(pi d)
/// below its fundamental. Chance alone: two smoothed bins (3 x 3 periodogram
/// bins, about 18 degrees of freedom each) of equal expected power differ by
/// more than a factor 4.6 with probability 0.1 % (F(18, 18) distribution).
/// The limit is the geometric midpoint of that chance bound and the side
/// lobe's 21, as elsewhere in this module for two bounds (a factor 10).
/// Disclosure: the two bounds themselves (5 and 20), a shorter stretch of
/// ray (from 1/3.5 of the peak's frequency), and the test on every tile
/// (also anisotropic ones, also in the fine pass) were run on the synthetic
/// sets too. The bounds lost more true tiles (5) or caught fewer side lobes
/// (20); the shorter stretch missed the side lobes of wide spacings; the
/// test on every tile removed the harmonic readings that `fundamental_of`
/// turns into correct values on etched columnar fields.
const MAX_RAY_EXCESS: f64 = 10.0;

/// Largest relative half-power width (full width / frequency, radially) of a
/// spectral peak for it to count as a period. N periods under a Hann window
/// give a peak of half-power full width 1.44 bins (Harris 1978), i.e. a
/// relative width 1.44 / N: at most 0.48 once a tile holds three periods,
/// the fewest that make a repetition. A tile holding fewer repeats, or a
/// spacing too irregular to be one period, gives a broader peak, as does the
/// main lobe of a single feature's form factor (its side lobes are narrower;
/// `resolve_ladder` deals with those).
const MAX_RELATIVE_WIDTH: f64 = 0.5;

/// `x.floor()` for |x| < 2^53, exactly, without the library call that a
/// baseline x86-64 build makes of `f64::floor` (the rounding instruction
/// needs SSE4.1); spectra are sampled along rays often enough for the call
/// to show.
fn floor(x: f64) -> f64 {
    let t = x as i64 as f64;
    if t > x {
        t - 1.0
    } else {
        t
    }
}

/// Bilinear interpolation of an n x n grid that repeats with period n in both
/// directions (a DFT spectrum), at (x, y) in bins.
fn bilinear_periodic(grid: &[f64], n: usize, x: f64, y: f64) -> f64 {
    let ni = n as i64;
    let (x0, y0) = (floor(x), floor(y));
    let (fx, fy) = (x - x0, y - y0);
    // Wrapped once per axis, by an integer division only when the index is
    // outside the grid; the next index wraps by comparison.
    let wrap = |a: i64| {
        if (0..ni).contains(&a) {
            a as usize
        } else {
            a.rem_euclid(ni) as usize
        }
    };
    let (xa, ya) = (wrap(x0 as i64), wrap(y0 as i64));
    let next = |a: usize| if a + 1 == n { 0 } else { a + 1 };
    let (xb, yb) = (next(xa), next(ya));
    let g = |a: usize, b: usize| grid[b * n + a];
    g(xa, ya) * (1.0 - fx) * (1.0 - fy)
        + g(xb, ya) * fx * (1.0 - fy)
        + g(xa, yb) * (1.0 - fx) * fy
        + g(xb, yb) * fx * fy
}

/// Relative radial half-power width of a peak: the distance, along the ray
/// from the origin through the peak, between the points where the raw power
/// (bilinearly interpolated, sampled every quarter bin) first falls to half
/// the peak's power on either side, divided by the peak's radius. A side
/// that never falls to half (before the origin or the Nyquist edge) extends
/// to that limit.
pub fn relative_width(power: &[f64], n: usize, peak: &Peak) -> f64 {
    let (u, v) = (peak.fx * n as f64, peak.fy * n as f64);
    let r = u.hypot(v);
    if r <= 0.0 {
        return f64::INFINITY;
    }
    let (cu, cv) = (u / r, v / r);
    let at = |t: f64| bilinear_periodic(power, n, t * cu, t * cv);
    let half = 0.5 * at(r);
    let step = 0.25;
    let mut lo = r;
    while lo > 0.0 && at(lo) > half {
        lo -= step;
    }
    let edge = n as f64 / 2.0 - 1.0;
    let mut hi = r;
    while hi < edge && at(hi) > half {
        hi += step;
    }
    (hi.min(edge) - lo.max(0.0)) / r
}

/// The dominant orientation of a spectrum's excess power (power above its
/// ring background), from the second-moment tensor of the excess over the
/// searched band: the spectral form of the structure tensor. Secondary arms
/// carry most of a columnar dendrite's edges, so this direction is the one
/// along which they repeat (the trunk direction); the primary spacing lies
/// across it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Orientation {
    /// Degrees counter-clockwise from +x with y up, in [0, 180).
    pub dir_deg: f64,
    /// (largest - smallest eigenvalue) / (sum): 0 isotropic, 1 one direction.
    pub anisotropy: f64,
}

/// Below this anisotropy a spectrum has no dominant orientation.
const MIN_ANISOTROPY: f64 = 0.2;

/// Largest angle between a peak and the dominant orientation for the peak
/// to count as aligned with it.
const MAX_OFF_AXIS_DEG: f64 = 30.0;

/// Lowest smoothed power along the ray from the origin through (u, v),
/// between r / 2 and 2 r, sampled every half bin by bilinear interpolation.
/// Between a periodic peak and its neighbours on the ray (its harmonics, or
/// the low frequencies) the power falls to the floor; along the streak that
/// long straight edges (trunks, grain boundaries) draw across a spectrum it
/// does not, so such a streak gets no prominence.
///
/// The search stops at the first sample at or below `stop` (the caller's
/// other background, which the floor only matters above) and returns it: the
/// larger of `stop` and the result is then the same as with the full floor.
fn ray_floor(smooth: &[f64], n: usize, u: i64, v: i64, stop: f64) -> f64 {
    let r = ((u * u + v * v) as f64).sqrt();
    let (cu, cv) = (u as f64 / r, v as f64 / r);
    let at = |x: f64, y: f64| bilinear_periodic(smooth, n, x, y);
    let (lo, hi) = (r / 2.0, (2.0 * r).min(n as f64 / 2.0 - 1.0));
    let steps = ((hi - lo) / 0.5).ceil().max(1.0) as usize;
    let mut floor = f64::INFINITY;
    for i in 0..=steps {
        let t = lo + (hi - lo) * i as f64 / steps as f64;
        floor = floor.min(at(t * cu, t * cv));
        if floor <= stop {
            break;
        }
    }
    floor
}

/// Most candidates kept per spectrum.
const MAX_CANDIDATES: usize = 64;

/// Highest harmonic order searched below a peak.
const MAX_HARMONIC: usize = 32;

/// The fundamental of `peak`: the lowest-frequency candidate c such that
/// `peak` lies at k c (k = 2..32, either sign), within (0.75 + k/2) bins, and
/// whose own prominence is at least half the quality threshold (the harmonic
/// relation is itself evidence). Without one, `peak` is its own fundamental.
/// The result is peak / k, with the peak's prominence.
fn fundamental_of(peak: Peak, cands: &[Peak], n: usize, params: &FftParams) -> Peak {
    let bin = 1.0 / n as f64;
    let mut found: Option<usize> = None;
    for c in cands {
        if c.prominence < 0.5 * params.min_quality || c.freq() >= 0.75 * peak.freq() {
            continue;
        }
        for k in 2..=MAX_HARMONIC {
            let kf = k as f64;
            // c is located to about half a bin, so k c to about k / 2 bins.
            let tol = (0.75 + 0.5 * kf) * bin;
            let d1 = (peak.fx - kf * c.fx).hypot(peak.fy - kf * c.fy);
            let d2 = (peak.fx + kf * c.fx).hypot(peak.fy + kf * c.fy);
            if d1.min(d2) <= tol && found.is_none_or(|fk| k > fk) {
                found = Some(k);
            }
        }
    }
    match found {
        // The harmonic is located k times more precisely, relative to its
        // frequency, than the fundamental itself.
        Some(k) => Peak {
            fx: peak.fx / k as f64,
            fy: peak.fy / k as f64,
            ..peak
        },
        None => peak,
    }
}

/// Difference of two axial directions (degrees modulo 180), in [0, 90].
pub fn axial_difference(a: f64, b: f64) -> f64 {
    let d = (a - b).rem_euclid(180.0);
    d.min(180.0 - d)
}

/// Candidate peaks of a power spectrum, strongest prominence first.
pub fn candidates(power: &[f64], n: usize, params: &FftParams) -> (Vec<Peak>, Orientation) {
    CandidateSearch::new(n, params.min_period_px).run(power)
}

/// One bin of the searched frequency band, precomputed for a tile size.
#[derive(Clone, Copy, Debug)]
struct BandBin {
    u: i32,
    v: i32,
    /// Index of the bin in the n x n spectrum.
    idx: u32,
    /// Index of its frequency ring (rounded radius).
    ring: u32,
    /// Unit vector from the origin to the bin.
    cu: f64,
    cv: f64,
}

/// The geometry of the peak search for one tile size (which bins form each
/// frequency ring, which bins lie in the searched band) and reusable
/// buffers, so that tiles of one size share it and allocate nothing. The
/// results are those of the direct computation described in `run`: only
/// where work is done and memory is kept changes.
pub struct CandidateSearch {
    n: usize,
    /// Bins of the half plane (v > 0, or v = 0 and u >= 0) grouped by ring,
    /// for the rings the band reaches; ring k is
    /// `ring_bins[ring_start[k]..ring_start[k + 1]]`.
    ring_bins: Vec<u32>,
    ring_start: Vec<usize>,
    /// The band's bins in the order of the direct scan (v, then u, rising).
    band: Vec<BandBin>,
    row_sums: Vec<f64>,
    smooth: Vec<f64>,
    ring_vals: Vec<f32>,
    background: Vec<f64>,
}

impl CandidateSearch {
    pub fn new(n: usize, min_period_px: f64) -> Self {
        let half = n / 2;
        let r_lo = 2.0f64;
        let r_hi = (n as f64 / min_period_px).min(half as f64 - 1.0);
        let mut s = Self {
            n,
            ring_bins: Vec::new(),
            ring_start: vec![0],
            band: Vec::new(),
            row_sums: vec![0.0; n * n],
            smooth: vec![0.0; n * n],
            ring_vals: Vec::new(),
            background: Vec::new(),
        };
        if r_hi <= r_lo {
            return s;
        }
        let ni = n as i64;
        let idx = |u: i64, v: i64| (v.rem_euclid(ni) * ni + u.rem_euclid(ni)) as u32;
        let half_plane = |u: i64, v: i64| v > 0 || (v == 0 && u >= 0);
        // Rings the band's bins fall in: up to round(r_hi).
        let rings = (r_hi.round() as usize + 1).min(half + 1);
        let reach = rings as i64; // |u|, v <= reach covers every such ring
        let mut per_ring: Vec<Vec<u32>> = vec![Vec::new(); rings];
        for v in 0..=reach.min(half as i64) {
            for u in -(reach.min(half as i64))..=reach.min(half as i64) {
                if !half_plane(u, v) {
                    continue;
                }
                let r = ((u * u + v * v) as f64).sqrt().round() as usize;
                if r < rings {
                    per_ring[r].push(idx(u, v));
                }
            }
        }
        for bins in per_ring {
            s.ring_bins.extend(bins);
            s.ring_start.push(s.ring_bins.len());
        }
        let vmax = r_hi.ceil() as i64;
        for v in 0..=vmax {
            for u in -vmax..=vmax {
                if !half_plane(u, v) {
                    continue;
                }
                let r = ((u * u + v * v) as f64).sqrt();
                if r < r_lo || r > r_hi {
                    continue;
                }
                s.band.push(BandBin {
                    u: u as i32,
                    v: v as i32,
                    idx: idx(u, v),
                    ring: r.round() as u32,
                    cu: u as f64 / r,
                    cv: v as f64 / r,
                });
            }
        }
        s
    }

    /// After `run`: the strongest smoothed power on the ray from the origin
    /// through `peak`, between 3 bins and 1/1.5 of the peak's radius
    /// (sampled every half bin), over the smoothed power at the peak (see
    /// `MAX_RAY_EXCESS`); 0 when that stretch of ray is empty.
    pub fn ray_excess_below(&self, peak: &Peak) -> f64 {
        let n = self.n as f64;
        let (u, v) = (peak.fx * n, peak.fy * n);
        let r = u.hypot(v);
        let (lo, hi) = (3.0, r / 1.5);
        if hi < lo {
            return 0.0;
        }
        let here = bilinear_periodic(&self.smooth, self.n, u, v);
        if here <= 0.0 {
            return f64::INFINITY;
        }
        let (cu, cv) = (u / r, v / r);
        let steps = ((hi - lo) / 0.5).floor() as usize;
        let mut most = 0.0f64;
        for i in 0..=steps {
            let t = lo + 0.5 * i as f64;
            most = most.max(bilinear_periodic(&self.smooth, self.n, t * cu, t * cv));
        }
        most / here
    }

    /// After `run`: the smoothed power at frequency (fx, fy) (cycles per
    /// pixel, in the half plane or on its edge) over the median of its
    /// frequency ring; NaN where that is undefined.
    pub fn ratio_at(&self, fx: f64, fy: f64) -> f64 {
        let n = self.n as f64;
        let (u, v) = (fx * n, fy * n);
        let ring = u.hypot(v).round() as usize;
        match self.background.get(ring) {
            Some(&bg) if bg > 0.0 && v >= -1.0 && v <= (self.n / 2) as f64 - 1.0 => {
                bilinear_periodic(&self.smooth, self.n, u, v) / bg
            }
            _ => f64::NAN,
        }
    }

    /// Candidate peaks of the power spectrum of one tile of this size,
    /// strongest prominence first, and the spectrum's dominant orientation.
    ///
    /// 1. 3x3 box smoothing of the periodic spectrum (rows of the half plane
    ///    and their neighbours: the only ones read below).
    /// 2. Background: the median of the smoothed power over each integer
    ///    frequency ring (half plane; a real image's spectrum is symmetric).
    ///    A peak from aligned arms occupies a small part of its ring and
    ///    stands above it; the smooth fall of an image's spectrum and the
    ///    floor of noise do not.
    /// 3. Over the band (radius 2 bins to n / min_period), the second-moment
    ///    tensor of the excess over the ring background, and the local maxima
    ///    with their prominence over the larger of ring background and ray
    ///    floor, located to a fraction of a bin.
    pub fn run(&mut self, power: &[f64]) -> (Vec<Peak>, Orientation) {
        let isotropic = Orientation {
            dir_deg: 0.0,
            anisotropy: 0.0,
        };
        let n = self.n;
        if self.band.is_empty() || power.len() != n * n {
            return (vec![], isotropic);
        }
        let half = n / 2;
        // Smoothed rows needed: n - 1 (the row above v = 0) and 0..=half;
        // their 3x3 sums read raw rows n - 2 ..= half + 1.
        let wrap = |v: i64| v.rem_euclid(n as i64) as usize;
        for v in -2..=(half as i64 + 1) {
            let vv = wrap(v);
            let row = &power[vv * n..(vv + 1) * n];
            let out = &mut self.row_sums[vv * n..(vv + 1) * n];
            out[0] = row[n - 1] + row[0] + row[1 % n];
            // Over windows of the row rather than indices (no bounds checks
            // in the loop, so it vectorises); same sums in the same order.
            for (o, w) in out[1..].iter_mut().zip(row.windows(3)) {
                *o = w[0] + w[1] + w[2];
            }
            if n > 1 {
                out[n - 1] = row[n - 2] + row[n - 1] + row[0];
            }
        }
        for v in -1..=(half as i64) {
            let (up, mid, down) = (wrap(v - 1), wrap(v), wrap(v + 1));
            let rs = &self.row_sums;
            let (a, b, c) = (
                &rs[up * n..][..n],
                &rs[mid * n..][..n],
                &rs[down * n..][..n],
            );
            // Zipped row slices so the division vectorises; same arithmetic.
            let out = &mut self.smooth[mid * n..(mid + 1) * n];
            for (((o, x), y), z) in out.iter_mut().zip(a).zip(b).zip(c) {
                *o = (x + y + z) / 9.0;
            }
        }
        let smooth = &self.smooth;
        self.background.clear();
        for k in 0..self.ring_start.len() - 1 {
            let bins = &self.ring_bins[self.ring_start[k]..self.ring_start[k + 1]];
            self.ring_vals.clear();
            self.ring_vals
                .extend(bins.iter().map(|&i| smooth[i as usize] as f32));
            self.background
                .push(stats::median_in_place(&mut self.ring_vals));
        }
        let background = &self.background;
        let ni = n as i64;
        let idx = |u: i64, v: i64| -> usize {
            (v.rem_euclid(ni) as usize) * n + u.rem_euclid(ni) as usize
        };
        let mut out = Vec::new();
        let (mut txx, mut txy, mut tyy) = (0.0f64, 0.0f64, 0.0f64);
        for b in &self.band {
            let s = smooth[b.idx as usize];
            let ring_bg = background[b.ring as usize];
            if ring_bg > 0.0 {
                let e = (s / ring_bg - 1.0).max(0.0);
                let (cu, cv) = (b.cu, b.cv);
                txx += e * cu * cu;
                txy += e * cu * cv;
                tyy += e * cv * cv;
            }
            // The ring alone bounds the prominence from above (the background
            // is the larger of ring and ray floor), so bins that cannot reach
            // the candidate threshold of 2 are skipped before the costlier
            // tests.
            if ring_bg <= 0.0 || s < 2.0 * ring_bg {
                continue;
            }
            let (u, v) = (b.u as i64, b.v as i64);
            let mut is_max = true;
            'nb: for dv in -1..=1 {
                for du in -1..=1 {
                    if (du, dv) != (0, 0) && smooth[idx(u + du, v + dv)] > s {
                        is_max = false;
                        break 'nb;
                    }
                }
            }
            if !is_max {
                continue;
            }
            let bg = ring_bg.max(ray_floor(smooth, n, u, v, ring_bg));
            if bg <= 0.0 {
                continue;
            }
            let prominence = s / bg;
            if prominence < 2.0 {
                continue;
            }
            // Sub-bin location on the raw power, from its largest bin next to
            // the smoothed maximum.
            let (mut pu, mut pv) = (u, v);
            for dv in -1..=1 {
                for du in -1..=1 {
                    if power[idx(u + du, v + dv)] > power[idx(pu, pv)] {
                        pu = u + du;
                        pv = v + dv;
                    }
                }
            }
            let mag = |a: i64, b: i64| power[idx(a, b)].sqrt();
            let du = hann_peak_offset(mag(pu - 1, pv), mag(pu, pv), mag(pu + 1, pv));
            let dv = hann_peak_offset(mag(pu, pv - 1), mag(pu, pv), mag(pu, pv + 1));
            out.push(Peak {
                fx: (pu as f64 + du) / n as f64,
                fy: (pv as f64 + dv) / n as f64,
                prominence,
                power: s,
            });
        }
        out.sort_by(|a, b| b.prominence.total_cmp(&a.prominence));
        out.truncate(MAX_CANDIDATES);
        let trace = txx + tyy;
        let orient = if trace > 0.0 {
            let phi = 0.5 * (2.0 * txy).atan2(txx - tyy);
            Orientation {
                // (cos phi, sin phi) is in image axes (y down); flip y.
                dir_deg: (-phi.to_degrees()).rem_euclid(180.0),
                anisotropy: ((txx - tyy).powi(2) + 4.0 * txy * txy).sqrt() / trace,
            }
        } else {
            isotropic
        };
        (out, orient)
    }
}

/// Robust aggregate of tiles: quality-weighted median; tiles further than
/// three robust standard deviations (1.4826 MAD) from it are rejected and
/// the median is taken again. The confidence interval treats the tiles as
/// n_eff = n x (stride/n)^2 independent samples (half-overlapping tiles share
/// area) and uses the standard error of a median, 1.2533 s / sqrt(n_eff).
/// Fewest reliable tiles behind a value: the median and the MAD-based
/// outlier rejection below need three values to tell an outlier from the
/// rest (with two, either could be the outlier).
const MIN_RELIABLE_TILES: usize = 3;

fn aggregate(mut tiles: Vec<TileResult>, n: usize, params: &FftParams) -> FftOutcome {
    let analysed = tiles.len();
    let reliable: Vec<usize> = (0..tiles.len())
        .filter(|&i| tiles[i].quality >= params.min_quality && tiles[i].spacing_px.is_finite())
        .collect();
    if reliable.is_empty() {
        return FftOutcome::none(
            format!(
                "no reliable periodicity: none of {analysed} tiles has a spectral peak of quality >= {}",
                params.min_quality
            ),
            n,
            tiles,
            analysed,
        );
    }
    if reliable.len() < MIN_RELIABLE_TILES {
        return FftOutcome::none(
            format!(
                "no reliable periodicity: only {} of {analysed} tiles have a spectral peak of quality >= {}; at least {MIN_RELIABLE_TILES} are needed to tell an outlier from the period",
                reliable.len(),
                params.min_quality
            ),
            n,
            tiles,
            analysed,
        );
    }
    let vals: Vec<f64> = reliable.iter().map(|&i| tiles[i].spacing_px).collect();
    let wts: Vec<f64> = reliable.iter().map(|&i| tiles[i].quality.ln()).collect();
    let m0 = stats::weighted_median(&vals, &wts).unwrap_or(f64::NAN);
    let s0 = stats::mad_sd(&vals, m0).unwrap_or(0.0);
    let limit = (3.0 * s0).max(1e-9 * m0);
    let kept: Vec<usize> = reliable
        .iter()
        .copied()
        .filter(|&i| (tiles[i].spacing_px - m0).abs() <= limit)
        .collect();
    for &i in &kept {
        tiles[i].used = true;
    }
    let kv: Vec<f64> = kept.iter().map(|&i| tiles[i].spacing_px).collect();
    let kw: Vec<f64> = kept.iter().map(|&i| tiles[i].quality.ln()).collect();
    let value = stats::weighted_median(&kv, &kw);
    let spread = value.and_then(|m| stats::mad_sd(&kv, m));
    let overlap = 0.25; // (stride / n)^2 with stride = n / 2
    let n_eff = (kept.len() as f64 * overlap).max(1.0);
    let ci = match (value, spread) {
        (Some(m), Some(s)) if n_eff >= 2.0 => stats::t_quantile(0.975, n_eff - 1.0).map(|t| {
            let half = t * 1.2533 * s / n_eff.sqrt();
            [m - half, m + half]
        }),
        _ => None,
    };
    let (mut c, mut s) = (0.0, 0.0);
    let mut wsum = 0.0;
    for &i in &kept {
        let a = (2.0 * tiles[i].dir_deg).to_radians();
        c += tiles[i].quality * a.cos();
        s += tiles[i].quality * a.sin();
        wsum += tiles[i].quality;
    }
    let (orientation, coherence) = if wsum > 0.0 {
        (
            Some((s.atan2(c).to_degrees() / 2.0).rem_euclid(180.0)),
            Some(c.hypot(s) / wsum),
        )
    } else {
        (None, None)
    };
    FftOutcome {
        value_px: value,
        ci95_px: ci,
        spread_px: spread,
        n_tiles_used: kept.len(),
        n_tiles_analysed: analysed,
        window_px: n,
        orientation_deg: orientation,
        orientation_coherence: coherence,
        tiles,
        reason: None,
    }
}

#[cfg(test)]
mod tests {

    fn tile(spacing_px: f64, quality: f64) -> TileResult {
        TileResult {
            cx_px: 0.0,
            cy_px: 0.0,
            spacing_px,
            dir_deg: 0.0,
            quality,
            used: false,
            half_ratio: f64::NAN,
        }
    }

    #[test]
    fn two_reliable_tiles_are_not_enough_for_a_value() {
        // Common practice, no single source: a median with MAD-based outlier
        // rejection needs three values; with two, either may be the outlier.
        let params = FftParams::default();
        let two = aggregate(
            vec![tile(20.0, 10.0), tile(24.0, 10.0), tile(22.0, 1.0)],
            64,
            &params,
        );
        assert!(two.value_px.is_none());
        assert!(
            two.reason.as_deref().unwrap_or("").contains("at least 3"),
            "{:?}",
            two.reason
        );
        let three = aggregate(
            vec![tile(20.0, 10.0), tile(24.0, 10.0), tile(22.0, 10.0)],
            64,
            &params,
        );
        assert!(three.value_px.is_some());
    }
    use super::*;
    use crate::load::GrayImage;
    use crate::preprocess::{prepare, PreprocessParams};

    fn sinusoid(n: usize, period: f64, angle_deg: f64) -> Vec<f32> {
        let (c, s) = (angle_deg.to_radians().cos(), angle_deg.to_radians().sin());
        (0..n * n)
            .map(|i| {
                let (x, y) = ((i % n) as f64, (i / n) as f64);
                // y points down in the image; the angle is counter-clockwise with y up.
                let t = x * c - y * s;
                (std::f64::consts::TAU * t / period).cos() as f32
            })
            .collect()
    }

    #[test]
    fn peak_of_a_pure_sinusoid_at_a_non_integer_bin() {
        // A pure sinusoid's frequency is known exactly; the interpolated peak
        // must land within 0.01 bin of it (requirement of the method).
        let n = 128;
        for bin in [5.3, 9.5, 17.25, 30.8] {
            let period = n as f64 / bin;
            let img = sinusoid(n, period, 0.0);
            let mut a = SpectrumAnalyser::new(n);
            let mut p = Vec::new();
            a.power(&img, n, 0, 0, &mut p);
            let peak = choose_peak(&p, n, &FftParams::default()).unwrap();
            let got_bin = peak.freq() * n as f64;
            assert!((got_bin - bin).abs() < 0.01, "bin {bin}: got {got_bin}");
        }
    }

    #[test]
    fn direction_follows_the_wave_vector() {
        let n = 128;
        for angle in [0.0, 30.0, 90.0, 135.0] {
            let img = sinusoid(n, 10.0, angle);
            let mut a = SpectrumAnalyser::new(n);
            let mut p = Vec::new();
            a.power(&img, n, 0, 0, &mut p);
            let peak = choose_peak(&p, n, &FftParams::default()).unwrap();
            assert!(
                axial_difference(peak.dir_deg(), angle) < 1.0,
                "{angle}: {}",
                peak.dir_deg()
            );
            assert!((peak.period_px() - 10.0).abs() < 0.1);
        }
    }

    #[test]
    fn featureless_images_give_no_value() {
        let (w, h) = (256, 256);
        let flat = GrayImage::from_vec(w, h, vec![0.5; w * h]).unwrap();
        let out = measure(
            &prepare(&flat, None, &PreprocessParams::default()),
            &FftParams::default(),
        );
        assert!(out.value_px.is_none() && out.reason.is_some());
        // Pseudo-random white noise (a fixed linear congruential sequence) has no period.
        let mut state = 12345u64;
        let noise: Vec<f32> = (0..w * h)
            .map(|_| {
                state = state
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                (state >> 40) as f32 / (1u64 << 24) as f32
            })
            .collect();
        let img = GrayImage::from_vec(w, h, noise).unwrap();
        let out = measure(
            &prepare(&img, None, &PreprocessParams::default()),
            &FftParams::default(),
        );
        assert!(out.value_px.is_none(), "noise gave {:?}", out.value_px);
    }

    fn stat(n: usize, period_px: f64, support: f64) -> ScaleStat {
        ScaleStat {
            n,
            period_px,
            support,
            n_tiles: 20,
        }
    }

    #[test]
    fn ladder_keeps_the_finest_period_reproduced_across_scales() {
        // Basis: a real period does not move with the analysis window while
        // resolution artefacts do (common practice, no single source), and
        // secondary arms are finer than the primary spacing.
        let p = FftParams::default();
        let ladder = [
            stat(32, 4.6, 0.3),  // drifts to 5.4 at the next scale: artefact
            stat(48, 5.4, 0.3),  // not reproduced at 72
            stat(72, 13.6, 0.4), // reproduced at 108: secondary arms
            stat(108, 13.4, 0.5),
            stat(162, 36.0, 0.6), // reproduced at 250: primary spacing
            stat(250, 36.5, 0.8),
        ];
        let got = ladder_period(&ladder, &p).unwrap();
        assert!((got - 13.4).abs() < 1e-9, "{got}");
        // Without enough agreeing tiles no scale supports a period.
        let weak: Vec<ScaleStat> = ladder.iter().map(|s| stat(s.n, s.period_px, 0.1)).collect();
        assert!(ladder_period(&weak, &p).is_none());
        // A tile must span MIN_PERIODS_PER_TILE periods at the finer scale.
        let coarse = [stat(32, 12.0, 0.5), stat(48, 12.0, 0.5)];
        assert!(ladder_period(&coarse, &p).is_none());
    }

    #[test]
    fn the_largest_tile_that_fits_ends_the_ladder() {
        // Basis: rungs 1.5 apart (common practice, no single source), and a
        // last rung at least 25 % above the one before (a resolution artefact
        // at 4 bins or more then moves by a bin or more).
        let sizes = smooth_sizes(524);
        assert_eq!(
            ladder_sizes(&sizes),
            vec![32, 48, 72, 108, 162, 250, 384, 512]
        );
        // 400 is within 25 % of 384: no extra rung.
        let sizes = smooth_sizes(400);
        assert_eq!(ladder_sizes(&sizes), vec![32, 48, 72, 108, 162, 250, 384]);
    }

    #[test]
    fn the_short_last_rung_pairs_only_on_the_largest_periods() {
        // A period that the regular rungs could reproduce on two pairs (the
        // rung three below the last holds 4 periods of it) is not taken from
        // the short last rung alone; a period too large for that is.
        let p = FftParams::default();
        let base = [
            stat(108, 9.0, 0.0),
            stat(162, 9.0, 0.0),
            stat(250, 9.0, 0.0),
        ];
        let with = |period: f64| {
            let mut l = base.to_vec();
            l.push(stat(384, period, 0.6));
            l.push(stat(512, period * 1.02, 0.6));
            ladder_period(&l, &p)
        };
        // 162 >= 4 x 15: pairs (108, 162) and (162, 250) could have shown it.
        assert!(with(15.0).is_none());
        // 162 < 4 x 45: only (250, 384) could; the last rung may confirm it.
        assert!((with(45.0).unwrap() - 45.9).abs() < 1e-9);
    }

    #[test]
    fn power_at_twice_the_spacing_shows_a_weaker_fundamental() {
        // Basis: the DFT is linear, so a wave of period 16 px added to one of
        // period 8 px puts its power at half the 8 px wave's frequency
        // vector, far above the white-noise level of that ring; without it,
        // that bin holds noise only, at about its ring's median (ratio near
        // 1, below the HARMONIC_RATIO of 2).
        let n = 128;
        let mut state = 777u64;
        let mut noise = || {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 40) as f32 / (1u64 << 24) as f32 - 0.5
        };
        let fine = sinusoid(n, 8.0, 30.0);
        let coarse = sinusoid(n, 16.0, 30.0);
        let p = FftParams::default();
        let ratio = |with_coarse: bool, noise: &mut dyn FnMut() -> f32| {
            let img: Vec<f32> = fine
                .iter()
                .zip(&coarse)
                .map(|(f, c)| f + if with_coarse { 0.3 * c } else { 0.0 } + noise())
                .collect();
            let mut a = SpectrumAnalyser::new(n);
            let mut power = Vec::new();
            a.power(&img, n, 0, 0, &mut power);
            let mut search = CandidateSearch::new(n, p.min_period_px);
            let (cands, _) = search.run(&power);
            let top = cands
                .iter()
                .max_by(|a, b| a.power.total_cmp(&b.power))
                .copied()
                .unwrap();
            assert!((top.period_px() - 8.0).abs() < 0.1);
            search.ratio_at(top.fx / 2.0, top.fy / 2.0)
        };
        let with = ratio(true, &mut noise);
        let without = ratio(false, &mut noise);
        assert!(with > 10.0 * HARMONIC_RATIO, "{with}");
        assert!(without < HARMONIC_RATIO, "{without}");
    }

    #[test]
    fn tiles_locked_on_a_harmonic_are_incompatible() {
        // Basis: sqrt 2 is the geometric midpoint between a period and its
        // second harmonic (or sub-harmonic).
        assert!(compatible(13.0, 10.0) && compatible(7.5, 10.0));
        assert!(!compatible(20.0, 10.0) && !compatible(5.0, 10.0));
    }

    #[test]
    fn finer_of_two_crossed_periods_is_measured() {
        // A strong coarse wave (period 30, as a primary spacing) across a
        // weaker fine one (period 8, as secondary arms): the finer period is
        // the one reproduced at the smallest scales and is measured.
        // Basis: secondary arms are finer than the primary spacing.
        let n = 384;
        let coarse = sinusoid(n, 30.0, 0.0);
        let fine = sinusoid(n, 8.0, 90.0);
        let data: Vec<f32> = coarse
            .iter()
            .zip(&fine)
            .map(|(a, b)| 0.5 + 0.3 * a + 0.15 * b)
            .collect();
        let img = GrayImage::from_vec(n, n, data).unwrap();
        let out = measure(
            &prepare(&img, None, &PreprocessParams::default()),
            &FftParams::default(),
        );
        let v = out.value_px.unwrap();
        assert!((v - 8.0).abs() < 0.2, "{v}");
    }

    #[test]
    fn a_side_lobe_is_not_the_strongest_feature_of_its_ray() {
        // Basis: the first side lobe of a rectangle of width w lies at
        // 1.43 / w, 13.3 dB (21 times) below its main lobe (Harris 1978);
        // a fundamental is the strongest feature of its ray.
        let n = 96;
        let w = 12usize;
        let bar: Vec<f32> = (0..n * n)
            .map(|i| f32::from(u8::from((42..42 + w).contains(&(i % n)))))
            .collect();
        let mut a = SpectrumAnalyser::new(n);
        let mut p = Vec::new();
        a.power(&bar, n, 0, 0, &mut p);
        let mut search = CandidateSearch::new(n, 3.0);
        let (cands, _) = search.run(&p);
        // The candidate nearest the first side lobe, 1.43 / 12 px.
        let lobe = cands
            .iter()
            .min_by(|x, y| {
                (x.freq() - 1.43 / w as f64)
                    .abs()
                    .total_cmp(&(y.freq() - 1.43 / w as f64).abs())
            })
            .unwrap();
        assert!((lobe.freq() * w as f64 - 1.43).abs() < 0.15, "{lobe:?}");
        let excess = search.ray_excess_below(lobe);
        assert!(excess >= MAX_RAY_EXCESS, "side lobe excess {excess}");
        // A row of such bars, 24 px apart (duty 0.5): its fundamental is the
        // strongest feature of its ray.
        let row: Vec<f32> = (0..n * n)
            .map(|i| f32::from(u8::from((i % n) % 24 < w)))
            .collect();
        a.power(&row, n, 0, 0, &mut p);
        let (cands, _) = search.run(&p);
        let fundamental = cands
            .iter()
            .max_by(|x, y| x.power.total_cmp(&y.power))
            .unwrap();
        assert!((fundamental.period_px() - 24.0).abs() < 0.5);
        let excess = search.ray_excess_below(fundamental);
        assert!(excess < 1.0, "fundamental excess {excess}");
    }

    #[test]
    fn a_single_bar_is_not_a_period() {
        // Basis: N periods under a Hann window give a peak of relative
        // half-power width 1.44 / N (Harris 1978); one feature's form factor
        // gives a lobe of relative width of order one.
        let n = 64;
        // One bright bar, 6 px wide, across the tile: no repetition.
        let bar: Vec<f32> = (0..n * n)
            .map(|i| {
                if (29..35).contains(&(i % n)) {
                    1.0
                } else {
                    0.0
                }
            })
            .collect();
        let mut a = SpectrumAnalyser::new(n);
        let mut p = Vec::new();
        a.power(&bar, n, 0, 0, &mut p);
        // Its strongest lobe (the first side lobe of its sinc-squared form
        // factor; higher lobes are relatively narrower but far weaker) is
        // broad and is not taken as a period.
        let (cands, _) = candidates(&p, n, &FftParams::default());
        let strongest = cands
            .iter()
            .max_by(|a, b| a.power.total_cmp(&b.power))
            .unwrap();
        assert!(relative_width(&p, n, strongest) > MAX_RELATIVE_WIDTH);
        let chosen = choose_peak(&p, n, &FftParams::default());
        assert!(chosen.is_none_or(|c| c.power < strongest.power));
        // Eight periods of 8 px: a narrow peak.
        let wave = sinusoid(n, 8.0, 0.0);
        a.power(&wave, n, 0, 0, &mut p);
        let peak = choose_peak(&p, n, &FftParams::default()).unwrap();
        let w = relative_width(&p, n, &peak);
        assert!(w < 0.3, "{w}");
    }

    #[test]
    fn finer_period_parallel_to_a_coarser_one_is_dropped() {
        // Basis: secondary arms repeat along the trunk and the primary
        // spacing across it (perpendicular); a finer period along the same
        // direction as a coarser one at the same place belongs to the same
        // rows (harmonic or side lobe). Common practice, no single source.
        let p = FftParams::default();
        let tile = |cx: f64, cy: f64, spacing_px: f64, dir_deg: f64| TileResult {
            cx_px: cx,
            cy_px: cy,
            spacing_px,
            dir_deg,
            quality: 20.0,
            used: false,
            half_ratio: f64::NAN,
        };
        let build = |coarse_dir: f64| {
            let mut scales = Vec::new();
            for (n, per, dir) in [
                (32usize, 5.0, 30.0),
                (48, 5.1, 30.0),
                (72, 14.0, coarse_dir),
                (108, 14.2, coarse_dir),
            ] {
                let tiles: Vec<TileResult> = (0..9)
                    .map(|k| tile(100.0 + 5.0 * k as f64, 100.0, per, dir))
                    .collect();
                scales.push((n, tiles));
            }
            let ladder: Vec<ScaleStat> =
                scales.iter().map(|(n, t)| scale_stat(*n, t, &p)).collect();
            resolve_ladder(&ladder, &scales, &p)
        };
        // Parallel: the fine period is a feature of the coarser rows.
        assert!((build(35.0).unwrap() - 14.2).abs() < 1e-9);
        // Perpendicular: the fine period is the secondary spacing.
        assert!((build(120.0).unwrap() - 5.1).abs() < 1e-9);
    }
}
