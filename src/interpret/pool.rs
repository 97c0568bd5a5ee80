//! A zone's SDAS pooled from its several fields, and the number of fields
//! that would decide a pooled zone.
//!
//! When a spec asks for it (`"pool": true`), a zone is decided once, on the
//! mean SDAS of its fields, instead of on its worst image. Fields of one zone
//! differ in truth (the local solidification conditions vary across a zone),
//! so the zone's SDAS is the mean of a population of fields and the
//! between-field variance belongs in its uncertainty: a random-effects mean.
//!
//! - Each field i gives its value y_i and the statistical part of its 95 %
//!   half-width, h_i = sqrt(half_i^2 - c_i^2) (c_i its calibration part),
//!   so its within-field variance is v_i = (h_i / 1.96)^2.
//! - The zone's mean is the plain mean of the k field values, y-bar, with
//!   standard uncertainty u_s = s / sqrt(k), s the sample standard
//!   deviation of the y_i, and k - 1 degrees of freedom: the one-way
//!   random-effects analysis of variance (for example D. C. Montgomery,
//!   "Design and Analysis of Experiments", the random-effects model; from
//!   memory), in which the spread of the field values holds the
//!   between-field and the within-field variance together, so the interval
//!   needs no estimate of either alone. The between-field variance is
//!   reported as its moment estimate tau^2 = max(0, s^2 - mean v_i).
//!   Why not a weighted mean (the DerSimonian-Laird random-effects mean,
//!   Controlled Clinical Trials 7, 1986, 177-188, with the Hartung-Knapp
//!   variance, Statistics in Medicine 20, 2001, 3875-3889): with the few
//!   fields of a zone the weights rest on a poorly known tau^2. In a
//!   simulation made for this choice (20,000 pools per case, 3 to 12
//!   fields, within-field sds differing up to four-fold, numpy seed 1) the
//!   Hartung-Knapp interval covered 90-95 %, its modification with q at
//!   least 1 covered 94-100 %, and the plain mean's t interval 95-97.5 %.
//!   Fields of one zone are taken at one magnification and differ little
//!   in precision, so weights would gain little. The plain mean's coverage
//!   is checked in `tests/pool.rs`.
//! - The calibration's part does not average out: the fields of a zone are
//!   measured with the same calibration, so its error is common to all of
//!   them (JCGM 100:2008, 5.2, correlated inputs with r = 1). Its standard
//!   uncertainty u_c = r_max mu / 1.96, with r_max the largest relative
//!   calibration part of the fields (cautious when they differ).
//! - Combined u = sqrt(u_s^2 + u_c^2), coverage factor t_0.975 at the
//!   Welch-Satterthwaite effective degrees of freedom
//!   nu = u^4 / (u_s^4 / (k - 1)) (JCGM 100:2008, G.4.1; the calibration's
//!   part taken as known with infinite degrees of freedom), so that one
//!   coverage factor applies to the whole expanded uncertainty.

use crate::interpret::acceptance::{self, Decision, Evidence, Rule};
use crate::stats::{t_quantile, Z95};
use crate::units::Micrometres;
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

/// One field's part in a pool: its value, 95 % interval and the
/// calibration's part of its half-width, um.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Field {
    pub value_um: f64,
    pub ci95_um: [f64; 2],
    pub calibration_half_um: f64,
}

/// The pooled SDAS of a zone (module docs).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Pooled {
    pub value_um: f64,
    pub ci95_um: [f64; 2],
    /// Fields in the pool.
    pub fields: usize,
    /// Between-field standard deviation (moment estimate), um.
    pub between_field_sd_um: f64,
    /// Standard uncertainty of the mean from the fields' spread, um.
    pub statistical_u_um: f64,
    /// The calibration's part of the 95 % half-width, um.
    pub calibration_half_um: f64,
    /// Effective degrees of freedom (Welch-Satterthwaite).
    pub dof: f64,
    /// The coverage factor, t_0.975 at `dof`.
    pub coverage_factor: f64,
}

