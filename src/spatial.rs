//! Where in the image: every method's local measurements (FFT tiles at
//! their centres, intercept lines at their mid-points, chains of arm
//! centres at their centroids) in one spatial index, positions in
//! micrometres from the image's top-left corner (x right, y down), and the
//! SDAS at a point from the measurements around it (`measure --at`).
//!
//! Stage: after `combine` (it reuses the combination of methods), before
//! `report`; it reads `methods` and `combine` and nothing reads it back but
//! the pipeline and the report.

use crate::blocks::point_pattern;
use crate::combine::{self, Estimate};
use crate::methods::{self, Detail, Local, Method, Outcome};
use crate::stats;
use crate::units::{Micrometres, Pixels, UmPerPx};
use kiddo::{KdTree, SquaredEuclidean};

pub mod map;
pub mod morphology;

/// One local measurement in the index.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Entry {
    pub method: Method,
    /// Position, um from the image's top-left corner (y down).
    pub x_um: f64,
    pub y_um: f64,
    /// The measurement as the method gave it (pixels).
    pub local: Local,
}

/// A k-d tree (kiddo) over the local measurements of one image.
pub struct Index {
    entries: Vec<Entry>,
    tree: KdTree<f64, 2>,
}

impl Index {
    /// The index of every local measurement of the outcomes (used or not;
    /// the queries choose), calibrated with `cal`. Measurements at a
    /// position that is not finite are left out.
    pub fn new(outcomes: &[Outcome], cal: UmPerPx) -> Self {
        let entries: Vec<Entry> = outcomes
            .iter()
            .flat_map(|o| {
                o.local.iter().map(move |l| Entry {
                    method: o.method,
                    x_um: cal.to_um(l.x).0,
                    y_um: cal.to_um(l.y).0,
                    local: *l,
                })
            })
            .filter(|e| e.x_um.is_finite() && e.y_um.is_finite())
            .collect();
        Self::of_entries(entries)
    }

    /// The index of the entries as given.
    pub fn of_entries(entries: Vec<Entry>) -> Self {
        let points: Vec<[f64; 2]> = entries.iter().map(|e| [e.x_um, e.y_um]).collect();
        // Tiles lie on a grid (many share an x or a y), which the tree's
        // buckets cannot split; `kd_tree` moves each point by at most
        // 2e-9 um per entry (2e-5 um for 10 000 entries), far below a
        // pixel, to keep coordinates distinct.
        let tree = point_pattern::kd_tree(&points);
        Self { entries, tree }
    }

    pub fn entries(&self) -> &[Entry] {
        &self.entries
    }

    pub fn len(&self) -> usize {
        self.entries.len()
    }

    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }

    /// The entries closer than `r` to the point (um), in index order.
    pub fn within(&self, p: [f64; 2], r: Micrometres) -> Vec<usize> {
        if self.entries.is_empty() || r.0.is_nan() || r.0 <= 0.0 {
            return vec![];
        }
        let mut found: Vec<usize> = self
            .tree
            .within_unsorted::<SquaredEuclidean>(&p, r.0 * r.0)
            .into_iter()
            .map(|n| n.item as usize)
            .collect();
        found.sort_unstable();
        found
    }

    /// The `k` entries nearest to the point, nearest first, each with its
    /// distance (ties in index order).
    pub fn nearest(&self, p: [f64; 2], k: usize) -> Vec<(usize, Micrometres)> {
        if self.entries.is_empty() || k == 0 {
            return vec![];
        }
        let mut found: Vec<(usize, Micrometres)> = self
            .tree
            .nearest_n::<SquaredEuclidean>(&p, k.min(self.entries.len()))
            .into_iter()
            .map(|n| (n.item as usize, Micrometres(n.distance.sqrt())))
            .collect();
        found.sort_by(|a, b| a.1 .0.total_cmp(&b.1 .0).then(a.0.cmp(&b.0)));
        found
    }
}

/// The unit of a length on the command line.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum LengthUnit {
    Micrometres,
    Pixels,
}

/// A point asked for with `--at X,Y[:R]`, as given.
#[derive(Clone, Debug, PartialEq)]
pub struct AtSpec {
    /// The text as given.
    pub text: String,
    pub x: f64,
    pub y: f64,
    /// The radius, when given.
    pub radius: Option<f64>,
    /// The unit of x, y and the radius.
    pub unit: LengthUnit,
}

/// Parses `X,Y[:R]`: the point from the image's top-left corner (y down)
/// and an optional radius. Micrometres unless a number carries `px`; a
/// `px` on any number makes them all pixels (`400,300px`, `400px,300px:50px`
/// and `400,300:50px` say the same), and `um` may be written for clarity,
/// but not beside `px`.
pub fn parse_at(s: &str) -> crate::Result<AtSpec> {
    let bad = |why: String| crate::Error::Value {
        reason: format!("'{s}': {why}"),
    };
    let text = s.trim();
    let (point, radius) = match text.split_once(':') {
        Some((p, r)) => (p, Some(r)),
        None => (text, None),
    };
    let Some((xs, ys)) = point.split_once(',') else {
        return Err(bad(
            "expected X,Y or X,Y:R (the point from the image's top-left corner, um, or pixels with a px suffix; R the radius)".into(),
        ));
    };
    let mut units = Vec::new();
    let mut number = |t: &str, what: &str| -> crate::Result<f64> {
        let t = t.trim();
        let (n, unit) = if let Some(n) = t.strip_suffix("px") {
            (n, Some(LengthUnit::Pixels))
        } else if let Some(n) = t.strip_suffix("um").or_else(|| t.strip_suffix("µm")) {
            (n, Some(LengthUnit::Micrometres))
        } else {
            (t, None)
        };
        let v: f64 = n.trim().parse().map_err(|_| {
            bad(format!(
                "{what} '{t}' is not a number (with an optional um or px suffix)"
            ))
        })?;
        if !v.is_finite() {
            return Err(bad(format!("{what} '{t}' is not a finite number")));
        }
        units.extend(unit);
        Ok(v)
    };
    let x = number(xs, "x")?;
    let y = number(ys, "y")?;
    let r = radius.map(|r| number(r, "the radius")).transpose()?;
    let px = units.contains(&LengthUnit::Pixels);
    if px && units.contains(&LengthUnit::Micrometres) {
        return Err(bad(
            "mixes um and px; give the point and the radius in one unit".into(),
        ));
    }
    if x < 0.0 || y < 0.0 {
        return Err(bad(format!(
            "the point ({x}, {y}) lies outside any image: positions are measured from the image's top-left corner and cannot be negative"
        )));
    }
    if let Some(r) = r {
        if r <= 0.0 {
            return Err(bad(format!("the radius {r} must be greater than zero")));
        }
    }
    Ok(AtSpec {
        text: text.to_string(),
        x,
        y,
        radius: r,
        unit: if px {
            LengthUnit::Pixels
        } else {
            LengthUnit::Micrometres
        },
    })
}

