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

mod ladder;
mod peaks;
mod radial;

use crate::blocks::spectrum::{hann_peak_offset, smooth_sizes, SpectrumAnalyser};
use crate::preprocess::Prepared;
use crate::stats;
use crate::units::Pixels;
use ladder::*;
pub use peaks::*;
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
    /// The period the tile repeats at across the chosen one, measured along
    /// the perpendicular of the chosen direction (NaN when it shows none; see
    /// [`cross_period`]), its direction and its prominence.
    pub cross_spacing_px: f64,
    pub cross_dir_deg: f64,
    pub cross_quality: f64,
}

/// The method's result for one image, in pixels.
#[derive(Clone, Debug, PartialEq)]
pub struct FftOutcome {
    pub value_px: Option<Pixels>,
    pub ci95_px: Option<[Pixels; 2]>,
    /// Robust standard deviation of the used tiles' spacings.
    pub spread_px: Option<Pixels>,
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
    /// The spacing between rows of spots, when most used tiles show a
    /// second, coarser period across the value's (see [`along_rows`]).
    pub row_spacing_px: Option<Pixels>,
    /// Whether the value is the finer period across the one the tiles chose
    /// first (the spots along their rows; the chosen one was the rows').
    pub read_along_rows: bool,
    /// A finer period across the value's that a minority of the used tiles
    /// show, too large a minority to say that most of the field has no
    /// rows (see [`along_rows`]): the value may then be the spacing between
    /// rows of arms cut across, and this the arms' along them.
    pub rows_undecided: Option<RowsUndecided>,
}

/// The evidence of [`FftOutcome::rows_undecided`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct RowsUndecided {
    /// Median of the finer periods the tiles show, pixels.
    pub period_px: f64,
    /// Used tiles that show it, and used tiles in all.
    pub tiles: usize,
    pub used: usize,
    /// Upper end of the Wilson 95 % interval of the share of tiles that
    /// show it (at the tiles' effective number), at least one half.
    pub share_upper95: f64,
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
            row_spacing_px: None,
            read_along_rows: false,
            rows_undecided: None,
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
            let periods = self.window_px as f64 / v.0;
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
            value: self.value_px,
            ci95: self.ci95_px,
            n: self.n_tiles_used,
            spread: self.spread_px,
            reason: self.reason.clone(),
            warnings,
            local,
            for_target: None,
            indicative: None,
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
        // No period reproduced by the tiles' directional peaks: the arms may
        // repeat along several directions in one tile (equiaxed grains),
        // which the radial spectrum reads (see `radial`).
        if let Some(out) = radial::measure_radial(img, &sizes, params) {
            return out;
        }
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
            // The coarse pass may have taken the other of two periods at
            // right angles (the rows of spots, or the spots along them):
            // a tile that shows that one across its own gives it, and
            // `along_rows` decides which of the two is the arm spacing.
            if t.cross_spacing_px.is_finite() && compatible(t.cross_spacing_px, coarse_period) {
                std::mem::swap(&mut t.spacing_px, &mut t.cross_spacing_px);
                std::mem::swap(&mut t.dir_deg, &mut t.cross_dir_deg);
                std::mem::swap(&mut t.quality, &mut t.cross_quality);
                // The harmonic test was of the other peak; the period
                // across was traced to its own fundamental already.
                t.half_ratio = f64::NAN;
                continue;
            }
            t.quality = 0.0;
        }
    }
    // Spots in rows first: when the value becomes the spots' period along
    // the rows, the chosen peaks were the rows', and whether the rows'
    // period is itself a harmonic does not bear on it (the period along the
    // rows was traced to its own fundamental). In a tile of six row
    // periods, half the rows' frequency lies 3 bins from the origin, inside
    // the window's zero-frequency leakage, where that test means nothing.
    let out = along_rows(aggregate(tiles, n, params), params);
    if out.read_along_rows {
        return out;
    }
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

/// Fraction of the tiles that count as independent samples: tiles of size n
/// laid at a stride of n / 2 share their area, (stride / n)^2 = 1/4.
pub const TILE_INDEPENDENCE: f64 = 0.25;

