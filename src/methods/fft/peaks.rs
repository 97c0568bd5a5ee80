//! Peak choice in a tile's power spectrum: candidates, their prominence,
//! the dominant orientation, harmonics traced to their fundamental (module
//! docs of [`super`], steps 1-4).

use super::*;

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
pub(crate) fn choose_peak_with(
    search: &mut CandidateSearch,
    power: &[f64],
    params: &FftParams,
    lone_peaks_only: bool,
) -> Option<Peak> {
    choose_peak_and_cross(search, power, params, lone_peaks_only).map(|(p, _)| p)
}

/// `choose_peak_with`, and with the chosen peak the period the tile shows
/// across it, when it shows one (see [`cross_period`]).
pub(crate) fn choose_peak_and_cross(
    search: &mut CandidateSearch,
    power: &[f64],
    params: &FftParams,
    lone_peaks_only: bool,
) -> Option<(Peak, Option<Cross>)> {
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
    let chosen = fundamental_of(first, &cands, n, params);
    let cross = cross_period(&chosen, &cands, power, search, params);
    Some((chosen, cross))
}

/// A period a tile shows across its chosen one.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Cross {
    /// The period along the direction perpendicular to the chosen peak's
    /// frequency vector, pixels.
    pub spacing_px: f64,
    /// That direction, degrees as [`Peak::dir_deg`].
    pub dir_deg: f64,
    pub prominence: f64,
}

/// Smallest ratio of two frequencies for their peaks to count as two
/// periods. A tile holds about `periods_per_tile` (6) periods of the
/// chosen one, and a Hann-windowed peak of N periods has a half-power full
/// width of 1.44 bins (Harris 1978): two peaks closer than one such width
/// (1 + 1.44 / 6 = 1.24 in frequency) are not resolved as two periods.
pub(crate) const RESOLVED_RATIO: f64 = 1.24;

/// The period a tile repeats at across its chosen peak: a reliable, narrow
/// candidate (the same tests as the chosen peak: prominence, relative
/// width) more than `90 - MAX_OFF_AXIS_DEG` degrees off the chosen peak's
/// direction, traced to its own fundamental, whose period measured along
/// the perpendicular of the chosen peak's frequency vector differs from the
/// chosen period by at least [`RESOLVED_RATIO`]; the strongest such one.
///
/// Why: a section that cuts secondary arms across shows rounded spots
/// standing in rows. Their spectrum has two periods at right angles: the
/// spacing of the spots along a row (the arm spacing) and the distance
/// between rows (coarser: neighbouring rows are the arms of other trunks or
/// of the trunk's other side). The rows' wide channels often carry the more
/// power, so the chosen peak may be the rows'. Where rows are staggered the
/// spots' peak lies off the perpendicular by the stagger (a centred lattice
/// has no peak exactly along the row), but its component along the row is
/// the spots' period; that component is what is returned. A column of
/// secondary arms on a trunk (a fishbone) shows, across its arms, only the
/// coarser primary spacing, or nothing periodic at all.
///
/// The period across must also be the strongest feature of its own ray
/// (`MAX_RAY_EXCESS`, as the ladder asks of tiles without a dominant
/// orientation): a harmonic or side lobe of arms that run across the chosen
/// ones (the other arm family of an equiaxed cross) has its fundamental on
/// the same ray at lower frequency, and is not a period of spots.
pub(crate) fn cross_period(
    chosen: &Peak,
    cands: &[Peak],
    power: &[f64],
    search: &CandidateSearch,
    params: &FftParams,
) -> Option<Cross> {
    let n = search.n;
    let f0 = chosen.freq();
    if f0 <= 0.0 {
        return None;
    }
    // Unit vector along the chosen frequency, and its perpendicular.
    let (ux, uy) = (chosen.fx / f0, chosen.fy / f0);
    let (px, py) = (-uy, ux);
    cands
        .iter()
        .filter(|c| c.prominence >= params.min_quality)
        // A peak 20 dB below the chosen one is no structure the field is
        // made of (the floor `FUNDAMENTAL_FLOOR` of the harmonic test); on
        // a flat spectrum, as of a clean grating, its prominence over an
        // empty ring means nothing.
        .filter(|c| c.power >= super::FUNDAMENTAL_FLOOR * chosen.power)
        .filter(|c| axial_difference(c.dir_deg(), chosen.dir_deg()) >= 90.0 - MAX_OFF_AXIS_DEG)
        .filter(|c| relative_width(power, n, c) <= MAX_RELATIVE_WIDTH)
        .filter_map(|c| {
            let f = fundamental_of(*c, cands, n, params);
            if search.ray_excess_below(&f) >= MAX_RAY_EXCESS {
                return None;
            }
            let along = (f.fx * px + f.fy * py).abs();
            let resolved = along >= RESOLVED_RATIO * f0 || along * RESOLVED_RATIO <= f0;
            (along > 0.0 && resolved).then_some((c.power, along, f.prominence))
        })
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(_, along, prominence)| Cross {
            spacing_px: 1.0 / along,
            dir_deg: (-py).atan2(px).to_degrees().rem_euclid(180.0),
            prominence,
        })
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
pub(crate) const MAX_RAY_EXCESS: f64 = 10.0;