impl AtSpec {
    fn to_um(&self, v: f64, cal: UmPerPx) -> f64 {
        match self.unit {
            LengthUnit::Micrometres => v,
            LengthUnit::Pixels => cal.to_um(Pixels(v)).0,
        }
    }

    /// The point in um from the image's top-left corner.
    pub fn point_um(&self, cal: UmPerPx) -> [f64; 2] {
        [self.to_um(self.x, cal), self.to_um(self.y, cal)]
    }

    /// The radius in um, when given.
    pub fn radius_um(&self, cal: UmPerPx) -> Option<Micrometres> {
        self.radius.map(|r| Micrometres(self.to_um(r, cal)))
    }

    /// Whether the point lies in an image of `width` x `height` pixels.
    pub fn inside(&self, width: u32, height: u32, cal: UmPerPx) -> bool {
        let [x, y] = self.point_um(cal);
        let (w, h) = (
            cal.to_um(Pixels(width as f64)).0,
            cal.to_um(Pixels(height as f64)).0,
        );
        x <= w && y <= h
    }
}

/// Fewest independent local measurements of one method behind a local
/// value: 3, so that the Student-t interval rests on two degrees of
/// freedom (t = 4.30). With two measurements the standard deviation rests
/// on a single difference (t = 12.7): an interval in name only, whose
/// width is mostly chance. FFT tiles count a quarter each
/// ([`Method::independent_fraction`]: half-overlapping tiles share their
/// area), so a local FFT value needs 12 tiles.
pub const MIN_LOCAL_INDEPENDENT: f64 = 3.0;

/// Above this many measurements the search for the smallest radius tries
/// a radius only when the count has grown by 1 % since the last one tried:
/// the radius found is then within the next 1 % of measurements of the
/// smallest, and a query on an image of 10 000 local measurements stays
/// fast.
const EXACT_SEARCH_UP_TO: usize = 500;

/// One method's part in a local value.
#[derive(Clone, Debug, PartialEq)]
pub struct AtMethod {
    pub method: Method,
    /// Its used local measurements within the radius.
    pub n: usize,
    /// Of those, how many count as independent.
    pub n_eff: f64,
    pub value: Option<Micrometres>,
    pub ci95: Option<[Micrometres; 2]>,
    /// Why it has no local value, when it has none.
    pub reason: Option<String>,
}

/// The SDAS at a point.
#[derive(Clone, Debug, PartialEq)]
pub struct AtResult {
    pub spec: AtSpec,
    /// The point, um from the image's top-left corner.
    pub x_um: f64,
    pub y_um: f64,
    /// The radius the value rests on: the one given, or the smallest that
    /// gives a value (the distance of the farthest measurement in it);
    /// none when the point lies outside the image.
    pub radius_um: Option<Micrometres>,
    /// Whether the radius was given (else chosen).
    pub radius_given: bool,
    /// The local value: the methods' local values combined as the image's
    /// are ([`combine::combine`]).
    pub estimate: Estimate,
    pub methods: Vec<AtMethod>,
    /// The test that the measurements behind the value (or behind the
    /// value refused for it) are one population around the point, when it
    /// was made.
    pub population: Option<Population>,
}

/// A method's local outcome from its used local measurements `locals`
/// near a point, in the method-neutral shape, with the statistics the
/// method uses for its own value (so a local value is read as the image's
/// is): the FFT's quality-weighted median of tiles with the standard error
/// of a median (1.2533 s / sqrt(n_eff), s the MAD-based standard
/// deviation); the mean of lines or chains with its Student-t interval.
/// Then its bias and the evidence rule, as every method's value
/// ([`methods::with_bias`], [`methods::require_support`]). `image` is the
/// method's outcome on the whole image: its row spacing goes with the local
/// outcome, so that the combination leaves out a method reading the rows
/// here as it does for the image.
fn local_outcome(image: &Outcome, locals: &[&Local]) -> (Outcome, Vec<usize>, f64) {
    let method = image.method;
    let n = locals.len();
    let n_eff = n as f64 * method.independent_fraction();
    let mut o = Outcome {
        method,
        value: None,
        ci95: None,
        n,
        spread: None,
        reason: None,
        warnings: vec![],
        local: vec![],
        for_target: None,
        indicative: None,
        detail: light_detail(image),
    };
    if image.value.is_none() {
        o.reason =
            Some("no value on the whole image, so none of its local measurements is used".into());
        return (o, vec![], 0.0);
    }
    if n_eff < MIN_LOCAL_INDEPENDENT {
        o.reason = Some(format!(
            "{n} local measurement(s) ({n_eff:.1} independent) within the radius; a local value needs {MIN_LOCAL_INDEPENDENT:.0} independent"
        ));
        return (o, vec![], n_eff);
    }
    let values: Vec<f64> = locals.iter().map(|l| l.spacing.0).collect();
    // The positions (in `locals`) of the measurements the value rests on,
    // after the method's screen.
    let mut kept: Vec<usize> = (0..n).collect();
    let stat = match method {
        Method::Fft => {
            // The method's own weights, ln(quality), and its own screen:
            // tiles further than three robust standard deviations from the
            // weighted median are left out and the median taken again
            // (`methods::fft`), here among the neighbourhood's tiles.
            let w: Vec<f64> = locals
                .iter()
                .map(|l| l.quality.map_or(1.0, |q| q.ln().max(0.0)))
                .collect();
            let wm =
                |v: &[f64], w: &[f64]| stats::weighted_median(v, w).or_else(|| stats::median(v));
            wm(&values, &w).and_then(|m0| {
                let s0 = stats::mad_sd(&values, m0).unwrap_or(0.0);
                let limit = (3.0 * s0).max(1e-9 * m0);
                kept.retain(|&i| (values[i] - m0).abs() <= limit);
                let (kv, kw): (Vec<f64>, Vec<f64>) =
                    kept.iter().map(|&i| (values[i], w[i])).unzip();
                o.n = kv.len();
                let n_eff = kv.len() as f64 * method.independent_fraction();
                if n_eff < MIN_LOCAL_INDEPENDENT {
                    return None;
                }
                let m = wm(&kv, &kw)?;
                let s = stats::mad_sd(&kv, m)?;
                let t = stats::t_quantile(0.975, n_eff - 1.0)?;
                Some((m, t * 1.2533 * s / n_eff.sqrt(), s))
            })
        }
        Method::Intercept => {
            // The method's screen of lines (modified z-score over 3.5,
            // Iglewicz & Hoaglin 1993), among the neighbourhood's lines.
            let med = stats::median(&values).unwrap_or(f64::NAN);
            let sd = stats::mad_sd(&values, med).unwrap_or(0.0);
            kept.retain(|&i| sd <= 0.0 || (values[i] - med).abs() <= 3.5 * sd);
            let kv: Vec<f64> = kept.iter().map(|&i| values[i]).collect();
            o.n = kv.len();
            if (kv.len() as f64) < MIN_LOCAL_INDEPENDENT {
                None
            } else {
                stats::Summary::of(&kv).map(|s| (s.mean, s.ci95_half_width, s.sd))
            }
        }
        Method::Centres => stats::Summary::of(&values).map(|s| (s.mean, s.ci95_half_width, s.sd)),
    };
    match stat {
        Some((m, half, s)) => {
            o.value = Some(Pixels(m));
            o.ci95 = Some([Pixels(m - half), Pixels(m + half)]);
            o.spread = Some(Pixels(s));
        }
        None => {
            o.reason = Some(format!(
                "{} of {n} local measurement(s) within the radius left after the method's outlier screen, too few for a value with a spread (a local value needs {MIN_LOCAL_INDEPENDENT:.0} independent)",
                o.n
            ))
        }
    }
    let n_eff = kept.len() as f64 * method.independent_fraction();
    (methods::require_support(methods::with_bias(o)), kept, n_eff)
}

