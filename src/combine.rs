//! Combining the methods' outcomes into the image's result: the combined
//! SDAS and its interval, the warnings when methods disagree, and the
//! largest local value for acceptance. Works on any number of methods, in
//! their registry order.

use crate::error::Warning;
use crate::interpret::acceptance::Evidence;
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
    /// Number of independent measurements behind the value (tiles, lines).
    pub n: usize,
    pub methods: Vec<Method>,
    pub reason: Option<String>,
}

impl Estimate {
    /// No value, for the reason given.
    pub fn none(reason: impl Into<String>) -> Self {
        Self {
            value: None,
            ci95: None,
            n: 0,
            methods: vec![],
            reason: Some(reason.into()),
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
    (diff.abs() > METHOD_DISAGREEMENT).then(|| {
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

/// One method's contribution to the image's value, in pixels.
struct Part {
    method: Method,
    value: f64,
    ci: Option<[f64; 2]>,
    n: usize,
}

/// The image's SDAS from the methods that gave a value.
///
/// With values that each carry a 95 % interval, the image's value is their
/// inverse-variance weighted mean (weights 1 / h^2, h the half-width; the
/// methods are treated as independent: one counts arms on lines, the other
/// reads spectra) and its half-width 1 / sqrt(sum of weights) (JCGM
/// 100:2008, 5.1.2 with the sensitivity of a weighted mean). A value
/// without an interval cannot be weighted and is not combined with one that
/// has one.
///
/// The calibration's relative standard uncertainty u is a systematic factor
/// common to every tile and line, so it widens the interval rather than
/// averaging out: the half-width becomes sqrt(h^2 + (k u x)^2) with x the
/// value and k = [`Z95`] (uncorrelated contributions combined in
/// quadrature, JCGM 100:2008, 5.1.2).
pub fn combine(outcomes: &[Outcome], cal: UmPerPx, cal_rel_u: Option<f64>) -> Estimate {
    let mut parts = Vec::new();
    let mut reasons = Vec::new();
    for o in outcomes {
        match o.value {
            Some(value) => parts.push(Part {
                method: o.method,
                value: value.0,
                ci: o.ci95.map(|[a, b]| [a.0, b.0]),
                n: o.n,
            }),
            None => reasons.push(format!(
                "{}: {}",
                o.method.name(),
                o.reason.as_deref().unwrap_or("no value")
            )),
        }
    }
    if parts.is_empty() {
        return Estimate::none(if reasons.is_empty() {
            "no method was run".into()
        } else {
            reasons.join("; ")
        });
    }
    let with_ci: Vec<&Part> = parts.iter().filter(|p| p.ci.is_some()).collect();
    let (value, half, used): (f64, Option<f64>, Vec<&Part>) = if with_ci.is_empty() {
        let v = parts.iter().map(|p| p.value).sum::<f64>() / parts.len() as f64;
        (v, None, parts.iter().collect())
    } else {
        let mut wsum = 0.0;
        let mut wv = 0.0;
        for p in &with_ci {
            let [lo, hi] = p.ci.unwrap_or([p.value, p.value]);
            let h = (0.5 * (hi - lo)).max(1e-9 * p.value.abs().max(1e-9));
            let w = 1.0 / (h * h);
            wsum += w;
            wv += w * p.value;
        }
        (wv / wsum, Some(1.0 / wsum.sqrt()), with_ci)
    };
    let to_um = |px: f64| cal.to_um(Pixels(px)).0;
    let x = to_um(value);
    let ci95 = half.map(|h| {
        let h = to_um(h);
        let u = cal_rel_u.unwrap_or(0.0) * Z95 * x;
        let total = (h * h + u * u).sqrt();
        [Micrometres(x - total), Micrometres(x + total)]
    });
    Estimate {
        value: Some(Micrometres(x)),
        ci95,
        n: used.iter().map(|p| p.n).sum(),
        methods: used.iter().map(|p| p.method).collect(),
        reason: None,
    }
}

/// The combined value as the evidence compared with a limit.
pub fn value_evidence(sdas: &Estimate, cal_rel_u: f64) -> Evidence {
    Evidence {
        value: sdas.value,
        ci95: sdas.ci95,
        n: sdas.n,
        calibration_half_um: sdas.value.map_or(0.0, |v| Z95 * cal_rel_u * v.0),
    }
}

/// The largest local value of an image, from the first method in registry
/// order that gave a value and has used local measurements (the FFT's tile
/// map before the intercept's lines), with a 95 % interval from that
/// method's local spread (the tiles' robust standard deviation, or the
/// lines' standard deviation, which also holds the real variation across
/// the field and so overstates a single value's uncertainty: a cautious
/// choice) and the calibration's uncertainty in quadrature.
pub fn max_local(outcomes: &[Outcome], cal: UmPerPx, cal_rel_u: f64) -> Evidence {
    let found = outcomes.iter().filter(|o| o.value.is_some()).find_map(|o| {
        let max = o
            .local
            .iter()
            .filter(|l| l.used && l.spacing.0.is_finite())
            .map(|l| l.spacing.0)
            .reduce(f64::max)?;
        Some((max, o.spread))
    });
    let Some((max_px, spread)) = found else {
        return Evidence::default();
    };
    let x = cal.to_um(Pixels(max_px)).0;
    let c = Z95 * cal_rel_u * x;
    let ci95 = spread.map(|s| {
        let h = (Z95 * cal.to_um(s).0).hypot(c);
        [Micrometres(x - h), Micrometres(x + h)]
    });
    Evidence {
        value: Some(Micrometres(x)),
        ci95,
        n: 0,
        calibration_half_um: c,
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
            detail: Detail::Intercept(InterceptOutcome {
                value_px: value,
                ci95_px: ci,
                sd_px: None,
                n_lines: n,
                rel_accuracy_pct: None,
                lines: vec![],
                reason: None,
            }),
        }
    }

    #[test]
    fn inverse_variance_weighted_mean() {
        // JCGM 100:2008, 5.1.2, for the mean of two independent estimates
        // weighted by 1/h^2: worked by hand, values 10 (half-width 1) and
        // 12 (half-width 2): weights 1 and 1/4, mean (10 + 3) / 1.25 = 10.4,
        // half-width 1 / sqrt(1.25) = 0.894 43.
        let cal = UmPerPx::new(1.0).unwrap();
        let o = [
            outcome(Method::Fft, Some(10.0), Some([9.0, 11.0]), 5),
            outcome(Method::Intercept, Some(12.0), Some([10.0, 14.0]), 7),
        ];
        let e = combine(&o, cal, None);
        assert!((e.value.unwrap().0 - 10.4).abs() < 1e-12);
        let [lo, hi] = e.ci95.unwrap();
        assert!((0.5 * (hi.0 - lo.0) - 1.0 / 1.25f64.sqrt()).abs() < 1e-12);
        assert_eq!(e.n, 12);
        assert_eq!(e.methods, vec![Method::Fft, Method::Intercept]);
        // A 1 % calibration uncertainty adds 1.96 x 0.01 x 10.4 in quadrature.
        let e = combine(&o, cal, Some(0.01));
        let [lo, hi] = e.ci95.unwrap();
        let expect = (0.8f64 + (Z95 * 0.104).powi(2)).sqrt();
        assert!((0.5 * (hi.0 - lo.0) - expect).abs() < 1e-12);
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
        let e = max_local(&o, cal, 0.0);
        // The largest line, 1.2 x 20 px, at 0.5 um/px; its interval is the
        // spread (1 px = 0.5 um) times 1.96.
        assert!((e.value.unwrap().0 - 12.0).abs() < 1e-12);
        let [lo, hi] = e.ci95.unwrap();
        assert!((0.5 * (hi.0 - lo.0) - Z95 * 0.5).abs() < 1e-12);
    }
}
