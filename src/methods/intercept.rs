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

use crate::preprocess::{
    box_widths, gaussian_blur_in_place, gaussian_blur_indicator_in_place, gaussian_blur_into,
    Prepared,
};
use crate::segment::{segment, SegmentParams, Segmentation};
use crate::stats::{self, Summary};

/// How the spacing of one line is computed from its count.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Convention {
    /// Distance between the first and last arm centres divided by the number
    /// of spacings between them, L/(n-1).
    CentreToCentre,
    /// Length of the line divided by the number of arms it crosses, L/n, with
    /// an arm cut by an end of the line counted as one half.
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
    pub value_px: Option<f64>,
    pub ci95_px: Option<[f64; 2]>,
    /// Standard deviation of the line spacings.
    pub sd_px: Option<f64>,
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
            value: self.value_px.map(Pixels),
            ci95: self.ci95_px.map(|[a, b]| [Pixels(a), Pixels(b)]),
            n: self.n_lines,
            spread: self.sd_px.map(Pixels),
            reason: self.reason.clone(),
            warnings: Vec::new(),
            local,
            for_target: None,
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
        occupied: Vec::new(),
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
            let v = bilinear(&field.v, field.w, field.h, a.0 + s * ux, a.1 + s * uy);
            fg += (v > 0.5) as usize;
        }
        total += n;
    }
    (total > 0).then(|| fg as f64 / total as f64)
}

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
            value_px: Some(s.mean),
            ci95_px: Some(s.ci95()),
            sd_px: Some(s.sd),
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

/// Smoothed structure tensor components (Jxx, Jxy, Jyy), on a grid of
/// pitch `d` pixels: every pixel when `d` is 1, else the means of d x d
/// blocks of pixels (see [`Tensor::rebuild`]).
struct Tensor {
    /// Width and height of the grid.
    gw: usize,
    gh: usize,
    /// Grid pitch, pixels.
    d: usize,
    jxx: Vec<f32>,
    jxy: Vec<f32>,
    jyy: Vec<f32>,
    /// Scratch of the blurs.
    tmp: Vec<f32>,
    /// The gradient products of every pixel, once a scale needed them.
    full: Option<[Vec<f32>; 3]>,
}

/// Products of the central-difference gradients (gx^2, gx gy, gy^2) of an
/// image, before smoothing. They do not depend on the spacing scale; they
/// are computed a row at a time where a scale needs them (cheaper than
/// storing three whole-image arrays when the tensor is on a coarser grid),
/// and as whole arrays once per image for the scales that need every pixel.
struct GradientProducts<'a> {
    w: usize,
    h: usize,
    data: &'a [f32],
    mask: Option<&'a [bool]>,
    /// Rows with a masked pixel (the stencil of row y reads rows y - 1 to
    /// y + 1; rows clear of the mask skip the per-pixel lookups).
    masked_rows: Vec<bool>,
}

impl<'a> GradientProducts<'a> {
    /// Central-difference gradients of `data`; pixels whose stencil touches
    /// the mask or the border contribute nothing.
    fn new(data: &'a [f32], mask: Option<&'a [bool]>, w: usize, h: usize) -> Self {
        let masked_rows = match mask {
            Some(m) => m.chunks(w.max(1)).map(|r| r.iter().any(|&v| v)).collect(),
            None => vec![false; h],
        };
        Self {
            w,
            h,
            data,
            mask,
            masked_rows,
        }
    }

    /// The products of row `y` into `xx`, `xy`, `yy` (each of length w).
    fn row(&self, y: usize, xx: &mut [f32], xy: &mut [f32], yy: &mut [f32]) {
        let (w, h, data) = (self.w, self.h, self.data);
        xx.fill(0.0);
        xy.fill(0.0);
        yy.fill(0.0);
        if y == 0 || y + 1 >= h {
            return;
        }
        let near_mask = self.masked_rows[y - 1..=y + 1].iter().any(|&v| v);
        let mask = self.mask.filter(|_| near_mask);
        for x in 1..w.saturating_sub(1) {
            let i = y * w + x;
            if let Some(m) = mask {
                if m[i] || m[i - 1] || m[i + 1] || m[i - w] || m[i + w] {
                    continue;
                }
            }
            let gx = 0.5 * (data[i + 1] - data[i - 1]);
            let gy = 0.5 * (data[i + w] - data[i - w]);
            xx[x] = gx * gx;
            xy[x] = gx * gy;
            yy[x] = gy * gy;
        }
    }

    /// The products of every pixel, row-major.
    fn full(&self) -> [Vec<f32>; 3] {
        let n = self.w * self.h;
        let (mut xx, mut xy, mut yy) = (vec![0.0f32; n], vec![0.0f32; n], vec![0.0f32; n]);
        for y in 0..self.h {
            let r = y * self.w..(y + 1) * self.w;
            self.row(
                y,
                &mut xx[r.clone()],
                &mut xy[r.clone()],
                &mut yy[r.clone()],
            );
        }
        [xx, xy, yy]
    }

