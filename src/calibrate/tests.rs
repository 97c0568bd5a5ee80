use super::*;
use crate::calibrate::scale_bar::Polarity;

#[test]
fn lengths_with_every_accepted_unit() {
    for (text, um) in [
        ("100um", 100.0),
        ("100 um", 100.0),
        ("100\u{00b5}m", 100.0), // micro sign
        ("100\u{03bc}m", 100.0), // Greek small mu
        (" 0.5mm ", 500.0),
        ("250nm", 0.25),
        ("1e2um", 100.0),
        ("50 \u{00b5}m", 50.0),
    ] {
        assert!((parse_length(text).unwrap().0 - um).abs() < 1e-9, "{text}");
    }
}

#[test]
fn lengths_rejected_with_a_reason() {
    for (text, words) in [
        ("100", "no unit"),
        ("100 in", "unknown unit 'in'"),
        ("100cm", "unknown unit 'cm'"),
        ("100 pixels", "unknown unit"),
        ("um", "no number"),
        ("-5um", "not a positive length"),
        ("0um", "not a positive length"),
        ("abc", "no number"),
        ("", "no number"),
    ] {
        let e = parse_length(text).unwrap_err().to_string();
        assert!(e.contains(words), "{text:?}: {e}");
    }
}

fn bar(length_px: f64) -> ScaleBar {
    ScaleBar {
        length_px,
        length_sd_px: 0.0,
        rows: 4,
        x0: 10,
        y0: 10,
        x1: 10 + length_px as u32 - 1,
        y1: 15,
        thickness_px: 6,
        polarity: Polarity::DarkOnLight,
        confidence: 1.0,
        backing_box: None,
        mask: [0, 0, 1, 1],
    }
}

fn um(v: f64) -> UmPerPx {
    UmPerPx::new(v).unwrap()
}

#[test]
fn bar_uncertainty_from_end_localisation() {
    // Two ends, each +-0.5 px rectangular: u = sqrt(2) * 0.5 / sqrt(3) = 0.408 px
    // (GUM 4.3.7); over 200 px that is 0.204 %.
    let o = from_bar(
        &bar(200.0),
        &BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.0,
        },
    )
    .unwrap();
    assert!((o.um_per_px.get() - 0.5).abs() < 1e-12);
    assert!((o.rel_uncertainty.unwrap() - 0.408_248_3 / 200.0).abs() < 1e-9);
    // A stated 1 % uncertainty of the bar adds in quadrature.
    let o = from_bar(
        &bar(200.0),
        &BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.01,
        },
    )
    .unwrap();
    let expected = ((0.408_248_3f64 / 200.0).powi(2) + 0.01f64.powi(2)).sqrt();
    assert!((o.rel_uncertainty.unwrap() - expected).abs() < 1e-9);
}

#[test]
fn precedence_manual_profile_bar_metadata() {
    let profile = profile::Profile {
        name: "x20".into(),
        um_per_px: um(0.5),
        rel_uncertainty: Some(0.003),
    };
    let found: crate::Result<ScaleBar> = Ok(bar(200.0)); // 100 um over 200 px: 0.5 um/px
    let full = CalibrationRequest {
        manual_rel_uncertainty: None,
        manual: Some(um(0.5)),
        profile: Some(profile.clone()),
        scale_bar: Some(BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.0,
        }),
        read_label: false,
        trust: None,
    };
    let (c, w) = resolve(&full, Some(&found), Some(um(0.5))).unwrap();
    assert_eq!(c.source, CalibrationSource::Manual);
    assert_eq!(c.offers.len(), 4);
    assert!(w.is_empty(), "{w:?}");
    let no_manual = CalibrationRequest {
        manual_rel_uncertainty: None,
        manual: None,
        ..full.clone()
    };
    let (c, _) = resolve(&no_manual, Some(&found), Some(um(0.5))).unwrap();
    assert_eq!(
        (c.source, c.rel_uncertainty),
        (CalibrationSource::Profile, Some(0.003))
    );
    let bar_only = CalibrationRequest {
        manual_rel_uncertainty: None,
        manual: None,
        profile: None,
        ..full.clone()
    };
    let (c, _) = resolve(&bar_only, Some(&found), Some(um(0.5))).unwrap();
    assert_eq!(c.source, CalibrationSource::ScaleBar);
    assert!(c.bar.is_some());
    let (c, _) = resolve(&CalibrationRequest::default(), None, Some(um(0.5))).unwrap();
    assert_eq!(c.source, CalibrationSource::FileMetadata);
    assert!(c.bar.is_none());
}