/// Power at half the peak's frequency, as a fraction of the peak's, below
/// which nothing there can be a fundamental: rows whose second harmonic
/// outshines their fundamental still put a good part of the harmonic's power
/// into it (arms and channels of nearly equal width give a weak second
/// harmonic, unequal widths a strong fundamental), never 1 % (-20 dB). A
/// ratio to the ring's median alone fails where the ring holds almost no
/// power (a clean grating, whose ring median is the quantisation floor).
pub(crate) const FUNDAMENTAL_FLOOR: f64 = 0.01;

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
                    let chosen = choose_peak_and_cross(&mut search, &buf, params, lone_peaks_only);
                    let peak = chosen.map(|(p, _)| p);
                    let cross = chosen.and_then(|(_, c)| c);
                    let (cross_spacing_px, cross_dir_deg, cross_quality) = cross
                        .map_or((f64::NAN, f64::NAN, 0.0), |c| {
                            (c.spacing_px, c.dir_deg, c.prominence)
                        });
                    let half_ratio = peak.map_or(f64::NAN, |p| {
                        let half = search.power_at(p.fx / 2.0, p.fy / 2.0);
                        let top = search.power_at(p.fx, p.fy);
                        if half < FUNDAMENTAL_FLOOR * top {
                            0.0 // nothing there that could be a fundamental
                        } else {
                            search.ratio_at(p.fx / 2.0, p.fy / 2.0)
                        }
                    });
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
                            cross_spacing_px,
                            cross_dir_deg,
                            cross_quality,
                        },
                        None => TileResult {
                            cx_px: cx,
                            cy_px: cy,
                            spacing_px: f64::NAN,
                            dir_deg: f64::NAN,
                            quality: 0.0,
                            used: false,
                            half_ratio,
                            cross_spacing_px,
                            cross_dir_deg,
                            cross_quality,
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

/// Fewest reliable tiles behind a value: the median and the MAD-based
/// outlier rejection below need three values to tell an outlier from the
/// rest (with two, either could be the outlier).
const MIN_RELIABLE_TILES: usize = 3;

/// Robust aggregate of tiles: quality-weighted median; tiles further than
/// three robust standard deviations (1.4826 MAD) from it are rejected and
/// the median is taken again. The confidence interval treats the tiles as
/// n_eff = n x (stride/n)^2 independent samples (half-overlapping tiles share
/// area) and uses the standard error of a median, 1.2533 s / sqrt(n_eff).
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
    let n_eff = (kept.len() as f64 * TILE_INDEPENDENCE).max(1.0);
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
        value_px: value.map(Pixels),
        ci95_px: ci.map(|c| c.map(Pixels)),
        spread_px: spread.map(Pixels),
        n_tiles_used: kept.len(),
        n_tiles_analysed: analysed,
        window_px: n,
        orientation_deg: orientation,
        orientation_coherence: coherence,
        tiles,
        reason: None,
        row_spacing_px: None,
        read_along_rows: false,
        rows_undecided: None,
    }
}

/// Smallest share of the used tiles that must show a period across their
/// own (`TileResult::cross_spacing_px`) for the field to count as spots in
/// rows: the rows must be a property of the field, seen in most of it, not
/// of a stray tile where two grains or a texture meet.
const ROWS_SHARE: f64 = 0.5;

/// The tiles as they read across their chosen period: each used tile that
/// shows a period across its own gives that period (with its direction and
/// prominence), every other tile nothing; for [`aggregate`].
fn cross_tiles(tiles: &[TileResult]) -> Vec<TileResult> {
    tiles
        .iter()
        .map(|t| {
            let shows = t.used && t.cross_spacing_px.is_finite();
            TileResult {
                spacing_px: t.cross_spacing_px,
                dir_deg: t.cross_dir_deg,
                quality: if shows { t.cross_quality } else { 0.0 },
                used: false,
                ..*t
            }
        })
        .collect()
}