/// The method's detail with only what the combination reads of it (the
/// row spacing), so that each radius tried does not copy every tile.
fn light_detail(image: &Outcome) -> Detail {
    match &image.detail {
        Detail::Fft(f) => Detail::Fft(crate::methods::fft::FftOutcome {
            value_px: None,
            ci95_px: None,
            spread_px: None,
            n_tiles_used: 0,
            n_tiles_analysed: 0,
            window_px: f.window_px,
            orientation_deg: None,
            orientation_coherence: None,
            tiles: vec![],
            reason: None,
            row_spacing_px: f.row_spacing_px,
            read_along_rows: f.read_along_rows,
            // Judged on the whole image's value only (the local cells
            // carry no FFT value of the image to compare with).
            rows_undecided: None,
        }),
        Detail::Intercept(_) => Detail::Intercept(crate::methods::intercept::InterceptOutcome {
            value_px: None,
            ci95_px: None,
            sd_px: None,
            n_lines: 0,
            rel_accuracy_pct: None,
            lines: vec![],
            reason: None,
        }),
        Detail::Centres(c) => Detail::Centres(crate::methods::centres::CentresOutcome {
            row_spacing_px: c.row_spacing_px,
            ..Default::default()
        }),
    }
}

/// A local value: the combination, each method's part, and the entries
/// (indices into the index) of the methods in the combined value that
/// passed their method's screen, which the value rests on.
struct Evaluated {
    estimate: Estimate,
    parts: Vec<AtMethod>,
    behind: Vec<usize>,
}

/// The local value from the used entries `chosen` (indices into the
/// index): each method's local outcome, then their combination.
fn evaluate(
    index: &Index,
    chosen: &[usize],
    outcomes: &[Outcome],
    cal: UmPerPx,
    cal_rel_u: Option<f64>,
) -> Evaluated {
    let mut n_effs = Vec::with_capacity(outcomes.len());
    let (local, kept): (Vec<Outcome>, Vec<Vec<usize>>) = outcomes
        .iter()
        .map(|o| {
            let mine: Vec<usize> = chosen
                .iter()
                .copied()
                .filter(|&i| index.entries[i].method == o.method)
                .collect();
            let locals: Vec<&Local> = mine.iter().map(|&i| &index.entries[i].local).collect();
            let (out, k, n_eff) = local_outcome(o, &locals);
            n_effs.push(n_eff);
            (out, k.into_iter().map(|j| mine[j]).collect())
        })
        .unzip();
    let mut estimate = combine::combine(&local, cal, cal_rel_u);
    if estimate.value.is_some() {
        estimate.n_eff = local
            .iter()
            .zip(&n_effs)
            .filter(|(o, _)| estimate.methods.contains(&o.method))
            .map(|(_, n)| n)
            .sum();
    }
    // As for the image: a local reading that did not enter the local value
    // is not shown as a value (the reason keeps the figure).
    let local = combine::withhold_unused(local, &estimate);
    let parts = local
        .iter()
        .zip(&n_effs)
        .map(|(o, &n_eff)| AtMethod {
            method: o.method,
            n: o.n,
            n_eff,
            value: o.value.map(|v| cal.to_um(v)),
            ci95: o.ci95.map(|c| c.map(|v| cal.to_um(v))),
            reason: o.reason.clone(),
        })
        .collect();
    let behind = local
        .iter()
        .zip(kept)
        .filter(|(o, _)| estimate.methods.contains(&o.method))
        .flat_map(|(_, k)| k)
        .collect();
    Evaluated {
        estimate,
        parts,
        behind,
    }
}

/// Significance level of the test that a neighbourhood holds one
/// population: 5 %, the common level of a test (common practice, no single
/// source). A neighbourhood found to hold two is given no value; one that
/// holds two but passes by chance (power) is what the interval must then
/// cover, so the level is not made stricter than common practice.
pub const ONE_POPULATION_ALPHA: f64 = 0.05;

/// Largest offset of the measurements' centroid from the point, as a
/// fraction of the radius, for a value to be read as the point's: 1/2. For
/// measurements spread evenly around the point within a radius R, each
/// coordinate of their centroid has a standard deviation of R / (2
/// sqrt(n)) (a uniform disc's coordinate has variance R^2 / 4); with the
/// fewest independent measurements a combined value rests on (two methods
/// of 3), 0.2 R, and an offset beyond R / 2 arises by chance in 4 % of
/// neighbourhoods (Rayleigh tail, exp(-(0.5 / 0.2)^2 / 2)). Beyond it the
/// measurements lie to one side: their value is that of another place.
pub const MAX_CENTROID_OFFSET: f64 = 0.5;

/// Largest default radius in local arm spacings: 20. A local value needs
/// about a dozen local measurements of each of two methods, each spanning a
/// few spacings (an FFT tile holds several periods, an intercept line or a
/// chain of centres some arms); a field covered with them holds that many
/// within about 10 spacings of a point, and twice that leaves room for half
/// of the neighbourhood without measurements (background, parts left out).
/// Farther, the value no longer describes the surroundings of the point
/// but a region of the section, which the image's value already describes.
pub const MAX_RADIUS_SPACINGS: f64 = 20.0;

