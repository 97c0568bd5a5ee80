//! The radial reading of the FFT method, for fields where no period is
//! reproduced tile by tile: equiaxed grains, whose arms point along several
//! directions inside one tile.
//!
//! Why: the arms of one equiaxed grain grow along a few crystal directions,
//! so a tile over it holds rows of arms repeating along two or three
//! directions at the same spacing. Their power lies on one frequency ring,
//! 1/lambda2, split between several directional peaks, none of which need
//! stand out on its own (each carries a part of the power, and the ring's
//! median that sets a peak's prominence holds the others). The angular
//! average of the power over each ring (the radial spectrum) adds them up
//! whatever their directions, so the spacing is read from the ring, not from
//! one peak. The same reproduction across the ladder of tile sizes is then
//! asked of it ([`super::ladder`]): a ring that stays put when the tile grows
//! is a period of the field; the hump of random bodies is broad, and the
//! window's leakage moves with the tile.

use super::*;
use crate::blocks::spectrum::SpectrumAnalyser;

/// Smallest ratio of a ring's mean power to the chord of the radial
/// spectrum beneath it for the ring to count as a period of the tile: a
/// factor 2, as a directional peak needs over its ring's median to be a
/// candidate at all (`HARMONIC_RATIO`). A ring of k bins averages about
/// pi k periodogram values (chi-square, 2 degrees of freedom each) from
/// k = 4 on, so chance alone moves a ring's mean by a few tens of per cent,
/// not a factor 2.
pub(crate) const RADIAL_MIN_RATIO: f64 = 2.0;

/// Smallest ratio of the strongest bin of the chosen ring (3 x 3 smoothed
/// power) to the ring's median for the ring to count as holding a
/// direction: arms repeat along a few directions, so their ring holds
/// directional peaks. A factor 2, what a peak needs over its ring's median
/// to be a candidate at all (`HARMONIC_RATIO`), not the chance bound of one
/// bin against another (4.6 at 0.1 %, `MAX_RAY_EXCESS`): arms along three
/// directions put peaks on a good part of their own ring and raise its
/// median (a drawn tile of three sectors of bars, the test below, reaches
/// 4.3). Chance is left to the count of agreeing tiles
/// ([`beyond_scatter`]).
///
/// Limitation, measured: this does not tell arms from bodies of one size
/// packed at random (their ring is sharp, and a small tile's ring is
/// uneven enough to pass): a field of equal discs 14 px apart gets a radial
/// value of about 15 px, which the intercept (no straight runs of arms)
/// does not corroborate, so the image gets none. A stricter test of the
/// ring's evenness (coefficient of variation of its bins at least sqrt 2,
/// midway between an even ring, 1, and three directions, 2) refused those
/// discs but also nearly every equiaxed tile (seeds 81-84: one new value
/// instead of six): at the tile scale the arms of dense equiaxed grains
/// point nearly every way.
pub(crate) const RADIAL_DIRECTIONAL: f64 = 2.0;

/// Factor in frequency between a ring and the two points of the radial
/// spectrum the chord beneath it joins: 1.5, beyond the half-power width of
/// a peak of three or more repeats (relative width at most 0.5,
/// `MAX_RELATIVE_WIDTH`, so half-power at 1 +/- 0.25), and the same factor
/// as the ray's stretch below a fundamental (`MAX_RAY_EXCESS`).
pub(crate) const RADIAL_CHORD: f64 = 1.5;

/// Shortest period the radial reading gives, pixels: four times the
/// thinnest arm body the centres method locates
/// ([`crate::methods::centres::MIN_BODY_RADIUS_PX`], bodies 6 px across),
/// i.e. arms and channels each about half the spacing and each at least
/// 6 px wide. Thinner arms and channels are closed or fused by the blur of
/// the optics and the smoothing before thresholding, and the ring then
/// holds the spacing of what stays distinct, longer than the arms'. The
/// directional reading keeps a direction to check a period against (the
/// ladder's parallel test, the harmonic test); the ring has only its radius,
/// so it is not read where the arms are not resolved.
/// Disclosure: this floor was added after the radial reading, on the
/// synthetic equiaxed fields of seeds 81-84 with spacings of 6 to 13 px
/// (dense, etched, lace styles), read 5 to 14 % long, as did the intercept
/// on the same fields; the value 12 px comes from the thickness limit above,
/// not from those fields.
pub(crate) const RADIAL_MIN_PERIOD_PX: f64 = 4.0 * crate::methods::centres::MIN_BODY_RADIUS_PX;