/// Two periods at right angles, seen in most tiles: the finer one is the
/// arm spacing and the coarser one the spacing between rows.
///
/// Secondary arms are the finest periodic dendritic feature of a section.
/// A coarser period across them is the spacing of the rows the arms stand
/// in: in a section that cuts the arms across, the distance between rows of
/// spots (neighbouring trunks, or the two sides of one trunk); on a column
/// of arms, the primary spacing. So when most used tiles show a resolved
/// second period across their own (see [`cross_period`]):
/// - if it is finer, the tiles chose the rows, and the value becomes the
///   finer period (aggregated over the tiles that show it, as the chosen
///   one is), with the chosen one kept as the row spacing;
/// - if it is coarser, the value stands and the coarser period is reported
///   as the row spacing.
///
/// Common practice (no single source) measures the spacing of cut arms
/// along their row, as the spots' count along a trunk.
fn along_rows(out: FftOutcome, params: &FftParams) -> FftOutcome {
    let Some(value) = out.value_px else {
        return out;
    };
    let used = out.tiles.iter().filter(|t| t.used).count();
    let across: Vec<f64> = out
        .tiles
        .iter()
        .filter(|t| t.used && t.cross_spacing_px.is_finite())
        .filter(|t| t.cross_quality >= params.min_quality)
        .map(|t| t.cross_spacing_px)
        .collect();
    if used == 0 {
        return out;
    }
    let Some(m) = stats::median(&across) else {
        return out;
    };
    if (across.len() as f64) < ROWS_SHARE * used as f64 {
        // A minority of tiles show a finer period across the value's. If
        // the field had no rows, such tiles would be a chance minority; if
        // it is a section with the arms cut across whose spots the tiles
        // resolve only in part (fine spots that the optical blur partly
        // fuses along their rows), the value is the rows' spacing. The
        // share alone decides only when it is clearly below one half: the
        // Wilson 95 % interval of the share (E. B. Wilson, J. Am. Stat.
        // Assoc. 22 (1927) 209-212), at the tiles' effective number
        // (overlapping tiles count TILE_INDEPENDENCE each, as in the
        // value's own interval), must lie below one half. Otherwise the
        // field may be mostly rows, and the evidence is kept for the
        // combination (`combine::rows_undecided`), which does not take a
        // reading of the coarser period as the arm spacing.
        //
        // The finer period must also be measured on its own by the rules
        // of any value (the tiles that show it, aggregated as when the
        // field is read along its rows, give a value with an interval):
        // with few tiles the share's interval is wide whatever it holds,
        // and a tile or two showing a finer period is no evidence of rows.
        let finer = m * peaks::RESOLVED_RATIO <= value.0;
        let n_eff = used as f64 * TILE_INDEPENDENCE;
        let upper = stats::wilson_upper95(across.len() as f64 * TILE_INDEPENDENCE, n_eff);
        let measured = || {
            aggregate(cross_tiles(&out.tiles), out.window_px, params)
                .ci95_px
                .is_some()
        };
        if finer && upper >= 0.5 && measured() {
            return FftOutcome {
                rows_undecided: Some(RowsUndecided {
                    period_px: m,
                    tiles: across.len(),
                    used,
                    share_upper95: upper,
                }),
                ..out
            };
        }
        return out;
    }
    if m >= peaks::RESOLVED_RATIO * value.0 {
        return FftOutcome {
            row_spacing_px: Some(Pixels(m)),
            ..out
        };
    }
    if m * peaks::RESOLVED_RATIO > value.0 {
        return out;
    }
    let along = aggregate(cross_tiles(&out.tiles), out.window_px, params);
    // Without a value along the rows there is none: the chosen period is
    // the rows', never the arms'.
    let reason = along.reason.as_ref().map(|r| {
        format!(
            "most tiles show spots in rows {:.1} px apart, and along the rows {r}",
            value.0
        )
    });
    FftOutcome {
        row_spacing_px: Some(value),
        read_along_rows: true,
        reason,
        ..along
    }
}

#[cfg(test)]
mod tests;