/// Largest default radius as the disc's share of the image's area: a
/// quarter. A local value describes the place around the point as distinct
/// from the rest of the field; a disc over more than a quarter of the
/// image leaves fewer than four disjoint places of its size in the field,
/// and its value is mostly the image's own (reported as such), not that of
/// a place in it.
pub const MAX_RADIUS_IMAGE_SHARE: f64 = 0.25;

/// The test that the measurements behind a local value are one population.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Population {
    /// The F statistic of a plane (the log spacing changing linearly across
    /// the neighbourhood) against one level per method, its degrees of
    /// freedom and its p-value.
    pub f: f64,
    pub df: (f64, f64),
    pub p: f64,
    /// The plane's change of the spacing across the neighbourhood's
    /// diameter, relative (0.1: 10 %).
    pub change_rel: f64,
    /// Distance of the measurements' centroid from the point, um.
    pub offset_um: f64,
    /// The neighbourhood's radius the test was made with, um.
    pub radius_um: f64,
}

/// What the test says of a neighbourhood.
#[derive(Clone, Debug, PartialEq)]
enum Verdict {
    /// One population around the point.
    One(Population),
    /// The spacing changes across the neighbourhood (the reason).
    Two(Population, String),
    /// The measurements lie to one side of the point (the reason).
    OneSided(Population, String),
    /// Too few measurements, or placed so, that the test cannot be made.
    Untestable(String),
}

/// Solves the symmetric system `a x = b` (q x q, row-major) by Gaussian
/// elimination with partial pivoting; `None` when it is singular.
fn solve(mut a: Vec<f64>, mut b: Vec<f64>, q: usize) -> Option<Vec<f64>> {
    for c in 0..q {
        let piv = (c..q).max_by(|&i, &j| a[i * q + c].abs().total_cmp(&a[j * q + c].abs()))?;
        let scale = (0..q).map(|k| a[c * q + k].abs()).fold(0.0, f64::max);
        if a[piv * q + c].abs() <= 1e-12 * scale.max(1e-300) {
            return None;
        }
        for k in 0..q {
            a.swap(c * q + k, piv * q + k);
        }
        b.swap(c, piv);
        for r in c + 1..q {
            let m = a[r * q + c] / a[c * q + c];
            for k in c..q {
                a[r * q + k] -= m * a[c * q + k];
            }
            b[r] -= m * b[c];
        }
    }
    let mut x = vec![0.0; q];
    for c in (0..q).rev() {
        let s: f64 = (c + 1..q).map(|k| a[c * q + k] * x[k]).sum();
        x[c] = (b[c] - s) / a[c * q + c];
    }
    Some(x)
}

/// The F test of a plane: weighted least squares of the log spacing
/// `obs` (level, u, v, log spacing, weight as a share of an independent
/// measurement) with one level per method, against the levels with a plane
/// in (u, v) added. Each observation weighs its share over its method's
/// variance about its level (methods differ in scatter); the residual
/// degrees of freedom are the independent measurements' less the
/// parameters. `None` when they are fewer than one or the positions lie on
/// one line. Gives (F, residual degrees of freedom, p, the plane's slope
/// per unit of u and v).
fn plane_test(obs: &[(usize, f64, f64, f64, f64)], k: usize) -> Option<(f64, f64, f64, f64)> {
    let q = k + 2;
    let mut mean = vec![0.0; k];
    let mut count = vec![0usize; k];
    for o in obs {
        mean[o.0] += o.3;
        count[o.0] += 1;
    }
    for m in 0..k {
        mean[m] /= count[m].max(1) as f64;
    }
    let mut var = vec![0.0; k];
    for o in obs {
        var[o.0] += (o.3 - mean[o.0]).powi(2);
    }
    for m in 0..k {
        // A floor far below any measurement's scatter (1e-4 relative),
        // only against division by zero on identical values.
        var[m] = (var[m] / count[m].saturating_sub(1).max(1) as f64).max(1e-8);
    }
    let w: Vec<f64> = obs.iter().map(|o| o.4 / var[o.0]).collect();
    let n_eff: f64 = obs.iter().map(|o| o.4).sum();
    let df2 = n_eff - q as f64;
    if df2 < 1.0 {
        return None;
    }
    let mut a = vec![0.0; q * q];
    let mut b = vec![0.0; q];
    for (o, &wi) in obs.iter().zip(&w) {
        let mut row = vec![0.0; q];
        row[o.0] = 1.0;
        row[k] = o.1;
        row[k + 1] = o.2;
        for r in 0..q {
            b[r] += wi * row[r] * o.3;
            for c in 0..q {
                a[r * q + c] += wi * row[r] * row[c];
            }
        }
    }
    let beta = solve(a, b, q)?;
    let (mut rss0, mut rss1) = (0.0, 0.0);
    let mut wmean = vec![(0.0, 0.0); k];
    for (o, &wi) in obs.iter().zip(&w) {
        wmean[o.0].0 += wi * o.3;
        wmean[o.0].1 += wi;
    }
    for (o, &wi) in obs.iter().zip(&w) {
        let m0 = wmean[o.0].0 / wmean[o.0].1;
        rss0 += wi * (o.3 - m0).powi(2);
        let fit = beta[o.0] + beta[k] * o.1 + beta[k + 1] * o.2;
        rss1 += wi * (o.3 - fit).powi(2);
    }
    let explained = (rss0 - rss1).max(0.0);
    let f = if rss1 > 0.0 {
        (explained / 2.0) / (rss1 / df2)
    } else if explained > 0.0 {
        f64::INFINITY
    } else {
        0.0
    };
    let p = if f.is_infinite() {
        0.0
    } else {
        stats::f_upper_tail(f, 2.0, df2).unwrap_or(1.0)
    };
    Some((f, df2, p, beta[k].hypot(beta[k + 1])))
}

