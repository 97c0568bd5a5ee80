//! Acceptance against an SDAS limit, with the decision rule made explicit.
//!
//! A spec file names the limit (an upper limit on lambda2, in um), the
//! statistic compared with it, optional zones matched by file-name pattern,
//! and the decision rule:
//!
//! - `guarded` (default): conformance only when the upper bound of the 95 %
//!   interval is at or below the limit; non-conformance when the lower bound
//!   is above it; otherwise indeterminate. This is the guarded acceptance
//!   and rejection of ISO 14253-1 and JCGM 106:2012 with a guard band equal
//!   to the expanded uncertainty (coverage 95 %), so that neither a pass nor
//!   a fail is declared while the interval straddles the limit.
//!   A spec (or zone) may set the guard band as a percentage of the
//!   expanded uncertainty U instead (`guard_band_pct`, default 100): with
//!   g = pct/100 x U, on each side the half-width of the interval on that
//!   side, conformance when value + g is at or below the limit and
//!   non-conformance when value - g is above it. Guard bands stated as a
//!   percentage of U are the form of ASME B89.7.3.1-2001 (from memory);
//!   ISO 14253-1:2017 leaves g to the agreement between the parties. 0 %
//!   decides on the value alone (as `simple`, but an image without an
//!   interval stays undecided); above 100 % widens the indeterminate zone.
//! - `simple`: value at or below the limit passes, above it fails (zero
//!   guard band; up to 50 % risk of a wrong decision for a value at the limit).
//!
//! An image without a value (or, under `guarded`, without an interval)
//! cannot be decided: indeterminate. When a result is indeterminate the
//! decision says how many measurements in all would decide it with a
//! probability of [`DECIDE_PROBABILITY`]: the statistical part h of the
//! half-width shrinks as 1/sqrt(n) while the calibration's part c does not.
//! Taking the present value x as the truth and the present spread as that
//! of every measurement (sd sigma = h sqrt(n) / 1.96), a new estimate from
//! n' measurements scatters about x with s = sigma / sqrt(n'), and its
//! interval clears the limit when |x' - limit| >= sqrt(c^2 + (1.96 s)^2).
//! That happens with probability P when d - sqrt(c^2 + (1.96 s)^2) >= z_P s,
//! d = |x - limit|, z_P the standard normal quantile of P: the usual sample
//! size of a one-sided test at power P (for example D. C. Montgomery,
//! "Design and Analysis of Experiments", the sample size for a test on a
//! mean; from memory). The smallest such n' is found by bisection on s.
//! At P = 0.5 it reduces to n' = n h^2 / (d^2 - c^2), the count that only
//! puts the expected bound on the limit (and decides half the time);
//! d <= c means only a better calibration can decide it.
//!
//! A zone the spec pools (`pool`) is decided once, on the random-effects
//! mean of its fields, by `interpret::pool`; each image keeps its own
//! acceptance beside it, and the zone's verdict is the pool's.

use crate::units::Micrometres;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

pub const FORMAT: &str = "armspace.spec/1";

/// Which number is compared with the limit.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Statistic {
    /// The image's SDAS value and its 95 % interval.
    #[default]
    Value,
    /// The largest local value (FFT tiles, or intercept lines without an
    /// FFT map), with the uncertainty of a maximum (bootstrap over the local
    /// values, `combine::max_local`).
    MaxLocal,
}

/// The decision rule: `guarded` (pass only when the whole 95 % interval is
/// at or below the limit, fail only when it is all above) or `simple` (the
/// value alone).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(rename_all = "snake_case")]
pub enum Rule {
    #[default]
    Guarded,
    Simple,
}

#[derive(
    Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema, PartialOrd, Ord,
)]
#[serde(rename_all = "snake_case")]
pub enum Decision {
    Pass,
    Indeterminate,
    Fail,
}

impl Decision {
    pub fn name(self) -> &'static str {
        match self {
            Decision::Pass => "pass",
            Decision::Indeterminate => "indeterminate",
            Decision::Fail => "fail",
        }
    }
}