/// Mean power of each integer ring of the half plane, k = 0 ..= n / 2 - 1,
/// and for each ring the direction (degrees as [`Peak::dir_deg`]) of its
/// strongest bin.
pub(crate) struct Rings {
    n: usize,
    /// Bin indices, directions and frequency indices (u, v) of each ring.
    bins: Vec<Vec<(usize, f64, i64, i64)>>,
}

impl Rings {
    pub(crate) fn new(n: usize) -> Self {
        let half = (n / 2) as i64;
        let ni = n as i64;
        let mut bins: Vec<Vec<(usize, f64, i64, i64)>> = vec![Vec::new(); n / 2];
        for v in 0..half {
            for u in -half + 1..half {
                if v == 0 && u < 0 {
                    continue;
                }
                let r = ((u * u + v * v) as f64).sqrt().round() as usize;
                if r < bins.len() {
                    let idx = (v.rem_euclid(ni) * ni + u.rem_euclid(ni)) as usize;
                    // Peak::dir_deg with fx = u / n, fy = v / n (y down).
                    let dir = (-(v as f64)).atan2(u as f64).to_degrees().rem_euclid(180.0);
                    bins[r].push((idx, dir, u, v));
                }
            }
        }
        Self { n, bins }
    }

    /// The power of each ring: its mean times its radius, i.e. the power
    /// per unit of frequency on the ring (its circumference grows with k).
    /// A directional peak puts its power on a few rings whatever their
    /// radius; the mean alone would divide it by the ring's length and move
    /// the peak's centre towards lower frequencies (longer periods).
    fn profile(&self, power: &[f64]) -> Vec<f64> {
        self.bins
            .iter()
            .enumerate()
            .map(|(k, b)| {
                if b.is_empty() {
                    0.0
                } else {
                    k as f64 * b.iter().map(|&(i, ..)| power[i]).sum::<f64>() / b.len() as f64
                }
            })
            .collect()
    }

