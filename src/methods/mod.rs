//! Measurement methods, side by side behind one interface.
//!
//! Each method takes what the shared stages produce ([`Inputs`]: the
//! prepared image, and whatever else a method needs from the stages before
//! it) and returns one [`Outcome`] in pixels: its value and 95 % interval,
//! the number of independent measurements behind them, the reason when
//! there is no value, its warnings, and its local measurements as a list of
//! one shared type ([`Local`]), with the method's own detail beside them
//! ([`Detail`]). Calibration to micrometres happens once, after the methods.
//!
//! Adding a method means: its file here, a [`Method`] variant with its name
//! and its arm in [`run`] (the one registration), its [`Detail`] variant,
//! and its report detail and schema entry (`report`).

pub mod centres;
pub mod fft;
pub mod intercept;

use crate::error::Warning;
use crate::preprocess::Prepared;
use crate::units::Pixels;

/// A measurement method. The order of the variants is the order in which
/// methods run and are listed (in the report, the CSV and the combination).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Method {
    Fft,
    Intercept,
    Centres,
}

impl Method {
    /// Every method, in registry order.
    pub const ALL: [Method; 3] = [Method::Fft, Method::Intercept, Method::Centres];

    /// Whether the method's local measurements are independent of each
    /// other (intercept lines laid apart), so that their count is the
    /// statistical sample size; the FFT's tiles overlap by half.
    pub fn independent_locals(self) -> bool {
        match self {
            Method::Fft => false,
            Method::Intercept => true,
            // Chains share no centre.
            Method::Centres => true,
        }
    }

    /// The fraction of the method's local measurements that count as
    /// independent: 1 for lines and chains laid apart; for FFT tiles
    /// overlapping by half in each direction, (stride / size)^2 = 1/4 (each
    /// tile shares its area with its neighbours; [`fft::TILE_INDEPENDENCE`]).
    pub fn independent_fraction(self) -> f64 {
        match self {
            Method::Fft => fft::TILE_INDEPENDENCE,
            Method::Intercept | Method::Centres => 1.0,
        }
    }

    /// Relative standard uncertainty of the method's own bias on a field: a
    /// Type B component (JCGM 100:2008, 4.3) from a validation study, as a
    /// trueness component is. On 120 synthetic fields of six styles (seeds
    /// 81 and 82, December 2026), the extra variance that brings the median
    /// of each method's squared standardised errors e^2 / (u^2 + u_m^2) to
    /// that of a chi-square with one degree of freedom (0.455), u being the
    /// method's statistical interval: FFT 0 (its intervals already cover:
    /// 135 of 151), intercept 1.4 % (103 -> 118 of 144), centres 8.1 %
    /// (29 -> 81 of 93: chains run through fused or missed arms and read
    /// high). The median, so that fields where a method reads something
    /// else (rows) do not set it. Fresh seeds 83-86 gave 0, 1.6 % and 10 %.
    pub fn bias_rel_u(self) -> f64 {
        match self {
            Method::Fft => 0.0,
            Method::Intercept => 0.014,
            Method::Centres => 0.081,
        }
    }

    /// The method's name in the report, the CSV and on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Method::Fft => "fft",
            Method::Intercept => "intercept",
            Method::Centres => "centres",
        }
    }
}

/// Parameters of every method.
#[derive(Clone, Debug, Default)]
pub struct Params {
    pub fft: fft::FftParams,
    pub intercept: intercept::InterceptParams,
    pub centres: centres::CentresParams,
}

/// What the shared stages give the methods.
pub struct Inputs<'a> {
    pub prepared: &'a Prepared,
}

/// One local measurement of spacing, of any method: an FFT tile, an
/// intercept line (at its mid-point), an arm chain.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Local {
    /// Position, pixels from the image's top-left corner (y down).
    pub x: Pixels,
    pub y: Pixels,
    /// The spacing measured there.
    pub spacing: Pixels,
    /// Direction along which the spacing was measured, degrees
    /// counter-clockwise from the image's +x axis with y up, in [0, 180).
    pub dir_deg: f64,
    /// The method's quality figure for it, when it has one.
    pub quality: Option<f64>,
    /// Whether it entered the method's value.
    pub used: bool,
}

/// The method-specific detail of an outcome (what the report, the overlay
/// and the acceptance read beyond the common fields).
#[derive(Clone, Debug, PartialEq)]
pub enum Detail {
    Fft(fft::FftOutcome),
    Intercept(intercept::InterceptOutcome),
    Centres(centres::CentresOutcome),
}

/// One method's result for one image, in pixels.
#[derive(Clone, Debug, PartialEq)]
pub struct Outcome {
    pub method: Method,
    pub value: Option<Pixels>,
    pub ci95: Option<[Pixels; 2]>,
    /// Number of independent measurements behind the value (tiles, lines).
    pub n: usize,
    /// The spread of the local measurements that entered the value (a
    /// standard deviation), when the method gives one.
    pub spread: Option<Pixels>,
    /// Why there is no value, when there is none.
    pub reason: Option<String>,
    pub warnings: Vec<Warning>,
    pub local: Vec<Local>,
    /// How many independent measurements in all would bring the percent
    /// relative accuracy to the target, at the same spread (set by
    /// [`Outcome::set_target`]; null for a method whose measurements overlap).
    pub for_target: Option<usize>,
    /// A figure without the support a value needs ([`require_support`]):
    /// reported, clearly marked, never used.
    pub indicative: Option<Pixels>,
    pub detail: Detail,
}

