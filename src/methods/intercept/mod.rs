//! SDAS by line intercept, automated the way a metallographer measures it.
//!
//! The manual practice (common practice, no single source; see e.g. the
//! linear-intercept counting of ASTM E112 and the comparison of SDAS methods
//! by E. Vandersluis & C. Ravindran, Metallogr. Microstruct. Anal. 6 (2017)
//! 89-94, cited from memory): lay a line along a primary trunk across a run
//! of parallel secondary arms, count the arms, and divide the length by the
//! count. Here:
//!
//! 1. **Segmentation** ([`crate::segment`]): Otsu's threshold on the lightly
//!    smoothed prepared image; the foreground is the phase carrying the arms.
//!    An image whose grey levels are not two phases (Otsu's separability
//!    below `min_separability`) gets no value. Lines are sampled, and the
//!    structure tensor computed, on the cleaned foreground indicator smoothed
//!    by the same 1 px Gaussian (the "phase field"): texture inside a phase
//!    is gone, and the 0.5 level gives sub-pixel boundaries.
//! 2. **Scale**: a first spacing scale `lambda0` is the `expected_spacing_px`
//!    hint when given, else the phase-boundary crossing density of the
//!    segmentation: for a row of parallel bands of period lambda at any angle,
//!    crossings per unit length along x and y are P_x = 2|cos a|/lambda and
//!    P_y = 2|sin a|/lambda, so lambda = 2 / sqrt(P_x^2 + P_y^2) exactly
//!    (stereology of lamellar structures). Regions without crossings (trunks,
//!    pools) make it read high, so the windows are tried at lambda0,
//!    lambda0/sqrt 2 and lambda0/2 and the scale whose lines' median spacing
//!    agrees best with it is kept (and repeated at the measured spacing when
//!    they still differ by more than 20 %).
//! 3. **Where arms run**: the structure tensor (J. Bigun & G. Granlund,
//!    "Optimal orientation detection of linear symmetry", Proc. 1st ICCV,
//!    1987, 433-438): products of the gradient smoothed by a Gaussian of
//!    `tensor_sigma_spacings` spacings. Its dominant eigenvector is the
//!    dominant gradient direction; secondary arms are elongated across their
//!    trunk, so in a row of parallel arms that direction runs along the
//!    trunk, across the arms: the direction of a test line. The coherence
//!    (l1 - l2) / (l1 + l2) says how one-directional the neighbourhood is.
//! 4. **Test lines**: candidate centres on a grid of pitch one spacing, taken
//!    in order of decreasing coherence; from each, a straight line is traced
//!    both ways along the local direction while the neighbourhood stays
//!    coherent, the direction stays within `max_turn_deg`, the image border
//!    and the mask are clear, and no earlier line lies within
//!    `line_separation_spacings` (so lines sample different arms and count
//!    as independent measurements); at most `max_line_spacings` long.
//! 5. **Counting**: the phase field is sampled every half pixel along the
//!    line (bilinear); boundaries are the linear-interpolated crossings of
//!    0.5. Runs in which the field never gets `min_crossing_depth` away
//!    from 0.5 are the line grazing a boundary, not crossing a particle, and
//!    are merged into their neighbours ([`merge_grazing_runs`]). Runs of
//!    either phase shorter than `min_run_px`, and then than
//!    `min_run_fraction` of the line's median period, are noise and are
//!    merged into their neighbours. Touching arms are split at necks in the
//!    grey profile (see `split_necks`). Arm centres are the centres of the
//!    complete foreground runs (runs cut by the line's ends have no centre).
//! 6. **Merged and missing arms** (correcting the cause, not the count): with
//!    w the median arm run and m the median period, a run longer than
//!    w + m/2 (nearer a merged pair, m + w, than a single arm) holds
//!    k = 1 + round((r - w)/m) arms, whose centres are spread evenly over it;
//!    a gap between consecutive centres of p ~ k m (k = 2, 3) holds k - 1
//!    arms out of the section plane, counted as positions without a centre.
//!    Beyond three periods the line has left the row (a trunk, a grain
//!    boundary, an interdendritic pool): it is cut there and the longest
//!    piece is kept. A line is rejected when more than a third of its
//!    positions are inferred (the period itself is then in doubt), or when
//!    the coefficient of variation of its periods exceeds `max_period_cv`.
//!    Each line is counted first with its own w and m (w + median gap), then
//!    recounted with w and m pooled over all the image's lines, which a few
//!    merged or missing arms cannot pull: w is the line fraction of the arm
//!    phase times m (stereology, unaffected by touching arms), and m is
//!    the fixed point of recounting with it (see `recount_pooled`), so that
//!    arms merged by the optical blur throughout a field do not bias the
//!    very rule that splits them.
//! 7. **Spacing of a line** ([`Convention`]): centre-to-centre L/(n-1), the
//!    distance between the first and last arm centres over the number of
//!    spacings between them; or L/n, the length of a line drawn from the
//!    middle of the gap before the first arm to the middle of the gap after
//!    the last (L/(n-1) span plus one period m) over the n arms it crosses.
//!    Traced lines end where the arm row ends, not at random, so the ASTM
//!    E112 half-count rule for randomly ended lines does not apply; gap-to-gap
//!    ends make L/n unbiased for a regular row.
//! 8. **Image value**: lines farther than 3.5 robust standard deviations
//!    (1.4826 MAD) from the median line are dropped (the modified z-score
//!    rule of B. Iglewicz & D. C. Hoaglin, "How to Detect and Handle
//!    Outliers", ASQC 1993); the value is the mean of the remaining lines with
//!    a Student-t 95 % interval ([`Summary`]). Fewer than two lines give no
//!    value.