/// A zone: images whose file name matches `pattern` ('*' and '?'
/// wildcards; a pattern with '/' is matched against the path as given).
#[derive(Clone, Debug, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Zone {
    pub name: String,
    pub pattern: String,
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub limit_um: f64,
    #[serde(default)]
    pub statistic: Option<Statistic>,
    #[serde(default)]
    pub rule: Option<Rule>,
    /// Guard band of the guarded rule, percent of the expanded uncertainty
    /// (0 to 400); the spec's when absent.
    #[serde(default)]
    #[schemars(range(min = 0, max = 400))]
    pub guard_band_pct: Option<f64>,
    /// Decide the zone once, on the random-effects mean of its fields
    /// (`pool`), instead of on its worst image; the spec's when absent.
    #[serde(default)]
    pub pool: Option<bool>,
    #[serde(skip)]
    matcher: Option<globset::GlobMatcher>,
}

/// A validated spec file.
#[derive(Clone, Debug, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct Spec {
    #[schemars(extend("const" = FORMAT))]
    pub format: String,
    /// Free text naming the specification (drawing, revision).
    #[serde(default)]
    pub title: Option<String>,
    /// Limit for images that match no zone; without it such an image is not
    /// assessed (and the batch cannot pass).
    #[serde(default)]
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub limit_um: Option<f64>,
    #[serde(default)]
    pub statistic: Statistic,
    #[serde(default)]
    pub rule: Rule,
    /// Guard band of the guarded rule, percent of the expanded uncertainty
    /// (0 to 400); 100 when absent.
    #[serde(default)]
    #[schemars(range(min = 0, max = 400))]
    pub guard_band_pct: Option<f64>,
    /// Decide each zone once, on the random-effects mean of its fields,
    /// instead of on its worst image (false when absent: the worst image).
    #[serde(default)]
    pub pool: bool,
    #[serde(default)]
    pub zones: Vec<Zone>,
}

/// The guard band when a spec sets none: the expanded uncertainty itself.
pub const DEFAULT_GUARD_BAND_PCT: f64 = 100.0;

/// Checks a guard band: a percentage from 0 to 400, on the guarded rule.
fn check_guard(pct: Option<f64>, rule: Rule, whose: &str) -> Result<(), String> {
    let Some(p) = pct else { return Ok(()) };
    if !(p.is_finite() && (0.0..=400.0).contains(&p)) {
        return Err(format!(
            "{whose}\"guard_band_pct\" must be a percentage of the expanded uncertainty from 0 to 400, got {}",
            crate::units::fmt_num(p)
        ));
    }
    if rule == Rule::Simple {
        return Err(format!(
            "{whose}\"guard_band_pct\" applies to the guarded rule, not to \"simple\" (which has none)"
        ));
    }
    Ok(())
}

/// Pooling takes the mean SDAS of a zone's fields: it applies to the
/// `value` statistic. The largest local value already stands for the worst
/// place of a field, and a mean of maxima is neither a mean nor a maximum.
fn check_pool(pool: bool, statistic: Statistic, whose: &str) -> Result<(), String> {
    if pool && statistic == Statistic::MaxLocal {
        return Err(format!(
            "{whose}\"pool\" averages the fields' values and applies to the statistic \"value\", not to \"max_local\" (a mean of maxima is neither)"
        ));
    }
    Ok(())
}

fn valid_limit(v: f64) -> bool {
    v.is_finite() && v > 0.0 && v < 1e5
}

impl Spec {
    /// Parses and checks a spec; `origin` names the file in messages.
    pub fn parse(text: &str, origin: &str) -> crate::Result<Self> {
        let bad = |reason: String| crate::Error::Input {
            path: origin.into(),
            reason,
        };
        let mut spec: Spec = serde_json::from_str(text)
            .map_err(|e| bad(crate::error::excerpt(&e.to_string(), 300)))?;
        if spec.format != FORMAT {
            return Err(bad(format!("format '{}' is not '{FORMAT}'", spec.format)));
        }
        if spec.limit_um.is_none() && spec.zones.is_empty() {
            return Err(bad(
                "no limit: give \"limit_um\" or at least one zone".into()
            ));
        }
        if let Some(l) = spec.limit_um {
            if !valid_limit(l) {
                return Err(bad(format!(
                    "\"limit_um\" must be a positive number of um, got {}",
                    crate::units::fmt_num(l)
                )));
            }
        }
        check_guard(spec.guard_band_pct, spec.rule, "").map_err(&bad)?;
        check_pool(spec.pool, spec.statistic, "").map_err(&bad)?;
        let mut names = std::collections::BTreeSet::new();
        for z in &mut spec.zones {
            check_guard(
                z.guard_band_pct.or(spec.guard_band_pct),
                z.rule.unwrap_or(spec.rule),
                &format!("zone '{}': ", z.name),
            )
            .map_err(&bad)?;
            check_pool(
                z.pool.unwrap_or(spec.pool),
                z.statistic.unwrap_or(spec.statistic),
                &format!("zone '{}': ", z.name),
            )
            .map_err(&bad)?;
            if z.name.trim().is_empty() {
                return Err(bad("a zone has no name".into()));
            }
            if !names.insert(z.name.clone()) {
                return Err(bad(format!("zone '{}' is named twice", z.name)));
            }
            if !valid_limit(z.limit_um) {
                return Err(bad(format!(
                    "zone '{}': \"limit_um\" must be a positive number of um, got {}",
                    z.name,
                    crate::units::fmt_num(z.limit_um)
                )));
            }
            let glob = globset::GlobBuilder::new(&z.pattern)
                .literal_separator(true)
                .build()
                .map_err(|e| bad(format!("zone '{}': pattern: {e}", z.name)))?;
            z.matcher = Some(glob.compile_matcher());
        }
        Ok(spec)
    }

