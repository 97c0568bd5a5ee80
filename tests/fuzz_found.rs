//! What the fuzz targets (fuzz/, DEVELOPERS.md "Fuzzing") found, each kept
//! as a test of the behaviour fixed: the input as the fuzzer wrote it where
//! the case is a file (fuzz/seeds/TARGET/found-*), or the same case written
//! out by hand where the numbers say it more plainly.

use armspace::calibrate::{scale_bar, BarLength, CalibrationRequest};
use armspace::interpret::library::{self, Correlation};
use armspace::interpret::{
    interpret_with_alternatives, round_significant, Interpretation, Request,
};
use armspace::load::LoadOptions;
use armspace::units::{Kelvin, Micrometres};
use std::path::Path;

const SOURCE: &str =
    r#"{"authors": "test", "year": 2026, "title": "invented", "published_in": "tests"}"#;

/// A user correlation file of power-law entries: (id, family, form,
/// variable unit, coefficient, exponent).
fn user_file(entries: &[(&str, &str, &str, &str, f64, f64)]) -> Vec<Correlation> {
    let body: Vec<String> = entries
        .iter()
        .map(|(id, family, form, unit, a, n)| {
            format!(
                r#"{{"id": "{id}", "alloy_family": "{family}", "form": "{form}", "sdas_unit": "um", "variable_unit": "{unit}", "coefficient": {{"value": {a:e}}}, "exponent": {n:e}, "scatter_pct": 10, "source": {SOURCE}}}"#
            )
        })
        .collect();
    let text = format!(
        r#"{{"format": "armspace.correlations/1", "correlations": [{}]}}"#,
        body.join(",")
    );
    library::parse(&text, "user.json", false).expect("a valid file")
}

fn at(sdas: f64, freezing_range: Option<f64>) -> Request {
    Request {
        sdas: Some(Micrometres(sdas)),
        ci95: Some([Micrometres(0.9 * sdas), Micrometres(1.1 * sdas)]),
        freezing_range: freezing_range.map(Kelvin),
        extrapolate: true,
        ..Request::default()
    }
}

/// Every number of an interpretation, as computed and as rounded for the
/// report, is finite.
fn all_finite(i: &Interpretation) -> bool {
    let r = i.rounded();
    [i, &r].iter().all(|i| {
        let q = [&i.cooling_rate_k_per_s, &i.solidification_time_s];
        q.iter().all(|q| {
            q.value.is_none_or(f64::is_finite)
                && [q.ci95, q.ci95_with_scatter, q.ci95_rel_pct]
                    .iter()
                    .flatten()
                    .flatten()
                    .all(|v| v.is_finite())
        }) && i
            .comparison
            .as_ref()
            .is_none_or(|c| c.ratio.is_none_or(f64::is_finite))
            && i.alternatives.iter().all(all_finite)
    })
}

/// decode_calibrate: a scale-bar candidate two of whose measured rows
/// differ by more than 2 px has no row within 1 px of their median, so its
/// length was a mean over no rows, NaN; and a NaN bar, found first, was
/// never displaced by a later one (every comparison with NaN is false),
/// hiding the real bar of the image. Such a candidate is now no bar.
#[test]
fn a_bar_candidate_without_a_measurable_length_is_no_bar() {
    let detect = |name: &str| {
        let path = Path::new("fuzz/seeds/decode_calibrate").join(name);
        let loaded = armspace::load::load(&path, &LoadOptions::default()).unwrap();
        scale_bar::detect(&loaded.image)
    };
    // The input as found (minimized): the NaN candidate was all there was.
    let e = detect("found-nan-bar-length.bmp").unwrap_err().to_string();
    assert_eq!(e, "no solid horizontal bar stands out from the image");
    // A mutated BMP whose dark strip at rows 16-18 was that candidate; its
    // bar, level 5 on a field near 128 over columns 47-106 of rows 22-24,
    // was hidden behind it. It measures its pixel count.
    let bar = detect("found-nan-bar-hid-real-bar.bmp").unwrap();
    assert!((bar.length_px - 60.0).abs() < 1e-9, "{}", bar.length_px);
    assert_eq!((bar.x0, bar.y0, bar.x1, bar.y1), (47, 22, 106, 24));
    assert_eq!(bar.polarity, scale_bar::Polarity::DarkOnLight);
    // And the calibration it gives for a 100 um bar: 100 / 60 um/px.
    let req = CalibrationRequest {
        scale_bar: Some(BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.0,
        }),
        ..CalibrationRequest::default()
    };
    let (c, _) = armspace::calibrate::resolve(&req, Some(&Ok(bar)), None).unwrap();
    assert!((c.um_per_px.get() - 100.0 / 60.0).abs() < 1e-12);
}