#[test]
fn disagreement_over_two_percent_is_a_warning() {
    let found: crate::Result<ScaleBar> = Ok(bar(200.0)); // 0.5 um/px
    let req = CalibrationRequest {
        manual_rel_uncertainty: None,
        manual: Some(um(0.515)), // +3 % against the bar
        profile: None,
        scale_bar: Some(BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.0,
        }),
        read_label: false,
        trust: None,
    };
    let (c, w) = resolve(&req, Some(&found), None).unwrap();
    assert_eq!(c.source, CalibrationSource::Manual);
    assert_eq!(w.len(), 1, "{w:?}");
    // Two sources the user gave, 3 % apart with no stated uncertainty: a
    // conflict, and the image is not decided.
    assert!(
        w[0].code == "calibration.conflict" && w[0].message.contains("scale-bar"),
        "{}",
        w[0]
    );
    assert!(c.conflict.is_some());
    // Named as trusted, the bar is used and the other is only warned about.
    let trusting = CalibrationRequest {
        manual_rel_uncertainty: None,
        trust: Some(CalibrationSource::ScaleBar),
        ..req.clone()
    };
    let (c, w) = resolve(&trusting, Some(&found), None).unwrap();
    assert_eq!(c.source, CalibrationSource::ScaleBar);
    assert!(c.conflict.is_none());
    assert_eq!(w[0].code, "calibration.sources-disagree");
    // A bar stated to 2 % (standard) allows 1.96 x 2 % = 3.9 %: no conflict.
    let uncertain = CalibrationRequest {
        manual_rel_uncertainty: None,
        scale_bar: Some(BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.02,
        }),
        ..req.clone()
    };
    let (c, _) = resolve(&uncertain, Some(&found), None).unwrap();
    assert!(c.conflict.is_none());
    // Trusting a source that is not offered is an error naming it.
    let absent = CalibrationRequest {
        manual_rel_uncertainty: None,
        trust: Some(CalibrationSource::Profile),
        ..req.clone()
    };
    let e = resolve(&absent, Some(&found), None)
        .unwrap_err()
        .to_string();
    assert!(e.contains("profile calibration is named as trusted"), "{e}");
    // 1.5 % apart: no warning.
    let req = CalibrationRequest {
        manual_rel_uncertainty: None,
        manual: Some(um(0.5075)),
        ..req
    };
    let (_, w) = resolve(&req, Some(&found), None).unwrap();
    assert!(w.is_empty(), "{w:?}");
}

#[test]
fn a_missing_bar_fails_with_advice_or_falls_back() {
    let missing: crate::Result<ScaleBar> = Err(crate::Error::Calibration {
        reason: "no solid horizontal bar stands out".into(),
    });
    let req = CalibrationRequest {
        manual_rel_uncertainty: None,
        scale_bar: Some(BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.0,
        }),
        ..Default::default()
    };
    let e = resolve(&req, Some(&missing), None).unwrap_err().to_string();
    assert!(e.contains("--um-per-px") && e.contains("--profile"), "{e}");
    let (c, w) = resolve(
        &CalibrationRequest {
            manual_rel_uncertainty: None,
            manual: Some(um(0.4)),
            ..req
        },
        Some(&missing),
        None,
    )
    .unwrap();
    assert_eq!(c.source, CalibrationSource::Manual);
    assert_eq!(w[0].code, "calibration.bar-not-found");
    let e = resolve(&CalibrationRequest::default(), None, None)
        .unwrap_err()
        .to_string();
    assert!(e.contains("no calibration"), "{e}");
}