    /// Whether the images of a zone (None: under the general limit) are
    /// pooled.
    pub fn pools(&self, zone: Option<&str>) -> bool {
        match zone {
            Some(name) => self
                .zones
                .iter()
                .find(|z| z.name == name)
                .and_then(|z| z.pool)
                .unwrap_or(self.pool),
            None => self.pool,
        }
    }

    /// The rule and guard band (percent, None under the simple rule) of a
    /// zone (None: the general limit).
    pub fn rule_of(&self, zone: Option<&str>) -> (Rule, Option<f64>) {
        let z = zone.and_then(|name| self.zones.iter().find(|z| z.name == name));
        let rule = z.and_then(|z| z.rule).unwrap_or(self.rule);
        let guard = (rule == Rule::Guarded).then(|| {
            z.and_then(|z| z.guard_band_pct)
                .or(self.guard_band_pct)
                .unwrap_or(DEFAULT_GUARD_BAND_PCT)
        });
        (rule, guard)
    }

    pub fn load(path: &std::path::Path) -> crate::Result<Self> {
        let text = crate::files::read_text(path, "specification")?;
        Self::parse(&text, &path.display().to_string())
    }

    /// The zone of a file (the first whose pattern matches), if any. A
    /// pattern without `/` is matched against the file name; one with `/`
    /// against the end of the path, after `.` and `name/..` are taken out,
    /// so that `demo/*.png` matches `demo/x.png`, `./demo/x.png` and
    /// `/lab/demo/x.png` alike (an absolute pattern, against the whole path).
    pub fn zone_of(&self, file: &std::path::Path) -> Option<&Zone> {
        let name = file.file_name().map(std::path::Path::new);
        let tails = path_tails(file);
        self.zones.iter().find(|z| {
            let Some(m) = &z.matcher else { return false };
            if z.pattern.starts_with('/') {
                tails.first().is_some_and(|t| m.is_match(t))
            } else if z.pattern.contains('/') {
                tails.iter().any(|t| m.is_match(t))
            } else {
                name.is_some_and(|n| m.is_match(n))
            }
        })
    }
}

/// A path without its `.` components and with `name/..` pairs taken out
/// (lexically: the spec speaks of the path as the user wrote it, links are
/// not followed), then every tail of it, the whole path first.
fn path_tails(file: &std::path::Path) -> Vec<std::path::PathBuf> {
    use std::path::Component;
    let mut parts: Vec<Component> = Vec::new();
    for c in file.components() {
        match c {
            Component::CurDir => {}
            Component::ParentDir if matches!(parts.last(), Some(Component::Normal(_))) => {
                parts.pop();
            }
            other => parts.push(other),
        }
    }
    (0..parts.len())
        .map(|i| parts[i..].iter().collect::<std::path::PathBuf>())
        .collect()
}

/// What is compared with the limit, for one image.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Evidence {
    pub value: Option<Micrometres>,
    pub ci95: Option<[Micrometres; 2]>,
    /// Independent measurements behind the value (tiles, lines).
    pub n: usize,
    /// The calibration's part of the 95 % half-width, um.
    pub calibration_half_um: f64,
    /// For the largest local value: how its interval was found.
    pub bootstrap: Option<MaxLocalBootstrap>,
}

/// The interval of the largest local value, by bootstrap of the maximum
/// (`combine::max_local`).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct MaxLocalBootstrap {
    /// Local values resampled (tiles or lines used).
    pub local_values: usize,
    /// Resamples drawn.
    pub resamples: usize,
    /// Seed of the fixed generator (SplitMix64): the same image gives the
    /// same interval on every run.
    pub seed: u64,
    /// Standard deviation of the resampled maxima, um.
    pub sd_um: f64,
}