impl Pooled {
    /// The standard deviation of one field's value about the zone's mean as
    /// the pool sees it (between-field and within-field together):
    /// u_s sqrt(k), the spread a field like these would have.
    pub fn per_field_sd_um(&self) -> f64 {
        self.statistical_u_um * (self.fields as f64).sqrt()
    }
}

/// The fewest fields a pool is computed from: the between-field variance
/// needs at least two.
pub const MIN_FIELDS: usize = 2;

/// Pools fields into the zone's mean (module docs); None with fewer than
/// [`MIN_FIELDS`] fields or non-finite numbers.
pub fn pool_fields(fields: &[Field]) -> Option<Pooled> {
    let k = fields.len();
    if k < MIN_FIELDS {
        return None;
    }
    let mut y = Vec::with_capacity(k);
    let mut v = Vec::with_capacity(k);
    let mut r_cal: f64 = 0.0;
    for f in fields {
        let [lo, hi] = f.ci95_um;
        let half = 0.5 * (hi - lo);
        if !(f.value_um.is_finite() && f.value_um > 0.0 && half.is_finite() && half >= 0.0) {
            return None;
        }
        let c = f.calibration_half_um.clamp(0.0, half);
        let h = (half * half - c * c).max(0.0).sqrt();
        // A field whose interval is all calibration would get an infinite
        // weight: its statistical variance is floored at a millionth of its
        // value (a numerical guard, far below any real field's spread).
        let sd = (h / Z95).max(1e-6 * f.value_um);
        y.push(f.value_um);
        v.push(sd * sd);
        r_cal = r_cal.max(c / f.value_um);
    }
    let kf = k as f64;
    let mu = y.iter().sum::<f64>() / kf;
    let df = kf - 1.0;
    let s2 = y.iter().map(|y| (y - mu).powi(2)).sum::<f64>() / df;
    let tau2 = (s2 - v.iter().sum::<f64>() / kf).max(0.0);
    let u_s = (s2 / kf).sqrt();
    let c = r_cal * mu;
    let u_c = c / Z95;
    let u = u_s.hypot(u_c);
    let dof = if u_s > 0.0 {
        (u.powi(4) / (u_s.powi(4) / df)).min(1e6)
    } else {
        1e6
    };
    let t = t_quantile(0.975, dof)?;
    let half = t * u;
    let out = Pooled {
        value_um: mu,
        ci95_um: [mu - half, mu + half],
        fields: k,
        between_field_sd_um: tau2.sqrt(),
        statistical_u_um: u_s,
        calibration_half_um: c,
        dof,
        coverage_factor: t,
    };
    [mu, half, u_s, c, dof, t]
        .iter()
        .all(|x| x.is_finite())
        .then_some(out)
}

/// The expanded uncertainty of a pool of `k` fields of per-field sd `sigma`
/// with calibration part `c` (module docs: Welch-Satterthwaite, t_0.975).
fn expanded(k: usize, sigma: f64, c: f64) -> f64 {
    let df = (k.max(2) - 1) as f64;
    let u_s2 = sigma * sigma / k as f64;
    let u2 = u_s2 + (c / Z95).powi(2);
    let dof = if u_s2 > 0.0 {
        (u2 * u2 / (u_s2 * u_s2 / df)).min(1e6)
    } else {
        1e6
    };
    t_quantile(0.975, dof).unwrap_or(f64::INFINITY) * u2.sqrt()
}