/// correlations: a coarsening entry with an absurd Gibbs-Thomson
/// coefficient (2.36e307 K m) gives a solidification time of about 1e-313
/// s, finite and positive; rounding it for the report gave NaN (the scale
/// 10^316 overflows).
#[test]
fn a_value_near_the_smallest_f64_rounds_to_itself() {
    let text =
        std::fs::read_to_string("fuzz/seeds/correlations/found-subnormal-time-rounds-to-nan.json")
            .unwrap();
    let lib = library::parse(&text, "user.json", false).unwrap();
    let c = library::find(&lib, "seed-coarsening").unwrap();
    let i = interpret_with_alternatives(c, &lib, &at(25.0, None)).unwrap();
    let t = i.solidification_time_s.value.unwrap();
    assert!(t > 0.0 && t < 1e-300, "{t}");
    let r = i.rounded().solidification_time_s.value.unwrap();
    assert!((r / t - 1.0).abs() < 1e-3, "{t} rounds to {r}");
    assert!(all_finite(&i));
    // The rounding itself, at both ends of the range of f64.
    assert!((round_significant(1.23456e-310, 4) / 1.235e-310 - 1.0).abs() < 1e-9);
    assert!((round_significant(-2.5e-320, 2) / -2.5e-320 - 1.0).abs() < 1e-3);
    assert_eq!(round_significant(f64::MAX, 4), f64::MAX);
    assert_eq!(round_significant(0.0123456, 4), 0.01235);
}

/// correlations: a time finite in the law's own unit can be beyond f64 in
/// seconds (2.5e307 min is 1.5e309 s): no value, with the reason, instead
/// of an infinite one (which the JSON report wrote as null, unexplained).
#[test]
fn a_value_beyond_f64_in_the_tools_unit_is_an_error() {
    let lib = user_file(&[("huge-min", "x", "solidification_time", "min", 1e-306, 1.0)]);
    let e = interpret_with_alternatives(&lib[0], &lib, &at(25.0, None))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("correlation 'huge-min'")
            && e.contains("gives no finite positive solidification time at 25 um"),
        "{e}"
    );
}

/// correlations: a cooling rate near the smallest f64 (1.6e-307 K/s) is a
/// value, but the time a freezing range gives from it, 60 K / 1.6e-307 K/s,
/// is beyond f64: that quantity has no value and says why.
#[test]
fn a_derived_quantity_beyond_f64_has_no_value_and_a_reason() {
    let lib = user_file(&[("tiny-rate", "x", "cooling_rate", "K/s", 1e-152, 0.5)]);
    let i = interpret_with_alternatives(&lib[0], &lib, &at(25.0, Some(60.0))).unwrap();
    let cr = i.cooling_rate_k_per_s.value.unwrap();
    // (25 / 1e-152)^-2 = 1.6e-307.
    assert!((cr / 1.6e-307 - 1.0).abs() < 1e-9, "{cr}");
    let t = &i.solidification_time_s;
    assert_eq!(t.value, None);
    assert_eq!(
        t.reason.as_deref(),
        Some("freezing range / cooling rate is beyond the range of numbers armspace holds")
    );
    assert!(all_finite(&i));
}