/// Largest relative half-power width (full width / frequency, radially) of a
/// spectral peak for it to count as a period. N periods under a Hann window
/// give a peak of half-power full width 1.44 bins (Harris 1978), i.e. a
/// relative width 1.44 / N: at most 0.48 once a tile holds three periods,
/// the fewest that make a repetition. A tile holding fewer repeats, or a
/// spacing too irregular to be one period, gives a broader peak, as does the
/// main lobe of a single feature's form factor (its side lobes are narrower;
/// `resolve_ladder` deals with those).
pub(crate) const MAX_RELATIVE_WIDTH: f64 = 0.5;

/// `x.floor()` for |x| < 2^53, exactly, without the library call that a
/// baseline x86-64 build makes of `f64::floor` (the rounding instruction
/// needs SSE4.1); spectra are sampled along rays often enough for the call
/// to show.
pub(crate) fn floor(x: f64) -> f64 {
    let t = x as i64 as f64;
    if t > x {
        t - 1.0
    } else {
        t
    }
}

/// Bilinear interpolation of an n x n grid that repeats with period n in both
/// directions (a DFT spectrum), at (x, y) in bins.
pub(crate) fn bilinear_periodic(grid: &[f64], n: usize, x: f64, y: f64) -> f64 {
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
pub(crate) const MIN_ANISOTROPY: f64 = 0.2;

/// Largest angle between a peak and the dominant orientation for the peak
/// to count as aligned with it.
pub(crate) const MAX_OFF_AXIS_DEG: f64 = 30.0;

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
pub(crate) fn ray_floor(smooth: &[f64], n: usize, u: i64, v: i64, stop: f64) -> f64 {
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
pub(crate) const MAX_CANDIDATES: usize = 64;

/// Highest harmonic order searched below a peak.
pub(crate) const MAX_HARMONIC: usize = 32;

/// The fundamental of `peak`: the lowest-frequency candidate c such that
/// `peak` lies at k c (k = 2..32, either sign), within (0.75 + k/2) bins, and
/// whose own prominence is at least half the quality threshold (the harmonic
/// relation is itself evidence). Without one, `peak` is its own fundamental.
/// The result is peak / k, with the peak's prominence.
pub(crate) fn fundamental_of(peak: Peak, cands: &[Peak], n: usize, params: &FftParams) -> Peak {
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
pub(crate) struct BandBin {
    pub(crate) u: i32,
    pub(crate) v: i32,
    /// Index of the bin in the n x n spectrum.
    pub(crate) idx: u32,
    /// Index of its frequency ring (rounded radius).
    pub(crate) ring: u32,
    /// Unit vector from the origin to the bin.
    pub(crate) cu: f64,
    pub(crate) cv: f64,
}

/// The geometry of the peak search for one tile size (which bins form each
/// frequency ring, which bins lie in the searched band) and reusable
/// buffers, so that tiles of one size share it and allocate nothing. The
/// results are those of the direct computation described in `run`: only
/// where work is done and memory is kept changes.
pub struct CandidateSearch {
    pub(crate) n: usize,
    /// Bins of the half plane (v > 0, or v = 0 and u >= 0) grouped by ring,
    /// for the rings the band reaches; ring k is
    /// `ring_bins[ring_start[k]..ring_start[k + 1]]`.
    pub(crate) ring_bins: Vec<u32>,
    pub(crate) ring_start: Vec<usize>,
    /// The band's bins in the order of the direct scan (v, then u, rising).
    pub(crate) band: Vec<BandBin>,
    pub(crate) row_sums: Vec<f64>,
    pub(crate) smooth: Vec<f64>,
    pub(crate) ring_vals: Vec<f32>,
    pub(crate) background: Vec<f64>,
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
    /// Smoothed power at the frequency (fx, fy), cycles per pixel (the
    /// half plane, as [`Self::ratio_at`]); NaN outside it.
    pub fn power_at(&self, fx: f64, fy: f64) -> f64 {
        let n = self.n as f64;
        let (u, v) = (fx * n, fy * n);
        if (-1.0..=(self.n / 2) as f64 - 1.0).contains(&v) {
            bilinear_periodic(&self.smooth, self.n, u, v)
        } else {
            f64::NAN
        }
    }

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
                .push(stats::median_in_place(&mut self.ring_vals).unwrap_or(0.0));
            // a ring without bins has no background
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