    /// The period a tile's radial spectrum shows, its direction (that of the
    /// strongest bin on the ring: the direction the arms repeat in most) and
    /// its quality (ring mean over the chord beneath it); `None` without a
    /// ring that passes.
    ///
    /// A ring is a candidate when it is a local maximum of the radial
    /// spectrum, from 4 bins (`MIN_PERIODS_PER_TILE` periods across the tile)
    /// to the finest period searched; the chord joins the radial spectrum at
    /// k / [`RADIAL_CHORD`] and k x [`RADIAL_CHORD`] in log power against log
    /// frequency (the smooth fall of an image's spectrum is close to a power
    /// law there). Its excess over the chord must fall to half within a
    /// relative width of `MAX_RELATIVE_WIDTH` (three or more repeats: the
    /// hump of random bodies of scattered sizes is broader). Among the rings
    /// that pass, the one of most excess power is taken, as a row of arms
    /// puts most of its power in its fundamental.
    pub(crate) fn read(
        &self,
        power: &[f64],
        min_period_px: f64,
        search: &mut CandidateSearch,
    ) -> Option<(f64, f64, f64)> {
        let p = self.profile(power);
        let n = self.n as f64;
        let at = |k: f64| -> f64 {
            // Log-linear interpolation between integer rings.
            let k0 = k.floor() as usize;
            if k0 + 1 >= p.len() {
                return f64::NAN;
            }
            let t = k - k0 as f64;
            let (a, b) = (p[k0].max(1e-300), p[k0 + 1].max(1e-300));
            (a.ln() * (1.0 - t) + b.ln() * t).exp()
        };
        let chord = |k: f64, k_lo: f64, k_hi: f64| -> f64 {
            let (a, b) = (at(k_lo).ln(), at(k_hi).ln());
            let t = (k.ln() - k_lo.ln()) / (k_hi.ln() - k_lo.ln());
            (a * (1.0 - t) + b * t).exp()
        };
        let k_min = MIN_PERIODS_PER_TILE.ceil() as usize;
        let k_max = ((n / min_period_px).floor() as usize).min(p.len().saturating_sub(1));
        let mut best: Option<(f64, f64, f64, f64)> = None; // (excess, k, quality, dir)
        for k in k_min..k_max {
            if k * 3 / 2 + 2 >= p.len() {
                break;
            }
            let (lo, hi) = (k as f64 / RADIAL_CHORD, k as f64 * RADIAL_CHORD);
            if hi + 1.0 >= p.len() as f64 {
                continue;
            }
            // The ring's power over the chord beneath it. The image's
            // transfer (blur, the arms' own shape) multiplies the spectrum
            // and falls steeply with frequency; over the chord, a local
            // power law, its slope divides out to first order, so the peak
            // is located on this ratio. On the spectrum itself (or on its
            // excess over the chord) the falling envelope moves the peak
            // towards lower frequencies, i.e. longer periods.
            let ratio = |j: usize| p[j] / chord(j as f64, lo, hi);
            let quality = ratio(k);
            if !(quality >= RADIAL_MIN_RATIO && quality > ratio(k - 1) && quality >= ratio(k + 1)) {
                continue;
            }
            let top = quality - 1.0;
            let kf = k as f64 + hann_peak_offset(ratio(k - 1) - 1.0, top, ratio(k + 1) - 1.0);
            // Half-excess points on either side, on the integer rings.
            let half_at = |dir: i64| -> Option<f64> {
                let mut j = k as i64;
                loop {
                    let next = j + dir;
                    if next < 1
                        || next as usize >= p.len()
                        || (next as f64) < lo
                        || (next as f64) > hi
                    {
                        return None;
                    }
                    let e = ratio(next as usize) - 1.0;
                    if e <= 0.5 * top {
                        let e0 = ratio(j as usize) - 1.0;
                        let f = (e0 - 0.5 * top) / (e0 - e).max(1e-300);
                        return Some(j as f64 + dir as f64 * f);
                    }
                    j = next;
                }
            };
            let (Some(a), Some(b)) = (half_at(-1), half_at(1)) else {
                continue;
            };
            if (b - a) / kf > MAX_RELATIVE_WIDTH {
                continue;
            }
            // Among the rings that pass, the one of most power above its
            // chord: a row of arms puts most of its power in its
            // fundamental.
            let power_above = p[k] - chord(k as f64, lo, hi);
            if best.is_none_or(|bb| power_above > bb.0) {
                best = Some((power_above, kf, quality, k as f64));
            }
        }
        let (_, kf, quality, k) = best?;
        // The ring must hold a direction: its strongest smoothed bin at
        // least RADIAL_DIRECTIONAL times the ring's median (see there).
        search.run(power);
        let (dir, excess, u, v) = self.bins[k as usize]
            .iter()
            .map(|&(_, d, u, v)| (d, search.ratio_at(u as f64 / n, v as f64 / n), u, v))
            .filter(|x| x.1.is_finite())
            .max_by(|x, y| x.1.total_cmp(&y.1))?;
        // And that direction's peak must be the strongest feature of its own
        // ray below it (`MAX_RAY_EXCESS`): a straight scratch or edge puts
        // its power on a ray falling from the origin, so its bins on any
        // ring have more power nearer the origin, while a row of arms peaks
        // at its fundamental.
        let peak = Peak {
            fx: u as f64 / n,
            fy: v as f64 / n,
            prominence: excess,
            power: search.power_at(u as f64 / n, v as f64 / n),
        };
        (excess >= RADIAL_DIRECTIONAL && search.ray_excess_below(&peak) < MAX_RAY_EXCESS)
            .then_some((n / kf, dir, quality))
    }
}