impl Outcome {
    /// Sets [`Outcome::for_target`] from the spread of the local
    /// measurements, for the methods whose local measurements are
    /// independent (intercept lines; not the FFT's overlapping tiles). All
    /// local measurements count, also when there is no value: the figure
    /// then says how many more would be needed.
    pub fn set_target(&mut self, target_rel_accuracy_pct: f64) {
        if !self.method.independent_locals() {
            return;
        }
        let spacings: Vec<f64> = self.local.iter().map(|l| l.spacing.0).collect();
        self.for_target = crate::stats::Summary::of(&spacings)
            .and_then(|s| crate::stats::measurements_for_target(&s, target_rel_accuracy_pct));
    }

    /// The FFT detail, when this is the FFT method's outcome.
    pub fn fft(&self) -> Option<&fft::FftOutcome> {
        match &self.detail {
            Detail::Fft(f) => Some(f),
            _ => None,
        }
    }

    /// The centres detail, when this is the centres method's outcome.
    pub fn centres(&self) -> Option<&centres::CentresOutcome> {
        match &self.detail {
            Detail::Centres(c) => Some(c),
            _ => None,
        }
    }

    /// The intercept detail, when this is the intercept method's outcome.
    pub fn intercept(&self) -> Option<&intercept::InterceptOutcome> {
        match &self.detail {
            Detail::Intercept(i) => Some(i),
            _ => None,
        }
    }
}

/// Runs one method, and holds its value to the evidence rule
/// ([`require_support`]).
pub fn run(method: Method, inputs: &Inputs, params: &Params) -> Outcome {
    let outcome = match method {
        Method::Fft => fft::measure(inputs.prepared, &params.fft).into_outcome(),
        Method::Intercept => intercept::measure(inputs.prepared, &params.intercept).into_outcome(),
        Method::Centres => centres::measure(inputs.prepared, &params.centres).into_outcome(),
    };
    require_support(with_bias(outcome))
}

/// The method's 95 % interval widened by its own bias
/// ([`Method::bias_rel_u`]): each half-width h becomes
/// sqrt(h^2 + (1.96 u_m x)^2) for the value x (uncorrelated components in
/// quadrature, JCGM 100:2008, 5.1.2). The statistical spread stays in the
/// method's own figures (sd, %RA); the interval is what a reader and the
/// combination rely on.
pub fn with_bias(mut o: Outcome) -> Outcome {
    let (Some(v), Some([lo, hi])) = (o.value, o.ci95) else {
        return o;
    };
    let b = crate::stats::Z95 * o.method.bias_rel_u() * v.0;
    if b > 0.0 {
        o.ci95 = Some([
            Pixels(v.0 - (v.0 - lo.0).hypot(b)),
            Pixels(v.0 + (hi.0 - v.0).hypot(b)),
        ]);
    }
    o
}

/// No value without evidence: a method's value stands only with a 95 %
/// interval that lies above zero. A value without an interval rests on too
/// few independent measurements to say how far off it may be; an interval
/// that reaches zero or below says the measurements scatter as much as the
/// spacing itself (a %RA of 100 % or more), which no periodic arm structure
/// does. Either way the figure is kept only in the reason, marked as
/// indicative, and never enters the image's value or a decision.
pub fn require_support(mut o: Outcome) -> Outcome {
    let Some(value) = o.value else {
        return o;
    };
    let why = match o.ci95 {
        None => Some(format!(
            "too few independent measurements for a 95 % interval ({} in all)",
            o.n
        )),
        Some([lo, hi]) if !(lo.0 > 0.0 && hi.0 >= lo.0 && hi.0.is_finite()) => Some(format!(
            "its 95 % interval ({:.1} to {:.1} times the value) does not lie above zero: the measurements scatter as much as the spacing itself",
            lo.0 / value.0, hi.0 / value.0
        )),
        _ => None,
    };
    if let Some(why) = why {
        o.reason = Some(format!(
            "no supported value: {why}; the figure it would give is reported as indicative only and is not used"
        ));
        o.indicative = Some(value);
        o.value = None;
        o.ci95 = None;
    }
    o
}

/// Direction of the segment from (x0, y0) to (x1, y1) in image pixels (y
/// down), as degrees counter-clockwise from +x with y up, in [0, 180).
pub fn segment_dir_deg(x0: f64, y0: f64, x1: f64, y1: f64) -> f64 {
    let d = (-(y1 - y0)).atan2(x1 - x0).to_degrees();
    d.rem_euclid(180.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn outcome(value: f64, ci: Option<[f64; 2]>) -> Outcome {
        Outcome {
            method: Method::Intercept,
            value: Some(Pixels(value)),
            ci95: ci.map(|[a, b]| [Pixels(a), Pixels(b)]),
            n: 3,
            spread: None,
            reason: None,
            warnings: vec![],
            local: vec![],
            for_target: None,
            indicative: None,
            detail: Detail::Intercept(intercept::InterceptOutcome {
                value_px: Some(Pixels(value)),
                ci95_px: ci.map(|c| c.map(Pixels)),
                sd_px: None,
                n_lines: 3,
                rel_accuracy_pct: None,
                lines: vec![],
                reason: None,
            }),
        }
    }

    #[test]
    fn a_value_needs_an_interval_above_zero() {
        // A spacing is a positive length (a fact of geometry): an interval
        // reaching zero, or none at all, leaves only an indicative figure.
        let kept = require_support(outcome(10.0, Some([9.0, 11.0])));
        assert_eq!(kept.value, Some(Pixels(10.0)));
        assert!(kept.indicative.is_none() && kept.reason.is_none());
        for ci in [None, Some([-2.3, 11.2]), Some([0.0, 20.0])] {
            let o = require_support(outcome(4.46, ci));
            assert!(o.value.is_none() && o.ci95.is_none(), "{ci:?}");
            assert_eq!(o.indicative, Some(Pixels(4.46)));
            assert!(o.reason.unwrap().starts_with("no supported value"));
        }
    }
}