/// An image's part in a pooled zone, beside its own acceptance.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PoolField {
    /// The calibration's part of the compared 95 % half-width, um.
    pub calibration_half_um: f64,
    /// Why this image's value cannot be trusted in a pool (a calibration
    /// the sources contradict, an implausible SDAS); null when it can.
    pub doubt: Option<String>,
}

/// The image's decision against the spec's SDAS limit (with --spec).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[schemars(rename = "acceptance", deny_unknown_fields)]
pub struct Acceptance {
    /// The zone the image falls in; null under the spec's general limit.
    pub zone: Option<String>,
    #[schemars(extend("exclusiveMinimum" = 0))]
    pub limit_um: Option<f64>,
    pub statistic: Statistic,
    pub rule: Rule,
    /// The guard band of the guarded rule, percent of the expanded
    /// uncertainty; null under the simple rule.
    pub guard_band_pct: Option<f64>,
    /// What was compared: the value and its 95 % interval, um.
    pub compared_um: Option<f64>,
    pub compared_ci95_um: Option<[f64; 2]>,
    /// null when the image was not assessed (it matches no zone and the spec
    /// has no general limit).
    pub decision: Option<Decision>,
    pub reason: String,
    /// For an indeterminate result: about how many measurements (tiles or
    /// lines) in all would decide it with 90 % probability, when more would.
    #[schemars(range(min = 1))]
    pub measurements_to_decide: Option<usize>,
    /// The same as a number of fields like this one, in all.
    #[schemars(range(min = 1))]
    pub fields_to_decide: Option<usize>,
    /// Statistic max_local: how the interval of the largest local value was
    /// found (bootstrap of the maximum); absent otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_local_bootstrap: Option<MaxLocalBootstrap>,
    /// In a pooled zone: what the pool takes from this image (the zone's
    /// verdict is the pool's, see the zone's `pooled`); absent otherwise.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub pool_field: Option<PoolField>,
}

/// Decides one image against a limit under a rule (module docs), with the
/// guarded rule's default guard band.
pub fn decide(
    evidence: &Evidence,
    limit: f64,
    rule: Rule,
) -> (Decision, String, Option<usize>, Option<usize>) {
    decide_with_guard(evidence, limit, rule, DEFAULT_GUARD_BAND_PCT)
}

/// Decides one image against a limit under a rule, the guarded rule with a
/// guard band of `guard_pct` percent of the expanded uncertainty.
pub fn decide_with_guard(
    evidence: &Evidence,
    limit: f64,
    rule: Rule,
    guard_pct: f64,
) -> (Decision, String, Option<usize>, Option<usize>) {
    decide_advising(evidence, limit, rule, guard_pct, |x, lo, hi, k| {
        let (n_all, advice) = more_to_decide(evidence, x, [lo, hi], limit, k);
        let fields = n_all.map(|n| n.div_ceil(evidence.n.max(1)));
        (n_all, fields, advice)
    })
}