/// correlations: two laws of one family whose cooling rates are 1e298 and
/// 1e-302 K/s have a ratio beyond f64: the comparison gives none (and says
/// so as "?" in the warning) instead of infinity.
#[test]
fn a_ratio_beyond_f64_between_two_laws_is_none() {
    let lib = user_file(&[
        ("low", "fam", "cooling_rate", "K/s", 1e-300, 1.0),
        ("high", "fam", "cooling_rate", "K/s", 1e300, 1.0),
    ]);
    let i = interpret_with_alternatives(&lib[0], &lib, &at(25.0, None)).unwrap();
    let alt = &i.alternatives[0];
    let c = alt.comparison.as_ref().unwrap();
    assert_eq!(c.quantity, Some("cooling_rate_K_per_s"));
    assert!(c.chosen_value.is_some() && c.value.is_some());
    assert_eq!(c.ratio, None);
    assert_eq!(c.intervals_overlap, Some(false));
    assert!(
        i.warnings.iter().any(|w| w.contains("(ratio ?)")),
        "{:?}",
        i.warnings
    );
    assert!(all_finite(&i));
}

/// manual_lines: a length near the smallest f64 over many spacings
/// (1.33e-322 um over 1031) underflowed to a spacing of 0, accepted as a
/// line; the statistics of such lines are 0 / 0 (NaN relative accuracy).
/// The row is refused, naming it.
#[test]
fn a_hand_measured_spacing_that_underflows_to_zero_is_refused() {
    use armspace::manual::parse;
    use armspace::methods::intercept::Convention;
    let e = parse(
        "length_um,arms\n100,5\n135e-324,1032\n",
        "lines.csv",
        Convention::CentreToCentre,
    )
    .unwrap_err()
    .to_string();
    assert_eq!(
        e,
        "lines.csv: row 3: length_um 1.33e-322 over 1031 spacing(s) is smaller than any number armspace holds"
    );
    // The file as the fuzzer wrote it (its first byte picks the convention).
    let bytes =
        std::fs::read("fuzz/seeds/manual_lines/found-spacing-underflows-to-zero.csv").unwrap();
    let text = std::str::from_utf8(&bytes[1..]).unwrap();
    let c = if bytes[0] & 1 == 0 {
        Convention::CentreToCentre
    } else {
        Convention::LengthOverCount
    };
    let e = parse(text, "lines.csv", c).unwrap_err().to_string();
    assert!(
        e.contains("is smaller than any number armspace holds"),
        "{e}"
    );
    // A small length that is still a number is a line.
    let lines = parse(
        "length_um,arms\n1e-300,5\n",
        "lines.csv",
        Convention::CentreToCentre,
    )
    .unwrap();
    assert_eq!(lines[0].sdas_um, 2.5e-301);
}

/// correlations: a coefficient finite in the entry's unit (7e305 mm, from
/// 5.01 + 1e305 x Si) overflows f64 in um; the error said "coefficient inf
/// must be a positive number", naming a value the file does not have. It
/// now says what happened.
#[test]
fn a_coefficient_beyond_f64_in_um_is_named_as_such() {
    let text =
        std::fs::read_to_string("fuzz/seeds/correlations/found-coefficient-overflows-in-um.json")
            .unwrap();
    let lib = library::parse(&text, "user.json", false).unwrap();
    let c = library::find(&lib, "seed-time").unwrap();
    let composition = armspace::interpret::parse_composition("Si=7").unwrap();
    let e = c.power_law(&composition).unwrap_err().to_string();
    assert_eq!(
        e,
        "correlation 'seed-time' has a coefficient beyond the range of numbers armspace holds (about 1.8e308) once lambda2 is in um (its sdas_unit is mm)"
    );
}
