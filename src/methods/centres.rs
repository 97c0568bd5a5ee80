//! The centres method: SDAS from the centres of the arms and the rows they
//! stand in.
//!
//! A secondary arm, whether the section cuts it along (a finger off a trunk)
//! or across (a rounded spot), is a body of the primary phase, and the arms
//! of one trunk side stand in a row at the arm spacing. This method finds
//! the body centres ([`crate::blocks::centres`]), links each to its nearest
//! neighbours through a k-d tree (`kiddo`), and follows links that continue
//! each other in a straight line into chains. A chain's spacing is the
//! distance between its first and last centres over the number of gaps, the
//! centre-to-centre convention of the line intercept. Chains are disjoint
//! (no centre in two), so their spacings are independent measurements:
//! mean, standard deviation and Student-t 95 % interval as for intercept
//! lines.
//!
//! Why this reads the arm spacing where a period may not: in a section that
//! cuts the arms across, the spots of one row are each other's nearest
//! neighbours (the rows are primary trunks, farther apart than the arms of
//! one trunk), so chains run along the rows. A transform or a test line laid
//! across the rows finds the row period instead; this method reports that
//! period too ([`CentresOutcome::row_spacing_px`]) so that the combination
//! can name it.
//!
//! Rules, each with its reason:
//! - *Distinct bodies only.* Two centres are linked only when the straight
//!   segment between them narrows to a neck or crosses the other phase
//!   ([`distinct_bodies`]), so an arm is never measured along its own length.
//! - *Arms, not particles.* Centres thinner than half the area-weighted
//!   median radius are left out: secondary arms of one field have
//!   comparable thickness (coarsening removes the thin ones and thickens the
//!   rest; common practice, no single source), whereas eutectic particles,
//!   holes in the lace and etch pits are much smaller.
//! - *Straight and even.* A chain continues only through a link that turns
//!   by at most [`CentresParams::max_turn_deg`], from the previous link and
//!   from the chain's overall direction (rows are straight; small turns must
//!   not add up to a curve), and whose length is within a
//!   factor [`CentresParams::max_step_ratio`] of the previous one and of the
//!   chain's shortest and longest steps so far: arms of one trunk side stand
//!   on a line with a nearly constant spacing; a missing arm (a doubled
//!   step) ends the chain rather than entering it, also when the steps
//!   lengthen a little at a time.
//! - *Not chance.* Random points also line up now and then, but their
//!   chains do not run side by side. The fraction of chains whose nearest
//!   chain is parallel to them is compared with the same fraction for
//!   [`CentresParams::null_sets`] sets of random points at the field's density
//!   and hard-core distance; the value stands only when the
//!   field's fraction exceeds every one of them (a Monte Carlo test at the
//!   level 1/(null_sets + 1): J. Besag and P. J. Diggle, "Simple Monte Carlo
//!   tests for spatial pattern", Applied Statistics 26 (1977) 327-333).

use crate::blocks::centres::{distance, maxima, neck_between, Centre};
use crate::blocks::point_pattern::{kd_tree, nearest_distances, random_hard_core, SplitMix};
use crate::preprocess::Prepared;
use crate::segment::{segment, SegmentParams, Segmentation};
use crate::units::Pixels;
use kiddo::SquaredEuclidean;

/// Parameters of the centres method.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CentresParams {
    pub segment: SegmentParams,
    /// Neighbours looked at from each centre. Eight covers the two along a
    /// row, the two of each neighbouring row and a spare for a missing arm.
    pub neighbours: usize,
    /// Largest turn, degrees, between two successive links of a chain.
    /// Centres of arms along a trunk side scatter sideways by up to about a
    /// quarter of a spacing (the arms are not all equally long or equally
    /// cut), which turns a link by up to atan(0.25 x 2) = 27 degrees; 25
    /// keeps such rows while refusing a bend of a right angle at once.
    pub max_turn_deg: f64,
    /// Largest ratio between successive link lengths in a chain: 1.5 passes
    /// the scatter of arms along one trunk and refuses the double step of a
    /// missing arm (ratio 2).
    pub max_step_ratio: f64,
    /// Fewest gaps in a chain: three (four centres), the fewest in which two
    /// successive turns can show a straight row.
    pub min_gaps: usize,
    /// Fewest chains for a value: five, as the intercept needs five lines,
    /// so that the Student-t interval (t = 2.78 for 4 degrees of freedom) is
    /// not dominated by its own uncertainty.
    pub min_chains: usize,
    /// Random point sets of the chance test. Both phases are tested and the
    /// better one taken, so each is tested at 0.5 % (199 sets: the field must
    /// beat all of them) to keep the chance of a value on a field without
    /// rows at 1 % (Bonferroni).
    pub null_sets: usize,
}

impl Default for CentresParams {
    fn default() -> Self {
        Self {
            segment: SegmentParams::default(),
            neighbours: 8,
            max_turn_deg: 25.0,
            max_step_ratio: 1.5,
            min_gaps: 3,
            min_chains: 5,
            null_sets: 199,
        }
    }
}

/// One chain of arm centres.
#[derive(Clone, Debug, PartialEq)]
pub struct Chain {
    /// The centres in order along the chain, pixels (y down).
    pub points: Vec<[f64; 2]>,
    /// End-to-end distance over the number of gaps.
    pub spacing_px: f64,
    /// Whether the chain entered the value: false for a chain that runs
    /// across rows (see [`across_rows`]).
    pub used: bool,
}

