//! The run analysis of a line's profile: runs of each phase, merging of
//! grazing and short runs, splitting at necks, merged and missing arms, and
//! the count (module docs of [`super`], steps 5 to 7).

use super::*;

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
pub(crate) fn merge_weakest_while(
    runs: &mut Vec<Run>,
    score: impl Fn(&Run) -> f64,
    threshold: f64,
) {
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
    /// Length over count, L/n, with L from the middle of the gap before the
    /// first arm to the middle of the gap after the last (n whole periods).
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
pub(crate) struct Necks<'a> {
    pub(crate) grey: &'a [f32],
    pub(crate) step: f64,
    pub(crate) depth: f32,
}

/// Splits foreground runs at necks: touching arms (coarsened, or merged by
/// the optical blur when the channel between them is narrower than the
/// resolution) still show a valley in grey between two crests. A run is
/// split at its deepest interior minimum when both crests either side rise
/// above it by at least `depth` (half the arm-to-threshold contrast, so the
/// valley is a real fall towards the other phase and not noise on a
/// plateau), recursively. Split runs abut.
pub(crate) fn split_necks(runs: &[Run], necks: Necks, min_len: f64) -> Vec<Run> {
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

pub(crate) fn deepest_neck(r: &Run, n: Necks, min_len: f64) -> Option<f64> {
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
pub(crate) fn count_runs_with_necks(
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

pub(crate) fn complete_fg(runs: &[Run]) -> impl Iterator<Item = &Run> {
    let n = runs.len();
    runs.iter()
        .enumerate()
        .filter(move |(i, r)| r.fg && *i > 0 && *i + 1 < n)
        .map(|(_, r)| r)
}

/// A line sampled every half pixel: its direction, the grey profile, and
/// the runs of the phase field after the grazing merge. Counting depends on
/// the pooled (w, m) only after this, so recounts reuse it.
pub(crate) struct Profile {
    pub(crate) a: (f64, f64),
    pub(crate) ux: f64,
    pub(crate) uy: f64,
    pub(crate) step: f64,
    pub(crate) grey: Vec<f32>,
    pub(crate) runs: Vec<Run>,
    /// Sampled length, pixels.
    pub(crate) sampled: f64,
}

/// Samples the line from `a` to `b` every half pixel. `None` for a line of
/// fewer than four samples.
pub(crate) fn sample_line(
    seg: &PhaseField,
    a: (f64, f64),
    b: (f64, f64),
    p: &InterceptParams,
) -> Option<Profile> {
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
            seg.v.bilinear(a.0 + s * ux, a.1 + s * uy)
        })
        .collect();
    let grey: Vec<f32> = (0..n)
        .map(|k| {
            let s = k as f64 * step;
            seg.grey.bilinear(a.0 + s * ux, a.1 + s * uy)
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
pub(crate) fn count_profile(
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