/// The probability that a pool of `k` fields decides, the truth at `d` from
/// the limit, each field scattering with sd `sigma` about it, with
/// calibration part `c` and guard band `g` (fraction of U).
///
/// The pool decides when |mu' - limit| >= g U(s), mu' ~ N(truth, sigma^2 / k)
/// and s the fields' sample sd. Linearising g U in s about sigma (the delta
/// method) with var(s) = sigma^2 / (2 (k - 1)) for normal fields (a textbook
/// large-sample result, for example A. Stuart and J. K. Ord, "Kendall's
/// Advanced Theory of Statistics", vol. 1, the standard error of a standard
/// deviation; from memory):
/// P = Phi((d - g U(sigma)) / sqrt(sigma^2 / k + (g U'(sigma))^2 sigma^2 /
/// (2 (k - 1)))). Without calibration and with g = 1 it is the usual normal
/// approximation to the power of a one-sample t test. The far side's
/// chance (a pool deciding the wrong way) is left out: it is below 2.5 %
/// whenever the near side's is at stake.
pub fn probability_of_deciding(k: usize, sigma: f64, c: f64, d: f64, g: f64) -> f64 {
    use statrs::distribution::{ContinuousCDF, Normal};
    if k < MIN_FIELDS || sigma.is_nan() || sigma <= 0.0 || !d.is_finite() {
        return 0.0;
    }
    let b = |s: f64| g * expanded(k, s, c);
    let eps = 1e-4;
    let slope = (b(sigma * (1.0 + eps)) - b(sigma * (1.0 - eps))) / (2.0 * eps * sigma);
    let var = sigma * sigma / k as f64 + slope * slope * sigma * sigma / (2.0 * (k - 1) as f64);
    let z = (d.abs() - b(sigma)) / var.sqrt();
    Normal::new(0.0, 1.0).map_or(0.0, |n| n.cdf(z))
}

/// The largest number of fields the count to decide a pool looks at.
pub const MAX_FIELDS: usize = 10_000;

/// The fewest fields in all for which a pool decides with probability `p`
/// ([`probability_of_deciding`]); None when no number up to [`MAX_FIELDS`]
/// does (the value lies within the calibration's part of the limit, or too
/// close to it).
pub fn fields_for_probability(sigma: f64, c: f64, d: f64, g: f64, p: f64) -> Option<usize> {
    // NaN in any input also ends here.
    if d.is_nan() || d.abs() <= g * c || sigma.is_nan() || sigma <= 0.0 {
        return None;
    }
    // The probability grows with k (the interval narrows and its quantile
    // falls): find an upper end by doubling, then bisect.
    let ok = |k: usize| probability_of_deciding(k, sigma, c, d, g) >= p;
    let mut hi = MIN_FIELDS;
    while !ok(hi) {
        if hi >= MAX_FIELDS {
            return None;
        }
        hi = (hi * 2).min(MAX_FIELDS);
    }
    let mut lo = MIN_FIELDS - 1;
    while hi - lo > 1 {
        let mid = (lo + hi) / 2;
        if mid >= MIN_FIELDS && ok(mid) {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    Some(hi)
}

/// An image offered to a zone's pool: its file, its acceptance's compared
/// value and interval, and its part in the pool.
pub struct Offered<'a> {
    pub file: &'a str,
    pub acceptance: Option<&'a acceptance::Acceptance>,
    /// The image could not be read or measured.
    pub error: bool,
}

/// A field left out of a pool, and why.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct LeftOut {
    pub file: String,
    pub reason: String,
}

/// A zone decided once on the random-effects mean of its fields (spec
/// `pool`): the mean of the field values with the t interval of the
/// one-way random-effects analysis of variance, the calibration's part
/// common to all fields, Welch-Satterthwaite coverage factor (module docs).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct PooledZone {
    /// The estimator: "random_effects_anova" (module docs).
    pub method: String,
    /// The zone's mean SDAS, um; null when fewer than two fields have one.
    pub value_um: Option<f64>,
    pub ci95_um: Option<[f64; 2]>,
    /// Between-field standard deviation (moment estimate: the fields'
    /// variance less their mean within-field variance), um.
    pub between_field_sd_um: Option<f64>,
    /// The calibration's part of the 95 % half-width (common to all
    /// fields, not reduced by pooling), um.
    pub calibration_half_um: Option<f64>,
    /// Effective degrees of freedom and the coverage factor t_0.975 at them.
    pub dof: Option<f64>,
    pub coverage_factor: Option<f64>,
    /// The files whose values entered the pool, in input order.
    pub fields_used: Vec<String>,
    pub fields_left_out: Vec<LeftOut>,
    /// The zone's verdict, from the pool.
    pub decision: Decision,
    pub reason: String,
    /// For an indeterminate pool: about how many fields in all would decide
    /// it with 90 % probability, when more would.
    #[schemars(range(min = 2))]
    pub fields_to_decide: Option<usize>,
}