impl Chain {
    pub fn gaps(&self) -> usize {
        self.points.len().saturating_sub(1)
    }
    fn ends(&self) -> ([f64; 2], [f64; 2]) {
        (
            self.points[0],
            *self.points.last().unwrap_or(&self.points[0]),
        )
    }
    /// Unit direction from the first to the last centre.
    fn unit(&self) -> [f64; 2] {
        let (a, b) = self.ends();
        let (dx, dy) = (b[0] - a[0], b[1] - a[1]);
        let n = dx.hypot(dy).max(1e-12);
        [dx / n, dy / n]
    }
    fn centroid(&self) -> [f64; 2] {
        let n = self.points.len() as f64;
        let sx: f64 = self.points.iter().map(|p| p[0]).sum();
        let sy: f64 = self.points.iter().map(|p| p[1]).sum();
        [sx / n, sy / n]
    }
}

/// The centres method's result, pixels.
#[derive(Clone, Debug, PartialEq, Default)]
pub struct CentresOutcome {
    pub value_px: Option<Pixels>,
    pub ci95_px: Option<[Pixels; 2]>,
    pub sd_px: Option<Pixels>,
    pub n_chains: usize,
    pub rel_accuracy_pct: Option<f64>,
    /// Centres of the arm bodies taken (after the thickness rule).
    pub centres: Vec<Centre>,
    pub chains: Vec<Chain>,
    /// Median distance between neighbouring parallel chains: the row (trunk)
    /// spacing of a section with the arms cut across.
    pub row_spacing_px: Option<f64>,
    /// Fraction of the chains whose nearest chain runs parallel to them, in
    /// the field and the largest over the random sets of the chance test.
    pub parallel_fraction: Option<f64>,
    pub chance_parallel_max: Option<f64>,
    /// The phase whose centres were taken as the arms ("darker" or "brighter").
    pub arm_phase: Option<&'static str>,
    /// How far apart neighbouring bodies stand: the median, over the
    /// centres, of the distance to the nearest centre on a distinct body,
    /// pixels; the larger of the two phases' medians (see
    /// [`nearest_body_median`]). Evidence for the combination: a period
    /// well above it is not the spacing of the bodies.
    pub nearest_body_px: Option<f64>,
    pub reason: Option<String>,
}

impl CentresOutcome {
    fn none(reason: impl Into<String>) -> Self {
        Self {
            reason: Some(reason.into()),
            ..Default::default()
        }
    }

    /// The method-neutral form.
    pub fn into_outcome(self) -> super::Outcome {
        use super::{segment_dir_deg, Detail, Local, Method, Outcome};
        use crate::units::Pixels;
        let valued = self.value_px.is_some();
        let local = self
            .chains
            .iter()
            .map(|c| {
                let used = valued && c.used;
                let (a, b) = c.ends();
                let m = c.centroid();
                Local {
                    x: Pixels(m[0]),
                    y: Pixels(m[1]),
                    spacing: Pixels(c.spacing_px),
                    dir_deg: segment_dir_deg(a[0], a[1], b[0], b[1]),
                    quality: None,
                    used,
                }
            })
            .collect();
        Outcome {
            method: Method::Centres,
            value: self.value_px,
            ci95: self.ci95_px,
            n: self.n_chains,
            spread: self.sd_px,
            reason: self.reason.clone(),
            warnings: Vec::new(),
            local,
            for_target: None,
            indicative: None,
            detail: Detail::Centres(self),
        }
    }
}

/// Measures SDAS from arm centres.
///
/// Which phase holds the arms is decided by the evidence, not assumed: both
/// phases of the segmentation are analysed, and the one whose centres stand
/// in rows farther beyond chance (the larger excess of the parallel fraction
/// over the largest chance fraction) is taken. In a section with the arms
/// cut across, the channels between the spots stand in the same rows as the
/// spots, so either phase gives the arm spacing; in a drawing of thin arms
/// on a wide matrix, only the arms' phase does. The area fraction, which
/// varies from 35 to 80 % with alloy and etch, plays no part.
pub fn measure(img: &Prepared, params: &CentresParams) -> CentresOutcome {
    let (w, h) = (img.image.width, img.image.height);
    if w < 16 || h < 16 || img.image.data.len() != w * h || img.contrast <= 1e-6 {
        return CentresOutcome::none("no arm centres: the image is too small or has no contrast");
    }
    let Some(seg) = segment(img, &params.segment) else {
        return CentresOutcome::none("no arm centres: the image does not separate into two phases");
    };
    // Only the phase indicator is used here: the smoothed values (a float
    // per pixel) are let go at once. A field left to `..` would stay in the
    // partly moved `seg` until the end of this function, beside the
    // distance transform.
    let Segmentation {
        foreground: mut phase,
        inverted,
        smoothed,
        ..
    } = seg;
    drop(smoothed);
    let mut best: Option<CentresOutcome> = None;
    let mut nearest_body: Option<f64> = None;
    // The segmentation's foreground first (the darker phase when inverted),
    // then the other phase, computed in place over it: unmasked pixels not
    // of the foreground.
    for darker in [inverted, !inverted] {
        if darker != inverted {
            let mask = img.mask.as_deref();
            for (i, v) in phase.iter_mut().enumerate() {
                *v = !mask.is_some_and(|m| m[i]) && !*v;
            }
        }
        let mut o = analyse_phase(&phase, w, h, params);
        o.arm_phase = Some(if darker { "darker" } else { "brighter" });
        if let Some(nn) = o.nearest_body_px {
            nearest_body = Some(nearest_body.map_or(nn, |b: f64| b.max(nn)));
        }
        let excess = |o: &CentresOutcome| match (o.parallel_fraction, o.chance_parallel_max) {
            (Some(c), Some(m)) => c - m,
            _ => f64::NEG_INFINITY,
        };
        let better = match &best {
            None => true,
            Some(b) => match (o.value_px.is_some(), b.value_px.is_some()) {
                (true, false) => true,
                (false, true) => false,
                _ => excess(&o) > excess(b),
            },
        };
        if better {
            best = Some(o);
        }
    }
    let mut out = best.unwrap_or_else(|| CentresOutcome::none("no arm centres"));
    out.nearest_body_px = nearest_body;
    out
}

