//! Columnar, equiaxed or mixed: how the arms' directions hang together
//! over the image.
//!
//! The directions are those of spectral tiles (`methods::fft`'s tile
//! analysis, its own peak choice and quality): tiles of about six arm
//! spacings side by side (not overlapping, so each is an independent
//! sample), each giving the direction along which the arms repeat in it
//! (on a columnar field, along the trunks). They cover the whole field,
//! also where the methods' own tiles found no value, every part weighing
//! by its area. (The structure tensor's gradient directions were tried
//! first and left out: the trunks' long edges and the arms' edges are two
//! perpendicular families of gradients, which cancel in the doubled angle
//! on columnar fields too.) Directions are axial (modulo 180 degrees), so
//! they are averaged as doubled angles (Mardia and Jupp, Directional
//! Statistics, 2000, section 9.3 on axial data; from memory): the mean
//! resultant length R of the doubled angles is 1 when every direction is
//! the same and 0 when they have no common direction, or when two
//! perpendicular families are equally present.
//!
//! In a columnar zone the trunks of neighbouring grains grow in nearly the
//! same direction (along the heat flow), so the arms repeat along one
//! direction over many grains. An equiaxed dendrite sends its arms out in
//! perpendicular directions (the cubic growth directions), and neighbouring
//! grains are turned at random, so within a few spacings the directions
//! cross. Each neighbourhood (cells laid as the map's, from the spacing
//! the tiles were sized for: discs of 10 spacings,
//! [`super::map::MAP_RADIUS_SPACINGS`]) is called aligned or crossed, and
//! the image by the share of its neighbourhoods that are aligned and
//! whether they share one direction.

use super::map::{MAP_RADIUS_SPACINGS, MAX_CELLS_PER_SIDE};
use super::MIN_LOCAL_INDEPENDENT;
use crate::blocks::spectrum::smooth_sizes;
use crate::methods::fft::{analyse_tiles, FftParams};
use crate::preprocess::Prepared;
use crate::units::{Pixels, UmPerPx};

/// Least ratio of a tile's period to the arm spacing (and of the spacing
/// to the period) for its direction to count: the period must be nearer
/// the arm spacing than half or twice it on a logarithmic scale (a ratio
/// under sqrt 2). A tile reading a coarser period (trunks, rows of arms cut
/// across, at right angles to the arms' direction) or a harmonic would
/// give a direction that is not the arms'.
pub const PERIOD_RATIO_MAX: f64 = std::f64::consts::SQRT_2;

/// One direction sample: a tile's.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DirSample {
    /// Position (the tile's centre), um from the top-left corner (y down).
    pub x_um: f64,
    pub y_um: f64,
    /// The direction along which the arms repeat, degrees counter-clockwise
    /// from +x with y up, [0, 180).
    pub dir_deg: f64,
    /// Its weight (1: tiles side by side are independent).
    pub weight: f64,
    /// The tile's side, um.
    pub side_um: f64,
}

/// The direction samples of a prepared image whose arm spacing is
/// `spacing`: tiles of the FFT method's size for that spacing
/// (`periods_per_tile` spacings, the nearest FFT-friendly size of at least
/// 32 px), side by side; a tile counts when its peak has the method's
/// quality and its period is the arms' ([`PERIOD_RATIO_MAX`]). None for a
/// spacing under 2 px or not finite, or an image smaller than a tile.
pub fn direction_samples(
    img: &Prepared,
    spacing: Pixels,
    cal: UmPerPx,
    params: &FftParams,
) -> Vec<DirSample> {
    let (w, h) = (img.image.width, img.image.height);
    let s = spacing.0;
    if !s.is_finite() || s < 2.0 {
        return vec![];
    }
    let target = params.periods_per_tile * s;
    let Some(n) = smooth_sizes(w.min(h))
        .into_iter()
        .filter(|&n| n >= 32)
        .min_by(|a, b| {
            ((*a as f64) - target)
                .abs()
                .total_cmp(&((*b as f64) - target).abs())
        })
    else {
        return vec![];
    };
    analyse_tiles(img, n, n, params)
        .into_iter()
        .filter(|t| {
            t.spacing_px.is_finite()
                && t.dir_deg.is_finite()
                && t.quality >= params.min_quality
                && (t.spacing_px / s).max(s / t.spacing_px) < PERIOD_RATIO_MAX
        })
        .map(|t| DirSample {
            x_um: cal.to_um(Pixels(t.cx_px)).0,
            y_um: cal.to_um(Pixels(t.cy_px)).0,
            dir_deg: t.dir_deg,
            weight: 1.0,
            side_um: cal.to_um(Pixels(n as f64)).0,
        })
        .collect()
}