/// Whether the measurements `behind` a local value (indices into the
/// index) are one population around the point `p`, within `radius` um.
///
/// The test: the logarithm of each measurement's spacing against its
/// position ([`plane_test`]): one level per method (the methods read the
/// same arms with biases of their own) against the levels and a plane (a
/// spacing that changes across the neighbourhood: a gradient, or a
/// boundary between two parts on one side of the point; a step projects
/// onto the plane). The nested linear model's F test (common practice, no
/// single source), on all the methods' measurements together, and on each
/// method's alone (a method whose measurements are few and straddle the
/// boundary, such as long intercept lines placed by their mid-points, can
/// hide the change that another method's show). Not one population when
/// any of these finds the plane at [`ONE_POPULATION_ALPHA`]: the tests are
/// not corrected for their number, since a false alarm costs a value
/// (none, with the reason) while a missed change gives a confident wrong
/// one. Then the centroid of the measurements must lie within
/// [`MAX_CENTROID_OFFSET`] of the radius from the point.
fn population(index: &Index, behind: &[usize], p: [f64; 2], radius: f64) -> Verdict {
    let mut methods: Vec<Method> = behind.iter().map(|&i| index.entries[i].method).collect();
    methods.sort_by_key(|m| m.name());
    methods.dedup();
    let k = methods.len();
    if behind.is_empty() || radius.is_nan() || radius <= 0.0 {
        return Verdict::Untestable("no measurements to test".into());
    }
    let level = |e: &Entry| methods.iter().position(|m| *m == e.method).unwrap_or(0);
    // Each measurement weighs its share of an independent one (an FFT
    // tile a quarter, `Method::independent_fraction`).
    let obs: Vec<(usize, f64, f64, f64, f64)> = behind
        .iter()
        .map(|&i| {
            let e = &index.entries[i];
            let s = e.method.independent_fraction();
            (
                level(e),
                (e.x_um - p[0]) / radius,
                (e.y_um - p[1]) / radius,
                e.local.spacing.0.ln(),
                s,
            )
        })
        .filter(|o| o.3.is_finite())
        .collect();
    let n_eff: f64 = obs.iter().map(|o| o.4).sum();
    // The centroid, each measurement weighing its share.
    let (cx, cy) = obs
        .iter()
        .fold((0.0, 0.0), |(x, y), o| (x + o.4 * o.1, y + o.4 * o.2));
    let offset = (cx / n_eff).hypot(cy / n_eff) * radius;
    let Some((f, df2, pv, slope)) = plane_test(&obs, k) else {
        return Verdict::Untestable(format!(
            "{n_eff:.1} independent measurements behind the value, too few (or placed on one line) to test that they are one population (a plane and {k} method level(s) need at least {})",
            k + 3
        ));
    };
    let mut pop = Population {
        f,
        df: (2.0, df2),
        p: pv,
        change_rel: (2.0 * slope).exp() - 1.0,
        offset_um: offset,
        radius_um: radius,
    };
    let mut which = "all methods' measurements together".to_string();
    if pv >= ONE_POPULATION_ALPHA && k > 1 {
        for (m, method) in methods.iter().enumerate() {
            let mine: Vec<(usize, f64, f64, f64, f64)> = obs
                .iter()
                .filter(|o| o.0 == m)
                .map(|o| (0, o.1, o.2, o.3, o.4))
                .collect();
            if let Some((f, df2, pv, slope)) = plane_test(&mine, 1) {
                if pv < pop.p {
                    pop = Population {
                        f,
                        df: (2.0, df2),
                        p: pv,
                        change_rel: (2.0 * slope).exp() - 1.0,
                        offset_um: offset,
                        radius_um: radius,
                    };
                    which = format!("the {} measurements", method.name());
                }
            }
        }
    }
    if pop.p < ONE_POPULATION_ALPHA {
        return Verdict::Two(
            pop,
            format!(
                "the measurements within {radius:.1} um are not one population: in {which} the spacing changes by {:.0} % across the neighbourhood (F = {:.1} on 2 and {:.1} degrees of freedom, p = {:.3}; a boundary between parts or a gradient)",
                100.0 * pop.change_rel, pop.f, pop.df.1, pop.p
            ),
        );
    }
    if offset > MAX_CENTROID_OFFSET * radius {
        return Verdict::OneSided(
            pop,
            format!(
                "the measurements within {radius:.1} um lie to one side of the point (their centroid {offset:.1} um from it, more than half the radius): their value is that of another place"
            ),
        );
    }
    Verdict::One(pop)
}

/// Whether a local measurement may enter a local value of an image whose
/// method outcomes are `outcomes` (see [`at`]).
pub fn enters_local_values(e: &Entry, outcomes: &[Outcome], fft_min_quality: f64) -> bool {
    let fft_valued = outcomes
        .iter()
        .any(|o| o.method == Method::Fft && o.value.is_some());
    let valued = outcomes
        .iter()
        .any(|o| o.method == e.method && o.value.is_some());
    valued && counts(e, fft_valued, fft_min_quality)
}

/// Whether a local measurement may enter a local value (see the notes in
/// [`at`]): used by its method, or for the FFT (when it has a value on the
/// image) a reliable tile.
fn counts(e: &Entry, fft_valued: bool, fft_min_quality: f64) -> bool {
    match e.method {
        Method::Fft => {
            fft_valued
                && e.local.spacing.0.is_finite()
                && e.local.quality.is_some_and(|q| q >= fft_min_quality)
        }
        _ => e.local.used,
    }
}

