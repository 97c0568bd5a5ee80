//! Combining the methods' outcomes into the image's result: the combined
//! SDAS and its interval, the warnings when methods disagree, and the
//! largest local value for acceptance. Works on any number of methods, in
//! their registry order.

use crate::error::Warning;
use crate::interpret::acceptance::{Evidence, MaxLocalBootstrap};
use crate::methods::{Method, Outcome};
use crate::stats::Z95;
use crate::units::{Micrometres, Pixels, UmPerPx};

/// Relative difference between two methods' values above which the image
/// carries a warning: 10 %, the agreement expected of two sound estimates of
/// the same spacing (each typically within a few per cent).
pub const METHOD_DISAGREEMENT: f64 = 0.10;

/// The image's combined SDAS estimate.
#[derive(Clone, Debug, PartialEq)]
pub struct Estimate {
    pub value: Option<Micrometres>,
    pub ci95: Option<[Micrometres; 2]>,
    /// Number of local measurements behind the value (tiles, lines, chains).
    pub n: usize,
    /// Of those, how many count as independent (overlapping FFT tiles
    /// count a quarter each; `Method::independent_fraction`).
    pub n_eff: f64,
    /// The methods whose values entered the combined value.
    pub methods: Vec<Method>,
    pub reason: Option<String>,
    /// Methods that gave a value which did not enter the combined value,
    /// each with the reason.
    pub left_out: Vec<(Method, String)>,
    /// The Birge ratio of the combined values (observed scatter against the
    /// stated uncertainties; above 1 it widened the interval), when two or
    /// more values with intervals were combined.
    pub birge_ratio: Option<f64>,
    /// Warnings of the combination (uncorroborated or left-out values).
    pub warnings: Vec<Warning>,
    /// The uncertainty budget behind `ci95`, when there is a value.
    pub budget: Option<Budget>,
}

/// The standard uncertainties (um) combined into an image's interval
/// (JCGM 100:2008, 5.1.2: in quadrature, then one coverage factor).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Budget {
    /// The methods' own statistics and the scatter between them (the
    /// combination's half-width over the coverage factor).
    pub statistical_um: f64,
    /// The calibration (the scale bar, or a given value's stated
    /// uncertainty; 0 when a given value is taken as exact).
    pub calibration_um: f64,
    /// The bias the agreeing methods share on a field
    /// ([`METHOD_BIAS_REL_U`] of the value).
    pub method_bias_um: f64,
    /// All three in quadrature.
    pub combined_um: f64,
    /// The factor from `combined_um` to the 95 % half-width.
    pub coverage_factor: f64,
}

/// Relative standard uncertainty of the bias that the agreeing methods
/// share on one field (they look at the same arms, so an error of the field,
/// such as arms cut obliquely, moves them together and their agreement
/// cannot show it): 1.0 %. A Type B component (JCGM 100:2008, 4.3) set from
/// a validation study, as a trueness component is (ISO 21748:2017, from
/// memory): on 115 synthetic fields with a combined value (seeds 81 and 82,
/// 20 fields of each of six styles), the extra variance that makes the
/// median of the squared standardised errors e^2 / (u^2 + u_b^2) equal that
/// of a chi-square with one degree of freedom (0.455) is u_b = 0.98 %. The
/// median, not the mean, so that the few fields where the methods read
/// something else (rows of a cut section, at twice the spacing) do not set
/// it: those are failures of the reading, which no uncertainty describes.
/// Its coverage was then checked on fresh seeds (DEVELOPERS.md).
pub const METHOD_BIAS_REL_U: f64 = 0.010;

impl Estimate {
    /// No value, for the reason given.
    pub fn none(reason: impl Into<String>) -> Self {
        Self {
            value: None,
            ci95: None,
            n: 0,
            n_eff: 0.0,
            methods: vec![],
            reason: Some(reason.into()),
            left_out: vec![],
            birge_ratio: None,
            warnings: vec![],
            budget: None,
        }
    }
}

/// The warnings for pairs of methods whose values lie more than
/// [`METHOD_DISAGREEMENT`] apart, in registry order.
pub fn disagreements(outcomes: &[Outcome], cal: UmPerPx) -> Vec<Warning> {
    let valued: Vec<(Method, Micrometres)> = outcomes
        .iter()
        .filter_map(|o| o.value.map(|v| (o.method, cal.to_um(v))))
        .collect();
    let mut out = Vec::new();
    for (i, &a) in valued.iter().enumerate() {
        out.extend(valued[i + 1..].iter().filter_map(|&b| disagreement(a, b)));
    }
    out
}

/// The warning for two methods' values more than [`METHOD_DISAGREEMENT`]
/// apart (relative to the first), or `None`.
pub fn disagreement(a: (Method, Micrometres), b: (Method, Micrometres)) -> Option<Warning> {
    let diff = b.1 .0 / a.1 .0 - 1.0;
    (!agree(a.1 .0, b.1 .0)).then(|| {
        Warning::new(
            "methods.disagree",
            format!(
                "the methods disagree: {} {:.2} um against {} {:.2} um ({:+.1} %); look at the overlay before using the value",
                b.0.name(),
                b.1 .0,
                a.0.name(),
                a.1 .0,
                100.0 * diff
            ),
        )
    })
}

/// Whether two values of the same spacing agree: the larger at most
/// [`METHOD_DISAGREEMENT`] above the smaller.
fn agree(a: f64, b: f64) -> bool {
    a > 0.0 && b > 0.0 && a.max(b) / a.min(b) - 1.0 <= METHOD_DISAGREEMENT
}

/// The likely reason why a value lies so far from the others, from their
/// ratio: a period about 1.4 to 2.1 times the arm spacing is what the rows of
/// arms cut across, or the trunks, give; a period 2 or 3 times shorter is a
/// harmonic; a much finer one is texture between the arms (the eutectic)
/// (common practice, no single source).
fn likely_reason(ratio: f64) -> &'static str {
    if ratio > 1.0 {
        "a longer period than the arms (the spacing between rows of arms cut across, trunks, or arms missed)"
    } else {
        "a finer period than the arms (eutectic or etch texture between the arms, a harmonic, or arms split)"
    }
}

/// One method's contribution to the image's value, in pixels.
struct Part {
    method: Method,
    value: f64,
    /// 95 % half-width.
    half: f64,
    n: usize,
}