/// The median, over the centres, of the distance to the nearest centre on
/// a distinct body (the shortest of its links, which go to the nearest
/// distinct bodies only, see [`neighbour_links`]); `None` with fewer than
/// [`MIN_NEAREST_BODIES`] centres linked.
///
/// Why it bounds the arm spacing from above (within its scatter): arms
/// stand in rows at the arm spacing, so a body's nearest distinct
/// neighbour is at most about one spacing away (the nearer of its two
/// neighbours along the row); a missing arm lengthens a few of these
/// distances and the median passes over them. The phase between the arms
/// is cut into bodies by the arms at the same spacing. A body whose nearest
/// neighbour is a row or a trunk away is one whose row neighbours are all
/// missing, which the median does not see unless most are.
pub fn nearest_body_median(points: &[[f64; 2]], links: &[Vec<usize>]) -> Option<f64> {
    let nearest: Vec<f64> = points
        .iter()
        .zip(links)
        .filter_map(|(p, ls)| {
            ls.iter()
                .map(|&j| (points[j][0] - p[0]).hypot(points[j][1] - p[1]))
                .min_by(f64::total_cmp)
        })
        .collect();
    if nearest.len() < MIN_NEAREST_BODIES {
        return None;
    }
    crate::stats::median(&nearest)
}

/// Fewest linked centres for [`nearest_body_median`]: with 30, the median's
/// 95 % distribution-free interval runs from about the 32nd to the 68th
/// percentile (binomial order statistics, n = 30: ranks 10 to 20).
pub const MIN_NEAREST_BODIES: usize = 30;