/// The tiles of size n on a grid of about `stride`, each read from its
/// radial spectrum (see [`Rings::read`]); quality is the ring's ratio over
/// its chord.
pub(crate) fn radial_tiles(
    img: &Prepared,
    n: usize,
    stride: usize,
    params: &FftParams,
) -> Vec<TileResult> {
    let (w, h) = (img.image.width, img.image.height);
    let xs = origins(w, n, stride);
    let ys = origins(h, n, stride);
    let grid: Vec<(usize, usize)> = ys
        .iter()
        .flat_map(|&y| xs.iter().map(move |&x| (x, y)))
        .filter(|&(x, y)| masked_fraction(img, x, y, n) <= params.max_masked_fraction)
        .collect();
    let run = grid.len().div_ceil(4 * rayon::current_num_threads()).max(1);
    grid.par_chunks(run)
        .flat_map_iter(|chunk| {
            let mut an = SpectrumAnalyser::new(n);
            let rings = Rings::new(n);
            let mut search = CandidateSearch::new(n, params.min_period_px);
            let mut buf = Vec::new();
            chunk
                .iter()
                .map(|&(x, y)| {
                    an.power(&img.image.data, w, x, y, &mut buf);
                    let read = rings.read(&buf, params.min_period_px, &mut search);
                    let (spacing, dir, quality) = read.unwrap_or((f64::NAN, f64::NAN, 0.0));
                    TileResult {
                        cx_px: x as f64 + n as f64 / 2.0,
                        cy_px: y as f64 + n as f64 / 2.0,
                        spacing_px: spacing,
                        dir_deg: dir,
                        quality,
                        used: false,
                        half_ratio: f64::NAN,
                        cross_spacing_px: f64::NAN,
                        cross_dir_deg: f64::NAN,
                        cross_quality: 0.0,
                    }
                })
                .collect::<Vec<_>>()
        })
        .collect()
}

/// The radial reading of a whole field: the ladder of tile sizes read from
/// radial spectra, the finest period two neighbouring scales reproduce
/// (`ladder_candidates`, the same rules of support and agreement), then
/// tiles of about `periods_per_tile` periods read the same way and
/// aggregated as the directional tiles are. `None` when no period is
/// reproduced.
pub(crate) fn measure_radial(
    img: &Prepared,
    sizes: &[usize],
    params: &FftParams,
) -> Option<FftOutcome> {
    let rp = FftParams {
        min_quality: RADIAL_MIN_RATIO,
        ..*params
    };
    let (w, h) = (img.image.width, img.image.height);
    let cap = params.coarse_window_max_px.max(LADDER_MIN_PX);
    let capped: Vec<usize> = sizes.iter().copied().filter(|&s| s <= cap).collect();
    let rungs = ladder_sizes(&capped);
    let mut ladder: Vec<ScaleStat> = Vec::with_capacity(rungs.len());
    for &n in &rungs {
        let count = |stride: usize| origins(w, n, stride).len() * origins(h, n, stride).len();
        let mut stride = if count(n) >= 9 { n } else { (n / 2).max(1) };
        while count(stride) > LADDER_MAX_TILES {
            stride += stride / 2;
        }
        let tiles = radial_tiles(img, n, stride, &rp);
        let mut stat = scale_stat(n, &tiles, &rp);
        if !beyond_scatter(&stat, &tiles, &rp) {
            stat.support = 0.0;
        }
        ladder.push(stat);
    }
    let (coarse_period, _) = *ladder_candidates(&ladder).first()?;
    if coarse_period < RADIAL_MIN_PERIOD_PX {
        return None;
    }
    let target = params.periods_per_tile * coarse_period;
    let n = sizes
        .iter()
        .copied()
        .filter(|&s| s >= LADDER_MIN_PX)
        .min_by(|a, b| {
            ((*a as f64) - target)
                .abs()
                .total_cmp(&((*b as f64) - target).abs())
        })?;
    let mut tiles = radial_tiles(img, n, (n / 2).max(1), &rp);
    for t in tiles.iter_mut() {
        if t.spacing_px.is_finite() && !compatible(t.spacing_px, coarse_period) {
            t.quality = 0.0;
        }
    }
    let out = aggregate(tiles, n, &rp);
    out.value_px
        .is_some_and(|v| v.0 >= RADIAL_MIN_PERIOD_PX)
        .then_some(out)
}

/// Largest chance, under scatter, of as many tiles agreeing on a scale's
/// period as do for the scale to support it in the radial reading: 1 %.
pub(crate) const RADIAL_SCATTER_P: f64 = 0.01;