mod lines;
mod runs;

use crate::blocks::blur::gaussian_blur_indicator_in_place;
use crate::blocks::fixed_point::Fixed16;
use crate::blocks::orientation::{GradientProducts, Tensor};
use crate::blocks::select::median_by_selection;
use crate::preprocess::Prepared;
use crate::segment::{segment, SegmentParams, Segmentation};
use crate::stats::{self, Summary};
use crate::units::Pixels;
use lines::*;
pub use runs::*;

/// How the spacing of one line is computed from its count.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Convention {
    /// Distance between the first and last arm centres divided by the number
    /// of spacings between them, L/(n-1).
    CentreToCentre,
    /// Length over count, L/n: L runs from the middle of the gap before the
    /// first whole arm to the middle of the gap after the last, so that it
    /// spans n whole periods; arms cut by the line's ends are not counted.
    LengthOverCount,
}

/// Parameters of the intercept method. Lengths given in spacings are
/// multiples of the scale estimate `lambda0` (module docs, step 2).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct InterceptParams {
    pub segment: SegmentParams,
    pub convention: Convention,
    /// Least Otsu separability (between-class / total variance at the
    /// threshold, `Segmentation::separability`) for the image to count as
    /// two phases. A single Gaussian population (what smoothed white noise
    /// becomes) gives 2/pi = 0.637 and a uniform one 0.75; the default 0.66
    /// asks for clearly more than one Gaussian, allowing a few hundredths
    /// for sampling, while fine blurred two-phase fields (period ~7 px,
    /// 1-2 px optical blur) can fall as low as about 0.67. Without the gate
    /// the line checks alone would, over thousands of candidates,
    /// occasionally pass a chance run of regular-looking noise.
    pub min_separability: f64,
    /// A spacing scale from elsewhere (e.g. the FFT method), pixels. Only
    /// sizes the windows; the measured value does not depend on it directly.
    pub expected_spacing_px: Option<f64>,
    /// Trunk direction from elsewhere, degrees counter-clockwise from +x
    /// with y up, in [0, 180) (the FFT method's convention). When given,
    /// lines are laid only where the local direction is within
    /// `max_turn_deg` of it.
    pub direction_hint_deg: Option<f64>,
    /// Smallest structure-tensor coherence for a line centre and along a
    /// line. 0.3 means the dominant eigenvalue is 1.9 times the other
    /// (l1/l2 = (1 + c)/(1 - c)); for isotropic noise averaged over the
    /// tensor window (hundreds of pixels) the coherence is of order
    /// 1/sqrt(pixels), about 0.1. It is deliberately permissive: rows of
    /// rounded, sectioned arms beside their trunk's edges (whose gradients
    /// point the other way) rarely reach 0.5, and the line checks that
    /// follow (regular periods, at least four arms) do the real selection.
    pub min_coherence: f64,
    /// Largest angle between the local direction and the line, degrees.
    /// Beyond 20 deg the measured spacing would exceed the perpendicular
    /// spacing by more than 1/cos(20 deg) - 1 = 6 %: the row has turned.
    pub max_turn_deg: f64,
    /// Smoothing of the structure tensor's products, in spacings. One
    /// spacing (a window of about +-2 spacings) always holds several arm
    /// edges, so the orientation reflects the row rather than one edge, and
    /// is still shorter than a secondary arm (commonly 1.5-3 spacings).
    pub tensor_sigma_spacings: f64,
    /// Longest line, in spacings. Trunks in a section stay straight over
    /// about ten arm spacings (from memory); longer straight lines leave a
    /// curved or branching row, and shorter ones give more independent lines.
    pub max_line_spacings: f64,
    /// Least number of arm positions on a valid line. Four arms give three
    /// spacings, the fewest from which an irregular period can be told from a
    /// regular one (common practice: five or more arms per line).
    pub min_arms: usize,
    /// Least distance between lines, in spacings: a secondary arm is about
    /// 1-3 spacings long, so lines two spacings apart mostly cross different
    /// arms (and the interval treats lines as independent).
    pub line_separation_spacings: f64,
    /// Largest coefficient of variation of a line's periods. Individual arm
    /// spacings along a trunk scatter with CV about 0.1-0.3 (from memory);
    /// beyond 0.4 the line is not crossing one regular row.
    pub max_period_cv: f64,
    /// Runs shorter than this, pixels, are not crossings: specks were
    /// already removed by the segmentation's clean-up, so a run under one
    /// pixel is a grazing contact with the edge of a particle.
    pub min_run_px: f64,
    /// Runs shorter than this fraction of the line's median period are
    /// noise: an arm row with phase fraction f has runs f x lambda and gaps
    /// (1 - f) x lambda, both above 0.15 lambda for f in 0.15-0.85.
    pub min_run_fraction: f64,
    /// Least depth of a run in the phase field (how far the smoothed
    /// foreground indicator gets from the 0.5 level inside it) for the run
    /// to be a crossing of a particle. A line that runs along a phase
    /// boundary sees the field wander about 0.5 and cuts it into short
    /// alternating runs that look like a fine, regular row. A particle of
    /// width d crossed squarely reaches erf(d / (2 sqrt 2 sigma)) after the
    /// segmentation's pre-smoothing sigma = 1 px; the default 0.183 is
    /// that level for d = 2 px (erf(1/sqrt 2) - 0.5), the narrowest
    /// particle a 1 px Gaussian leaves resolved (its full width at half
    /// maximum is 2.35 px). Shallower runs are merged into their neighbours.
    pub min_crossing_depth: f64,
}