/// The SDAS at a point of an image of `width` x `height` pixels, from the
/// local measurements that entered their method's value (`used`).
///
/// With a radius given, from the used measurements closer than it. Without
/// one, from the smallest radius that gives a value: the measurements are
/// taken nearest first, and the first set for which the combination gives
/// a value stands. A value needs, as the image's does, two methods that
/// agree (when more than one was run), each with at least
/// [`MIN_LOCAL_INDEPENDENT`] independent measurements for its Student-t
/// interval. A larger radius averages over more of the casting, which may
/// vary; the smallest one keeps the value as local as the evidence allows,
/// and the radius is reported beside it. A value stands only when the
/// measurements behind it are one population around the point
/// ([`population`]); a radius whose measurements hold two ends the search
/// (a larger one holds both as well), and the search ends at
/// [`MAX_RADIUS_SPACINGS`] local spacings or a disc of
/// [`MAX_RADIUS_IMAGE_SHARE`] of the image. No value, with the reason,
/// when no radius gives one, or the point lies outside the image.
pub fn at(
    index: &Index,
    spec: &AtSpec,
    outcomes: &[Outcome],
    cal: UmPerPx,
    cal_rel_u: Option<f64>,
    (width, height): (u32, u32),
    fft_min_quality: f64,
) -> AtResult {
    let [x_um, y_um] = spec.point_um(cal);
    let given = spec.radius_um(cal);
    let result = |radius_um, estimate, methods, population| AtResult {
        spec: spec.clone(),
        x_um,
        y_um,
        radius_um,
        radius_given: given.is_some(),
        estimate,
        methods,
        population,
    };
    if !spec.inside(width, height, cal) {
        let (w, h) = (
            cal.to_um(Pixels(width as f64)).0,
            cal.to_um(Pixels(height as f64)).0,
        );
        return result(
            None,
            Estimate::none(format!(
                "the point ({x_um:.1}, {y_um:.1}) um lies outside the image ({w:.1} x {h:.1} um, {width} x {height} px)"
            )),
            vec![],
            None,
        );
    }
    let p = [x_um, y_um];
    // The local measurements a local value may rest on: those that entered
    // their method's value (`used`), but for the FFT every reliable tile
    // (a spectral peak of the method's quality; the tiles below it are
    // left out as the method leaves them out). The FFT's `used` also holds
    // its outlier screen around the image's median, which presumes one
    // spacing over the image: in a casting whose spacing changes across
    // the field, it drops the tiles of the part that differs from the
    // majority, and a point there would read the majority's spacing. The
    // same screen is applied among the neighbourhood's tiles instead
    // (`local_outcome`). Only methods with a value on the image count.
    let fft_valued = outcomes
        .iter()
        .any(|o| o.method == Method::Fft && o.value.is_some());
    let used = |i: &usize| counts(&index.entries[*i], fft_valued, fft_min_quality);
    // A value stands only when its measurements are one population around
    // the point (`population`); otherwise none, with the reason.
    let refuse = |mut e: Estimate, why: String| {
        e.value = None;
        e.ci95 = None;
        e.budget = None;
        e.reason = Some(why);
        e
    };
    if let Some(r) = given {
        let chosen: Vec<usize> = index.within(p, r).into_iter().filter(used).collect();
        let ev = evaluate(index, &chosen, outcomes, cal, cal_rel_u);
        let mut e = ev.estimate;
        if e.value.is_none() {
            if let Some(why) = e.reason.take() {
                e.reason = Some(format!("within {:.1} um: {why}", r.0));
            }
            return result(Some(r), e, ev.parts, None);
        }
        return match population(index, &ev.behind, p, r.0) {
            Verdict::One(pop) => result(Some(r), e, ev.parts, Some(pop)),
            Verdict::Two(pop, why) | Verdict::OneSided(pop, why) => {
                result(Some(r), refuse(e, why), ev.parts, Some(pop))
            }
            Verdict::Untestable(why) => result(
                Some(r),
                refuse(e, format!("within {:.1} um: {why}", r.0)),
                ev.parts,
                None,
            ),
        };
    }
    let order: Vec<(usize, Micrometres)> = index
        .nearest(p, index.len())
        .into_iter()
        .filter(|(i, _)| used(i))
        .collect();
    let needed = outcomes.iter().filter(|o| o.value.is_some()).count().min(2);
    let r_image = {
        let (w, h) = (
            cal.to_um(Pixels(width as f64)).0,
            cal.to_um(Pixels(height as f64)).0,
        );
        (MAX_RADIUS_IMAGE_SHARE * w * h / std::f64::consts::PI).sqrt()
    };
    let mut counts = vec![0.0f64; outcomes.len()];
    let mut tried_at = 0usize;
    let mut last: Option<(Micrometres, Estimate, Vec<AtMethod>, Option<Population>)> = None;
    let mut stop: Option<String> = None;
    for (k, &(i, d)) in order.iter().enumerate() {
        if let Some(slot) = outcomes
            .iter()
            .position(|o| o.method == index.entries[i].method)
        {
            counts[slot] += index.entries[i].method.independent_fraction();
        }
        // Entries at the same distance enter together.
        if order.get(k + 1).is_some_and(|n| n.1 .0 <= d.0) {
            continue;
        }
        let ready = counts
            .iter()
            .filter(|&&c| c >= MIN_LOCAL_INDEPENDENT)
            .count();
        if needed == 0 || ready < needed {
            continue;
        }
        let n = k + 1;
        if n > EXACT_SEARCH_UP_TO && n < order.len() && (n - tried_at) * 100 < tried_at {
            continue;
        }
        tried_at = n;
        // The radius is bounded by the local spacing (the median of the
        // measurements within it, um).
        let spacings: Vec<f64> = order[..n]
            .iter()
            .map(|&(j, _)| cal.to_um(index.entries[j].local.spacing).0)
            .collect();
        let local_spacing = stats::median(&spacings).unwrap_or(f64::NAN);
        let r_max = (MAX_RADIUS_SPACINGS * local_spacing).min(r_image);
        if d.0 > r_max {
            stop = Some(format!(
                "no radius up to {r_max:.1} um ({MAX_RADIUS_SPACINGS:.0} local spacings of {local_spacing:.1} um, or a disc of a quarter of the image, {r_image:.1} um, whichever is smaller) gives a value from one population around the point"
            ));
            break;
        }
        let chosen: Vec<usize> = order[..n].iter().map(|&(i, _)| i).collect();
        let ev = evaluate(index, &chosen, outcomes, cal, cal_rel_u);
        if ev.estimate.value.is_none() {
            last = Some((d, ev.estimate, ev.parts, None));
            continue;
        }
        match population(index, &ev.behind, p, d.0) {
            Verdict::One(pop) => return result(Some(d), ev.estimate, ev.parts, Some(pop)),
            // A larger radius holds the other population as well: stop.
            Verdict::Two(pop, why) => {
                return result(
                    None,
                    refuse(
                        ev.estimate,
                        format!("no radius gives a value from one population: {why}"),
                    ),
                    ev.parts,
                    Some(pop),
                )
            }
            // A larger radius may reach the other side, or bring enough
            // measurements for the test.
            Verdict::OneSided(pop, why) => {
                last = Some((d, refuse(ev.estimate, why), ev.parts, Some(pop)));
            }
            Verdict::Untestable(why) => {
                last = Some((d, refuse(ev.estimate, why), ev.parts, None));
            }
        }
    }
    // No radius within the bound had the measurements a value needs: what
    // the whole image gives says nothing about the point, so none of it is
    // reported for the point.
    if let (Some(s), None) = (&stop, &last) {
        return result(
            None,
            Estimate::none(format!(
                "{s}: within it, fewer methods than a value needs (two, or the only one run) have the {MIN_LOCAL_INDEPENDENT} independent local measurements each needs"
            )),
            Vec::new(),
            None,
        );
    }
    let (reach, mut e, m, pop) = match last {
        Some(l) => l,
        None => {
            let chosen: Vec<usize> = order.iter().map(|&(i, _)| i).collect();
            let ev = evaluate(index, &chosen, outcomes, cal, cal_rel_u);
            (
                order.last().map_or(Micrometres(0.0), |o| o.1),
                ev.estimate,
                ev.parts,
                None,
            )
        }
    };
    e.value = None;
    e.ci95 = None;
    e.budget = None;
    let why = e.reason.take().unwrap_or_default();
    e.reason = Some(match stop {
        Some(s) => format!("{s}; at {:.1} um: {why}", reach.0),
        None => format!(
            "no radius gives a value from one population (up to {:.1} um, all {} used local measurements of the image): {why}",
            reach.0,
            order.len()
        ),
    });
    result(None, e, m, pop)
}

