//! Statistics shared by all methods: medians, robust spread, Student's t
//! confidence intervals and percent relative accuracy.

use serde::Serialize;
use statrs::distribution::{ContinuousCDF, FisherSnedecor, StudentsT};

/// Median of a slice, reordering it: the middle value, or the mean of the
/// two middle ones; `None` for an empty slice, as [`median`]. (The crate's
/// one median: [`median`] for values that must stay in order, and
/// `blocks::select::median_by_selection`, the same number bit for bit by
/// radix selection for large images, are the same definition.)
pub fn median_in_place(v: &mut [f32]) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    let n = v.len();
    let mid = n / 2;
    let (_, m, _) = v.select_nth_unstable_by(mid, |a, b| a.total_cmp(b));
    let upper = *m as f64;
    Some(if n % 2 == 1 {
        upper
    } else {
        let lower = v[..mid].iter().copied().fold(f32::NEG_INFINITY, f32::max) as f64;
        0.5 * (lower + upper)
    })
}

/// The 0.975 quantile of the standard normal distribution: the coverage
/// factor of a 95 % interval under a normal distribution (JCGM 100:2008,
/// G.1.3, table G.1 gives 1.960). The one value of it in the crate.
pub const Z95: f64 = 1.959_963_984_540_054;

/// Median of values (not reordered).
pub fn median(values: &[f64]) -> Option<f64> {
    if values.is_empty() {
        return None;
    }
    let mut v = values.to_vec();
    v.sort_by(|a, b| a.total_cmp(b));
    let n = v.len();
    Some(if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    })
}

/// Weighted median: the smallest value at which the cumulative weight reaches
/// half the total; the midpoint when it lands exactly on half.
pub fn weighted_median(values: &[f64], weights: &[f64]) -> Option<f64> {
    let mut pairs: Vec<(f64, f64)> = values
        .iter()
        .zip(weights)
        .filter(|(v, w)| v.is_finite() && w.is_finite() && **w > 0.0)
        .map(|(v, w)| (*v, *w))
        .collect();
    if pairs.is_empty() {
        return None;
    }
    pairs.sort_by(|a, b| a.0.total_cmp(&b.0));
    let total: f64 = pairs.iter().map(|p| p.1).sum();
    let half = 0.5 * total;
    let mut acc = 0.0;
    for (i, (v, w)) in pairs.iter().enumerate() {
        acc += w;
        if (acc - half).abs() <= 1e-12 * total {
            return Some(pairs.get(i + 1).map_or(*v, |n| 0.5 * (v + n.0)));
        }
        if acc > half {
            return Some(*v);
        }
    }
    pairs.last().map(|p| p.0)
}

/// Median absolute deviation about `center`, scaled by 1.4826 to estimate a
/// normal standard deviation.
pub fn mad_sd(values: &[f64], center: f64) -> Option<f64> {
    let dev: Vec<f64> = values.iter().map(|v| (v - center).abs()).collect();
    median(&dev).map(|m| 1.4826 * m)
}

/// Quantile of Student's t distribution with `dof` degrees of freedom.
pub fn t_quantile(p: f64, dof: f64) -> Option<f64> {
    if !(0.0..1.0).contains(&p) || p == 0.0 || dof <= 0.0 || !dof.is_finite() {
        return None;
    }
    StudentsT::new(0.0, 1.0, dof).ok().map(|t| t.inverse_cdf(p))
}

/// Upper tail P(F > f) of Fisher's F distribution with `d1` and `d2`
/// degrees of freedom (the p-value of an F test); `None` for degrees of
/// freedom that are not positive or an `f` that is not finite.
pub fn f_upper_tail(f: f64, d1: f64, d2: f64) -> Option<f64> {
    if !(f.is_finite() && d1 > 0.0 && d2 > 0.0 && d1.is_finite() && d2.is_finite()) {
        return None;
    }
    if f <= 0.0 {
        return Some(1.0);
    }
    FisherSnedecor::new(d1, d2).ok().map(|d| d.sf(f))
}

/// Sample statistics of independent measurements (lines, fields, tiles).
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Summary {
    pub n: usize,
    pub mean: f64,
    /// Sample standard deviation (n - 1 in the denominator).
    pub sd: f64,
    /// Half-width of the 95% confidence interval of the mean: t(0.975, n-1) s / sqrt(n).
    pub ci95_half_width: f64,
    /// Percent relative accuracy, 100 x half-width / mean (ASTM E112 practice).
    pub rel_accuracy_pct: f64,
}