    /// Means of the products over the `d` x `d` blocks of the image (blocks
    /// at the right and bottom edges hold what is left), row-major.
    fn block_means(&self, d: usize, out: [&mut Vec<f32>; 3]) {
        let (w, h) = (self.w, self.h);
        let (gw, gh) = (w.div_ceil(d), h.div_ceil(d));
        let mut rows = [vec![0.0f32; w], vec![0.0f32; w], vec![0.0f32; w]];
        let mut acc = [vec![0.0f64; gw], vec![0.0f64; gw], vec![0.0f64; gw]];
        let [o0, o1, o2] = out;
        let mut out = [o0, o1, o2];
        for o in out.iter_mut() {
            o.clear();
            o.resize(gw * gh, 0.0);
        }
        for by in 0..gh {
            for a in acc.iter_mut() {
                a.iter_mut().for_each(|v| *v = 0.0);
            }
            let (y0, y1) = (by * d, ((by + 1) * d).min(h));
            for y in y0..y1 {
                let [r0, r1, r2] = &mut rows;
                self.row(y, r0, r1, r2);
                for (a, r) in acc.iter_mut().zip(&rows) {
                    // The usual pitches with the block width known to the
                    // compiler (unrolled); the same sums in the same order.
                    match d {
                        2 => add_block_sums::<2>(a, r),
                        3 => add_block_sums::<3>(a, r),
                        4 => add_block_sums::<4>(a, r),
                        5 => add_block_sums::<5>(a, r),
                        6 => add_block_sums::<6>(a, r),
                        _ => {
                            for (s, block) in a.iter_mut().zip(r.chunks(d)) {
                                *s += block.iter().map(|&v| v as f64).sum::<f64>();
                            }
                        }
                    }
                }
            }
            for (o, a) in out.iter_mut().zip(&acc) {
                for (bx, (ov, s)) in o[by * gw..(by + 1) * gw].iter_mut().zip(a).enumerate() {
                    let cols = ((bx + 1) * d).min(w) - bx * d;
                    *ov = (*s / ((y1 - y0) * cols) as f64) as f32;
                }
            }
        }
    }
}

impl Tensor {
    fn empty() -> Self {
        Self {
            gw: 0,
            gh: 0,
            d: 1,
            jxx: Vec::new(),
            jxy: Vec::new(),
            jyy: Vec::new(),
            tmp: Vec::new(),
            full: None,
        }
    }

    /// Makes this the gradient products smoothed by a Gaussian of `sigma`
    /// pixels, reusing the buffers of the previous scale.
    ///
    /// A wide window is computed on a coarser grid. The smoothed tensor
    /// holds no detail finer than its window: a Gaussian of standard
    /// deviation sigma passes spatial frequency f with gain
    /// exp(-2 pi^2 sigma^2 f^2), so on a grid of pitch d = sigma/4 the
    /// Nyquist frequency 1/(2d) keeps exp(-8 pi^2), about 1e-34: nothing
    /// aliases, and values between grid points are interpolated bilinearly
    /// (C. E. Shannon's sampling theorem; the interpolation's own smoothing,
    /// at most d/2 = sigma/8 of standard deviation, widens the window by
    /// under 1 %). The products are first averaged over d x d blocks (a box
    /// of variance (d^2 - 1)/12 per axis), then blurred on the grid by the
    /// rest of the variance, so the window keeps its sigma. The grid's
    /// Gaussian is then at least 4 grid steps wide, where the three-box
    /// cascade's odd widths still give its sigma within a few per cent (the
    /// same granularity as at full resolution for sigma >= 8, see
    /// `preprocess::box_widths`); of the pitches up to sigma/4 the one whose
    /// window's variance is nearest the full-resolution cascade's is used
    /// ([`grid_pitch`]). Below sigma = 8 the grid is every pixel and the
    /// blurs read the products directly into the reused buffers (the same
    /// result as blurring at full resolution always, bit for bit).
    fn rebuild(&mut self, g: &GradientProducts, sigma: f64) {
        let d = grid_pitch(sigma);
        self.d = d;
        if d == 1 {
            (self.gw, self.gh) = (g.w, g.h);
            let full = self.full.get_or_insert_with(|| g.full());
            for (src, dst) in full
                .iter()
                .zip([&mut self.jxx, &mut self.jxy, &mut self.jyy])
            {
                gaussian_blur_into(src, dst, &mut self.tmp, g.w, g.h, sigma);
            }
            return;
        }
        let (gw, gh) = (g.w.div_ceil(d), g.h.div_ceil(d));
        (self.gw, self.gh) = (gw, gh);
        let rest = coarse_sigma(sigma, d);
        g.block_means(d, [&mut self.jxx, &mut self.jxy, &mut self.jyy]);
        for dst in [&mut self.jxx, &mut self.jxy, &mut self.jyy] {
            gaussian_blur_in_place(dst, &mut self.tmp, gw, gh, rest);
        }
    }

    /// Dominant gradient direction (radians, image axes, y down, in
    /// (-pi/2, pi/2]) and coherence at pixel (x, y).
    #[inline]
    fn at(&self, x: usize, y: usize) -> (f64, f64) {
        let j = self.components(x, y);
        (j.theta(), j.coherence())
    }