/// The decision rules (module docs), with the advice for a straddling
/// result from `advise`: measurements and fields in all that would decide
/// it, and the advice in words, from the value x, its interval lo to hi and
/// the guard band k as a fraction of U.
pub(crate) fn decide_advising(
    evidence: &Evidence,
    limit: f64,
    rule: Rule,
    guard_pct: f64,
    advise: impl Fn(f64, f64, f64, f64) -> (Option<usize>, Option<usize>, String),
) -> (Decision, String, Option<usize>, Option<usize>) {
    let Some(x) = evidence.value.map(|v| v.0) else {
        return (
            Decision::Indeterminate,
            "no SDAS value: the image cannot be compared with the limit".into(),
            None,
            None,
        );
    };
    match rule {
        Rule::Simple => {
            if x <= limit {
                (
                    Decision::Pass,
                    format!("value {x:.2} um <= limit {limit} um (simple rule)"),
                    None,
                    None,
                )
            } else {
                (
                    Decision::Fail,
                    format!("value {x:.2} um > limit {limit} um (simple rule)"),
                    None,
                    None,
                )
            }
        }
        Rule::Guarded => {
            let Some([lo, hi]) = evidence.ci95.map(|[a, b]| [a.0, b.0]) else {
                return (
                    Decision::Indeterminate,
                    format!("value {x:.2} um has no 95 % interval, which the guarded rule needs"),
                    None,
                    None,
                );
            };
            let k = guard_pct / 100.0;
            let (up, down) = (x + k * (hi - x), x - k * (x - lo));
            // The bounds compared, in words: the interval's own at 100 %.
            let (up_name, down_name) = if guard_pct == DEFAULT_GUARD_BAND_PCT {
                (
                    "upper 95 % bound".to_string(),
                    "lower 95 % bound".to_string(),
                )
            } else {
                let g = format!("guard band {} % of U", crate::units::fmt_num(guard_pct));
                (format!("value + {g}"), format!("value - {g}"))
            };
            if up <= limit {
                (
                    Decision::Pass,
                    format!("{up_name} {up:.2} um <= limit {limit} um"),
                    None,
                    None,
                )
            } else if down > limit {
                (
                    Decision::Fail,
                    format!("{down_name} {down:.2} um > limit {limit} um"),
                    None,
                    None,
                )
            } else {
                let (n_all, fields, advice) = advise(x, lo, hi, k);
                let zone = if guard_pct == DEFAULT_GUARD_BAND_PCT {
                    format!("the 95 % interval {lo:.2} to {hi:.2} um contains the limit {limit} um")
                } else {
                    format!(
                        "the guarded zone {down:.2} to {up:.2} um ({} % of the 95 % interval {lo:.2} to {hi:.2} um) contains the limit {limit} um",
                        crate::units::fmt_num(guard_pct)
                    )
                };
                (
                    Decision::Indeterminate,
                    format!("{zone}; {advice}"),
                    n_all,
                    fields,
                )
            }
        }
    }
}

/// Measurements in all that would decide (with `DECIDE_PROBABILITY`) a straddling interval,
/// and the advice in words (module docs).
/// `k` is the guard band as a fraction of the expanded uncertainty.
fn more_to_decide(
    e: &Evidence,
    x: f64,
    [lo, hi]: [f64; 2],
    limit: f64,
    k: f64,
) -> (Option<usize>, String) {
    let half = 0.5 * (hi - lo);
    let c = e.calibration_half_um.min(half);
    let h2 = half * half - c * c;
    let d = (x - limit).abs();
    if d == 0.0 {
        // Estimates of a value on the limit fall on either side of it half
        // the time, whatever their number or the calibration.
        return (
            None,
            "the value lies on the limit: no number of fields decides it (a value on the limit passes or fails by chance)".into(),
        );
    }
    if d <= k * c {
        return (
            None,
            "the value is within the calibration's uncertainty of the limit: more fields cannot decide it, a better calibration (or a different statistic) might".into(),
        );
    }
    if e.n == 0 {
        return (
            None,
            "a single local value: more fields do not narrow its interval".into(),
        );
    }
    if h2 <= 0.0 {
        return (None, "more fields would narrow the interval".into());
    }
    let needed = measurements_for_probability_guarded(e.n, h2.sqrt(), c, d, DECIDE_PROBABILITY, k);
    if !needed.is_finite() || needed > 1e9 {
        return (
            None,
            "the value is too close to the limit for more fields to decide it".into(),
        );
    }
    let needed = needed as usize;
    let fields = needed.div_ceil(e.n);
    (
        Some(needed),
        format!(
            "about {needed} measurements in all ({} now), i.e. about {fields} fields like this one, would decide it with {:.0} % probability",
            e.n,
            100.0 * DECIDE_PROBABILITY
        ),
    )
}

/// The probability of deciding for which the number of measurements that
/// would decide an indeterminate image is given: 90 %, a common design power
/// for a sample size (common practice, no single source). Planning for the
/// expected bound alone would decide only half the time.
pub const DECIDE_PROBABILITY: f64 = 0.90;

/// Measurements in all (from `n` now, with statistical half-width `h` and
/// calibration half-width `c`, value `d` from the limit) after which the
/// guarded interval clears the limit with probability `p` (module docs);
/// infinite when no number can (d <= c).
pub fn measurements_for_probability(n: usize, h: f64, c: f64, d: f64, p: f64) -> f64 {
    measurements_for_probability_guarded(n, h, c, d, p, 1.0)
}