/// The centres, chains, chance test and statistics of one phase.
fn analyse_phase(phase: &[bool], w: usize, h: usize, params: &CentresParams) -> CentresOutcome {
    let Some(d) = distance(phase, w, h) else {
        return CentresOutcome::none(
            "no arm centres: not enough memory for the distance transform of the image",
        );
    };
    // A body must be at least 3 px across to be resolved (the segmentation
    // removes anything smaller than 3 x 3 px).
    let all = maxima(&d, w, h, 1.5);
    let radii: Vec<f64> = all.iter().map(|c| c.r).collect();
    let weights: Vec<f64> = all.iter().map(|c| c.r * c.r).collect();
    let Some(r_ref) = crate::stats::weighted_median(&radii, &weights) else {
        return CentresOutcome::none("no arm centres: no bodies of the arm phase");
    };
    if r_ref < MIN_BODY_RADIUS_PX {
        return CentresOutcome::none(format!(
            "no arm centres: the arm bodies are {:.1} px thick, too thin to locate (at least {:.0} px needed)",
            2.0 * r_ref,
            2.0 * MIN_BODY_RADIUS_PX
        ));
    }
    let centres: Vec<Centre> = all.into_iter().filter(|c| c.r >= 0.5 * r_ref).collect();
    let min_centres = params.min_chains * (params.min_gaps + 1);
    if centres.len() < min_centres {
        return CentresOutcome {
            reason: Some(format!(
                "no arm centres: {} arm bodies, fewer than the {min_centres} that {} chains of {} arms need",
                centres.len(),
                params.min_chains,
                params.min_gaps + 1
            )),
            centres,
            ..Default::default()
        };
    }
    let points: Vec<[f64; 2]> = centres.iter().map(|c| [c.x, c.y]).collect();
    let links = neighbour_links(&points, params.neighbours, |i, j| {
        distinct_bodies(&d, w, h, centres[i], centres[j])
    });
    let nearest_body_px = nearest_body_median(&points, &links);
    let chains = build_chains(&points, &links, params);
    let parallel = parallel_fraction(&chains);

    // The chance test. Random points also fall into short straight chains;
    // what they do not do is line up in rows side by side, as the arms of a
    // grain do along its trunks. The statistic is the fraction of chains
    // whose nearest chain runs parallel to them (within PARALLEL_DEG): for
    // chains whose directions are independent and isotropic it is about
    // PARALLEL_DEG / 90 = 1/6 whatever the spacing of the points, which a
    // count of chained points is not (closely packed random bodies chain
    // far more often than loosely packed ones). Its distribution is taken
    // from random sets of points at the field's density with a hard-core
    // distance (the lower quartile of the field's nearest-neighbour
    // distances, so that they are packed about as closely), chained by the
    // same rules; the field must beat every one of them. The random sets
    // hold at most NULL_POINTS points, in a window of the field's shape
    // sized to keep its density: fewer chains scatter the statistic more,
    // which only makes the largest random value harder to beat.
    let nn = nearest_distances(&points);
    let hard_core = percentile(&nn, 0.25);
    let n_null = points.len().min(NULL_POINTS);
    let shrink = (n_null as f64 / points.len() as f64).sqrt();
    let (nw, nh) = (w as f64 * shrink, h as f64 * shrink);
    let mut rng = SplitMix(0x5eed_a4b5 ^ ((points.len() as u64) << 20));
    let mut chance_max: f64 = 0.0;
    let observed = parallel.unwrap_or(0.0);
    if parallel.is_some() {
        for _ in 0..params.null_sets {
            let pts = random_hard_core(n_null, nw, nh, hard_core, &mut rng);
            // Every random point is its own body, so its nearest neighbours
            // are the links: no wider search is needed.
            let l = neighbour_links(&pts, ROW_NEIGHBOURS, |_, _| true);
            let Some(f) = parallel_fraction(&build_chains(&pts, &l, params)) else {
                continue;
            };
            chance_max = chance_max.max(f);
            if f >= observed {
                break; // the field is not above this random set: the test fails
            }
        }
    }
    let mut chains = chains;
    across_rows(&mut chains);
    // The rows are measured between the chains that run along them.
    let along: Vec<Chain> = chains.iter().filter(|c| c.used).cloned().collect();
    let row_spacing_px = row_spacing(&along);
    let base = CentresOutcome {
        centres,
        nearest_body_px,
        row_spacing_px,
        parallel_fraction: parallel,
        chance_parallel_max: Some(chance_max),
        ..Default::default()
    };
    if parallel.is_none() || observed <= chance_max {
        return CentresOutcome {
            reason: Some(format!(
                "no arm rows beyond chance: {:.0} % of the chains of centres run parallel to their nearest neighbour chain, as many as in a random set of points ({:.0} %)",
                100.0 * observed,
                100.0 * chance_max
            )),
            chains,
            ..base
        };
    }
    let spacings: Vec<f64> = along.iter().map(|c| c.spacing_px).collect();
    if along.len() < params.min_chains {
        return CentresOutcome {
            reason: Some(format!(
                "too few arm rows: {} chains of at least {} arms along rows, {} needed",
                along.len(),
                params.min_gaps + 1,
                params.min_chains
            )),
            chains,
            ..base
        };
    }
    let Some(s) = crate::stats::Summary::of(&spacings) else {
        return CentresOutcome {
            reason: Some("no spread could be computed from the chains".into()),
            chains,
            ..base
        };
    };
    // Along a row the arms are nearer each other than the rows are (the rule
    // behind ROW_NEIGHBOURS). Chains whose spacing exceeds the distance
    // between them run across the rows, not along them: in a field of spots
    // in rows, the channels between the rows are bodies too, and their
    // chains cross the rows through the gaps between the spots.
    if let Some(rows) = base.row_spacing_px {
        if rows < s.mean {
            return CentresOutcome {
                reason: Some(format!(
                    "the chains of centres run across rows: {:.1} px apart along a chain, but the chains lie only {:.1} px apart",
                    s.mean, rows
                )),
                chains,
                ..base
            };
        }
    }
    let ci = s.ci95();
    CentresOutcome {
        value_px: Some(Pixels(s.mean)),
        ci95_px: Some(ci.map(Pixels)),
        sd_px: Some(Pixels(s.sd)),
        n_chains: along.len(),
        rel_accuracy_pct: Some(100.0 * (ci[1] - s.mean) / s.mean),
        chains,
        ..base
    }
}

/// Whether two centres lie on distinct bodies: the straight segment between
/// them narrows to at most half the thinner one's radius (it crosses the
/// other phase, or a neck where fused arms meet). The maxima along one
/// body's own ridge never narrow like that (a ridge is at least as thick as
/// its thinner end), so an arm is not measured along its own length.
/// (Requiring the segment to cross the other phase outright was tried: on
/// 20 cut sections, seeds 43 and 44, it broke the rows at every pair of
/// fused arms and the chains then ran across the rows, median error 27 %
/// against 11 %.)
fn distinct_bodies(d: &[f32], w: usize, h: usize, a: Centre, b: Centre) -> bool {
    neck_between(d, w, h, a, b) <= 0.5 * a.r.min(b.r)
}

/// For each point, the links to its nearest neighbours (among its `k`
/// nearest, those on bodies distinct from it and from each other by
/// `valid`; see [`ROW_NEIGHBOURS`]).
fn neighbour_links(
    points: &[[f64; 2]],
    k: usize,
    valid: impl Fn(usize, usize) -> bool,
) -> Vec<Vec<usize>> {
    let tree = kd_tree(points);
    let nearest: Vec<Vec<usize>> = points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let mut taken: Vec<usize> = Vec::with_capacity(ROW_NEIGHBOURS);
            for j in tree
                .nearest_n::<SquaredEuclidean>(p, k + 1)
                .into_iter()
                .map(|n| n.item as usize)
            {
                if taken.len() == ROW_NEIGHBOURS {
                    break;
                }
                // One link per neighbouring body: a second maximum on the
                // ridge of a body already linked is the same arm, and a link
                // to it would run obliquely along the row.
                if j != i && valid(i, j) && taken.iter().all(|&t| valid(t, j)) {
                    taken.push(j);
                }
            }
            taken
        })
        .collect();
    // Symmetric: a link stands when either end has the other among its
    // nearest distinct neighbours.
    let mut links = nearest.clone();
    for (i, ns) in nearest.iter().enumerate() {
        for &j in ns {
            if !links[j].contains(&i) {
                links[j].push(i);
            }
        }
    }
    links
}