/// The image's SDAS from the methods that gave a value.
///
/// **Corroboration.** When more than one method was run, the image gets a
/// value only when at least two methods, each with a value and a 95 %
/// interval, agree within [`METHOD_DISAGREEMENT`]. The methods rest on
/// different evidence (spectral periodicity, arms counted on lines, arm
/// centres in rows), so on a field without arms their chance values are
/// scattered over the whole range of spacings and two of them rarely fall
/// within 10 % of each other; a lone value is the reading most often wrong
/// (a row spacing, a texture, a chance period). A lone value stays in its
/// method's block, marked there, and never enters the image's value or a
/// decision. When only one method was run (by request), its value is the
/// image's, with a warning that it is uncorroborated.
///
/// **Outliers.** The largest set of methods whose values agree pairwise is
/// used; a method outside it is left out with the reason. When two equally
/// large sets exist (A agrees with B, B with C, but A not with C), all their
/// members are used and the interval widened by their scatter (tau^2
/// below), so that it covers the disagreement.
///
/// **Interval.** The value is the inverse-variance weighted mean (weights
/// 1 / (u^2 + tau^2), u = h / 1.96 the standard uncertainty from the
/// half-width h, tau^2 the between-method variance that the scatter of the
/// values shows beyond their intervals; DerSimonian and Laird, see
/// `weighted`). The methods measure the same arms, so their errors are
/// correlated to an unknown degree; the half-width is the larger of the
/// fully correlated bound, 1.96 sqrt((sum of w_i u_i)^2 + tau^2 sum of
/// w_i^2) with normalised weights (JCGM 100:2008, 5.2.2 with r = 1 for the
/// methods' own errors; their biases independent), and the
/// independent one, 1.96 / sqrt(sum of weights) (5.1.2). For methods of
/// equal uncertainty this is the independent half-width scaled by the
/// Birge ratio R = sqrt(chi^2 / (k - 1)) (Birge 1932), which the report
/// gives.
///
/// The calibration's relative standard uncertainty u is a systematic factor
/// common to every tile and line, so it widens the interval rather than
/// averaging out: the half-width becomes sqrt(h^2 + (k u x)^2) with x the
/// value and k = [`Z95`] (uncorrelated contributions combined in
/// quadrature, JCGM 100:2008, 5.1.2).
pub fn combine(outcomes: &[Outcome], cal: UmPerPx, cal_rel_u: Option<f64>) -> Estimate {
    let to_um = |px: f64| cal.to_um(Pixels(px)).0;
    let mut parts: Vec<Part> = Vec::new();
    let mut reasons = Vec::new();
    let mut left_out = Vec::new();
    for o in outcomes {
        match (o.value, o.ci95) {
            (Some(value), Some([lo, hi])) if value.0 > 0.0 && hi.0 >= lo.0 => parts.push(Part {
                method: o.method,
                value: value.0,
                half: (0.5 * (hi.0 - lo.0)).max(1e-9 * value.0),
                n: o.n,
            }),
            (Some(value), _) => {
                let why = format!(
                    "{:.2} um without a 95 % interval (too few independent measurements): not combined",
                    to_um(value.0)
                );
                reasons.push(format!("{}: {why}", o.method.name()));
                left_out.push((o.method, why));
            }
            (None, _) => reasons.push(format!(
                "{}: {}",
                o.method.name(),
                o.reason.as_deref().unwrap_or("no value")
            )),
        }
    }
    let none = |reason: String, left_out: Vec<(Method, String)>, warnings: Vec<Warning>| Estimate {
        left_out,
        warnings,
        ..Estimate::none(reason)
    };
    if outcomes.is_empty() {
        return Estimate::none("no method was run");
    }
    let needed = outcomes.len().min(2);
    if parts.len() < needed {
        if let Some(p) = parts.first() {
            let why = format!(
                "{:.2} um is uncorroborated: no other method gives a value to check it against, and a value needs two methods that agree",
                to_um(p.value)
            );
            reasons.insert(0, format!("{}: {why}", p.method.name()));
            left_out.insert(0, (p.method, why));
            let w = Warning::new(
                "combine.uncorroborated",
                format!(
                    "only {} gave a value ({:.2} um); it is not corroborated by another method and is not used as the image's value",
                    p.method.name(),
                    to_um(p.value)
                ),
            );
            return none(reasons.join("; "), left_out, vec![w]);
        }
        return none(
            if reasons.is_empty() {
                "no method gave a value".into()
            } else {
                reasons.join("; ")
            },
            left_out,
            vec![],
        );
    }
    let mut warnings = Vec::new();
    // Row spacing named by the centres' or the FFT's evidence (see
    // `rows_explained`). The centres' value is not vouched for by the
    // methods that read the rows: they corroborate the row spacing, not the
    // spacing along the rows. Measured on 20 cut sections (seeds 41, 42):
    // taking the centres' value alone in that case gave 3 right values and
    // one 36 % too high; a value still needs two methods that agree on it.
    let explained: Vec<(usize, String)> = rows_explained(outcomes, &parts)
        .into_iter()
        .map(|(i, rows, witness)| {
            let seen = match witness {
                Method::Fft => "the period across the arms' rows that most FFT tiles show",
                _ => "between the rows of arm centres the centres method found",
            };
            let why = format!(
                "{:.2} um is the spacing between rows of arms ({:.2} um, {seen}), not the spacing of the arms along a row",
                to_um(parts[i].value),
                to_um(rows)
            );
            (i, why)
        })
        .collect();
    parts = leave_out(
        parts,
        explained,
        "combine.row-spacing",
        &mut warnings,
        &mut left_out,
    );
    // Values the FFT's tiles leave undecided between arms and rows (see
    // `rows_undecided`).
    let undecided: Vec<(usize, String)> = rows_undecided(outcomes, &parts)
        .into_iter()
        .map(|(i, ev)| {
            let why = format!(
                "{:.2} um may be the spacing between rows of arms cut across: {} of the FFT's {} tiles also show a finer period at right angles ({:.2} um), too many to call them a chance minority of the field (their share could be one half or more: Wilson 95 % upper bound {:.2})",
                to_um(parts[i].value),
                ev.tiles,
                ev.used,
                to_um(ev.period_px),
                ev.share_upper95
            );
            (i, why)
        })
        .collect();
    let any_undecided = !undecided.is_empty();
    parts = leave_out(
        parts,
        undecided,
        "combine.rows-undecided",
        &mut warnings,
        &mut left_out,
    );
    if any_undecided && parts.is_empty() {
        let why = "every method's value may be the spacing between rows of arms cut across (the FFT's tiles also show a finer period at right angles in too large a part of the field)".to_string();
        return none(why, left_out, warnings);
    }
    // Values beyond the spacing of the bodies (see `beyond_bodies`).
    let beyond: Vec<(usize, String)> = beyond_bodies(outcomes, &parts)
        .into_iter()
        .map(|(i, nn)| {
            let v = parts[i].value;
            let why = format!(
                "{:.2} um is {:.2} times the distance between neighbouring arm bodies ({:.2} um, the median distance from a body to the nearest distinct one): a longer period than the arms (the spacing between rows of arms, trunks, or arms missed)",
                to_um(v),
                v / nn,
                to_um(nn)
            );
            (i, why)
        })
        .collect();
    let any_beyond = !beyond.is_empty();
    parts = leave_out(
        parts,
        beyond,
        "combine.beyond-bodies",
        &mut warnings,
        &mut left_out,
    );
    if any_beyond && parts.is_empty() {
        let why = "every method's value is well above the distance between neighbouring arm bodies: each reads a longer period than the arms".to_string();
        return none(why, left_out, warnings);
    }
    let used: Vec<&Part> = if parts.len() < 2 && needed == 2 {
        let list: Vec<String> = parts
            .iter()
            .map(|p| format!("{} {:.2} um", p.method.name(), to_um(p.value)))
            .collect();
        let why = format!(
            "no two methods agree on the arm spacing ({}); the others read a longer period than the arms (see the methods left out)",
            list.join(", ")
        );
        return none(why, left_out, warnings);
    } else if needed == 1 {
        warnings.push(Warning::new(
            "combine.single-method",
            format!(
                "only one method ({}) was run: its value is not corroborated by another method",
                parts[0].method.name()
            ),
        ));
        vec![&parts[0]]
    } else {
        match largest_agreeing(&parts) {
            Some(set) => set.into_iter().map(|i| &parts[i]).collect(),
            None => {
                let list: Vec<String> = parts
                    .iter()
                    .map(|p| format!("{} {:.2} um", p.method.name(), to_um(p.value)))
                    .collect();
                let (lo, hi) = parts.iter().fold((f64::INFINITY, 0.0f64), |(a, b), p| {
                    (a.min(p.value), b.max(p.value))
                });
                let why = format!(
                    "the methods disagree ({}; the largest {:.0} % above the smallest) and no two agree within {:.0} %: one of them reads {} or {}",
                    list.join(", "),
                    100.0 * (hi / lo - 1.0),
                    100.0 * METHOD_DISAGREEMENT,
                    likely_reason(2.0),
                    likely_reason(0.5),
                );
                let w = Warning::new("combine.disagree", why.clone());
                return none(why, left_out, vec![w]);
            }
        }
    };
    let (value, half, birge) = weighted(&used);
    for p in parts
        .iter()
        .filter(|p| !used.iter().any(|u| u.method == p.method))
    {
        let why = format!(
            "{:.2} um disagrees with the {} method(s) that agree ({:+.1} %): likely {}",
            to_um(p.value),
            used.len(),
            100.0 * (p.value / value - 1.0),
            likely_reason(p.value / value)
        );
        warnings.push(Warning::new(
            "combine.left-out",
            format!("{} left out of the image's value: {why}", p.method.name()),
        ));
        left_out.push((p.method, why));
    }
    let x = to_um(value);
    let h = to_um(half);
    let u = cal_rel_u.unwrap_or(0.0) * Z95 * x;
    let b = METHOD_BIAS_REL_U * Z95 * x;
    let total = (h * h + u * u + b * b).sqrt();
    if total >= x {
        // A spacing is positive; an interval that reaches zero says the
        // value is not known even to its order (`methods::require_support`).
        let why = format!(
            "the combined 95 % interval ({:.2} um +/- {:.2} um, with the calibration's and the methods' shared uncertainty) reaches zero: no supported value",
            x, total
        );
        return none(why, left_out, warnings);
    }
    Estimate {
        value: Some(Micrometres(x)),
        ci95: Some([Micrometres(x - total), Micrometres(x + total)]),
        n: used.iter().map(|p| p.n).sum(),
        n_eff: used
            .iter()
            .map(|p| p.n as f64 * p.method.independent_fraction())
            .sum(),
        methods: used.iter().map(|p| p.method).collect(),
        reason: None,
        left_out,
        birge_ratio: birge,
        warnings,
        budget: Some(Budget {
            statistical_um: h / Z95,
            calibration_um: u / Z95,
            method_bias_um: b / Z95,
            combined_um: total / Z95,
            coverage_factor: Z95,
        }),
    }
}