/// The same with a guard band of `k` times the expanded uncertainty: the
/// zone clears the limit when d - k sqrt(c^2 + (1.96 s)^2) >= z_P s; a
/// guard band of 0 needs only d >= z_P s.
pub fn measurements_for_probability_guarded(
    n: usize,
    h: f64,
    c: f64,
    d: f64,
    p: f64,
    k: f64,
) -> f64 {
    use statrs::distribution::{ContinuousCDF, Normal};
    let z95 = crate::stats::Z95;
    // NaN in any input also ends here: no count without numbers.
    if d.is_nan() || c.is_nan() || h.is_nan() || k.is_nan() || k < 0.0 {
        return f64::INFINITY;
    }
    let (c, z95) = (k * c, k * z95);
    if d <= c || n == 0 || h <= 0.0 {
        return f64::INFINITY;
    }
    let z_p = Normal::new(0.0, 1.0).map_or(f64::NAN, |nd| nd.inverse_cdf(p));
    if !z_p.is_finite() {
        return f64::INFINITY;
    }
    let sigma = h * (n as f64).sqrt() / crate::stats::Z95;
    // f(s) = d - sqrt(c^2 + (z95 s)^2) - z_p s falls with s (for z_p >= 0)
    // from f(0) = d - c > 0; below s = (d - c) / (z95 + z_p) it cannot
    // reach zero and above d / z95 it is negative.
    let f = |s: f64| d - c.hypot(z95 * s) - z_p * s;
    // The upper end of the search: f < 0 there (d / z95 when the guard band
    // counts, d / z_p without one).
    let top = if z95 > 0.0 {
        d / z95
    } else {
        d / z_p.max(1e-12)
    };
    let (mut lo, mut hi) = (0.0, top);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if f(mid) >= 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    if lo <= 0.0 {
        return f64::INFINITY;
    }
    // The bisection ends just below the root, so the count just above an
    // exact integer; a relative 1e-9 is far below any count's meaning.
    ((sigma / lo).powi(2) * (1.0 - 1e-9)).ceil()
}

/// The acceptance of one image under a spec.
pub fn assess(
    spec: &Spec,
    file: &std::path::Path,
    value: Evidence,
    max_local: Evidence,
) -> Acceptance {
    let zone = spec.zone_of(file);
    let statistic = zone.and_then(|z| z.statistic).unwrap_or(spec.statistic);
    let rule = zone.and_then(|z| z.rule).unwrap_or(spec.rule);
    let guard = (rule == Rule::Guarded).then(|| {
        zone.and_then(|z| z.guard_band_pct)
            .or(spec.guard_band_pct)
            .unwrap_or(DEFAULT_GUARD_BAND_PCT)
    });
    let limit = zone.map(|z| z.limit_um).or(spec.limit_um);
    let evidence = match statistic {
        Statistic::Value => value,
        Statistic::MaxLocal => max_local,
    };
    let mut out = Acceptance {
        zone: zone.map(|z| z.name.clone()),
        limit_um: limit,
        statistic,
        rule,
        guard_band_pct: guard,
        compared_um: evidence.value.map(|v| v.0),
        compared_ci95_um: evidence.ci95.map(|[a, b]| [a.0, b.0]),
        decision: None,
        reason: String::new(),
        measurements_to_decide: None,
        fields_to_decide: None,
        max_local_bootstrap: match statistic {
            Statistic::MaxLocal => evidence.bootstrap,
            Statistic::Value => None,
        },
        pool_field: spec
            .pools(zone.map(|z| z.name.as_str()))
            .then_some(PoolField {
                calibration_half_um: evidence.calibration_half_um,
                doubt: None,
            }),
    };
    match limit {
        None => {
            out.reason = "the file name matches no zone of the spec and the spec has no general limit: not assessed".into();
        }
        Some(limit) => {
            let (d, reason, n, f) = decide_with_guard(
                &evidence,
                limit,
                rule,
                guard.unwrap_or(DEFAULT_GUARD_BAND_PCT),
            );
            out.decision = Some(d);
            out.reason = match statistic {
                Statistic::MaxLocal if evidence.value.is_some() => {
                    format!("largest local value: {reason}")
                }
                _ => reason,
            };
            out.measurements_to_decide = n;
            out.fields_to_decide = f;
        }
    }
    out
}

/// A verdict over several images: fail when any failed; otherwise
/// indeterminate when any is indeterminate or was not assessed; otherwise
/// pass. None for no images.
pub fn verdict(decisions: impl IntoIterator<Item = Option<Decision>>) -> Option<Decision> {
    let mut worst: Option<Decision> = None;
    for d in decisions {
        let d = d.unwrap_or(Decision::Indeterminate);
        worst = Some(worst.map_or(d, |w| w.max(d)));
    }
    worst
}