/// Links are kept only to a centre's two nearest distinct neighbours (or
/// from theirs): the arms of one row are each other's nearest neighbours,
/// the row before and the row after, because the rows (trunks) stand
/// farther apart than the arms along one of them (primary spacing exceeds
/// secondary; common practice, no single source). A link to the next row
/// or past a neighbour to the arm beyond is therefore not a step along a row.
const ROW_NEIGHBOURS: usize = 2;

/// Largest number of points in a random set of the chance test (see there).
const NULL_POINTS: usize = 600;

/// Thinnest arm body located, as the radius of its inscribed disc, pixels:
/// bodies 6 px across. The distance transform on a pixel grid is quantised
/// to about half a pixel and the 1 px smoothing before thresholding closes
/// channels narrower than about 2 px, so thinner bodies cannot be told from
/// their neighbours reliably; finer fields are left to the FFT and the
/// intercept, which resolve periods down to 3 px.
pub const MIN_BODY_RADIUS_PX: f64 = 3.0;

fn percentile(v: &[f64], q: f64) -> f64 {
    let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
    if s.is_empty() {
        return 0.0;
    }
    s.sort_by(f64::total_cmp);
    s[((s.len() - 1) as f64 * q).round() as usize]
}

/// Fraction of the chains whose nearest chain (by centroid) runs parallel
/// to them within [`PARALLEL_DEG`]; `None` with fewer than two chains.
fn parallel_fraction(chains: &[Chain]) -> Option<f64> {
    if chains.len() < 2 {
        return None;
    }
    let cos_par = PARALLEL_DEG.to_radians().cos();
    let info: Vec<([f64; 2], [f64; 2])> = chains.iter().map(|c| (c.centroid(), c.unit())).collect();
    let tree = kd_tree(&info.iter().map(|(m, _)| *m).collect::<Vec<_>>());
    let mut parallel = 0usize;
    for (i, (m, u)) in info.iter().enumerate() {
        let nearest = tree
            .nearest_n::<SquaredEuclidean>(m, 2)
            .into_iter()
            .map(|n| n.item as usize)
            .find(|&j| j != i);
        if let Some(j) = nearest {
            let v = info[j].1;
            if (u[0] * v[0] + u[1] * v[1]).abs() >= cos_par {
                parallel += 1;
            }
        }
    }
    Some(parallel as f64 / chains.len() as f64)
}

/// Two chains run parallel when their directions differ by at most this
/// many degrees: the arms along the trunks of one grain are parallel to
/// within a few degrees, and 15 degrees leaves room for the scatter of a
/// chain's direction from its end centres.
const PARALLEL_DEG: f64 = 15.0;

/// Chains from the links, greedily from the shortest link: a chain starts on
/// an unused pair and grows at both ends through the straightest link that
/// passes the turn and step rules to an unused centre. Chains shorter than
/// `min_gaps` are dropped (their centres stay free for no other chain: a
/// greedy pass, deterministic for a given set of points).
fn build_chains(points: &[[f64; 2]], links: &[Vec<usize>], p: &CentresParams) -> Vec<Chain> {
    let dist = |a: usize, b: usize| {
        // sqrt of the sum of squares: pixel coordinates are far from the
        // overflow `hypot` guards against, and this is the hot loop.
        let (dx, dy) = (points[b][0] - points[a][0], points[b][1] - points[a][1]);
        (dx * dx + dy * dy).sqrt()
    };
    let mut pairs: Vec<(f64, usize, usize)> = links
        .iter()
        .enumerate()
        .flat_map(|(i, ns)| ns.iter().filter(move |&&j| i < j).map(move |&j| (i, j)))
        .map(|(i, j)| (dist(i, j), i, j))
        .collect();
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)).then(a.2.cmp(&b.2)));
    let cos_max = p.max_turn_deg.to_radians().cos();
    let mut used = vec![false; points.len()];
    let mut chains = Vec::new();
    for &(_, a, b) in &pairs {
        if used[a] || used[b] {
            continue;
        }
        let mut seq = std::collections::VecDeque::from([a, b]);
        let mut taken = vec![a, b];
        // The shortest and longest steps of the chain so far: every step
        // must lie within `max_step_ratio` of both, not only of the step
        // before it, or a chain can drift through steps of 1.0, 1.4, 1.9
        // spacings into skipping every other arm.
        let (mut short, mut long) = (dist(a, b), dist(a, b));
        // Grow forward (from b away from a), then backward.
        for forward in [true, false] {
            loop {
                let (prev, last) = if forward {
                    (seq[seq.len() - 2], seq[seq.len() - 1])
                } else {
                    (seq[1], seq[0])
                };
                let step = dist(prev, last);
                let ux = (points[last][0] - points[prev][0]) / step;
                let uy = (points[last][1] - points[prev][1]) / step;
                // The chain's overall direction, from its far end to the end
                // being grown: every link must also keep within the turn
                // limit of it, so that small turns cannot add up to a curve.
                let far = if forward { seq[0] } else { seq[seq.len() - 1] };
                let span = dist(far, last);
                let vx = (points[last][0] - points[far][0]) / span;
                let vy = (points[last][1] - points[far][1]) / span;
                let next = links[last]
                    .iter()
                    .copied()
                    .filter(|&c| !used[c] && !taken.contains(&c))
                    .filter_map(|c| {
                        let l = dist(last, c);
                        let ratio = l / step;
                        let cos = ((points[c][0] - points[last][0]) * ux
                            + (points[c][1] - points[last][1]) * uy)
                            / l;
                        let cos_all = ((points[c][0] - points[last][0]) * vx
                            + (points[c][1] - points[last][1]) * vy)
                            / l;
                        (cos >= cos_max
                            && cos_all >= cos_max
                            && ratio <= p.max_step_ratio
                            && ratio >= 1.0 / p.max_step_ratio
                            && l <= p.max_step_ratio * short
                            && l * p.max_step_ratio >= long)
                            .then_some((cos, c))
                    })
                    .max_by(|x, y| x.0.total_cmp(&y.0).then(y.1.cmp(&x.1)));
                match next {
                    Some((_, c)) => {
                        let l = dist(last, c);
                        short = short.min(l);
                        long = long.max(l);
                        taken.push(c);
                        if forward {
                            seq.push_back(c);
                        } else {
                            seq.push_front(c);
                        }
                    }
                    None => break,
                }
            }
        }
        if seq.len() > p.min_gaps {
            for &i in &seq {
                used[i] = true;
            }
            let pts: Vec<[f64; 2]> = seq.iter().map(|&i| points[i]).collect();
            let (s, e) = (pts[0], pts[pts.len() - 1]);
            let spacing = (e[0] - s[0]).hypot(e[1] - s[1]) / (pts.len() - 1) as f64;
            chains.push(Chain {
                points: pts,
                spacing_px: spacing,
                used: true,
            });
        }
    }
    chains
}