impl Default for InterceptParams {
    fn default() -> Self {
        Self {
            segment: SegmentParams::default(),
            convention: Convention::CentreToCentre,
            min_separability: 0.66,
            expected_spacing_px: None,
            direction_hint_deg: None,
            min_coherence: 0.3,
            max_turn_deg: 20.0,
            tensor_sigma_spacings: 1.0,
            max_line_spacings: 12.0,
            min_arms: 4,
            line_separation_spacings: 2.0,
            max_period_cv: 0.4,
            min_run_px: 1.0,
            min_run_fraction: 0.15,
            min_crossing_depth: 0.183,
        }
    }
}

/// One accepted test line, pixel coordinates of the image (y down).
#[derive(Clone, Debug, PartialEq)]
pub struct Line {
    pub x0_px: f64,
    pub y0_px: f64,
    pub x1_px: f64,
    pub y1_px: f64,
    /// Arm positions on the line: observed arms plus arms inferred in gaps
    /// of two or three periods (out of the section plane).
    pub arms: usize,
    /// The line's spacing under the chosen convention.
    pub spacing_px: f64,
    /// Centres of the observed arms (including arms split out of merged runs).
    pub arm_centres_px: Vec<(f64, f64)>,
}

/// The method's result for one image, in pixels.
#[derive(Clone, Debug, PartialEq)]
pub struct InterceptOutcome {
    pub value_px: Option<Pixels>,
    pub ci95_px: Option<[Pixels; 2]>,
    /// Standard deviation of the line spacings.
    pub sd_px: Option<Pixels>,
    /// Number of lines in the value.
    pub n_lines: usize,
    /// Percent relative accuracy of the value (95 % half-width / mean).
    pub rel_accuracy_pct: Option<f64>,
    /// The lines in the value.
    pub lines: Vec<Line>,
    /// Why there is no value, when there is none.
    pub reason: Option<String>,
}