/// Whether the tiles agreeing on a scale's period are more than the
/// scatter of the tiles' readings explains.
///
/// The directional ladder's support thresholds rest on reliable tiles being
/// rare under noise (1-3 %, `MIN_SUPPORT`); a ring over its chord is a
/// weaker condition, met by many tiles of texture too, so a fixed fraction
/// is no test: three of nine tiles agree by chance often enough. The null:
/// each reliable tile's period falls anywhere in the searched band, evenly
/// in log period (texture of scattered sizes), so it lands within
/// `LADDER_AGREEMENT` of a given period with probability
/// q = ln((1 + a) / (1 - a)) / ln(band); the number of agreeing tiles is then
/// binomial (n reliable tiles, q), and the scale supports its period only
/// when that many or more would agree with chance below
/// [`RADIAL_SCATTER_P`]. (The period was chosen as the tiles' median, which
/// favours agreement; the 1 % level leaves room for that.)
fn beyond_scatter(stat: &ScaleStat, tiles: &[TileResult], params: &FftParams) -> bool {
    let reliable = tiles
        .iter()
        .filter(|t| t.quality >= params.min_quality && t.spacing_px.is_finite())
        .count();
    if reliable == 0 || !stat.period_px.is_finite() {
        return false;
    }
    let agree = (stat.support * stat.n_tiles as f64).round() as usize;
    let band = (stat.n as f64 / MIN_PERIODS_PER_TILE / params.min_period_px).max(1.0 + 1e-9);
    let q = (((1.0 + LADDER_AGREEMENT) / (1.0 - LADDER_AGREEMENT)).ln() / band.ln()).min(1.0);
    binomial_tail(reliable, q, agree) < RADIAL_SCATTER_P
}

/// P(X >= k) for X binomial (n, q).
fn binomial_tail(n: usize, q: f64, k: usize) -> f64 {
    if k == 0 {
        return 1.0;
    }
    if q >= 1.0 {
        return 1.0;
    }
    // Terms from the pmf recurrence p(i + 1) = p(i) (n - i) / (i + 1) q / (1 - q).
    let mut p = (1.0 - q).powi(n as i32);
    let mut below = 0.0;
    for i in 0..k.min(n + 1) {
        below += p;
        p *= (n - i) as f64 / (i + 1) as f64 * q / (1.0 - q);
    }
    (1.0 - below).max(0.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn binomial_tail_matches_the_exact_sum() {
        // P(X >= 3) for X ~ Binomial(9, 0.1) = 1 - (0.9^9 + 9 x 0.1 x 0.9^8
        // + 36 x 0.01 x 0.9^7) = 1 - 0.947027862 = 0.052972138 (the
        // binomial probability mass function, summed by hand).
        assert!((binomial_tail(9, 0.1, 3) - 0.052_972_138).abs() < 1e-9);
        assert_eq!(binomial_tail(9, 0.1, 0), 1.0);
        // P(X >= n) = q^n.
        assert!((binomial_tail(5, 0.5, 5) - 0.031_25).abs() < 1e-12);
    }

    /// A tile of three sectors around its centre, each a bar grating of
    /// period `period` (bars half a period wide) along its own direction
    /// (0, 60 and 120 degrees): the arms of one equiaxed grain, repeating
    /// along three directions at the same spacing.
    fn three_directions(n: usize, period: f64) -> Vec<f32> {
        let c = n as f64 / 2.0;
        (0..n * n)
            .map(|i| {
                let (x, y) = ((i % n) as f64 - c, (i / n) as f64 - c);
                let sector = ((y.atan2(x).to_degrees().rem_euclid(360.0)) / 120.0) as usize;
                let a = (60.0 * sector as f64).to_radians();
                let t = x * a.cos() + y * a.sin();
                if (t / period).rem_euclid(1.0) < 0.5 {
                    1.0
                } else {
                    0.0
                }
            })
            .collect()
    }

    #[test]
    fn arms_along_three_directions_give_their_spacing_from_the_ring() {
        // The period is set by construction; the ring must give it within
        // 3 % (a quarter bin at 8 periods per tile is 3 %).
        let n = 128;
        for period in [14.0, 16.0] {
            let data = three_directions(n, period);
            let mut an = SpectrumAnalyser::new(n);
            let mut buf = Vec::new();
            an.power(&data, n, 0, 0, &mut buf);
            let rings = Rings::new(n);
            let mut search = CandidateSearch::new(n, 3.0);
            let (p, _, q) = rings
                .read(&buf, 3.0, &mut search)
                .unwrap_or_else(|| panic!("{period}: no ring"));
            assert!((p / period - 1.0).abs() < 0.03, "{period}: {p}");
            assert!(q >= RADIAL_MIN_RATIO);
        }
    }
}