/// Leaves the parts at the given indices out of the combination, each with
/// its reason in `left_out` and a warning `code` naming its method.
fn leave_out(
    parts: Vec<Part>,
    drop: Vec<(usize, String)>,
    code: &'static str,
    warnings: &mut Vec<Warning>,
    left_out: &mut Vec<(Method, String)>,
) -> Vec<Part> {
    if drop.is_empty() {
        return parts;
    }
    for (i, why) in &drop {
        let m = parts[*i].method;
        warnings.push(Warning::new(
            code,
            format!("{} left out of the image's value: {why}", m.name()),
        ));
        left_out.push((m, why.clone()));
    }
    parts
        .into_iter()
        .enumerate()
        .filter(|(i, _)| !drop.iter().any(|(j, _)| j == i))
        .map(|(_, p)| p)
        .collect()
}

/// The parts (by index) that read the spacing between rows of arms, each
/// with that row spacing and the method whose evidence names it.
///
/// Two methods can see that the arms stand in rows and measure the distance
/// R between rows apart from the spacing s along them: the centres method
/// (its chains run along the rows; R is the distance between parallel
/// chains) and the FFT (two periods at right angles in most tiles; s the
/// finer, R the coarser, see `methods::fft::along_rows`). A method whose
/// value agrees with R and not with s reads the rows, not the arms (a
/// transform or a test line laid across the rows sees their period). Only
/// when R stands clear of s (R at least 1.3 s: the 10 % agreement band on
/// each side and some room, so that the two readings cannot be mistaken for
/// each other). A witness whose own value is a row spacing by the other
/// witness's evidence names nothing: it read the rows itself.
fn rows_explained(outcomes: &[Outcome], parts: &[Part]) -> Vec<(usize, f64, Method)> {
    let witnesses: Vec<(Method, f64, f64)> = parts
        .iter()
        .filter_map(|p| {
            let rows = outcomes.iter().find_map(|o| match p.method {
                Method::Centres => o.centres().and_then(|d| d.row_spacing_px),
                Method::Fft => o.fft().and_then(|d| d.row_spacing_px.map(|r| r.0)),
                _ => None,
            })?;
            (rows >= 1.3 * p.value).then_some((p.method, p.value, rows))
        })
        .collect();
    let reads_rows = |p: &Part, (m, s, rows): (Method, f64, f64)| {
        p.method != m && agree(p.value, rows) && !agree(p.value, s)
    };
    let credible: Vec<(Method, f64, f64)> = witnesses
        .iter()
        .copied()
        .filter(|&(m, _, _)| {
            parts
                .iter()
                .filter(|p| p.method == m)
                .all(|p| !witnesses.iter().any(|&w| reads_rows(p, w)))
        })
        .collect();
    parts
        .iter()
        .enumerate()
        .filter_map(|(i, p)| {
            credible
                .iter()
                .find(|&&w| reads_rows(p, w))
                .map(|&(m, _, rows)| (i, rows, m))
        })
        .collect()
}

/// Largest ratio of a value to the distance between neighbouring arm
/// bodies ([`crate::methods::centres::CentresOutcome::nearest_body_px`])
/// for the value still to be read as the bodies' spacing.
///
/// Why 1.4: the median nearest-body distance is at most about one arm
/// spacing (the nearer of two row neighbours; see
/// `methods::centres::nearest_body_median`), and at least about 0.8 of it
/// when the arm spacings scatter by 20 % (the nearer of two neighbours
/// whose spacings scatter by a standard deviation s lies on average
/// s / sqrt(pi) = 0.56 s below the mean: the expected minimum of two
/// independent normal values, which follows from E|X1 - X2| = 2 s / sqrt(pi)). A
/// value of the arm spacing is therefore at most about 1/0.8 = 1.25 times
/// the median, and 1.4 leaves room for the value's own scatter. The
/// spacing between rows of arms cut across is 1.4 to 2 arm spacings, and a
/// value reading it stands 1.4 / 1.0 to 2 / 0.8 times the median, so part
/// of the row readings lie above the bound: those are left out; the rest
/// are left to the other evidence (`rows_explained`).
pub const BODY_SPACING_RATIO: f64 = 1.4;