impl InterceptOutcome {
    fn none(reason: impl Into<String>, lines: Vec<Line>) -> Self {
        Self {
            value_px: None,
            ci95_px: None,
            sd_px: None,
            n_lines: 0,
            rel_accuracy_pct: None,
            lines,
            reason: Some(reason.into()),
        }
    }
}

impl InterceptOutcome {
    /// The outcome in the shape every method shares; each line is a local
    /// measurement at its mid-point, along its own direction.
    pub fn into_outcome(self) -> super::Outcome {
        use super::{segment_dir_deg, Detail, Local, Method, Outcome};
        use crate::units::Pixels;
        let local = self
            .lines
            .iter()
            .filter(|l| l.spacing_px.is_finite())
            .map(|l| Local {
                x: Pixels(0.5 * (l.x0_px + l.x1_px)),
                y: Pixels(0.5 * (l.y0_px + l.y1_px)),
                spacing: Pixels(l.spacing_px),
                dir_deg: segment_dir_deg(l.x0_px, l.y0_px, l.x1_px, l.y1_px),
                quality: None,
                used: self.value_px.is_some(),
            })
            .collect();
        Outcome {
            method: Method::Intercept,
            value: self.value_px,
            ci95: self.ci95_px,
            n: self.n_lines,
            spread: self.sd_px,
            reason: self.reason.clone(),
            warnings: Vec::new(),
            local,
            for_target: None,
            indicative: None,
            detail: Detail::Intercept(self),
        }
    }
}

/// Measures the secondary arm spacing of a prepared image by line intercepts.
pub fn measure(img: &Prepared, params: &InterceptParams) -> InterceptOutcome {
    let (w, h) = (img.image.width, img.image.height);
    if w < 16 || h < 16 || img.image.data.len() != w * h {
        return InterceptOutcome::none("no reliable arm rows: the image is too small", vec![]);
    }
    if img.contrast <= 1e-6 {
        return InterceptOutcome::none("no reliable arm rows: the image has no contrast", vec![]);
    }
    let Some(seg) = segment(img, &params.segment) else {
        return InterceptOutcome::none(
            "no reliable arm rows: the image does not separate into two phases",
            vec![],
        );
    };
    let hint = params
        .expected_spacing_px
        .filter(|s| s.is_finite() && *s > 0.0);
    let Some(lambda0) = hint.or_else(|| crossing_scale(&seg, img.mask.as_deref())) else {
        return InterceptOutcome::none(
            "no reliable arm rows: no phase boundaries to set a spacing scale",
            vec![],
        );
    };
    let max_scale = w.min(h) as f64 / 4.0;
    if !(2.0..=max_scale).contains(&lambda0) {
        return InterceptOutcome::none(
            format!(
                "no reliable arm rows: spacing scale {lambda0:.1} px is outside 2..{max_scale:.0} px for this image"
            ),
            vec![],
        );
    }
    if seg.separability < params.min_separability {
        return InterceptOutcome::none(
            format!(
                "no reliable arm rows: the grey levels do not form two phases (Otsu separability {:.2} < {:.2})",
                seg.separability, params.min_separability
            ),
            vec![],
        );
    }
    let field = phase_field(seg, params.segment.smooth_sigma_px);
    let grads = GradientProducts::new(
        &field.v,
        img.mask.as_deref().filter(|m| m.len() == w * h),
        w,
        h,
    );
    let median_of = |lines: &[Traced]| -> Option<f64> {
        if lines.len() < 2 {
            return None;
        }
        stats::median(&lines.iter().map(|l| l.line.spacing_px).collect::<Vec<_>>())
    };
    // Scale search (without a hint). The crossing estimate counts the whole
    // field, including trunks and interdendritic pools without crossings, so
    // it overestimates the spacing by up to about 2x (an isotropic field also
    // reads sqrt 2 high); the windows are therefore tried at lambda0,
    // lambda0/sqrt 2 and lambda0/2, and the scale kept is the one whose
    // lines' median spacing agrees best with it (self-consistency). Within
    // +-20 % the window sizes do not matter and the search stops.
    let scales: Vec<f64> = match hint {
        Some(s) => vec![s],
        None => [1.0, std::f64::consts::FRAC_1_SQRT_2, 0.5]
            .iter()
            .map(|f| f * lambda0)
            .filter(|s| *s >= 2.0)
            .collect(),
    };
    let mut scratch = LayScratch {
        tensor: Tensor::empty(),
        occupied: fixedbitset::FixedBitSet::new(),
    };
    let mut best: Option<(f64, f64, Vec<Traced>)> = None;
    let mut fallback: Vec<Traced> = Vec::new();
    for &scale in &scales {
        let lines = lay_lines(img, &field, &grads, scale, params, &mut scratch);
        let Some(m) = median_of(&lines) else {
            if lines.len() > fallback.len() {
                fallback = lines;
            }
            continue;
        };
        let misfit = (m / scale).ln().abs();
        let better = best.as_ref().is_none_or(|b| misfit < b.0);
        let done = misfit <= 1.2f64.ln();
        if better {
            best = Some((misfit, m, lines));
        }
        if done {
            break;
        }
    }
    let lines = match best {
        Some((misfit, m, lines)) => {
            if hint.is_none() && misfit > 1.2f64.ln() && (2.0..=max_scale).contains(&m) {
                // Repeat at the measured scale.
                let again = lay_lines(img, &field, &grads, m, params, &mut scratch);
                if again.len() >= 2 {
                    again
                } else {
                    lines
                }
            } else {
                lines
            }
        }
        None => fallback,
    };
    aggregate(recount_pooled(&field, lines, params))
}