impl Summary {
    /// Statistics of at least two finite values.
    pub fn of(values: &[f64]) -> Option<Self> {
        let n = values.len();
        if n < 2 || values.iter().any(|v| !v.is_finite()) {
            return None;
        }
        let nf = n as f64;
        let mean = values.iter().sum::<f64>() / nf;
        let var = values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (nf - 1.0);
        let sd = var.sqrt();
        let t = t_quantile(0.975, nf - 1.0)?;
        let half = t * sd / nf.sqrt();
        Some(Self {
            n,
            mean,
            sd,
            ci95_half_width: half,
            rel_accuracy_pct: if mean != 0.0 {
                100.0 * half / mean.abs()
            } else {
                f64::INFINITY
            },
        })
    }

    pub fn ci95(&self) -> [f64; 2] {
        [
            self.mean - self.ci95_half_width,
            self.mean + self.ci95_half_width,
        ]
    }
}

/// Number of measurements (lines, fields) that would bring the percent
/// relative accuracy of the mean under `target_rel_accuracy_pct`, assuming
/// the standard deviation and the mean stay as in `summary`. Halving %RA
/// takes about four times as many measurements.
///
/// %RA(n) = 100 t(0.975, n-1) s / (sqrt(n) mean) (ASTM E112 practice). The
/// first guess n' = n (RA/target)^2 keeps t fixed; since t(0.975, n-1) falls
/// as n grows, n' is then iterated as n' = (100 t(0.975, n'-1) s / (mean
/// target))^2, rounded up, and finally checked and stepped up until
/// %RA(n') <= target. The result is the total number of lines (at least 2;
/// it may be less than `summary.n` when the target is already met). `None`
/// for a non-positive target or mean, or beyond ten million lines.
pub fn measurements_for_target(summary: &Summary, target_rel_accuracy_pct: f64) -> Option<usize> {
    let (s, mean, t) = (summary.sd, summary.mean, target_rel_accuracy_pct);
    if !(t > 0.0 && mean > 0.0 && s.is_finite() && s >= 0.0) {
        return None;
    }
    const LIMIT: usize = 10_000_000;
    let ra = |n: usize| -> Option<f64> {
        let nf = n as f64;
        Some(100.0 * t_quantile(0.975, nf - 1.0)? * s / (nf.sqrt() * mean))
    };
    if s == 0.0 {
        return Some(2);
    }
    let n0 = summary.n.max(2);
    let first = (n0 as f64 * (summary.rel_accuracy_pct / t).powi(2)).ceil();
    let mut n = if first.is_finite() {
        (first as usize).clamp(2, LIMIT)
    } else {
        n0
    };
    for _ in 0..50 {
        let tq = t_quantile(0.975, n as f64 - 1.0)?;
        let next = (100.0 * tq * s / (mean * t)).powi(2).ceil();
        if !next.is_finite() || next > LIMIT as f64 {
            return None;
        }
        let next = (next as usize).max(2);
        if next == n {
            break;
        }
        n = next;
    }
    // Step down while the target is still met, then up until it is.
    while n > 2 && ra(n - 1)? <= t {
        n -= 1;
    }
    while ra(n)? > t {
        n += 1;
        if n > LIMIT {
            return None;
        }
    }
    Some(n)
}