    /// The tensor at pixel (x, y), interpolated on a coarse grid.
    #[inline]
    fn components(&self, x: usize, y: usize) -> Components {
        let (a, b, c) = if self.d == 1 {
            let i = y * self.gw + x;
            (self.jxx[i] as f64, self.jxy[i] as f64, self.jyy[i] as f64)
        } else {
            // Cell k holds the mean of pixels k d .. k d + d - 1, centred
            // at k d + (d - 1)/2.
            let d = self.d as f64;
            let gx = ((x as f64 - 0.5 * (d - 1.0)) / d).clamp(0.0, (self.gw - 1) as f64);
            let gy = ((y as f64 - 0.5 * (d - 1.0)) / d).clamp(0.0, (self.gh - 1) as f64);
            let (x0, y0) = (gx as usize, gy as usize);
            let (x1, y1) = ((x0 + 1).min(self.gw - 1), (y0 + 1).min(self.gh - 1));
            let (fx, fy) = (gx - x0 as f64, gy - y0 as f64);
            let w = [
                (1.0 - fx) * (1.0 - fy),
                fx * (1.0 - fy),
                (1.0 - fx) * fy,
                fx * fy,
            ];
            let idx = [
                y0 * self.gw + x0,
                y0 * self.gw + x1,
                y1 * self.gw + x0,
                y1 * self.gw + x1,
            ];
            let lerp =
                |v: &[f32]| -> f64 { w.iter().zip(&idx).map(|(wk, &i)| wk * v[i] as f64).sum() };
            (lerp(&self.jxx), lerp(&self.jxy), lerp(&self.jyy))
        };
        Components { a, b, c }
    }
}

/// The tensor (Jxx, Jxy, Jyy) at one point. Its coherence is cheaper than
/// its direction (no arctangent), so a test on both asks the coherence
/// first.
#[derive(Clone, Copy)]
struct Components {
    a: f64,
    b: f64,
    c: f64,
}

impl Components {
    /// Dominant gradient direction, radians (0 for a zero tensor).
    #[inline]
    fn theta(self) -> f64 {
        if self.a + self.c <= 0.0 {
            return 0.0;
        }
        0.5 * (2.0 * self.b).atan2(self.a - self.c)
    }

    /// (l1 - l2) / (l1 + l2) (0 for a zero tensor).
    #[inline]
    fn coherence(self) -> f64 {
        let (a, b, c) = (self.a, self.b, self.c);
        let tr = a + c;
        if tr <= 0.0 {
            return 0.0;
        }
        ((a - c).powi(2) + 4.0 * b * b).sqrt() / tr
    }
}

/// Adds to `acc[k]` the sum of `row[k D .. k D + D]` (the last block holds
/// what is left), each sum taken in order as f64.
fn add_block_sums<const D: usize>(acc: &mut [f64], row: &[f32]) {
    let blocks = row.chunks_exact(D);
    let rest = blocks.remainder();
    let full = row.len() / D;
    for (s, block) in acc.iter_mut().zip(blocks) {
        *s += block.iter().map(|&v| v as f64).sum::<f64>();
    }
    if !rest.is_empty() {
        acc[full] += rest.iter().map(|&v| v as f64).sum::<f64>();
    }
}

/// Variance of the three-box cascade that approximates a Gaussian of
/// `sigma` (a box of odd width w has variance (w^2 - 1)/12; the cascade's
/// variances add).
fn cascade_variance(sigma: f64) -> f64 {
    box_widths(sigma, 3)
        .iter()
        .map(|&w| ((w * w) as f64 - 1.0) / 12.0)
        .sum()
}

/// Sigma, in grid steps, of the cascade on a grid of pitch `d` that leaves
/// the window a variance of sigma^2 after the d x d block means.
fn coarse_sigma(sigma: f64, d: usize) -> f64 {
    let df = d as f64;
    (sigma * sigma - (df * df - 1.0) / 12.0).max(0.0).sqrt() / df
}