/// The parts (by index) whose value exceeds [`BODY_SPACING_RATIO`] times
/// the distance between neighbouring arm bodies that the centres method
/// measured, each with that distance. Such a value is not the spacing of
/// the bodies: most bodies have a distinct neighbour much nearer than it.
/// When the centres method was not run, nothing is left out.
fn beyond_bodies(outcomes: &[Outcome], parts: &[Part]) -> Vec<(usize, f64)> {
    let Some(nn) = outcomes
        .iter()
        .find_map(|o| o.centres().and_then(|c| c.nearest_body_px))
        .filter(|v| v.is_finite() && *v > 0.0)
    else {
        return vec![];
    };
    parts
        .iter()
        .enumerate()
        .filter(|(_, p)| p.value > BODY_SPACING_RATIO * nn)
        .map(|(i, _)| (i, nn))
        .collect()
}

/// The parts (by index) that read the FFT's value while its tiles leave
/// open whether that value is the spacing between rows of arms cut across
/// (`methods::fft::FftOutcome::rows_undecided`: a finer period at right
/// angles in a share of the tiles that may be one half or more), each with
/// that evidence. The field is then ambiguous between two readings: the
/// coarser period is the arm spacing (and the finer tiles a chance
/// minority), or the coarser period is the rows' and the finer one the
/// arms'. The intercept and the centres methods read the rows of such a
/// section too (README, known limits), so their agreement with the
/// coarser period does not tell the two apart, as agreement on the rows is
/// no corroboration of the arms in `rows_explained`. A part that agrees
/// with the finer period is not left out.
fn rows_undecided(
    outcomes: &[Outcome],
    parts: &[Part],
) -> Vec<(usize, crate::methods::fft::RowsUndecided)> {
    let Some((coarse, ev)) = outcomes.iter().find_map(|o| {
        let f = o.fft()?;
        Some((f.value_px?.0, f.rows_undecided?))
    }) else {
        return vec![];
    };
    parts
        .iter()
        .enumerate()
        .filter(|(_, p)| agree(p.value, coarse) && !agree(p.value, ev.period_px))
        .map(|(i, _)| (i, ev))
        .collect()
}

/// Indices of the largest set of parts whose values agree pairwise (at
/// least two); when several sets of that size exist, the union of them.
/// `None` when no two parts agree.
fn largest_agreeing(parts: &[Part]) -> Option<Vec<usize>> {
    let k = parts.len();
    if k > 16 {
        return None;
    }
    let mut best: Vec<u32> = Vec::new();
    let mut best_size = 1;
    for mask in 1u32..(1 << k) {
        let members: Vec<usize> = (0..k).filter(|i| mask & (1 << i) != 0).collect();
        if members.len() < best_size.max(2) {
            continue;
        }
        let ok = members.iter().enumerate().all(|(a, &i)| {
            members[a + 1..]
                .iter()
                .all(|&j| agree(parts[i].value, parts[j].value))
        });
        if !ok {
            continue;
        }
        if members.len() > best_size {
            best_size = members.len();
            best.clear();
        }
        best.push(mask);
    }
    let union = best.iter().fold(0u32, |a, &m| a | m);
    (union != 0).then(|| (0..k).filter(|i| union & (1 << i) != 0).collect())
}

/// Weighted mean, 95 % half-width and Birge ratio of the parts (see
/// [`combine`]).
///
/// The methods' values differ by more than their own intervals allow when a
/// method carries a bias of its own (rows read for arms, chains that cross
/// the arms obliquely): a between-method variance tau^2 that no single
/// method's interval shows. It is estimated from Cochran's Q by the method
/// of moments, tau^2 = max(0, (Q - (k - 1)) / (W - sum w^2 / W)), and added
/// to every method's variance before weighting (R. DerSimonian and N. Laird,
/// "Meta-analysis in clinical trials", Controlled Clinical Trials 7 (1986)
/// 177-188). Without excess scatter tau^2 is 0 and the weights are the
/// inverse variances; for methods of equal uncertainty the half-width is
/// the Birge-scaled one; for unequal ones the narrowest method no longer
/// outweighs a disagreement it is part of.
fn weighted(parts: &[&Part]) -> (f64, f64, Option<f64>) {
    // Standard uncertainties u_i = h_i / Z95 and weights 1 / u_i^2.
    let u: Vec<f64> = parts.iter().map(|p| p.half / Z95).collect();
    let w: Vec<f64> = u.iter().map(|u| 1.0 / (u * u)).collect();
    let wsum: f64 = w.iter().sum();
    let mean0 = parts.iter().zip(&w).map(|(p, w)| w * p.value).sum::<f64>() / wsum;
    if parts.len() < 2 {
        return (mean0, Z95 / wsum.sqrt(), None);
    }
    let q = parts
        .iter()
        .zip(&w)
        .map(|(p, w)| w * (p.value - mean0).powi(2))
        .sum::<f64>();
    let k1 = (parts.len() - 1) as f64;
    let birge = (q / k1).sqrt();
    let w2sum: f64 = w.iter().map(|w| w * w).sum();
    let tau2 = ((q - k1) / (wsum - w2sum / wsum)).max(0.0);
    let ws: Vec<f64> = u.iter().map(|u| 1.0 / (u * u + tau2)).collect();
    let wssum: f64 = ws.iter().sum();
    let mean = parts.iter().zip(&ws).map(|(p, w)| w * p.value).sum::<f64>() / wssum;
    let independent = Z95 / wssum.sqrt();
    // The methods measure the same arms, so their own errors may be fully
    // correlated: the weighted sum of their standard uncertainties bounds
    // that case; each method's bias (variance tau^2) is its own, independent
    // of the others', and adds in quadrature.
    let shared = u.iter().zip(&ws).map(|(u, w)| w / wssum * u).sum::<f64>();
    let own = tau2 * ws.iter().map(|w| (w / wssum).powi(2)).sum::<f64>();
    let correlated = Z95 * (shared * shared + own).sqrt();
    (mean, correlated.max(independent), Some(birge))
}

/// The methods' outcomes as the report shows them: a method's value stands
/// as a value only when it entered the image's value (or was the only
/// method asked for). A value that no other method corroborates, or that
/// the combination left out, has no evidence beyond the method's own
/// statistics, and those cannot tell a chance period (a texture, scratches,
/// the rows instead of the arms) from the arms: on 300 featureless fields
/// (synth seeds 61-66) one method alone gave a value on 74 of the 900
/// method runs although no two agreed on any field. Such a figure is kept
/// as `indicative`, with the reason it was not used, and never printed as
/// a value. Call after everything that reads the methods' values (the
/// local values, the largest local value) has run.
pub fn withhold_unused(outcomes: Vec<Outcome>, sdas: &Estimate) -> Vec<Outcome> {
    let asked = outcomes.len();
    outcomes
        .into_iter()
        .map(|mut o| {
            let Some(v) = o.value else { return o };
            if asked < 2 || sdas.methods.contains(&o.method) {
                return o;
            }
            let why = sdas
                .left_out
                .iter()
                .find(|(m, _)| *m == o.method)
                .map(|(_, why)| why.clone())
                .or_else(|| sdas.reason.clone())
                .unwrap_or_else(|| "it did not enter the image's value".into());
            o.reason = Some(format!(
                "not used: {why}; the figure it gives is reported as indicative only"
            ));
            o.indicative = Some(v);
            o.value = None;
            o.ci95 = None;
            o
        })
        .collect()
}