/// Upper end of the Wilson score 95 % interval of a proportion: `x`
/// successes in `n` trials (both may be fractional, for an effective
/// number of trials), without continuity correction (E. B. Wilson,
/// "Probable inference, the law of succession, and statistical
/// inference", J. Am. Stat. Assoc. 22 (1927) 209-212). Unlike the normal
/// approximation it stays within [0, 1] and is usable for small `n`.
/// 1 for `n` <= 0 (nothing is known).
pub fn wilson_upper95(x: f64, n: f64) -> f64 {
    if n.is_nan() || n <= 0.0 {
        return 1.0;
    }
    let p = (x / n).clamp(0.0, 1.0);
    let z2 = Z95 * Z95;
    let centre = p + z2 / (2.0 * n);
    let half = Z95 * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt();
    ((centre + half) / (1.0 + z2 / n)).min(1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn t_quantiles_match_published_table() {
        // Two-sided 95% critical values of Student's t, NIST/SEMATECH
        // e-Handbook of Statistical Methods, section 1.3.6.7.2 (table of
        // upper critical values, column 0.025).
        for (dof, t) in [
            (1.0, 12.706),
            (4.0, 2.776),
            (9.0, 2.262),
            (29.0, 2.045),
            (100.0, 1.984),
        ] {
            let q = t_quantile(0.975, dof).unwrap();
            assert!((q - t).abs() < 1e-3, "dof {dof}: {q} vs {t}");
        }
    }

    #[test]
    fn f_upper_tail_matches_published_critical_values() {
        // Upper 5 % critical values of F with 2 numerator degrees of
        // freedom, NIST/SEMATECH e-Handbook of Statistical Methods, section
        // 1.3.6.7.3 (from memory): F(2, 4) = 6.944, F(2, 10) = 4.103,
        // F(2, 20) = 3.493. With d1 = 2 the tail also has the closed form
        // (1 + 2 f / d2)^(-d2 / 2) (the F(2, d2) density integrated; common
        // practice, no single source).
        for (d2, f) in [(4.0, 6.944), (10.0, 4.103), (20.0, 3.493)] {
            let p = f_upper_tail(f, 2.0, d2).unwrap();
            assert!((p - 0.05).abs() < 2e-4, "F(2, {d2}) at {f}: {p}");
        }
        for (f, d2) in [(0.5f64, 3.0f64), (2.0, 7.5), (9.0, 1.5)] {
            let closed = (1.0 + 2.0 * f / d2).powf(-d2 / 2.0);
            assert!((f_upper_tail(f, 2.0, d2).unwrap() - closed).abs() < 1e-9);
        }
        assert_eq!(f_upper_tail(0.0, 2.0, 5.0), Some(1.0));
        assert_eq!(f_upper_tail(1.0, 2.0, 0.0), None);
        assert_eq!(f_upper_tail(f64::NAN, 2.0, 5.0), None);
    }

    #[test]
    fn summary_of_a_worked_sample() {
        // Worked by hand: values 10, 12, 14, 16, 18: mean 14, s = sqrt(10) = 3.1623,
        // t(0.975, 4) = 2.776 (NIST table above), half-width = 2.776 * 3.1623 / sqrt(5) = 3.926,
        // %RA = 100 * 3.926 / 14 = 28.04.
        let s = Summary::of(&[10.0, 12.0, 14.0, 16.0, 18.0]).unwrap();
        assert!((s.mean - 14.0).abs() < 1e-12);
        assert!((s.sd - 10f64.sqrt()).abs() < 1e-12);
        assert!((s.ci95_half_width - 3.926).abs() < 2e-3);
        assert!((s.rel_accuracy_pct - 28.04).abs() < 0.02);
        assert!(Summary::of(&[1.0]).is_none());
    }

    #[test]
    fn measurements_needed_for_a_target_accuracy() {
        // Worked by hand: mean 20, s = 4, n = 5: t(0.975, 4) = 2.776 (NIST
        // table above), half-width 2.776 * 4 / sqrt(5) = 4.966, %RA 24.8.
        // For %RA <= 10 the half-width must be <= 2: n = 18 gives
        // t(0.975, 17) = 2.110, 2.110 * 4 / sqrt(18) = 1.989 <= 2, while
        // n = 17 gives 2.120 * 4 / sqrt(17) = 2.057 > 2 (t values from the
        // same table).
        let s = Summary {
            n: 5,
            mean: 20.0,
            sd: 4.0,
            ci95_half_width: 4.966,
            rel_accuracy_pct: 24.83,
        };
        assert_eq!(measurements_for_target(&s, 10.0), Some(18));
        assert_eq!(measurements_for_target(&s, 30.0), Some(5));
    }

    #[test]
    fn medians() {
        assert_eq!(median(&[3.0, 1.0, 2.0]), Some(2.0));
        assert_eq!(median(&[4.0, 1.0, 3.0, 2.0]), Some(2.5));
        let mut v = [4.0f32, 1.0, 3.0, 2.0];
        assert_eq!(median_in_place(&mut v), Some(2.5));
        assert_eq!(median_in_place(&mut []), None);
        assert_eq!(median(&[]), None);
        assert_eq!(
            weighted_median(&[1.0, 2.0, 3.0], &[1.0, 1.0, 5.0]),
            Some(3.0)
        );
        assert_eq!(weighted_median(&[1.0, 2.0], &[1.0, 1.0]), Some(1.5));
        assert_eq!(weighted_median(&[], &[]), None);
    }

    #[test]
    fn wilson_upper_bound_matches_scipy() {
        // scipy 1.17.1: scipy.stats.binomtest(k, n).proportion_ci(
        // confidence_level=0.95, method="wilson").high
        for (k, n, high) in [
            (46.0, 191.0, 0.306_203_808_875_489_04),
            (88.0, 217.0, 0.471_950_704_225_813_03),
            (3.0, 10.0, 0.603_221_852_538_854_6),
            (0.0, 8.0, 0.324_407_564_880_383_9),
            (10.0, 10.0, 1.0),
        ] {
            let u = wilson_upper95(k, n);
            assert!((u - high).abs() < 1e-9, "{k}/{n}: {u} vs {high}");
        }
        assert_eq!(wilson_upper95(0.0, 0.0), 1.0);
    }
}