/// Least mean resultant length of the doubled directions for a
/// neighbourhood to be aligned: 0.5. Arms of a cubic dendrite grow in
/// perpendicular directions; for two perpendicular families of weights a
/// and b the doubled angles' resultant is (a - b) / (a + b), so 0.5 means
/// that one family outweighs the other three to one: the neighbourhood is
/// dominated by one direction rather than crossed. (For one family
/// scattered about its mean, 0.5 is a circular standard deviation of
/// 34 degrees of the directions.)
pub const ALIGNED_MIN_R: f64 = 0.5;

/// Significance level of the Rayleigh test that a neighbourhood's
/// directions have a common direction at all: 5 %, the common level of a
/// test (common practice, no single source). With few tiles, a resultant
/// over [`ALIGNED_MIN_R`] arises by chance (three independent directions
/// give one in about half of neighbourhoods); such a neighbourhood is left
/// undecided.
pub const RAYLEIGH_ALPHA: f64 = 0.05;

/// Share of the decided neighbourhoods that must be aligned (crossed) for
/// the image to be called columnar (equiaxed): four in five. A columnar
/// field keeps some crossed neighbourhoods (grain boundaries, side
/// branches, a tile across a trunk), an equiaxed one some aligned ones (a
/// neighbourhood inside one arm of a large grain); one in five of either
/// is allowed for. Between the two, both are present in quantity: mixed.
pub const CLASS_SHARE: f64 = 0.8;

/// Fewest decided neighbourhoods for a class by neighbourhoods: 5, so
/// that the four-in-five rule can allow one exception. With fewer, the
/// image's tiles are read together as one neighbourhood's (columnar when
/// aligned, equiaxed when crossed; never mixed), when they cover at least
/// [`WHOLE_IMAGE_COVER`] of it.
pub const MIN_DECIDED: usize = 5;

/// Least share of the image's area the tiles must cover for them to be
/// read together as the image's: a half. Tiles over less describe the
/// places they lie in, not the image (a few tiles inside one grain of an
/// equiaxed field all show its direction).
pub const WHOLE_IMAGE_COVER: f64 = 0.5;

/// What the image is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Class {
    Columnar,
    Equiaxed,
    Mixed,
}

impl Class {
    pub fn name(self) -> &'static str {
        match self {
            Class::Columnar => "columnar",
            Class::Equiaxed => "equiaxed",
            Class::Mixed => "mixed",
        }
    }
}

/// One neighbourhood.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Cell {
    /// Tiles in it, and how many count as independent (Kish's effective
    /// number of their weights; each tile one).
    pub samples: usize,
    pub n_eff: f64,
    /// Mean resultant length of the doubled directions.
    pub r: Option<f64>,
    /// The mean direction, degrees counter-clockwise from +x with y up,
    /// [0, 180).
    pub dir_deg: Option<f64>,
    /// Aligned (true), crossed (false), or undecided (too few tiles, or a
    /// resultant that may be chance).
    pub aligned: Option<bool>,
}