#[test]
fn resolution_tags() {
    // 10 000 pixels per centimetre = 1 um per pixel (TIFF 6.0, ResolutionUnit 3).
    let (v, notes) = from_resolution(10_000.0, 10_000.0, 3).unwrap();
    assert!((v.get() - 1.0).abs() < 1e-12 && notes.is_empty());
    // 50 800 pixels per inch = 0.5 um per pixel (25 400 um per inch).
    let (v, _) = from_resolution(50_800.0, 50_800.0, 2).unwrap();
    assert!((v.get() - 0.5).abs() < 1e-12);
    // 72 dpi, the usual default, is not a calibration.
    assert!(from_resolution(72.0, 72.0, 2)
        .unwrap_err()
        .to_string()
        .contains("screen or print"));
    assert!(from_resolution(100.0, 100.0, 1).is_err());
    let (_, notes) = from_resolution(10_000.0, 9_000.0, 3).unwrap();
    assert!(notes[0].contains("non-square"));
}

#[test]
fn parses_um_per_px() {
    assert_eq!(parse_um_per_px("0.5").unwrap().get(), 0.5);
    assert_eq!(parse_um_per_px(" 2e-1 ").unwrap().get(), 0.2);
    for bad in ["", "abc", "0", "-0.3", "nan", "inf", "1,5"] {
        assert!(parse_um_per_px(bad).is_err(), "{bad:?} accepted");
    }
}

fn read_label(text: &str, length_um: f64) -> label::Label {
    label::Label {
        text: text.into(),
        length_um,
        confidence: 0.9,
        rect: [10, 20, 40, 30],
        height_px: 10.0,
    }
}

#[test]
fn auto_calibrates_from_the_label_and_fails_without_one() {
    // 100 um read over a bar of 200 px: 0.5 um/px (the definition of the
    // calibration, length over pixels).
    let found: crate::Result<ScaleBar> = Ok(bar(200.0));
    let auto = CalibrationRequest {
        read_label: true,
        ..CalibrationRequest::default()
    };
    let read = Ok(read_label("100 µm", 100.0));
    let (c, w) = resolve_with_label(&auto, Some(&found), Some(&read), None).unwrap();
    assert!((c.um_per_px.get() - 0.5).abs() < 1e-12);
    assert_eq!(c.source, CalibrationSource::ScaleBar);
    assert_eq!(c.label.as_ref().map(|l| l.text.as_str()), Some("100 µm"));
    assert!(w.is_empty(), "{w:?}");
    // A label not read: no calibration, and the message says why and what
    // to pass instead.
    let unread = Err("character 2 of '1?0 µm' is not clearly any of 0-9".to_string());
    let e = resolve_with_label(&auto, Some(&found), Some(&unread), None)
        .unwrap_err()
        .to_string();
    assert!(
        e.contains("label was not read") && e.contains("--um-per-px"),
        "{e}"
    );
    assert!(e.contains("1?0"), "{e}");
}

#[test]
fn a_given_length_the_label_contradicts_is_warned_about() {
    let found: crate::Result<ScaleBar> = Ok(bar(200.0));
    let given = CalibrationRequest {
        scale_bar: Some(BarLength {
            length: Micrometres(50.0),
            rel_uncertainty: 0.0,
        }),
        ..CalibrationRequest::default()
    };
    let read = Ok(read_label("100 µm", 100.0));
    let (c, w) = resolve_with_label(&given, Some(&found), Some(&read), None).unwrap();
    // The length given is used (0.25 um/px), with the warning.
    assert!((c.um_per_px.get() - 0.25).abs() < 1e-12);
    assert_eq!(w.len(), 1, "{w:?}");
    assert_eq!(w[0].code, "calibration.label-disagrees");
    assert!(w[0].message.contains("100 µm"), "{}", w[0].message);
    // The same length written otherwise (0.05 mm = 50 um) agrees.
    let same = Ok(read_label("0.05 mm", 50.0));
    let (_, w) = resolve_with_label(&given, Some(&found), Some(&same), None).unwrap();
    assert!(w.is_empty(), "{w:?}");
}