/// Pitch of the structure tensor's grid for a window of `sigma` pixels
/// (see [`Tensor::rebuild`]): at most a quarter of sigma, so nothing
/// aliases, and of those pitches the one whose window (block means plus the
/// grid's box cascade, whose odd widths move its variance in steps) has
/// the variance nearest that of the full-resolution cascade, so the window
/// stays the one the full-resolution path uses within the grid's
/// granularity (the larger pitch on a tie). 1 below sigma = 8.
fn grid_pitch(sigma: f64) -> usize {
    let d_max = if sigma.is_finite() {
        (sigma / 4.0).floor() as usize
    } else {
        1
    };
    if d_max < 2 {
        return 1;
    }
    let target = cascade_variance(sigma);
    let realised = |d: usize| {
        let df = d as f64;
        (df * df - 1.0) / 12.0 + df * df * cascade_variance(coarse_sigma(sigma, d))
    };
    (2..=d_max)
        .rev()
        .min_by(|&a, &b| {
            (realised(a) - target)
                .abs()
                .total_cmp(&(realised(b) - target).abs())
        })
        .unwrap_or(1)
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
struct PhaseField {
    w: usize,
    h: usize,
    v: Vec<f32>,
    grey: Vec<f32>,
    neck_depth: f32,
}

fn phase_field(seg: Segmentation, sigma: f64) -> PhaseField {
    let mut ind: Vec<f32> = seg
        .foreground
        .iter()
        .map(|&f| if f { 1.0 } else { 0.0 })
        .collect();
    let (w, h) = (seg.width, seg.height);
    gaussian_blur_indicator_in_place(&mut ind, &mut Vec::new(), w, h, sigma.max(0.5));
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
    let level = crate::segment::median_by_selection(&arm) as f32;
    PhaseField {
        w: seg.width,
        h: seg.height,
        v: ind,
        grey,
        neck_depth: 0.5 * (level - sign * seg.threshold).max(0.0),
    }
}

/// A counted line with the traced segment it was sampled on.
struct Traced {
    line: Line,
    /// The sampled line, for the pooled recounts.
    profile: Profile,
    count: Count,
}

/// Scratch reused by the scales tried on one image: the smoothed tensor
/// and the map of pixels already taken by a line.
struct LayScratch {
    tensor: Tensor,
    occupied: Vec<bool>,
}

fn lay_lines(
    img: &Prepared,
    seg: &PhaseField,
    grads: &GradientProducts,
    lambda: f64,
    p: &InterceptParams,
    scratch: &mut LayScratch,
) -> Vec<Traced> {
    let (w, h) = (seg.w, seg.h);
    let mask = img.mask.as_deref().filter(|m| m.len() == w * h);
    let LayScratch { tensor, occupied } = scratch;
    tensor.rebuild(grads, (p.tensor_sigma_spacings * lambda).max(1.0));
    let tensor = &*tensor;
    let max_turn = p.max_turn_deg.to_radians();
    // Hint in image axes: y up -> y down flips the angle's sign.
    let hint = p
        .direction_hint_deg
        .filter(|d| d.is_finite())
        .map(|d| -d.to_radians());
    // Keep a margin of one tensor window from the border, where the
    // smoothing saw only part of its neighbourhood.
    let margin = (2.0 * p.tensor_sigma_spacings * lambda).ceil().max(2.0) as usize;
    if 2 * margin + 4 >= w || 2 * margin + 4 >= h {
        return vec![];
    }
    let pitch = lambda.max(2.0);
    let mut cands: Vec<(f64, usize, usize)> = Vec::new();
    let mut yf = margin as f64;
    while yf < (h - margin) as f64 {
        let mut xf = margin as f64;
        while xf < (w - margin) as f64 {
            let (x, y) = (xf as usize, yf as usize);
            let j = tensor.components(x, y);
            let coh = j.coherence();
            if coh >= p.min_coherence
                && hint.is_none_or(|hd| axial_diff(j.theta(), hd) <= max_turn)
                && !mask.is_some_and(|m| m[y * w + x])
            {
                cands.push((coh, x, y));
            }
            xf += pitch;
        }
        yf += pitch;
    }
    // Most coherent first; ties by raster position, so the order is total.
    cands.sort_by(|a, b| b.0.total_cmp(&a.0).then((a.2, a.1).cmp(&(b.2, b.1))));

    occupied.clear();
    occupied.resize(w * h, false);
    let half_max = 0.5 * p.max_line_spacings * lambda;
    let min_len = 0.5 * (p.min_arms.saturating_sub(1)) as f64 * lambda;
    let band = p.line_separation_spacings * lambda;
    let mut lines = Vec::new();
    for &(_, cx, cy) in &cands {
        if occupied[cy * w + cx] {
            continue;
        }
        let (theta, _) = tensor.at(cx, cy);
        let (ux, uy) = (theta.cos(), theta.sin());
        let inside = |x: f64, y: f64| {
            x >= margin as f64
                && y >= margin as f64
                && x <= (w - 1 - margin) as f64
                && y <= (h - 1 - margin) as f64
        };
        let mut ends = [0.0f64; 2];
        for (k, sign) in [-1.0f64, 1.0].into_iter().enumerate() {
            let mut s = 0.0;
            while s + 1.0 <= half_max {
                let (x, y) = (
                    cx as f64 + sign * (s + 1.0) * ux,
                    cy as f64 + sign * (s + 1.0) * uy,
                );
                if !inside(x, y) {
                    break;
                }
                let (xi, yi) = (x.round() as usize, y.round() as usize);
                let i = yi * w + xi;
                if occupied[i] || mask.is_some_and(|m| m[i]) {
                    break;
                }
                let j = tensor.components(xi, yi);
                if j.coherence() < p.min_coherence || axial_diff(j.theta(), theta) > max_turn {
                    break;
                }
                s += 1.0;
            }
            ends[k] = s;
        }
        let (a, b) = (-ends[0], ends[1]);
        if b - a < min_len {
            continue;
        }
        let (x0, y0) = (cx as f64 + a * ux, cy as f64 + a * uy);
        let (x1, y1) = (cx as f64 + b * ux, cy as f64 + b * uy);
        let Some(profile) = sample_line(seg, (x0, y0), (x1, y1), p) else {
            continue;
        };
        let Some((line, count)) = count_profile(&profile, seg.neck_depth, p, None) else {
            continue;
        };
        mark_band(occupied, w, h, (x0, y0), (x1, y1), band);
        lines.push(Traced {
            line,
            profile,
            count,
        });
    }
    lines
}

/// Marks every pixel within `band` of the segment (x0, y0)-(x1, y1).
fn mark_band(occ: &mut [bool], w: usize, h: usize, a: (f64, f64), b: (f64, f64), band: f64) {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let len2 = dx * dx + dy * dy;
    let xmin = (a.0.min(b.0) - band).floor().max(0.0) as usize;
    let ymin = (a.1.min(b.1) - band).floor().max(0.0) as usize;
    let xmax = ((a.0.max(b.0) + band).ceil().max(0.0) as usize).min(w - 1);
    let ymax = ((a.1.max(b.1) + band).ceil().max(0.0) as usize).min(h - 1);
    // Only the pixels of a row within band + 1 of the segment's line can
    // be within band of the segment: the exact test below searches that
    // stretch of the row (widened by a pixel) instead of the whole bounding
    // box. Pixels skipped are more than band + 1 from the line, far beyond
    // any rounding of the test.
    let len = len2.sqrt();
    for y in ymin..=ymax {
        let (mut x_lo, mut x_hi) = (xmin, xmax);
        if len > 0.0 && dy != 0.0 {
            // |(x - a.0) dy - (y - a.1) dx| / len <= band + 1.
            let c = a.0 + (y as f64 - a.1) * dx / dy;
            let half = ((band + 1.0) * len / dy).abs();
            let (lo, hi) = ((c - half).floor() - 1.0, (c + half).ceil() + 1.0);
            if hi < xmin as f64 || lo > xmax as f64 {
                continue;
            }
            x_lo = x_lo.max(lo.max(0.0) as usize);
            x_hi = x_hi.min(hi as usize);
        }
        let within = |x: usize| {
            let (px, py) = (x as f64 - a.0, y as f64 - a.1);
            let t = if len2 > 0.0 {
                ((px * dx + py * dy) / len2).clamp(0.0, 1.0)
            } else {
                0.0
            };
            let (ex, ey) = (px - t * dx, py - t * dy);
            ex * ex + ey * ey <= band * band
        };
        // The band is convex, so on a row its pixels are one stretch: find
        // its ends by the exact test from either side and fill between
        // (a pixel between two marked ones is nearer the segment than the
        // farther of them; only one within rounding, ~1e-12 px, of the
        // band's edge could be judged otherwise pixel by pixel).
        let Some(first) = (x_lo..=x_hi).find(|&x| within(x)) else {
            continue;
        };
        let last = (first..=x_hi).rev().find(|&x| within(x)).unwrap_or(first);
        occ[y * w + first..=y * w + last].fill(true);
    }
}

fn bilinear(data: &[f32], w: usize, h: usize, x: f64, y: f64) -> f32 {
    let x = x.clamp(0.0, (w - 1) as f64);
    let y = y.clamp(0.0, (h - 1) as f64);
    // x, y >= 0 here, so truncation is the floor.
    let (x0, y0) = (x as usize, y as usize);
    let (x1, y1) = ((x0 + 1).min(w - 1), (y0 + 1).min(h - 1));
    let (fx, fy) = ((x - x0 as f64) as f32, (y - y0 as f64) as f32);
    let top = data[y0 * w + x0] * (1.0 - fx) + data[y0 * w + x1] * fx;
    let bot = data[y1 * w + x0] * (1.0 - fx) + data[y1 * w + x1] * fx;
    top * (1.0 - fy) + bot * fy
}

/// A run of one phase along a line, positions in pixels from the line start.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Run {
    pub start: f64,
    pub end: f64,
    /// `true` for the arm-carrying (foreground) phase.
    pub fg: bool,
}