/// Recounts every line with the arm run length `w` and period `m` pooled
/// over all lines of the image (module docs, step 6). One line holds a
/// handful of arms, so its own medians are easily pulled by two or three
/// merged or missing arms, and then the split and gap rules misjudge; the
/// image's, over hundreds of arms, are not. Lines that no longer pass are
/// dropped.
///
/// The pooled values must not be taken from the very counts they correct.
/// Where the optical blur closes the narrow channels between neighbouring
/// arms, many arm runs are merged pairs; the median run and the median
/// period of the first counts then read high together, the rule "a run
/// longer than w + m/2 holds two arms" stops catching the pairs, and every
/// line reads long by the same amount. So:
///
/// * `w = L_L x m`, with `L_L` the fraction of the counted lines' length in
///   the arm phase. Along a row with one arm per period, the mean arm
///   intercept is the line fraction times the period, whether or not
///   neighbours touch (the line fraction equals the area fraction,
///   L_L = A_A: A. Rosiwal 1898; E. E. Underwood, "Quantitative
///   Stereology", Addison-Wesley 1970, chapter 2, from memory). A merged
///   pair therefore no longer raises `w`.
/// * `m` is the fixed point of "recount every line with (L_L m, m), take
///   the median of the recounted periods", started from the first counts'
///   median. Each recount splits the pairs that the previous `m` missed,
///   which lowers the next `m`; a recount that splits nothing more gives
///   back the same `m` (within 0.5 %, a tenth of the spacing scatter a line
///   resolves) and the iteration stops. The count decides every period, so
///   the value is still an intercept count, not a fitted number. At most
///   [`MAX_POOL_ITERATIONS`] rounds; the last recount is used.
/// * The iteration may lower `m` to no less than 2/3 of the first counts'
///   median: below that, more than a third of the arm positions would be
///   ones the counts did not see, the limit beyond which a single line is
///   already rejected (module docs, step 6). A field that runs past it
///   (typically a couple of short lines whose splits feed on themselves) is
///   recounted once with the first counts' medians of `w` and `m`, as
///   without the iteration.
fn recount_pooled(field: &PhaseField, lines: Vec<Traced>, p: &InterceptParams) -> Vec<Line> {
    let periods: Vec<f64> = lines
        .iter()
        .flat_map(|t| t.count.periods_px.iter().copied())
        .collect();
    let extents: Vec<Segment> = lines
        .iter()
        .map(|t| ((t.line.x0_px, t.line.y0_px), (t.line.x1_px, t.line.y1_px)))
        .collect();
    let w_counts = stats::median(&lines.iter().map(|t| t.count.arm_run_px).collect::<Vec<_>>());
    let recount = |wm: (f64, f64)| -> Vec<(Line, Count)> {
        lines
            .iter()
            .filter_map(|t| count_profile(&t.profile, field.neck_depth, p, Some(wm)))
            .collect()
    };
    let (Some(m0), Some(w0)) = (stats::median(&periods), w_counts) else {
        return lines.into_iter().map(|t| t.line).collect();
    };
    if lines.len() < 2 || m0 <= 0.0 || w0 <= 0.0 || w0 >= m0 {
        return lines.into_iter().map(|t| t.line).collect();
    }
    let once = || recount((w0, m0)).into_iter().map(|(l, _)| l).collect();
    let Some(frac) = arm_line_fraction(field, &extents).filter(|f| *f > 0.0 && *f < 1.0) else {
        return once();
    };
    let m_floor = m0 * 2.0 / 3.0;
    let mut m = m0;
    let mut out = Vec::new();
    for _ in 0..MAX_POOL_ITERATIONS {
        let counted = recount((frac * m, m));
        let periods: Vec<f64> = counted
            .iter()
            .flat_map(|(_, c)| c.periods_px.iter().copied())
            .collect();
        let next = stats::median(&periods);
        out = counted.into_iter().map(|(l, _)| l).collect();
        match next {
            Some(mn) if mn < m_floor => return once(),
            Some(mn) if (mn / m - 1.0).abs() > 0.005 => m = mn,
            _ => break,
        }
    }
    out
}