/// A line asked for with `--along X0,Y0:X1,Y1[:BIN]`, as given.
#[derive(Clone, Debug, PartialEq)]
pub struct AlongSpec {
    /// The text as given.
    pub text: String,
    pub from: [f64; 2],
    pub to: [f64; 2],
    /// The bin length, when given.
    pub bin: Option<f64>,
    pub unit: LengthUnit,
}

/// Bins along a line when no bin length is given: 10, a profile's
/// resolution that still leaves each bin a tenth of the line to hold the
/// measurements a local value needs.
pub const DEFAULT_BINS: usize = 10;

/// Parses `X0,Y0:X1,Y1[:BIN]` (units as in [`parse_at`]).
pub fn parse_along(s: &str) -> crate::Result<AlongSpec> {
    let bad = |why: String| crate::Error::Value {
        reason: format!("'{s}': {why}"),
    };
    let text = s.trim();
    let parts: Vec<&str> = text.split(':').collect();
    if !(2..=3).contains(&parts.len()) {
        return Err(bad(
            "expected X0,Y0:X1,Y1 or X0,Y0:X1,Y1:BIN (the line's ends from the image's top-left corner, um, or pixels with a px suffix; BIN the bin length)".into(),
        ));
    }
    // Each end is read as a point, the bin as a radius would be.
    let a = parse_at(parts[0]).map_err(|e| bad(format!("its start: {e}")))?;
    let b = match parts.get(2) {
        Some(bin) => parse_at(&format!("{}:{bin}", parts[1])),
        None => parse_at(parts[1]),
    }
    .map_err(|e| bad(format!("its end or bin: {e}")))?;
    let explicit = |t: &str| t.contains("um") || t.contains("µm");
    let px = a.unit == LengthUnit::Pixels || b.unit == LengthUnit::Pixels;
    if px && parts.iter().any(|t| explicit(t)) {
        return Err(bad("mixes um and px; give the line in one unit".into()));
    }
    if a.x == b.x && a.y == b.y {
        return Err(bad("the line's two ends are the same point".into()));
    }
    Ok(AlongSpec {
        text: text.to_string(),
        from: [a.x, a.y],
        to: [b.x, b.y],
        bin: b.radius,
        unit: if px {
            LengthUnit::Pixels
        } else {
            LengthUnit::Micrometres
        },
    })
}

/// One bin of a profile.
#[derive(Clone, Debug, PartialEq)]
pub struct Bin {
    /// Distance of the bin's centre from the line's start, um.
    pub distance_um: f64,
    /// The bin's centre, um from the top-left corner.
    pub x_um: f64,
    pub y_um: f64,
    pub estimate: Estimate,
    /// Each method's value in the bin.
    pub methods: Vec<AtMethod>,
}

/// SDAS against distance along a line.
#[derive(Clone, Debug, PartialEq)]
pub struct Profile {
    pub spec: AlongSpec,
    pub from_um: [f64; 2],
    pub to_um: [f64; 2],
    pub bin_um: f64,
    pub bins: Vec<Bin>,
    /// Why there is no profile (a line leaving the image).
    pub reason: Option<String>,
}