impl Run {
    fn len(&self) -> f64 {
        self.end - self.start
    }
    fn centre(&self) -> f64 {
        0.5 * (self.start + self.end)
    }
}

/// Runs along a sampled profile: `values` at positions `k x step`, compared
/// with `threshold` (foreground where `(v > threshold) != inverted`);
/// boundaries at the linear-interpolated crossing of the threshold.
pub fn runs_of_profile(values: &[f32], step: f64, threshold: f32, inverted: bool) -> Vec<Run> {
    let mut runs = Vec::new();
    let Some(&first) = values.first() else {
        return runs;
    };
    let fg = |v: f32| (v > threshold) != inverted;
    let mut cur = Run {
        start: 0.0,
        end: 0.0,
        fg: fg(first),
    };
    for k in 1..values.len() {
        let (a, b) = (values[k - 1], values[k]);
        if fg(b) != cur.fg {
            let (da, db) = ((a - threshold) as f64, (b - threshold) as f64);
            let frac = if (da - db).abs() > 0.0 {
                (da / (da - db)).clamp(0.0, 1.0)
            } else {
                0.5
            };
            let s = (k as f64 - 1.0 + frac) * step;
            cur.end = s;
            runs.push(cur);
            cur = Run {
                start: s,
                end: s,
                fg: fg(b),
            };
        }
    }
    cur.end = (values.len() - 1) as f64 * step;
    runs.push(cur);
    runs
}