/// A straight segment between two points, pixel coordinates.
type Segment = ((f64, f64), (f64, f64));

/// Most rounds of the pooled recount. Each round that changes `m` splits
/// or joins arms; on real rows it settles in two or three, so eight only
/// bounds the time of a field that keeps alternating between two counts.
const MAX_POOL_ITERATIONS: usize = 8;

/// Fraction of the length of the given segments (sampled every half pixel)
/// that lies in the arm phase (phase field above 0.5). `None` without samples.
fn arm_line_fraction(field: &PhaseField, segments: &[Segment]) -> Option<f64> {
    let step = 0.5;
    let (mut fg, mut total) = (0usize, 0usize);
    for &(a, b) in segments {
        let len = (b.0 - a.0).hypot(b.1 - a.1);
        if !len.is_finite() {
            continue;
        }
        let n = (len / step).floor() as usize + 1;
        let (ux, uy) = if len > 0.0 {
            ((b.0 - a.0) / len, (b.1 - a.1) / len)
        } else {
            (0.0, 0.0)
        };
        for k in 0..n {
            let s = k as f64 * step;
            let v = field.v.bilinear(a.0 + s * ux, a.1 + s * uy);
            fg += (v > 0.5) as usize;
        }
        total += n;
    }
    (total > 0).then(|| fg as f64 / total as f64)
}

/// The method's value from its counted lines: lines further than 3.5 robust
/// standard deviations from the median are left out (modified z-score), and
/// the rest give the mean, its Student's t 95 % interval and %RA; fewer than
/// two lines give no value, with the reason.
fn aggregate(lines: Vec<Line>) -> InterceptOutcome {
    let all: Vec<f64> = lines.iter().map(|l| l.spacing_px).collect();
    let (Some(med), n_found) = (stats::median(&all), lines.len()) else {
        return InterceptOutcome::none(
            "no reliable arm rows: no straight run of at least four regular arms was found",
            lines,
        );
    };
    // Modified z-score screen (Iglewicz & Hoaglin 1993): |x - med| / (1.4826 MAD) > 3.5.
    let sd = stats::mad_sd(&all, med).unwrap_or(0.0);
    let kept: Vec<Line> = lines
        .into_iter()
        .filter(|l| sd <= 0.0 || (l.spacing_px - med).abs() <= 3.5 * sd)
        .collect();
    let values: Vec<f64> = kept.iter().map(|l| l.spacing_px).collect();
    match Summary::of(&values) {
        Some(s) => InterceptOutcome {
            value_px: Some(Pixels(s.mean)),
            ci95_px: Some(s.ci95().map(Pixels)),
            sd_px: Some(Pixels(s.sd)),
            n_lines: s.n,
            rel_accuracy_pct: Some(s.rel_accuracy_pct),
            lines: kept,
            reason: None,
        },
        None => InterceptOutcome::none(
            format!("no reliable arm rows: {n_found} valid line(s) found, at least 2 are needed"),
            kept,
        ),
    }
}