/// The combined value as the evidence compared with a limit.
pub fn value_evidence(sdas: &Estimate, cal_rel_u: f64) -> Evidence {
    Evidence {
        value: sdas.value,
        ci95: sdas.ci95,
        n: sdas.n,
        calibration_half_um: sdas.value.map_or(0.0, |v| Z95 * cal_rel_u * v.0),
        bootstrap: None,
    }
}

/// Resamples of the bootstrap of the largest local value. The Monte Carlo
/// error of a bootstrap standard deviation from B resamples is about
/// 1 / sqrt(2 B) of it (B. Efron and R. J. Tibshirani, "An Introduction to
/// the Bootstrap", 1993, ch. 6, who find 25 to 200 enough for a standard
/// error; from memory): 2000 puts it near 1.6 %, below the rounding of the
/// reported interval, at a cost far below that of measuring the image.
pub const MAX_LOCAL_RESAMPLES: usize = 2000;

/// Seed of the bootstrap's generator: fixed, so that the same local values
/// give the same interval on every run and thread count.
pub const MAX_LOCAL_SEED: u64 = 0x6d61_785f_6c6f_6361;

/// The fewest local values the bootstrap of a maximum is drawn from: below
/// five the resampled maxima take at most four distinct values and their
/// spread says little (common practice, no single source).
pub const MAX_LOCAL_MIN_VALUES: usize = 5;

/// Standard deviation of the maximum of `values` under the nonparametric
/// bootstrap (B. Efron, Annals of Statistics 7, 1979, 1-26): `resamples`
/// resamples of the same size with replacement, drawn with a SplitMix64
/// stream from `seed`. None for fewer than [`MAX_LOCAL_MIN_VALUES`] values.
pub fn bootstrap_sd_of_max(values: &[f64], resamples: usize, seed: u64) -> Option<f64> {
    let m = values.len();
    if m < MAX_LOCAL_MIN_VALUES || resamples < 2 {
        return None;
    }
    let mut rng = crate::blocks::point_pattern::SplitMix(seed);
    let maxima: Vec<f64> = (0..resamples)
        .map(|_| {
            (0..m)
                .map(|_| values[((rng.unit() * m as f64) as usize).min(m - 1)])
                .fold(f64::NEG_INFINITY, f64::max)
        })
        .collect();
    let mean = maxima.iter().sum::<f64>() / resamples as f64;
    let var = maxima.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (resamples - 1) as f64;
    Some(var.sqrt())
}