/// Merges runs shorter than `min_len` into their neighbours, shortest first
/// (the earliest on ties), until none is left.
pub fn merge_short_runs(runs: &mut Vec<Run>, min_len: f64) {
    merge_weakest_while(runs, Run::len, min_len);
}

/// Merges the run of lowest `score` below `threshold` into its neighbours,
/// again and again until none is left: an end run joins its one neighbour;
/// an inner run's neighbours are of the other phase, so the three become one.
fn merge_weakest_while(runs: &mut Vec<Run>, score: impl Fn(&Run) -> f64, threshold: f64) {
    loop {
        if runs.len() < 2 {
            return;
        }
        let mut best: Option<(usize, f64)> = None;
        for (i, r) in runs.iter().enumerate() {
            let v = score(r);
            if v < threshold && best.is_none_or(|(_, b)| v < b) {
                best = Some((i, v));
            }
        }
        let Some((i, _)) = best else {
            return;
        };
        if i == 0 {
            runs[1].start = runs[0].start;
            runs.remove(0);
        } else if i == runs.len() - 1 {
            runs[i - 1].end = runs[i].end;
            runs.pop();
        } else {
            runs[i - 1].end = runs[i + 1].end;
            runs.drain(i..=i + 1);
        }
    }
}

/// Merges runs whose phase field (`values`, samples `step` apart) never gets
/// farther than `min_dev` from the 0.5 level into their neighbours, least
/// deep first, until none is left: the line grazed a boundary there, or
/// crossed a sliver narrower than the pre-smoothing resolves, and crossed no
/// particle (see [`InterceptParams::min_crossing_depth`]). `min_dev <= 0`
/// merges nothing.
pub fn merge_grazing_runs(runs: &mut Vec<Run>, values: &[f32], step: f64, min_dev: f32) {
    if values.is_empty() || min_dev <= 0.0 {
        return;
    }
    let depth = |r: &Run| -> f32 {
        let k0 = ((r.start / step).ceil() as usize).min(values.len().saturating_sub(1));
        let k1 = ((r.end / step).floor() as usize).min(values.len().saturating_sub(1));
        values[k0..=k1.max(k0)]
            .iter()
            .map(|v| if r.fg { v - 0.5 } else { 0.5 - v })
            .fold(0.0f32, f32::max)
    };
    // f32 to f64 is exact and keeps the order: the same runs merge.
    merge_weakest_while(runs, |r| f64::from(depth(r)), f64::from(min_dev));
}

/// The count of one line (or piece of a line): positions along it.
#[derive(Clone, Debug, PartialEq)]
pub struct Count {
    /// Observed arm centres, pixels from the line start.
    pub centres: Vec<f64>,
    /// Arm positions (observed plus inferred), n.
    pub positions: usize,
    /// Spacings between the first and last centre, n - 1.
    pub spacings: usize,
    /// Centre-to-centre spacing, L/(n-1).
    pub centre_to_centre: f64,
    /// Line length over count, L/n, with half counts for arms cut by the ends.
    pub length_over_count: f64,
    /// Start and end of the piece of line counted, pixels from the line start.
    pub extent: (f64, f64),
    /// Coefficient of variation of the periods (each divided by its k).
    pub period_cv: f64,
    /// Arm positions inferred (missing) or split out of merged runs.
    pub inferred: usize,
    /// Median length of the complete single arm runs used, pixels.
    pub arm_run_px: f64,
    /// Periods between consecutive centres, each divided by its k.
    pub periods_px: Vec<f64>,
}

/// Counts arms on a run sequence (module docs, steps 5-7); `line_len` is the
/// sampled length. Returns the longest valid piece, or `None`.
pub fn count_runs(runs: &[Run], line_len: f64, p: &InterceptParams) -> Option<Count> {
    count_runs_with_necks(runs, None, line_len, p, None)
}

/// A grey profile along a line (arm phase bright, samples `step` apart) and
/// the least depth of a neck between two touching arms.
#[derive(Clone, Copy)]
struct Necks<'a> {
    grey: &'a [f32],
    step: f64,
    depth: f32,
}

/// Splits foreground runs at necks: touching arms (coarsened, or merged by
/// the optical blur when the channel between them is narrower than the
/// resolution) still show a valley in grey between two crests. A run is
/// split at its deepest interior minimum when both crests either side rise
/// above it by at least `depth` (half the arm-to-threshold contrast, so the
/// valley is a real fall towards the other phase and not noise on a
/// plateau), recursively. Split runs abut.
fn split_necks(runs: &[Run], necks: Necks, min_len: f64) -> Vec<Run> {
    let mut out = Vec::with_capacity(runs.len());
    for r in runs {
        if !r.fg {
            out.push(*r);
            continue;
        }
        let mut stack = vec![*r];
        let mut pieces = Vec::new();
        while let Some(q) = stack.pop() {
            match deepest_neck(&q, necks, min_len) {
                Some(pos) => {
                    // Right piece pushed first so the left one is done first.
                    stack.push(Run {
                        start: pos,
                        end: q.end,
                        fg: true,
                    });
                    stack.push(Run {
                        start: q.start,
                        end: pos,
                        fg: true,
                    });
                }
                None => pieces.push(q),
            }
        }
        out.extend(pieces);
    }
    out
}