/// The profile along a line: the line cut into bins of equal length, each
/// bin the square of that side centred on the line (so a bin weighs the
/// field beside the line as far as along it), and each bin's value from
/// the measurements in its square as [`at`] reads a neighbourhood (the same
/// measurements, statistics and combination).
pub fn along(
    index: &Index,
    spec: &AlongSpec,
    outcomes: &[Outcome],
    cal: UmPerPx,
    cal_rel_u: Option<f64>,
    (width, height): (u32, u32),
    fft_min_quality: f64,
) -> Profile {
    let um = |v: f64| match spec.unit {
        LengthUnit::Micrometres => v,
        LengthUnit::Pixels => cal.to_um(Pixels(v)).0,
    };
    let (a, b) = (
        [um(spec.from[0]), um(spec.from[1])],
        [um(spec.to[0]), um(spec.to[1])],
    );
    let len = (b[0] - a[0]).hypot(b[1] - a[1]);
    let bin = spec.bin.map_or(len / DEFAULT_BINS as f64, um).min(len);
    let mut p = Profile {
        spec: spec.clone(),
        from_um: a,
        to_um: b,
        bin_um: bin,
        bins: vec![],
        reason: None,
    };
    let (w, h) = (
        cal.to_um(Pixels(width as f64)).0,
        cal.to_um(Pixels(height as f64)).0,
    );
    let inside = |q: [f64; 2]| q[0] >= 0.0 && q[1] >= 0.0 && q[0] <= w && q[1] <= h;
    if !inside(a) || !inside(b) {
        p.reason = Some(format!(
            "the line leaves the image ({w:.1} x {h:.1} um, {width} x {height} px)"
        ));
        return p;
    }
    // A bin narrower than a pixel holds no local measurement of its own
    // (every local spacing spans two pixels or more), and a tiny bin would
    // ask for a number of bins without bound.
    let px_um = cal.to_um(Pixels(1.0)).0;
    if bin.is_nan() || bin < px_um {
        p.reason = Some(format!(
            "the bin ({bin:.3e} um) is narrower than a pixel ({px_um:.3e} um): no local measurement is that narrow; give a bin of a pixel or more"
        ));
        return p;
    }
    let u = [(b[0] - a[0]) / len, (b[1] - a[1]) / len];
    let n = (len / bin).round().max(1.0) as usize;
    let step = len / n as f64;
    let fft_valued = outcomes
        .iter()
        .any(|o| o.method == Method::Fft && o.value.is_some());
    for k in 0..n {
        let t0 = k as f64 * step;
        let c = [
            a[0] + u[0] * (t0 + 0.5 * step),
            a[1] + u[1] * (t0 + 0.5 * step),
        ];
        let chosen: Vec<usize> = index
            .within(
                c,
                Micrometres(step * std::f64::consts::FRAC_1_SQRT_2 * 1.0001),
            )
            .into_iter()
            .filter(|&i| {
                let e = &index.entries[i];
                let (dx, dy) = (e.x_um - a[0], e.y_um - a[1]);
                let along = dx * u[0] + dy * u[1];
                let across = (-dx * u[1] + dy * u[0]).abs();
                counts(e, fft_valued, fft_min_quality)
                    && along >= t0
                    && along < t0 + step
                    && across <= 0.5 * step
            })
            .collect();
        let ev = evaluate(index, &chosen, outcomes, cal, cal_rel_u);
        let mut estimate = ev.estimate;
        // A bin's value, as a point's, rests on one population: a bin
        // across a boundary or a steep gradient gives none.
        if estimate.value.is_some() {
            let why = match population(index, &ev.behind, c, 0.5 * step) {
                Verdict::Two(_, why) | Verdict::Untestable(why) => Some(why),
                Verdict::One(_) | Verdict::OneSided(..) => None,
            };
            if let Some(why) = why {
                estimate.value = None;
                estimate.ci95 = None;
                estimate.budget = None;
                estimate.reason = Some(why);
            }
        }
        let methods = ev.parts;
        p.bins.push(Bin {
            distance_um: t0 + 0.5 * step,
            x_um: c[0],
            y_um: c[1],
            estimate,
            methods,
        });
    }
    p
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_points_radii_and_units() {
        let a = parse_at("120,340").unwrap();
        assert_eq!(
            (a.x, a.y, a.radius, a.unit),
            (120.0, 340.0, None, LengthUnit::Micrometres)
        );
        let b = parse_at(" 400,300:50px ").unwrap();
        assert_eq!(
            (b.x, b.y, b.radius, b.unit),
            (400.0, 300.0, Some(50.0), LengthUnit::Pixels)
        );
        let c = parse_at("400px,300px").unwrap();
        assert_eq!(c.unit, LengthUnit::Pixels);
        let d = parse_at("1.5um,2e1um:3um").unwrap();
        assert_eq!((d.x, d.y, d.radius), (1.5, 20.0, Some(3.0)));
    }

    #[test]
    fn refuses_absurd_points_with_the_value() {
        for (s, says) in [
            ("12", "expected X,Y"),
            ("a,3", "x 'a' is not a number"),
            ("3,4:-2", "radius -2 must be greater than zero"),
            ("3,4:0", "greater than zero"),
            ("-3,4", "cannot be negative"),
            ("3px,4um", "mixes um and px"),
            ("3,NaN", "not a finite number"),
            ("3,4:", "the radius '' is not a number"),
        ] {
            let e = parse_at(s).unwrap_err().to_string();
            assert!(e.contains(s.trim()) && e.contains(says), "{s}: {e}");
        }
    }

    #[test]
    fn parses_lines_and_refuses_absurd_ones() {
        let a = parse_along("0,10:100,10:20").unwrap();
        assert_eq!(
            (a.from, a.to, a.bin, a.unit),
            (
                [0.0, 10.0],
                [100.0, 10.0],
                Some(20.0),
                LengthUnit::Micrometres
            )
        );
        let b = parse_along("0,10px:100,10").unwrap();
        assert_eq!((b.bin, b.unit), (None, LengthUnit::Pixels));
        for (s, says) in [
            ("0,10", "expected X0,Y0:X1,Y1"),
            ("0,10:5,5:1:2", "expected X0,Y0:X1,Y1"),
            ("0,10:5,5:-1", "greater than zero"),
            ("0,10:0,10", "the same point"),
            ("0px,10:5um,5", "mixes um and px"),
            ("a,1:2,3", "not a number"),
        ] {
            let e = parse_along(s).unwrap_err().to_string();
            assert!(e.contains(s) && e.contains(says), "{s}: {e}");
        }
    }

    /// Intercept-like entries (one independent each) on a 9 x 9 grid of
    /// 10 um over a disc of 40 um around (50, 50), spacing `f(x)` with a
    /// deterministic scatter of +/- 3 %.
    fn grid(f: impl Fn(f64) -> f64) -> (Index, Vec<usize>) {
        let mut entries = Vec::new();
        for i in 0..9 {
            for j in 0..9 {
                let (x, y) = (10.0 + 10.0 * i as f64, 10.0 + 10.0 * j as f64);
                if (x - 50.0).hypot(y - 50.0) > 40.0 {
                    continue;
                }
                let jitter = 1.0 + 0.03 * ((i * 7 + j * 3) % 5) as f64 / 2.0 - 0.03;
                entries.push(Entry {
                    method: Method::Intercept,
                    x_um: x,
                    y_um: y,
                    local: Local {
                        x: Pixels(x),
                        y: Pixels(y),
                        spacing: Pixels(f(x) * jitter),
                        dir_deg: 0.0,
                        quality: None,
                        used: true,
                    },
                });
            }
        }
        let ids = (0..entries.len()).collect();
        (Index::of_entries(entries), ids)
    }

    #[test]
    fn the_population_test_tells_one_part_from_two() {
        // One spacing over the disc: one population (the scatter is a
        // measurement's, with no trend). A step of 1.5 times across the
        // middle (a two-part field's boundary through the point): the
        // plane's F test finds it. The step's size is the generator's
        // two-part field; the expectations follow from the test's
        // definition (a nested linear model's F test; common practice, no
        // single source).
        let (one, ids) = grid(|_| 20.0);
        assert!(matches!(
            population(&one, &ids, [50.0, 50.0], 40.0),
            Verdict::One(_)
        ));
        let (two, ids) = grid(|x| if x < 50.0 { 20.0 } else { 30.0 });
        match population(&two, &ids, [50.0, 50.0], 40.0) {
            Verdict::Two(p, why) => {
                assert!(p.p < 1e-6 && p.change_rel > 0.3, "{p:?}");
                assert!(why.contains("not one population"), "{why}");
            }
            v => panic!("{v:?}"),
        }
        // The uniform disc seen from a point at its rim: its measurements
        // lie to one side (centroid 40 um away, radius 60 um).
        let (one, ids) = grid(|_| 20.0);
        assert!(matches!(
            population(&one, &ids, [90.0, 50.0], 60.0),
            Verdict::OneSided(..)
        ));
        // Two measurements cannot test a plane.
        assert!(matches!(
            population(&one, &ids[..2], [50.0, 50.0], 40.0),
            Verdict::Untestable(_)
        ));
    }

    #[test]
    fn a_point_beyond_the_image_has_no_value_and_says_so() {
        let cal = UmPerPx::new(0.5).unwrap();
        let index = Index::of_entries(vec![]);
        let r = at(
            &index,
            &parse_at("600,10").unwrap(),
            &[],
            cal,
            None,
            (1000, 800),
            6.0,
        );
        assert!(r.estimate.value.is_none() && r.radius_um.is_none());
        assert!(r
            .estimate
            .reason
            .unwrap()
            .contains("outside the image (500.0 x 400.0 um"));
    }
}