/// The largest local value of an image, from the first method in registry
/// order whose value entered the image's value (`sdas`) and that has used
/// local measurements (the FFT's tile map before the intercept's lines);
/// none when the image has no value.
///
/// Its uncertainty is that of a maximum, not the spread of the local
/// values: which tiles or lines the field happened to hold decides how
/// large the largest is, and the bootstrap of the maximum over the local
/// values measures that (`bootstrap_sd_of_max`, [`MAX_LOCAL_RESAMPLES`]
/// resamples, seed [`MAX_LOCAL_SEED`]). The 95 % interval is the maximum
/// +- 1.96 times the resampled maxima's standard deviation (a normal
/// approximation: the resampled maxima never exceed the sample's own, a
/// known weakness of the bootstrap of an extreme, so their spread, not
/// their percentiles, sets both sides), with the calibration's part in
/// quadrature (JCGM 100:2008, 5.1.2). Fewer than
/// [`MAX_LOCAL_MIN_VALUES`] local values: no interval.
pub fn max_local(outcomes: &[Outcome], sdas: &Estimate, cal: UmPerPx, cal_rel_u: f64) -> Evidence {
    let used = |o: &&Outcome| o.value.is_some() && sdas.methods.contains(&o.method);
    let found = outcomes.iter().filter(used).find_map(|o| {
        let values: Vec<f64> = o
            .local
            .iter()
            .filter(|l| l.used && l.spacing.0.is_finite())
            .map(|l| l.spacing.0)
            .collect();
        let max = values.iter().copied().reduce(f64::max)?;
        Some((max, values))
    });
    let Some((max_px, values)) = found else {
        return Evidence::default();
    };
    let x = cal.to_um(Pixels(max_px)).0;
    let c = Z95 * cal_rel_u * x;
    let sd_px = bootstrap_sd_of_max(&values, MAX_LOCAL_RESAMPLES, MAX_LOCAL_SEED);
    let sd_um = sd_px.map(|s| cal.to_um(Pixels(s)).0);
    let ci95 = sd_um.map(|s| {
        let h = (Z95 * s).hypot(c);
        [Micrometres(x - h), Micrometres(x + h)]
    });
    Evidence {
        value: Some(Micrometres(x)),
        ci95,
        n: 0,
        calibration_half_um: c,
        bootstrap: sd_um.map(|sd_um| MaxLocalBootstrap {
            local_values: values.len(),
            resamples: MAX_LOCAL_RESAMPLES,
            seed: MAX_LOCAL_SEED,
            sd_um,
        }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::methods::intercept::InterceptOutcome;
    use crate::methods::{Detail, Local};

    fn outcome(method: Method, value: Option<f64>, ci: Option<[f64; 2]>, n: usize) -> Outcome {
        Outcome {
            method,
            value: value.map(Pixels),
            ci95: ci.map(|[a, b]| [Pixels(a), Pixels(b)]),
            n,
            spread: Some(Pixels(1.0)),
            reason: value.is_none().then(|| "nothing".to_string()),
            warnings: vec![],
            local: value
                .map(|v| {
                    [0.9, 1.2]
                        .map(|f| Local {
                            x: Pixels(1.0),
                            y: Pixels(1.0),
                            spacing: Pixels(f * v),
                            dir_deg: 0.0,
                            quality: None,
                            used: true,
                        })
                        .to_vec()
                })
                .unwrap_or_default(),
            for_target: None,
            indicative: None,
            detail: Detail::Intercept(InterceptOutcome {
                value_px: value.map(Pixels),
                ci95_px: ci.map(|c| c.map(Pixels)),
                sd_px: None,
                n_lines: n,
                rel_accuracy_pct: None,
                lines: vec![],
                reason: None,
            }),
        }
    }

    /// The statistical part of the half-width (the methods and the scatter
    /// between them), which the worked examples below compute.
    fn half(e: &Estimate) -> f64 {
        let b = e.budget.unwrap();
        b.statistical_um * b.coverage_factor
    }

    #[test]
    fn the_interval_is_the_budget_in_quadrature_times_one_factor() {
        // JCGM 100:2008, 5.1.2 (uncorrelated inputs add in quadrature) and
        // 6.2.1 (U = k u_c): the half-width is 1.96 sqrt(s^2 + c^2 + b^2)
        // with b = METHOD_BIAS_REL_U x value and c the calibration's part.
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, Some(10.0), Some([9.0, 11.0]), 5),
            outcome(Method::Intercept, Some(10.5), Some([8.5, 12.5]), 7),
        ];
        let e = combine(&o, cal, Some(0.02));
        let b = e.budget.unwrap();
        let x = e.value.unwrap().0;
        assert!((b.statistical_um - 1.2 / Z95).abs() < 1e-12);
        assert!((b.calibration_um - 0.02 * x).abs() < 1e-12);
        assert!((b.method_bias_um - METHOD_BIAS_REL_U * x).abs() < 1e-12);
        let uc =
            (b.statistical_um.powi(2) + b.calibration_um.powi(2) + b.method_bias_um.powi(2)).sqrt();
        assert!((b.combined_um - uc).abs() < 1e-12);
        let [lo, hi] = e.ci95.unwrap();
        assert!((0.5 * (hi.0 - lo.0) - Z95 * uc).abs() < 1e-12);
        assert!((0.5 * (hi.0 + lo.0) - x).abs() < 1e-12);
    }

    #[test]
    fn agreeing_methods_give_the_weighted_mean_with_the_correlated_bound() {
        // Worked by hand (JCGM 100:2008, 5.1.2 and 5.2.2 with r = 1):
        // values 10 (half-width 1) and 10.5 (half-width 2), 5 % apart:
        // weights 1 and 1/4, mean (10 + 2.625) / 1.25 = 10.1; independent
        // half-width 1 / sqrt(1.25) = 0.894; fully correlated
        // (1 x 1 + 0.25 x 2) / 1.25 = 1.2; Birge ratio
        // sqrt(1.96^2 x (0.1^2 + 0.25 x 0.4^2)) = 0.438 < 1, no scaling.
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, Some(10.0), Some([9.0, 11.0]), 5),
            outcome(Method::Intercept, Some(10.5), Some([8.5, 12.5]), 7),
        ];
        let e = combine(&o, cal, None);
        assert!((e.value.unwrap().0 - 10.1).abs() < 1e-12);
        assert!((half(&e) - 1.2).abs() < 1e-12);
        assert!((e.birge_ratio.unwrap() - (Z95 * Z95 * 0.05f64).sqrt()).abs() < 1e-12);
        assert_eq!(e.n, 12);
        assert_eq!(e.methods, vec![Method::Fft, Method::Intercept]);
        assert!(e.warnings.is_empty() && e.left_out.is_empty());
        // A 1 % calibration uncertainty adds 1.96 x 0.01 x 10.1 in quadrature
        // (with the methods' shared bias, 1.96 x 0.01 x 10.1 too).
        let e = combine(&o, cal, Some(0.01));
        let expect = (1.44f64 + 2.0 * (Z95 * 0.101).powi(2)).sqrt();
        let [lo, hi] = e.ci95.unwrap();
        assert!((0.5 * (hi.0 - lo.0) - expect).abs() < 1e-12);
    }

    #[test]
    fn scatter_beyond_the_intervals_widens_by_the_between_method_variance() {
        // Values 10 and 10.8, each with half-width 0.2 (8 % apart, so they
        // agree, but 0.8 apart against a standard uncertainty u = 0.2 / 1.96
        // each). DerSimonian and Laird (1986): w = 1 / u^2 each, Q = w x
        // (0.4^2 + 0.4^2), tau^2 = (Q - 1) / (2w - w) = 0.32 - u^2; equal
        // weights, mean 10.4. Independent half-width 1.96 sqrt((u^2 +
        // tau^2) / 2) = 1.96 x 0.4 (the Birge-scaled one); the bound with
        // the methods' own errors fully correlated, 1.96 sqrt(u^2 + tau^2 /
        // 2), is the larger.
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, Some(10.0), Some([9.8, 10.2]), 5),
            outcome(Method::Intercept, Some(10.8), Some([10.6, 11.0]), 7),
        ];
        let e = combine(&o, cal, None);
        assert!((e.value.unwrap().0 - 10.4).abs() < 1e-12);
        let u = 0.2 / Z95;
        let tau2 = 0.32 - u * u;
        assert!((half(&e) - Z95 * (u * u + tau2 / 2.0).sqrt()).abs() < 1e-9);
        assert!(half(&e) >= Z95 * 0.4);
        // The Birge ratio is reported: sqrt(Q / 1).
        assert!((e.birge_ratio.unwrap() - (0.32f64 / (u * u)).sqrt()).abs() < 1e-9);
        // The widened interval covers both values.
        let [lo, hi] = e.ci95.unwrap();
        assert!(lo.0 < 10.0 && hi.0 > 10.8);
    }

    #[test]
    fn a_narrow_method_does_not_outweigh_a_disagreement_it_is_part_of() {
        // 20 +- 1 and 21 +- 0.3 (agreeing within 10 %, disagreeing beyond
        // their intervals). Inverse-variance weights alone would give 20.92
        // +- 0.36, which excludes 20; with the between-method variance the
        // weights nearly equalise and the interval covers both values.
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, Some(20.0), Some([19.0, 21.0]), 40),
            outcome(Method::Centres, Some(21.0), Some([20.7, 21.3]), 12),
        ];
        let e = combine(&o, cal, None);
        let v = e.value.unwrap().0;
        assert!(v > 20.3 && v < 20.7, "{v}");
        let [lo, hi] = e.ci95.unwrap();
        assert!(lo.0 <= 20.0 && hi.0 >= 21.0, "{lo:?} {hi:?}");
    }

    #[test]
    fn a_lone_value_is_not_the_images_value() {
        let cal = UmPerPx::new(2.0).unwrap();
        let o = [
            outcome(Method::Fft, None, None, 0),
            outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7),
        ];
        let e = combine(&o, cal, None);
        assert!(e.value.is_none() && e.ci95.is_none());
        assert_eq!(e.warnings[0].code, "combine.uncorroborated");
        assert_eq!(e.left_out[0].0, Method::Intercept);
        let reason = e.reason.unwrap();
        assert!(reason.contains("20.00 um is uncorroborated"), "{reason}");
        assert!(reason.contains("fft: nothing"), "{reason}");
        // Nor is a value without an interval.
        let o = [
            outcome(Method::Fft, Some(10.0), None, 3),
            outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7),
        ];
        let e = combine(&o, cal, None);
        assert!(e.value.is_none());
        assert_eq!(e.left_out.len(), 2);
        assert!(e.left_out[1].1.contains("without a 95 % interval"));
    }

    #[test]
    fn only_values_that_entered_the_image_stay_values() {
        // A value is printed only when another method corroborates it
        // (the evidence rule above): a lone value and two disagreeing
        // values become indicative figures with the reason; agreeing
        // values, and the value of the only method asked for, stay.
        let cal = UmPerPx::new(1.0).unwrap();
        let lone = vec![
            outcome(Method::Fft, None, None, 0),
            outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7),
        ];
        let e = combine(&lone, cal, None);
        let shown = withhold_unused(lone.clone(), &e);
        assert!(shown[1].value.is_none() && shown[1].ci95.is_none());
        assert_eq!(shown[1].indicative, Some(Pixels(10.0)));
        let why = shown[1].reason.as_deref().unwrap();
        assert!(
            why.starts_with("not used: 10.00 um is uncorroborated"),
            "{why}"
        );
        assert_eq!(shown[0], lone[0]);

        let apart = vec![
            outcome(Method::Fft, Some(15.0), Some([14.0, 16.0]), 5),
            outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7),
        ];
        let e = combine(&apart, cal, None);
        let shown = withhold_unused(apart, &e);
        assert!(shown.iter().all(|o| o.value.is_none()));
        assert!(shown[0].reason.as_deref().unwrap().contains("disagree"));

        let agree = vec![
            outcome(Method::Fft, Some(10.0), Some([9.0, 11.0]), 5),
            outcome(Method::Intercept, Some(10.5), Some([9.0, 12.0]), 7),
        ];
        let e = combine(&agree, cal, None);
        let shown = withhold_unused(agree.clone(), &e);
        assert_eq!(shown, agree);

        let alone = vec![outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7)];
        let e = combine(&alone, cal, None);
        assert_eq!(withhold_unused(alone.clone(), &e), alone);
    }

    #[test]
    fn an_interval_reaching_zero_gives_no_value() {
        // A 60 % relative standard calibration uncertainty: 1.96 x 0.6 > 1.
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, Some(10.0), Some([9.0, 11.0]), 5),
            outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7),
        ];
        let e = combine(&o, cal, Some(0.6));
        assert!(e.value.is_none());
        assert!(e.reason.unwrap().contains("reaches zero"));
    }

    #[test]
    fn disagreeing_methods_give_no_value() {
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, Some(15.0), Some([14.0, 16.0]), 5),
            outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7),
        ];
        let e = combine(&o, cal, None);
        assert!(e.value.is_none());
        assert_eq!(e.warnings[0].code, "combine.disagree");
        assert!(e.reason.unwrap().contains("50 % above the smallest"));
    }

    #[test]
    fn one_method_run_by_request_gives_its_value_with_a_warning() {
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [outcome(Method::Intercept, Some(10.0), Some([9.0, 11.0]), 7)];
        let e = combine(&o, cal, None);
        assert_eq!(e.value.unwrap().0, 10.0);
        assert!((half(&e) - 1.0).abs() < 1e-12);
        assert_eq!(e.warnings[0].code, "combine.single-method");
    }

    fn parts(values: &[f64]) -> Vec<Part> {
        values
            .iter()
            .map(|&value| Part {
                method: Method::Fft,
                value,
                half: 1.0,
                n: 1,
            })
            .collect()
    }

    #[test]
    fn the_largest_agreeing_set_leaves_the_outlier_out() {
        // 10 and 10.5 agree (5 %), 14 agrees with neither.
        assert_eq!(
            largest_agreeing(&parts(&[10.0, 10.5, 14.0])),
            Some(vec![0, 1])
        );
        assert_eq!(
            largest_agreeing(&parts(&[14.0, 10.0, 10.5])),
            Some(vec![1, 2])
        );
        // A chain: 10 ~ 10.9 (9 %), 10.9 ~ 11.9 (9.2 %), 10 !~ 11.9 (19 %):
        // two sets of two, no majority, all kept (and the Birge ratio widens).
        assert_eq!(
            largest_agreeing(&parts(&[10.0, 10.9, 11.9])),
            Some(vec![0, 1, 2])
        );
        assert_eq!(largest_agreeing(&parts(&[10.0, 13.0, 17.0])), None);
        assert_eq!(
            largest_agreeing(&parts(&[10.0, 10.2, 10.4])),
            Some(vec![0, 1, 2])
        );
    }

    #[test]
    fn no_value_gives_every_reason() {
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, None, None, 0),
            outcome(Method::Intercept, None, None, 0),
        ];
        let e = combine(&o, cal, None);
        assert!(e.value.is_none());
        assert_eq!(e.reason.unwrap(), "fft: nothing; intercept: nothing");
        assert_eq!(combine(&[], cal, None).reason.unwrap(), "no method was run");
    }

    #[test]
    fn max_local_prefers_the_first_method_with_a_value() {
        let cal = UmPerPx::new(0.5).unwrap();
        let o = [
            outcome(Method::Fft, None, None, 0),
            outcome(Method::Intercept, Some(20.0), Some([18.0, 22.0]), 7),
        ];
        // Only a method whose value entered the image's value counts.
        assert!(max_local(&o, &Estimate::none("x"), cal, 0.0)
            .value
            .is_none());
        let mut sdas = Estimate::none("");
        sdas.methods = vec![Method::Intercept];
        let e = max_local(&o, &sdas, cal, 0.0);
        // The largest line, 1.2 x 20 px, at 0.5 um/px; two lines are too
        // few for the bootstrap of a maximum: no interval.
        assert!((e.value.unwrap().0 - 12.0).abs() < 1e-12);
        assert!(e.ci95.is_none() && e.bootstrap.is_none());
    }

    /// The exact bootstrap distribution of the maximum of m distinct sorted
    /// values: a resample's maximum is at most x_(j) with probability
    /// (j / m)^m (every draw among the j smallest), so it is x_(j) with
    /// (j / m)^m - ((j - 1) / m)^m. Its standard deviation, computed from
    /// that, is the check of the resampling.
    fn exact_bootstrap_sd_of_max(sorted: &[f64]) -> f64 {
        let m = sorted.len() as f64;
        let p: Vec<f64> = (1..=sorted.len())
            .map(|j| (j as f64 / m).powf(m) - ((j - 1) as f64 / m).powf(m))
            .collect();
        let mean: f64 = p.iter().zip(sorted).map(|(p, x)| p * x).sum();
        p.iter()
            .zip(sorted)
            .map(|(p, x)| p * (x - mean).powi(2))
            .sum::<f64>()
            .sqrt()
    }

    #[test]
    fn the_bootstrap_of_a_maximum_matches_its_exact_distribution() {
        let values: Vec<f64> = (1..=12).map(|i| 10.0 + (i as f64).powf(1.3)).collect();
        let exact = exact_bootstrap_sd_of_max(&values);
        // Many resamples: within 1.5 % (Monte Carlo error 1 / sqrt(2 B) =
        // 0.35 % at B = 40,000).
        let sd = bootstrap_sd_of_max(&values, 40_000, 7).unwrap();
        assert!((sd / exact - 1.0).abs() < 0.015, "{sd} vs {exact}");
        // The tool's own count and seed: within 5 % (1.6 % Monte Carlo
        // error), and the same on every call.
        let sd = bootstrap_sd_of_max(&values, MAX_LOCAL_RESAMPLES, MAX_LOCAL_SEED).unwrap();
        assert!((sd / exact - 1.0).abs() < 0.05, "{sd} vs {exact}");
        assert_eq!(
            Some(sd),
            bootstrap_sd_of_max(&values, MAX_LOCAL_RESAMPLES, MAX_LOCAL_SEED)
        );
        assert!(bootstrap_sd_of_max(&values[..4], 2000, 1).is_none());
    }

    #[test]
    fn max_local_carries_the_uncertainty_of_a_maximum() {
        let cal = UmPerPx::new(0.5).unwrap();
        let mut o = outcome(Method::Intercept, Some(20.0), Some([18.0, 22.0]), 7);
        let values: Vec<f64> = (1..=12).map(|i| 10.0 + (i as f64).powf(1.3)).collect();
        for (i, v) in values.iter().enumerate() {
            let mut l = o.local[0];
            l.spacing = Pixels(*v);
            if i < 2 {
                o.local[i] = l;
            } else {
                o.local.push(l);
            }
        }
        let mut sdas = Estimate::none("");
        sdas.methods = vec![Method::Intercept];
        let e = max_local(&[o], &sdas, cal, 0.01);
        let x = 0.5 * values[11];
        let sd = 0.5 * bootstrap_sd_of_max(&values, MAX_LOCAL_RESAMPLES, MAX_LOCAL_SEED).unwrap();
        let c = Z95 * 0.01 * x;
        let [lo, hi] = e.ci95.unwrap();
        assert!((e.value.unwrap().0 - x).abs() < 1e-12);
        assert!((0.5 * (hi.0 - lo.0) - (Z95 * sd).hypot(c)).abs() < 1e-9);
        let b = e.bootstrap.unwrap();
        assert_eq!((b.local_values, b.resamples), (12, MAX_LOCAL_RESAMPLES));
    }

    /// An FFT outcome whose tiles show spots in rows: `value` along the
    /// rows, `rows` between them.
    fn fft_in_rows(value: f64, rows: f64) -> Outcome {
        use crate::methods::fft::FftOutcome;
        let ci = [value * 0.98, value * 1.02];
        Outcome {
            method: Method::Fft,
            detail: Detail::Fft(FftOutcome {
                value_px: Some(Pixels(value)),
                ci95_px: Some(ci.map(Pixels)),
                spread_px: Some(Pixels(0.5)),
                n_tiles_used: 40,
                n_tiles_analysed: 60,
                window_px: 64,
                orientation_deg: Some(0.0),
                orientation_coherence: Some(0.9),
                tiles: vec![],
                reason: None,
                row_spacing_px: Some(Pixels(rows)),
                read_along_rows: true,
                rows_undecided: None,
            }),
            ..outcome(Method::Fft, Some(value), Some(ci), 40)
        }
    }

    /// A centres outcome without a value whose bodies stand `nn` px apart
    /// (median nearest distinct body).
    fn centres_with_bodies(nn: f64) -> Outcome {
        use crate::methods::centres::CentresOutcome;
        Outcome {
            detail: Detail::Centres(CentresOutcome {
                nearest_body_px: Some(nn),
                reason: Some("no arm rows beyond chance".into()),
                ..Default::default()
            }),
            ..outcome(Method::Centres, None, None, 0)
        }
    }

    #[test]
    fn values_well_above_the_spacing_of_the_bodies_are_left_out() {
        // Geometry of a section with the arms cut across: spots 10 px apart
        // along rows 17 px apart. The FFT and the intercept both read the
        // rows (17 px, agreeing with each other), while the bodies stand
        // 10 px from their nearest neighbours: 1.7 > BODY_SPACING_RATIO
        // times that, so neither is the arms' spacing and there is no value.
        let outs = [
            outcome(Method::Fft, Some(17.0), Some([16.6, 17.4]), 40),
            outcome(Method::Intercept, Some(17.3), Some([16.5, 18.1]), 10),
            centres_with_bodies(10.0),
        ];
        let e = combine(&outs, UmPerPx::new(1.0).unwrap(), None);
        assert!(e.value.is_none(), "{e:?}");
        assert_eq!(e.left_out.len(), 2, "{:?}", e.left_out);
        assert!(e.warnings.iter().any(|w| w.code == "combine.beyond-bodies"));
        // Values within the bound stand: arms 10 px apart whose bodies'
        // nearest neighbours are 8.5 px away (the nearer of two scattered
        // neighbours) give their combined value.
        let outs = [
            outcome(Method::Fft, Some(10.0), Some([9.8, 10.2]), 40),
            outcome(Method::Intercept, Some(10.2), Some([9.7, 10.7]), 10),
            centres_with_bodies(8.5),
        ];
        let e = combine(&outs, UmPerPx::new(1.0).unwrap(), None);
        assert!(e.value.is_some() && e.left_out.is_empty(), "{e:?}");
        // Without the centres method run there is no such evidence.
        let e = combine(&outs[..2], UmPerPx::new(1.0).unwrap(), None);
        assert!(e.value.is_some());
    }

    #[test]
    fn values_the_fft_leaves_undecided_between_arms_and_rows_are_left_out() {
        use crate::methods::fft::RowsUndecided;
        // The FFT reads 13.5 px in most tiles, a quarter of them also 7.5 px
        // at right angles, too many to call a chance minority: 13.5 may be
        // the rows. The intercept agreeing on 13.5 does not settle it (it
        // reads the rows of such sections too): no value.
        let mut fft = fft_in_rows(13.5, 0.0);
        if let Detail::Fft(f) = &mut fft.detail {
            f.row_spacing_px = None;
            f.read_along_rows = false;
            f.rows_undecided = Some(RowsUndecided {
                period_px: 7.5,
                tiles: 10,
                used: 40,
                share_upper95: 0.56,
            });
        }
        let outs = [
            fft.clone(),
            outcome(Method::Intercept, Some(13.7), Some([13.2, 14.2]), 20),
        ];
        let e = combine(&outs, UmPerPx::new(1.0).unwrap(), None);
        assert!(e.value.is_none(), "{e:?}");
        assert_eq!(e.left_out.len(), 2);
        assert!(e
            .warnings
            .iter()
            .any(|w| w.code == "combine.rows-undecided"));
        // Two methods that agree on the finer period stand.
        let outs = [
            fft,
            outcome(Method::Intercept, Some(7.6), Some([7.3, 7.9]), 20),
            outcome(Method::Centres, Some(7.4), Some([7.1, 7.7]), 20),
        ];
        let e = combine(&outs, UmPerPx::new(1.0).unwrap(), None);
        let v = e.value.map(|v| v.0).unwrap_or(f64::NAN);
        assert!((v - 7.5).abs() < 0.2, "{e:?}");
    }

    #[test]
    fn methods_reading_the_rows_the_fft_names_are_left_out() {
        // Spots 10 px apart along rows 18 px apart (geometry of the case):
        // the FFT reads along the rows; the intercept and the centres agree
        // on 18, the rows. Agreement on the rows is no corroboration of the
        // arms: no value, the two named as reading the rows.
        let outs = [
            fft_in_rows(10.0, 18.0),
            outcome(Method::Intercept, Some(18.1), Some([17.6, 18.6]), 30),
            outcome(Method::Centres, Some(17.8), Some([17.2, 18.4]), 30),
        ];
        let e = combine(&outs, UmPerPx::new(1.0).unwrap(), None);
        assert!(e.value.is_none(), "{e:?}");
        let out: Vec<Method> = e.left_out.iter().map(|(m, _)| *m).collect();
        assert!(
            out.contains(&Method::Intercept) && out.contains(&Method::Centres),
            "{out:?}"
        );
        // A method that agrees with the FFT along the rows corroborates it.
        let outs = [
            fft_in_rows(10.0, 18.0),
            outcome(Method::Intercept, Some(10.2), Some([9.8, 10.6]), 30),
            outcome(Method::Centres, Some(17.8), Some([17.2, 18.4]), 30),
        ];
        let e = combine(&outs, UmPerPx::new(1.0).unwrap(), None);
        let v = e.value.map(|v| v.0).unwrap_or(f64::NAN);
        assert!((v - 10.1).abs() < 0.3, "{e:?}");
        assert!(e.left_out.iter().any(|(m, _)| *m == Method::Centres));
    }
}