fn deepest_neck(r: &Run, n: Necks, min_len: f64) -> Option<f64> {
    let k0 = (r.start / n.step).ceil() as usize;
    let k1 = ((r.end / n.step).floor() as usize).min(n.grey.len().checked_sub(1)?);
    if k1 < k0 + 2 {
        return None;
    }
    let seg = &n.grey[k0..=k1];
    let (imin, vmin) = seg
        .iter()
        .enumerate()
        .min_by(|a, b| a.1.total_cmp(b.1))
        .map(|(i, v)| (i, *v))?;
    let left = seg[..=imin]
        .iter()
        .copied()
        .fold(f32::NEG_INFINITY, f32::max);
    let right = seg[imin..]
        .iter()
        .copied()
        .fold(f32::NEG_INFINITY, f32::max);
    let pos = (k0 + imin) as f64 * n.step;
    let ok = left.min(right) - vmin >= n.depth
        && n.depth > 0.0
        && pos - r.start >= min_len
        && r.end - pos >= min_len;
    ok.then_some(pos)
}

/// `pooled`: the arm run length and period (w, m) pooled over all the
/// image's lines, used instead of the line's own medians when given.
fn count_runs_with_necks(
    runs: &[Run],
    necks: Option<Necks>,
    line_len: f64,
    p: &InterceptParams,
    pooled: Option<(f64, f64)>,
) -> Option<Count> {
    let mut runs = runs.to_vec();
    merge_short_runs(&mut runs, p.min_run_px);
    // Median period from the complete foreground runs, then the relative
    // noise rule.
    let period = |runs: &[Run]| -> Option<f64> {
        let c: Vec<f64> = complete_fg(runs).map(|r| r.centre()).collect();
        let d: Vec<f64> = c.windows(2).map(|v| v[1] - v[0]).collect();
        stats::median(&d)
    };
    let m0 = match pooled {
        Some((_, m)) => m,
        None => period(&runs)?,
    };
    let min_len = (p.min_run_fraction * m0).max(p.min_run_px);
    merge_short_runs(&mut runs, min_len);
    if let Some(nk) = necks {
        runs = split_necks(&runs, nk, min_len);
    }
    let n = runs.len();
    let (wmed, m) = match pooled {
        Some(wm) => wm,
        None => {
            let wmed = stats::median(&complete_fg(&runs).map(|r| r.len()).collect::<Vec<_>>())?;
            let gaps: Vec<f64> = runs
                .iter()
                .enumerate()
                .filter(|(i, r)| !r.fg && *i > 0 && *i + 1 < n)
                .map(|(_, r)| r.len())
                .collect();
            (wmed, wmed + stats::median(&gaps)?)
        }
    };
    if m <= 0.0 {
        return None;
    }
    // Arm positions along the line, in pieces (with the stretch of line each
    // covers) cut where the line leaves the row.
    #[derive(Clone, Copy)]
    struct Pos {
        c: f64,
        /// An extra arm split out of a merged run (not its first).
        extra: bool,
    }
    let mut pieces: Vec<(Vec<Pos>, f64, f64)> = Vec::new();
    let mut cur: Vec<Pos> = Vec::new();
    let mut piece_start = 0.0;
    for (i, r) in runs.iter().enumerate() {
        if !r.fg || i == 0 || i + 1 == n {
            continue;
        }
        let k = if r.len() > wmed + 0.5 * m {
            1 + ((r.len() - wmed) / m).round() as usize
        } else {
            1
        };
        if k > 3 {
            // Not merged arms: a trunk or other body; the row ends here.
            pieces.push((std::mem::take(&mut cur), piece_start, r.start));
            piece_start = r.end;
            continue;
        }
        if k == 1 {
            cur.push(Pos {
                c: r.centre(),
                extra: false,
            });
        } else {
            let step = (r.len() - wmed) / (k - 1) as f64;
            for j in 0..k {
                cur.push(Pos {
                    c: r.start + 0.5 * wmed + j as f64 * step,
                    extra: j > 0,
                });
            }
        }
    }
    pieces.push((cur, piece_start, line_len));

    // Cut pieces further at gaps of more than three periods.
    let mut cut: Vec<(Vec<Pos>, f64, f64)> = Vec::new();
    for (ps, a, b) in pieces {
        let mut acc: Vec<Pos> = Vec::new();
        let mut a_cur = a;
        for q in ps {
            if let Some(last) = acc.last() {
                if ((q.c - last.c) / m).round() > 3.0 {
                    let end = last.c + 0.5 * m;
                    cut.push((std::mem::take(&mut acc), a_cur, end));
                    a_cur = q.c - 0.5 * m;
                }
            }
            acc.push(q);
        }
        cut.push((acc, a_cur, b));
    }

    let mut best: Option<Count> = None;
    for (ps, a, b) in cut {
        if ps.len() < 2 {
            continue;
        }
        let mut spacings = 0usize;
        let mut normalised = Vec::with_capacity(ps.len());
        for pair in ps.windows(2) {
            let d = pair[1].c - pair[0].c;
            let k = ((d / m).round() as usize).max(1);
            spacings += k;
            normalised.push(d / k as f64);
        }
        let positions = spacings + 1;
        // Arms without a centre of their own: positions in wide gaps, and
        // the extra arms split out of merged runs.
        let inferred = (positions - ps.len()) + ps.iter().filter(|q| q.extra).count();
        if positions < p.min_arms || 3 * inferred > positions {
            continue;
        }
        let mean = normalised.iter().sum::<f64>() / normalised.len() as f64;
        let cv = if normalised.len() > 1 && mean > 0.0 {
            let var = normalised.iter().map(|v| (v - mean).powi(2)).sum::<f64>()
                / (normalised.len() - 1) as f64;
            var.sqrt() / mean
        } else {
            0.0
        };
        if cv > p.max_period_cv {
            continue;
        }
        let (c0, c1) = (ps[0].c, ps[ps.len() - 1].c);
        let count = Count {
            centres: ps.iter().map(|q| q.c).collect(),
            positions,
            spacings,
            centre_to_centre: (c1 - c0) / spacings as f64,
            // The line from the middle of the gap before the first arm to
            // the middle of the gap after the last spans n periods.
            length_over_count: (c1 - c0 + m) / positions as f64,
            extent: ((c0 - 0.5 * m).max(a), (c1 + 0.5 * m).min(b)),
            period_cv: cv,
            inferred,
            arm_run_px: wmed,
            periods_px: normalised.clone(),
        };
        if best
            .as_ref()
            .is_none_or(|bc| count.positions > bc.positions)
        {
            best = Some(count);
        }
    }
    best
}