/// The morphology of one image.
#[derive(Clone, Debug, PartialEq)]
pub struct Morphology {
    pub class: Option<Class>,
    /// Why there is no class, when there is none.
    pub reason: Option<String>,
    /// Tiles over the image that give a direction.
    pub samples: usize,
    /// The arm spacing the scales were set from, um.
    pub spacing_um: f64,
    /// Mean resultant length of all samples' doubled directions: 0 when the
    /// arms show no preferred direction over the image, 1 when they all
    /// repeat along one.
    pub anisotropy: Option<f64>,
    /// The neighbourhoods' grid (as the map's).
    pub step_um: f64,
    pub radius_um: f64,
    pub columns: usize,
    pub rows: usize,
    pub cells: Vec<Cell>,
    pub aligned: usize,
    pub crossed: usize,
    /// The direction of the aligned neighbourhoods' samples (the trunks'
    /// growth direction in a columnar zone, as an axis: which way along it
    /// is not known from the arms), degrees counter-clockwise from +x with
    /// y up, and its spread (circular standard deviation of those samples'
    /// directions), when the aligned neighbourhoods share a direction.
    pub growth_dir_deg: Option<f64>,
    pub growth_spread_deg: Option<f64>,
    /// Mean resultant length of the aligned neighbourhoods' directions
    /// (do they share one?).
    pub aligned_agreement: Option<f64>,
    /// Whether the class was read from the whole image as one
    /// neighbourhood (fewer than [`MIN_DECIDED`] decided ones).
    pub whole_image: bool,
}

/// Mean resultant length, mean axis (degrees) and effective number
/// ((sum w)^2 / sum w^2, Kish) of weighted axial directions (degrees).
fn axial_mean(dirs: &[(f64, f64)]) -> Option<(f64, f64, f64)> {
    let (mut c, mut s, mut sw, mut sw2) = (0.0, 0.0, 0.0, 0.0);
    for &(d, w) in dirs {
        let a = 2.0 * d.to_radians();
        c += w * a.cos();
        s += w * a.sin();
        sw += w;
        sw2 += w * w;
    }
    if sw <= 0.0 || !sw.is_finite() {
        return None;
    }
    let r = (c / sw).hypot(s / sw);
    let mean = (0.5 * s.atan2(c).to_degrees()).rem_euclid(180.0);
    Some((r, mean, sw * sw / sw2))
}

/// The Rayleigh test's p-value for `n` independent directions with mean
/// resultant length `r` (doubled angles), in its large-sample form
/// exp(-n r^2) (Mardia and Jupp 2000, section 6.3.1; from memory).
fn rayleigh_p(n: f64, r: f64) -> f64 {
    (-n * r * r).exp().min(1.0)
}