/// Pools a zone's images and decides the zone once against `limit` under
/// its rule and guard band (percent of U; None under the simple rule).
pub fn decide_zone(
    offered: &[Offered],
    limit: f64,
    rule: Rule,
    guard_pct: Option<f64>,
) -> PooledZone {
    let mut used = Vec::new();
    let mut left_out = Vec::new();
    let mut fields = Vec::new();
    let mut doubts = Vec::new();
    for o in offered {
        let leave = |reason: &str| LeftOut {
            file: o.file.to_string(),
            reason: reason.to_string(),
        };
        let Some(a) = o.acceptance.filter(|_| !o.error) else {
            left_out.push(leave(
                "not measured: the file could not be read or measured",
            ));
            continue;
        };
        if let Some(d) = a.pool_field.as_ref().and_then(|p| p.doubt.as_ref()) {
            doubts.push(format!("{}: {d}", o.file));
            left_out.push(leave(&format!("not trusted: {d}")));
            continue;
        }
        match (a.compared_um, a.compared_ci95_um) {
            (Some(v), Some(ci)) => {
                used.push(o.file.to_string());
                fields.push(Field {
                    value_um: v,
                    ci95_um: ci,
                    calibration_half_um: a
                        .pool_field
                        .as_ref()
                        .map_or(0.0, |p| p.calibration_half_um),
                });
            }
            (Some(_), None) => left_out.push(leave("its value has no 95 % interval")),
            _ => left_out.push(leave("no SDAS value")),
        }
    }
    let pooled = pool_fields(&fields);
    let mut out = PooledZone {
        method: "random_effects_anova".into(),
        value_um: pooled.map(|p| p.value_um),
        ci95_um: pooled.map(|p| p.ci95_um),
        between_field_sd_um: pooled.map(|p| p.between_field_sd_um),
        calibration_half_um: pooled.map(|p| p.calibration_half_um),
        dof: pooled.map(|p| p.dof),
        coverage_factor: pooled.map(|p| p.coverage_factor),
        fields_used: used,
        fields_left_out: left_out,
        decision: Decision::Indeterminate,
        reason: String::new(),
        fields_to_decide: None,
    };
    if !doubts.is_empty() {
        // A field whose calibration the sources contradict may be off by
        // the factor between them; the pool cannot say which way.
        out.reason = format!("not decided: {}", doubts.join("; "));
        return out;
    }
    let Some(p) = pooled else {
        out.reason = format!(
            "{} field(s) with a value and an interval: a pool needs at least {MIN_FIELDS} (the between-field variance needs two)",
            fields.len()
        );
        return out;
    };
    let evidence = Evidence {
        value: Some(Micrometres(p.value_um)),
        ci95: Some(p.ci95_um.map(Micrometres)),
        n: p.fields,
        calibration_half_um: p.calibration_half_um,
        bootstrap: None,
    };
    let sigma = p.per_field_sd_um();
    let (decision, reason, _, fields_to_decide) = acceptance::decide_advising(
        &evidence,
        limit,
        rule,
        guard_pct.unwrap_or(acceptance::DEFAULT_GUARD_BAND_PCT),
        |x, _, _, k| {
            let d = x - limit;
            if d == 0.0 {
                return (
                    None,
                    None,
                    "the pooled value lies on the limit: no number of fields decides it".into(),
                );
            }
            match fields_for_probability(sigma, p.calibration_half_um, d, k, acceptance::DECIDE_PROBABILITY) {
                Some(f) => (
                    None,
                    Some(f),
                    format!(
                        "about {f} fields in all ({} now) would decide the zone's pool with {:.0} % probability",
                        p.fields,
                        100.0 * acceptance::DECIDE_PROBABILITY
                    ),
                ),
                None if d.abs() <= k * p.calibration_half_um => (
                    None,
                    None,
                    "the pooled value is within the calibration's uncertainty of the limit: more fields cannot decide it, a better calibration might".into(),
                ),
                None => (None, None, "the pooled value is too close to the limit for more fields to decide it".into()),
            }
        },
    );
    out.decision = decision;
    out.reason = format!("pooled mean of {} fields: {reason}", p.fields);
    out.fields_to_decide = fields_to_decide;
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn field(y: f64, half: f64) -> Field {
        Field {
            value_um: y,
            ci95_um: [y - half, y + half],
            calibration_half_um: 0.0,
        }
    }

    #[test]
    fn without_calibration_the_pool_is_the_t_interval_of_the_field_values() {
        // Values 20, 22, 27 have mean 23, sd sqrt(13) = 3.6056; t_0.975,2 =
        // 4.3027 (table of Student's t), half-width 4.3027 x 3.6056 /
        // sqrt(3) = 8.957. Within-field sd 0.5 / 1.96, so tau^2 = 13 -
        // (0.5 / 1.96)^2.
        let p = pool_fields(&[field(20.0, 0.5), field(22.0, 0.5), field(27.0, 0.5)]).unwrap();
        assert!((p.value_um - 23.0).abs() < 1e-9);
        let half = 0.5 * (p.ci95_um[1] - p.ci95_um[0]);
        assert!(
            (half - 4.302_653 * 13f64.sqrt() / 3f64.sqrt()).abs() < 1e-4,
            "{half}"
        );
        let tau2 = 13.0 - (0.5 / Z95).powi(2);
        assert!((p.between_field_sd_um - tau2.sqrt()).abs() < 1e-9);
        assert!(pool_fields(&[field(20.0, 0.5)]).is_none());
    }

    #[test]
    fn the_calibration_part_is_common_to_all_fields() {
        // Identical fields: no between-field spread, so the interval is the
        // statistical part over sqrt(k) and the calibration part not
        // reduced. Two fields 30 +- 2 (stat 1.6, cal 1.2): u_s = (1.6 / 1.96)
        // / sqrt(2) x sqrt(q) with q = 0, so only the calibration is left.
        let f = Field {
            value_um: 30.0,
            ci95_um: [28.0, 32.0],
            calibration_half_um: 1.2,
        };
        let p = pool_fields(&[f, f]).unwrap();
        assert!((p.calibration_half_um - 1.2).abs() < 1e-12);
        let half = 0.5 * (p.ci95_um[1] - p.ci95_um[0]);
        // (The degrees of freedom are capped at 1e6: t there differs from
        // 1.96 in the sixth digit.)
        assert!((half - 1.2).abs() < 1e-3, "{half}");
    }

    #[test]
    fn more_fields_are_needed_closer_to_the_limit() {
        let a = fields_for_probability(3.0, 0.0, 3.0, 1.0, 0.9).unwrap();
        let b = fields_for_probability(3.0, 0.0, 1.5, 1.0, 0.9).unwrap();
        assert!(a < b, "{a} {b}");
        // Normal approximation (large k): k = sigma^2 (z_0.975 + z_0.90)^2
        // / d^2 = 9 x 3.2415^2 / 2.25 = 42.0; the t quantile and the
        // uncertain sd add a few.
        assert!((42..=48).contains(&b), "{b}");
        assert!(fields_for_probability(3.0, 2.0, 1.5, 1.0, 0.9).is_none());
    }
}