fn complete_fg(runs: &[Run]) -> impl Iterator<Item = &Run> {
    let n = runs.len();
    runs.iter()
        .enumerate()
        .filter(move |(i, r)| r.fg && *i > 0 && *i + 1 < n)
        .map(|(_, r)| r)
}

/// A line sampled every half pixel: its direction, the grey profile, and
/// the runs of the phase field after the grazing merge. Counting depends on
/// the pooled (w, m) only after this, so recounts reuse it.
struct Profile {
    a: (f64, f64),
    ux: f64,
    uy: f64,
    step: f64,
    grey: Vec<f32>,
    runs: Vec<Run>,
    /// Sampled length, pixels.
    sampled: f64,
}

/// Samples the line from `a` to `b` every half pixel. `None` for a line of
/// fewer than four samples.
fn sample_line(
    seg: &PhaseField,
    a: (f64, f64),
    b: (f64, f64),
    p: &InterceptParams,
) -> Option<Profile> {
    let (w, h) = (seg.w, seg.h);
    let len = (b.0 - a.0).hypot(b.1 - a.1);
    // Half-pixel steps: the sampling is finer than the 1 px pre-smoothing,
    // so no boundary is skipped.
    let step = 0.5;
    let n = (len / step).floor() as usize + 1;
    if n < 4 {
        return None;
    }
    let (ux, uy) = ((b.0 - a.0) / len, (b.1 - a.1) / len);
    let values: Vec<f32> = (0..n)
        .map(|k| {
            let s = k as f64 * step;
            bilinear(&seg.v, w, h, a.0 + s * ux, a.1 + s * uy)
        })
        .collect();
    let grey: Vec<f32> = (0..n)
        .map(|k| {
            let s = k as f64 * step;
            bilinear(&seg.grey, w, h, a.0 + s * ux, a.1 + s * uy)
        })
        .collect();
    let mut runs = runs_of_profile(&values, step, 0.5, false);
    merge_grazing_runs(&mut runs, &values, step, p.min_crossing_depth as f32);
    Some(Profile {
        a,
        ux,
        uy,
        step,
        grey,
        runs,
        sampled: (n - 1) as f64 * step,
    })
}

/// Counts a sampled line and returns it as a [`Line`].
fn count_profile(
    pr: &Profile,
    neck_depth: f32,
    p: &InterceptParams,
    pooled: Option<(f64, f64)>,
) -> Option<(Line, Count)> {
    let necks = Necks {
        grey: &pr.grey,
        step: pr.step,
        depth: neck_depth,
    };
    let c = count_runs_with_necks(&pr.runs, Some(necks), pr.sampled, p, pooled)?;
    let spacing = match p.convention {
        Convention::CentreToCentre => c.centre_to_centre,
        Convention::LengthOverCount => c.length_over_count,
    };
    if !spacing.is_finite() || spacing <= 0.0 {
        return None;
    }
    let (a, ux, uy) = (pr.a, pr.ux, pr.uy);
    let at = |s: f64| (a.0 + s * ux, a.1 + s * uy);
    let (s0, s1) = c.extent;
    let (p0, p1) = (at(s0), at(s1));
    let line = Line {
        x0_px: p0.0,
        y0_px: p0.1,
        x1_px: p1.0,
        y1_px: p1.1,
        arms: c.positions,
        spacing_px: spacing,
        arm_centres_px: c.centres.iter().map(|&s| at(s)).collect(),
    };
    Some((line, c))
}