/// The morphology of an image of `width` x `height` pixels from its
/// direction samples ([`direction_samples`], made at the arm spacing
/// `spacing`; see the module notes).
pub fn morphology(
    samples: &[DirSample],
    spacing: Option<Pixels>,
    cal: UmPerPx,
    (width, height): (u32, u32),
) -> Morphology {
    let mut m = Morphology {
        class: None,
        reason: None,
        samples: samples.len(),
        spacing_um: 0.0,
        anisotropy: None,
        step_um: 0.0,
        radius_um: 0.0,
        columns: 0,
        rows: 0,
        cells: vec![],
        aligned: 0,
        crossed: 0,
        growth_dir_deg: None,
        growth_spread_deg: None,
        aligned_agreement: None,
        whole_image: false,
    };
    let Some(spacing) = spacing.filter(|s| s.0.is_finite() && s.0 > 0.0) else {
        m.reason = Some(
            "no arm spacing from any method (neither a value nor local measurements) to set the tiles' size".into(),
        );
        return m;
    };
    let spacing = cal.to_um(spacing).0;
    m.spacing_um = spacing;
    let all: Vec<(f64, f64)> = samples.iter().map(|s| (s.dir_deg, s.weight)).collect();
    m.anisotropy = axial_mean(&all).map(|x| x.0);
    if samples.is_empty() {
        m.reason = Some(
            "no tile shows the arms' period with the FFT method's quality: no arms' direction to read".into(),
        );
        return m;
    }
    let (w, h) = (
        cal.to_um(Pixels(width as f64)).0,
        cal.to_um(Pixels(height as f64)).0,
    );
    let step = (MAP_RADIUS_SPACINGS * spacing).max(w.max(h) / MAX_CELLS_PER_SIDE);
    m.step_um = step;
    m.radius_um = step;
    m.columns = ((w / step).ceil() as usize).max(1);
    m.rows = ((h / step).ceil() as usize).max(1);
    let centre = |k: usize| {
        let (r, c) = (k / m.columns, k % m.columns);
        [
            ((c as f64 + 0.5) * step).min(w),
            ((r as f64 + 0.5) * step).min(h),
        ]
    };
    let near = |p: [f64; 2]| -> Vec<usize> {
        (0..samples.len())
            .filter(|&i| (samples[i].x_um - p[0]).hypot(samples[i].y_um - p[1]) < step)
            .collect()
    };
    for k in 0..m.rows * m.columns {
        let ids = near(centre(k));
        let d: Vec<(f64, f64)> = ids
            .iter()
            .map(|&i| (samples[i].dir_deg, samples[i].weight))
            .collect();
        let mean = axial_mean(&d);
        let n_eff = mean.map_or(0.0, |x| x.2);
        let aligned = match mean {
            _ if n_eff < MIN_LOCAL_INDEPENDENT => None,
            Some((r, _, _)) if r < ALIGNED_MIN_R => Some(false),
            Some((r, _, _)) if rayleigh_p(n_eff, r) < RAYLEIGH_ALPHA => Some(true),
            _ => None,
        };
        m.cells.push(Cell {
            samples: ids.len(),
            n_eff,
            r: mean.map(|x| x.0),
            dir_deg: mean.map(|x| x.1),
            aligned,
        });
    }
    m.aligned = m.cells.iter().filter(|c| c.aligned == Some(true)).count();
    m.crossed = m.cells.iter().filter(|c| c.aligned == Some(false)).count();
    let decided = m.aligned + m.crossed;
    // Do the aligned neighbourhoods share one direction (the same rule as
    // within a neighbourhood)?
    let aligned_dirs: Vec<(f64, f64)> = m
        .cells
        .iter()
        .filter(|c| c.aligned == Some(true))
        .filter_map(|c| c.dir_deg.map(|d| (d, 1.0)))
        .collect();
    m.aligned_agreement = axial_mean(&aligned_dirs).map(|x| x.0);
    let shared = m.aligned_agreement.is_some_and(|r| r >= ALIGNED_MIN_R);
    if shared {
        // The growth direction and its spread from the samples of the
        // aligned neighbourhoods (each sample once).
        let mut ids: Vec<usize> = vec![];
        for k in 0..m.cells.len() {
            if m.cells[k].aligned == Some(true) {
                ids.extend(near(centre(k)));
            }
        }
        ids.sort_unstable();
        ids.dedup();
        let d: Vec<(f64, f64)> = ids
            .iter()
            .map(|&i| (samples[i].dir_deg, samples[i].weight))
            .collect();
        if let Some((r, mean, _)) = axial_mean(&d) {
            m.growth_dir_deg = Some(mean);
            // Circular standard deviation of the axes: sqrt(-2 ln R) of
            // the doubled angles, halved (Mardia and Jupp 2000, 2.3.4 and
            // 9.3; from memory).
            m.growth_spread_deg = Some(0.5 * (-2.0 * r.max(1e-12).ln()).sqrt().to_degrees());
        }
    }
    if decided < MIN_DECIDED {
        // An image of fewer decided neighbourhoods is read as one
        // neighbourhood: its tiles together, by the same rule (aligned:
        // columnar, crossed: equiaxed; mixed cannot be told without
        // neighbourhoods to compare).
        let n_eff = axial_mean(&all).map_or(0.0, |x| x.2);
        let cover: f64 = samples.iter().map(|s| s.side_um * s.side_um).sum::<f64>() / (w * h);
        let whole = match axial_mean(&all) {
            _ if n_eff < MIN_LOCAL_INDEPENDENT || cover < WHOLE_IMAGE_COVER => None,
            Some((r, _, _)) if r < ALIGNED_MIN_R => Some(false),
            Some((r, _, _)) if rayleigh_p(n_eff, r) < RAYLEIGH_ALPHA => Some(true),
            _ => None,
        };
        m.whole_image = true;
        match whole {
            Some(true) => {
                m.class = Some(Class::Columnar);
                if let Some((r, mean, _)) = axial_mean(&all) {
                    m.growth_dir_deg = Some(mean);
                    m.growth_spread_deg =
                        Some(0.5 * (-2.0 * r.max(1e-12).ln()).sqrt().to_degrees());
                }
            }
            Some(false) => {
                m.class = Some(Class::Equiaxed);
                m.growth_dir_deg = None;
                m.growth_spread_deg = None;
            }
            None => {
                m.reason = Some(format!(
                    "{decided} neighbourhood(s) of {step:.0} um decided (aligned or crossed) of {}, and the image's {} tile(s) cannot be read together: they cover {:.0} % of it (at least {:.0} % needed), or are too few, or their common direction may be chance",
                    m.cells.len(),
                    samples.len(),
                    100.0 * cover,
                    100.0 * WHOLE_IMAGE_COVER
                ));
            }
        }
        return m;
    }
    let f = m.aligned as f64 / decided as f64;
    m.class = Some(if f >= CLASS_SHARE && shared {
        Class::Columnar
    } else if 1.0 - f >= CLASS_SHARE || !shared {
        Class::Equiaxed
    } else {
        Class::Mixed
    });
    m
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn axial_means_of_known_sets() {
        // One direction: R = 1, its own mean; 10 and 170 degrees are 20
        // degrees apart about 0 (axes); two perpendicular families equally
        // present: R = 0; three to one: R = 0.5 (the module's reasoning,
        // arithmetic of unit vectors).
        let (r, m, n) = axial_mean(&[(30.0, 1.0), (30.0, 1.0)]).unwrap();
        assert!((r - 1.0).abs() < 1e-12 && (m - 30.0).abs() < 1e-9 && (n - 2.0).abs() < 1e-12);
        let (_, m, _) = axial_mean(&[(10.0, 1.0), (170.0, 1.0)]).unwrap();
        assert!(m.min(180.0 - m) < 1e-9, "{m}");
        let (r, _, _) = axial_mean(&[(0.0, 1.0), (90.0, 1.0)]).unwrap();
        assert!(r < 1e-12);
        // Three to one, as weights or as counts; Kish's n of weights 3 and
        // 1 is 16 / 10.
        let (r, m, _) = axial_mean(&[(45.0, 1.0), (45.0, 1.0), (45.0, 1.0), (135.0, 1.0)]).unwrap();
        assert!((r - 0.5).abs() < 1e-12 && (m - 45.0).abs() < 1e-9);
        let (r, _, n) = axial_mean(&[(45.0, 3.0), (135.0, 1.0)]).unwrap();
        assert!((r - 0.5).abs() < 1e-12 && (n - 1.6).abs() < 1e-12);
    }

    #[test]
    fn the_rayleigh_tail_is_the_exponential_of_n_r_squared() {
        // n R^2 = 3: p = exp(-3) = 0.0498 (the large-sample form).
        assert!((rayleigh_p(12.0, 0.5) - (-3.0f64).exp()).abs() < 1e-12);
        assert_eq!(rayleigh_p(0.0, 0.9), 1.0);
    }
}