/// Median over chains of the distance to the nearest roughly parallel chain
/// (directions within 15 degrees) beside it: the spacing of the rows. The
/// neighbour must overlap the chain along its direction and lie at least
/// half a spacing to the side (a chain continuing the same row is not a
/// neighbouring row).
fn row_spacing(chains: &[Chain]) -> Option<f64> {
    let d: Vec<f64> = row_distances(chains).into_iter().flatten().collect();
    crate::stats::median(&d)
}

/// For each chain, the distance to its nearest parallel neighbour chain as
/// `row_spacing` defines it (`None` without one).
///
/// A neighbour counts only within `reach` = half the chain's length plus
/// one spacing along it, so one whose distance across is below `best` lies
/// within sqrt(reach^2 + best^2) of the chain's centroid: the candidates
/// come from a k-d tree of the centroids within a radius that doubles
/// until it covers that bound (or the whole field), which gives exactly
/// what a comparison with every other chain gives (property test below),
/// in about n log n rather than n^2 (a 64-megapixel field holds tens of
/// thousands of chains).
fn row_distances(chains: &[Chain]) -> Vec<Option<f64>> {
    let geo: Vec<RowGeometry> = chains.iter().map(RowGeometry::of).collect();
    let centroids: Vec<[f64; 2]> = geo.iter().map(|g| g.centroid).collect();
    if centroids.is_empty() {
        return vec![];
    }
    let tree = kd_tree(&centroids);
    let (mut lo, mut hi) = ([f64::INFINITY; 2], [f64::NEG_INFINITY; 2]);
    for c in &centroids {
        for k in 0..2 {
            lo[k] = lo[k].min(c[k]);
            hi[k] = hi[k].max(c[k]);
        }
    }
    let field = (hi[0] - lo[0]).hypot(hi[1] - lo[1]);
    // `kd_tree` moves each point by at most 3e-9 times its index: the
    // query radius carries that margin so that no candidate is missed.
    let margin = 3e-9 * centroids.len() as f64 + 1e-9;
    geo.iter()
        .enumerate()
        .map(|(i, a)| {
            let reach = a.half_len + a.spacing;
            let mut r = (2.0 * reach).max(1.0);
            loop {
                let mut best = f64::INFINITY;
                let q = r + margin;
                for n in tree.within_unsorted::<SquaredEuclidean>(&a.centroid, q * q) {
                    let j = n.item as usize;
                    if j != i {
                        if let Some(across) = a.row_neighbour(&geo[j]) {
                            best = best.min(across);
                        }
                    }
                }
                let covered = best.is_finite() && reach.hypot(best) <= r;
                if covered || r > field {
                    return best.is_finite().then_some(best);
                }
                r *= 2.0;
            }
        })
        .collect()
}

/// What `row_distances` needs of a chain, computed once.
struct RowGeometry {
    unit: [f64; 2],
    centroid: [f64; 2],
    half_len: f64,
    spacing: f64,
}

impl RowGeometry {
    fn of(c: &Chain) -> Self {
        Self {
            unit: c.unit(),
            centroid: c.centroid(),
            half_len: 0.5 * c.spacing_px * c.gaps() as f64,
            spacing: c.spacing_px,
        }
    }

    /// The distance across from this chain to `b` when `b` is a parallel
    /// neighbouring row as `row_spacing` defines it.
    fn row_neighbour(&self, b: &RowGeometry) -> Option<f64> {
        let cos_par = 15f64.to_radians().cos();
        let (u, v) = (self.unit, b.unit);
        if (u[0] * v[0] + u[1] * v[1]).abs() < cos_par {
            return None;
        }
        let (dx, dy) = (
            b.centroid[0] - self.centroid[0],
            b.centroid[1] - self.centroid[1],
        );
        let along = dx * u[0] + dy * u[1];
        let across = (dx * u[1] - dy * u[0]).abs();
        (along.abs() <= self.half_len + self.spacing && across >= 0.5 * self.spacing)
            .then_some(across)
    }
}