/// Spacing scale from the crossing density of the phase boundaries (module
/// docs, step 2). `None` without crossings in either direction.
fn crossing_scale(seg: &Segmentation, mask: Option<&[bool]>) -> Option<f64> {
    let (w, h) = (seg.width, seg.height);
    let ok = |i: usize| !mask.is_some_and(|m| m[i]);
    let (mut cx, mut nx, mut cy, mut ny) = (0u64, 0u64, 0u64, 0u64);
    let f = &seg.foreground;
    let masked_row = |y: usize| mask.is_some_and(|m| m[y * w..(y + 1) * w].iter().any(|&v| v));
    let mut this_masked = h > 0 && masked_row(0);
    for y in 0..h {
        let next_masked = y + 1 < h && masked_row(y + 1);
        let masked = this_masked || next_masked;
        this_masked = next_masked;
        if !masked {
            // Rows y and y + 1 clear of the mask: the same counts, by rows.
            let row = &f[y * w..(y + 1) * w];
            nx += w.saturating_sub(1) as u64;
            cx += row.windows(2).filter(|p| p[0] != p[1]).count() as u64;
            if y + 1 < h {
                let below = &f[(y + 1) * w..(y + 2) * w];
                ny += w as u64;
                cy += row.iter().zip(below).filter(|(a, b)| a != b).count() as u64;
            }
            continue;
        }
        for x in 0..w {
            let i = y * w + x;
            if !ok(i) {
                continue;
            }
            if x + 1 < w && ok(i + 1) {
                nx += 1;
                cx += (seg.foreground[i] != seg.foreground[i + 1]) as u64;
            }
            if y + 1 < h && ok(i + w) {
                ny += 1;
                cy += (seg.foreground[i] != seg.foreground[i + w]) as u64;
            }
        }
    }
    if nx == 0 || ny == 0 || cx + cy == 0 {
        return None;
    }
    let (px, py) = (cx as f64 / nx as f64, cy as f64 / ny as f64);
    Some(2.0 / px.hypot(py))
}

/// Smallest angle between two axial directions (radians, modulo pi).
fn axial_diff(a: f64, b: f64) -> f64 {
    let d = (a - b).rem_euclid(std::f64::consts::PI);
    d.min(std::f64::consts::PI - d)
}

/// Lays and counts the test lines at scale `lambda`.
/// The foreground indicator (1 arm phase, 0 other or masked) smoothed by
/// the segmentation's pre-smoothing Gaussian. Lines are sampled on it and
/// the structure tensor is computed from it, rather than from the grey
/// image: texture inside a phase (the granular eutectic of an etched
/// section, polishing marks) is removed by the segmentation and its
/// clean-up, and would otherwise add isotropic gradient energy that hides
/// the arms' orientation. Smoothing restores sub-pixel boundary positions
/// (the 0.5 level of a blurred step lies on the step).
///
/// Alongside, the smoothed grey values with the arm phase made bright
/// (`grey`), used to find necks between touching arms (see [`split_necks`]),
/// and the neck depth: half the contrast between the arm phase's median
/// level and the threshold.
pub(crate) struct PhaseField {
    pub(crate) w: usize,
    pub(crate) h: usize,
    pub(crate) v: Fixed16,
    pub(crate) grey: Fixed16,
    pub(crate) neck_depth: f32,
}

/// Both arrays are held as 16-bit fixed point ([`Fixed16`]: within 7.6e-6
/// of their range of the floats, far below the image's noise), and each
/// float array is freed as soon as its copy is made, so that the method
/// holds at most one whole float array beside the prepared image.
fn phase_field(seg: Segmentation, sigma: f64) -> PhaseField {
    let (w, h) = (seg.width, seg.height);
    let sign = if seg.inverted { -1.0f32 } else { 1.0 };
    // The segmentation's smoothed values, taken over (not copied).
    let mut grey = seg.smoothed;
    grey.iter_mut().for_each(|v| *v *= sign);
    let arm: Vec<f32> = grey
        .iter()
        .zip(&seg.foreground)
        .filter(|(_, &f)| f)
        .map(|(g, _)| *g)
        .step_by(7)
        .collect();
    // No arm pixel at all: the level is the image's floor (0), as before.
    let level = median_by_selection(&arm).unwrap_or(0.0) as f32;
    let grey = Fixed16::from_f32(grey, w, h);
    let mut ind: Vec<f32> = seg
        .foreground
        .iter()
        .map(|&f| if f { 1.0 } else { 0.0 })
        .collect();
    drop(seg.foreground);
    gaussian_blur_indicator_in_place(&mut ind, w, h, sigma.max(0.5));
    PhaseField {
        w,
        h,
        v: Fixed16::from_f32(ind, w, h),
        grey,
        neck_depth: 0.5 * (level - sign * seg.threshold).max(0.0),
    }
}