/// Marks the chains that run across rows as not used, and returns how many
/// were marked. Along a row the arms are nearer each other than the rows
/// are (the rule behind `ROW_NEIGHBOURS`), so a chain whose own spacing
/// exceeds the distance to its nearest parallel chain links spots of
/// neighbouring rows: its spacing is the rows', not the arms'. Where the
/// spots of a row are fused or close, such chains form beside the chains
/// along the rows, and a mean over both lies between the two spacings. The
/// rule for the whole field below (the chains' mean against the row
/// spacing) is the same rule; here it is applied to each chain. A chain
/// without a parallel neighbour gives no such evidence and is kept.
fn across_rows(chains: &mut [Chain]) -> usize {
    let d = row_distances(chains);
    let mut n = 0;
    for (c, d) in chains.iter_mut().zip(d) {
        if d.is_some_and(|d| d < c.spacing_px) {
            c.used = false;
            n += 1;
        }
    }
    n
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::load::GrayImage;
    use proptest::prelude::*;

    /// `row_distances` by comparing every pair of chains (the definition).
    fn row_distances_brute(chains: &[Chain]) -> Vec<Option<f64>> {
        let geo: Vec<RowGeometry> = chains.iter().map(RowGeometry::of).collect();
        geo.iter()
            .enumerate()
            .map(|(i, a)| {
                geo.iter()
                    .enumerate()
                    .filter(|(j, _)| *j != i)
                    .filter_map(|(_, b)| a.row_neighbour(b))
                    .reduce(f64::min)
            })
            .collect()
    }

    proptest! {
        // The k-d tree's candidates give the row distances a comparison of
        // every pair gives (brute force is the definition).
        #[test]
        fn row_distances_agree_with_every_pair(
            raw in proptest::collection::vec(
                (0.0f64..400.0, 0.0f64..400.0, 0.0f64..3.2, 4.0f64..30.0, 3usize..8),
                0..60,
            )
        ) {
            let chains: Vec<Chain> = raw
                .iter()
                .map(|&(x, y, angle, step, n)| Chain {
                    points: (0..n)
                        .map(|k| [x + k as f64 * step * angle.cos(), y + k as f64 * step * angle.sin()])
                        .collect(),
                    spacing_px: step,
                    used: true,
                })
                .collect();
            prop_assert_eq!(row_distances(&chains), row_distances_brute(&chains));
        }
    }

    proptest! {
        // The k-d tree's nearest neighbour agrees with a search over all
        // pairs (brute force is the definition of a nearest neighbour).
        #[test]
        fn kd_tree_nearest_matches_brute_force(
            pts in prop::collection::vec((0u16..400, 0u16..300), 2..200)
        ) {
            let points: Vec<[f64; 2]> =
                pts.iter().map(|&(x, y)| [x as f64, y as f64]).collect();
            let fast = nearest_distances(&points);
            for (i, p) in points.iter().enumerate() {
                let brute = points
                    .iter()
                    .enumerate()
                    .filter(|&(j, _)| j != i)
                    .map(|(_, q)| (q[0] - p[0]).hypot(q[1] - p[1]))
                    .fold(f64::INFINITY, f64::min);
                prop_assert!((fast[i] - brute).abs() < 1e-6, "{} vs {}", fast[i], brute);
            }
        }
    }

    /// Discs of radius `r` on rows `row` px apart, `s` px apart along each
    /// row, rows along a direction `angle_deg` from +x, dark on bright.
    fn rows_of_spots(w: usize, h: usize, s: f64, row: f64, r: f64, angle_deg: f64) -> Prepared {
        let (c, sn) = (angle_deg.to_radians().cos(), angle_deg.to_radians().sin());
        let mut img = GrayImage::new(w, h);
        for y in 0..h {
            for x in 0..w {
                // Coordinates along (u) and across (v) the rows.
                let (xf, yf) = (x as f64, y as f64);
                let u = xf * c + yf * sn;
                let v = -xf * sn + yf * c;
                let du = u - s * (u / s).round();
                let dv = v - row * (v / row).round();
                let inside = du.hypot(dv) <= r;
                img.data[y * w + x] = if inside { 0.2 } else { 0.8 };
            }
        }
        crate::preprocess::prepare(&img, None, &Default::default())
    }

    #[test]
    fn rows_of_spots_give_the_spacing_along_the_rows() {
        // Geometry, not a calibration: spots 20 px apart along rows 34 px
        // apart (1.7 spacings, the range of sections that cut the arms
        // across) are 20 px apart along a row; the rows are 34 px apart.
        for angle in [0.0, 30.0, 75.0] {
            let img = rows_of_spots(400, 320, 20.0, 34.0, 7.0, angle);
            let o = measure(&img, &CentresParams::default());
            let v = o
                .value_px
                .map(|p| p.0)
                .unwrap_or_else(|| panic!("{angle}: {:?}", o.reason));
            assert!((v / 20.0 - 1.0).abs() < 0.03, "{angle}: {v}");
            let [lo, hi] = o.ci95_px.map(|c| c.map(|p| p.0)).unwrap();
            assert!(lo <= v && v <= hi);
            let rows = o.row_spacing_px.unwrap();
            assert!((rows / 34.0 - 1.0).abs() < 0.1, "{angle}: rows {rows}");
        }
    }

    #[test]
    fn the_nearest_body_distance_is_the_spacing_along_the_rows() {
        // Geometry: in a lattice of spots 20 px apart along rows 34 px apart,
        // a spot's nearest neighbour is the next one along its row, 20 px
        // away (within the 1 px quantisation of the centres).
        for angle in [0.0, 30.0] {
            let img = rows_of_spots(400, 320, 20.0, 34.0, 7.0, angle);
            let d = &img.image.data;
            let mid = d.iter().sum::<f32>() / d.len() as f32;
            let dark: Vec<bool> = d.iter().map(|&v| v < mid).collect();
            let spots = analyse_phase(&dark, 400, 320, &CentresParams::default());
            let nn = spots.nearest_body_px.unwrap();
            assert!((nn / 20.0 - 1.0).abs() < 0.1, "{angle}: {nn}");
            // The bright phase between separate spots is one channel along
            // each row, its bodies a row apart: the larger of the two
            // medians, which the method reports, is the rows' 34 px, and
            // no value reading the rows is left out by it (the bound is
            // one-sided: it leaves out only what both phases refute).
            let both = measure(&img, &CentresParams::default())
                .nearest_body_px
                .unwrap();
            assert!((both / 34.0 - 1.0).abs() < 0.1, "{angle}: {both}");
        }
        // By hand: points 10 apart on a line, each linked to its
        // neighbours, one stray point linked to nothing: median 10.
        let line = |n: usize| -> (Vec<[f64; 2]>, Vec<Vec<usize>>) {
            let points = (0..n).map(|i| [10.0 * i as f64, 0.0]).collect();
            let links = (0..n)
                .map(|i: usize| {
                    [i.checked_sub(1), Some(i + 1).filter(|&j| j < n)]
                        .into_iter()
                        .flatten()
                        .collect()
                })
                .collect();
            (points, links)
        };
        let (mut points, mut links) = line(40);
        points.push([5.0, 50.0]);
        links.push(vec![]);
        assert_eq!(nearest_body_median(&points, &links), Some(10.0));
        // Too few linked centres for a median to rest on.
        let (points, links) = line(MIN_NEAREST_BODIES - 1);
        assert_eq!(nearest_body_median(&points, &links), None);
    }

    #[test]
    fn a_chain_stops_where_its_steps_have_grown_by_the_step_ratio() {
        // Steps 10, 10, 10, 13, 17 along a line: each step is within 1.5 of
        // the one before it, but 17 is 1.7 times the chain's shortest step
        // (an arm skipped, the steps having lengthened a little at a time).
        let xs = [0.0, 10.0, 20.0, 30.0, 43.0, 60.0];
        let points: Vec<[f64; 2]> = xs.iter().map(|&x| [x, 0.0]).collect();
        let links: Vec<Vec<usize>> = (0..xs.len())
            .map(|i| {
                [i.checked_sub(1), Some(i + 1).filter(|&j| j < xs.len())]
                    .into_iter()
                    .flatten()
                    .collect()
            })
            .collect();
        let chains = build_chains(&points, &links, &CentresParams::default());
        assert_eq!(chains.len(), 1);
        assert_eq!(chains[0].points.len(), 5);
        assert!((chains[0].spacing_px - 43.0 / 4.0).abs() < 1e-12);
    }

    #[test]
    fn a_flat_or_tiny_field_gives_no_value() {
        let flat = crate::preprocess::prepare(&GrayImage::new(64, 64), None, &Default::default());
        let o = measure(&flat, &CentresParams::default());
        assert!(o.value_px.is_none() && o.reason.is_some());
        // Spots 2 px in radius are below the resolution the method claims.
        let fine = rows_of_spots(200, 200, 6.0, 10.0, 2.0, 0.0);
        let o = measure(&fine, &CentresParams::default());
        assert!(o.value_px.is_none(), "{:?}", o.value_px.map(|p| p.0));
    }

    #[test]
    fn random_points_rarely_form_parallel_rows() {
        // Chance alone: for chains of random points the parallel fraction is
        // near 15/90 = 1/6 (isotropic directions), far below a field of rows.
        let mut rng = SplitMix(7);
        let pts = random_hard_core(600, 500.0, 500.0, 12.0, &mut rng);
        let l = neighbour_links(&pts, 8, |_, _| true);
        let chains = build_chains(&pts, &l, &CentresParams::default());
        let f = parallel_fraction(&chains).unwrap();
        assert!(f < 0.45, "{f} over {} chains", chains.len());
    }

    #[test]
    fn chains_across_rows_are_not_used() {
        // Geometry of the case: spots 10 px apart along horizontal rows 20
        // px apart. Chains along the rows (spacing 10, neighbours 20 away)
        // are kept; chains down the columns link neighbouring rows (spacing
        // 20, their parallel neighbours 10 away) and are marked not used.
        let chain = |pts: Vec<[f64; 2]>, s: f64| Chain {
            points: pts,
            spacing_px: s,
            used: true,
        };
        let mut chains = Vec::new();
        for r in 0..3 {
            let y = 20.0 * r as f64;
            chains.push(chain((0..5).map(|i| [10.0 * i as f64, y]).collect(), 10.0));
        }
        for c in 0..3 {
            let x = 100.0 + 10.0 * c as f64;
            chains.push(chain((0..4).map(|i| [x, 20.0 * i as f64]).collect(), 20.0));
        }
        assert_eq!(across_rows(&mut chains), 3);
        assert!(chains[..3].iter().all(|c| c.used));
        assert!(chains[3..].iter().all(|c| !c.used));
        let along: Vec<Chain> = chains.iter().filter(|c| c.used).cloned().collect();
        assert_eq!(row_spacing(&along), Some(20.0));
    }
}
