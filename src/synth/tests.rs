use super::*;

fn base(morphology: Morphology, style: Style) -> FieldSpec {
    FieldSpec {
        gradient: None,
        width: 300,
        height: 240,
        morphology,
        style,
        sdas_px: 12.0,
        um_per_px: 0.5,
        primary_angle_deg: 30.0,
        primary_spacing_px: 50.0,
        spacing_jitter: 0.1,
        missing_arm_fraction: 0.05,
        invert: false,
        noise_sd: 0.02,
        blur_sigma_px: 1.0,
        illumination: 0.1,
        scale_bar: Some(ScaleBarSpec {
            length_um: 20.0,
            thickness_px: 4,
            polarity: Polarity::LightOnDark,
            corner: Corner::BottomRight,
            backing_box: true,
            ticks: false,
            label: None,
            ink: None,
            inset_px: None,
        }),
        seed: 7,
    }
}

#[test]
fn synth_render_is_deterministic_for_all_kinds() {
    for m in [Morphology::Columnar, Morphology::Equiaxed] {
        for s in [Style::Clean, Style::Etched] {
            let spec = base(m, s);
            let (a, ta) = render(&spec).expect("render a");
            let (b, tb) = render(&spec).expect("render b");
            assert_eq!(a.as_raw(), b.as_raw(), "{m:?} {s:?}");
            assert_eq!(ta, tb);
        }
    }
}

#[test]
fn synth_different_seeds_differ() {
    let spec = base(Morphology::Columnar, Style::Etched);
    let mut other = spec.clone();
    other.seed = 8;
    let (a, _) = render(&spec).expect("render");
    let (b, _) = render(&other).expect("render");
    assert_ne!(a.as_raw(), b.as_raw());
}

#[test]
fn synth_truth_spacing_close_to_request() {
    for m in [Morphology::Columnar, Morphology::Equiaxed] {
        let mut spec = base(m, Style::Clean);
        spec.width = 600;
        spec.height = 600;
        let (_, t) = render(&spec).expect("render");
        assert!(t.sdas_count > 20, "{m:?}: {}", t.sdas_count);
        assert!(
            (t.sdas_px / 12.0 - 1.0).abs() < 0.06,
            "{m:?}: {}",
            t.sdas_px
        );
        assert!((t.sdas_um - t.sdas_px * 0.5).abs() < 1e-8);
    }
}

#[test]
fn synth_invalid_specs_are_rejected() {
    let good = base(Morphology::Columnar, Style::Clean);
    let mut cases = Vec::new();
    let mut s = good.clone();
    s.sdas_px = f64::NAN;
    cases.push(s);
    let mut s = good.clone();
    s.width = 4;
    cases.push(s);
    let mut s = good.clone();
    s.primary_spacing_px = 12.0;
    cases.push(s);
    let mut s = good.clone();
    s.um_per_px = 0.0;
    cases.push(s);
    let mut s = good.clone();
    if let Some(b) = s.scale_bar.as_mut() {
        b.length_um = 1e6;
    }
    cases.push(s);
    let mut s = good.clone();
    s.noise_sd = -1.0;
    cases.push(s);
    let mut s = good.clone();
    s.width = 9000;
    cases.push(s);
    let mut s = good.clone();
    (s.width, s.height, s.sdas_px, s.primary_spacing_px) = (8000, 4000, 3.0, 6.0);
    cases.push(s);
    for c in cases {
        assert!(
            matches!(render(&c), Err(SynthError::InvalidSpec(_))),
            "{c:?}"
        );
    }
}

#[test]
fn synth_random_specs_render() {
    use rand::SeedableRng;
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
    for i in 0..8 {
        let mut spec = random_spec(&mut rng, i);
        // keep the unit test quick
        spec.width = spec.width.min(512);
        spec.height = spec.height.min(512);
        spec.sdas_px = spec.sdas_px.min(40.0);
        spec.primary_spacing_px = spec.sdas_px * 4.0;
        spec.scale_bar = None;
        let (img, t) = render(&spec).expect("random spec renders");
        assert_eq!(img.width(), spec.width);
        assert!(t.sdas_px > 0.0 && t.dendrite_area_fraction > 0.1);
    }
}

#[test]
fn synth_serde_names() {
    let j = serde_json::to_string(&(Morphology::Equiaxed, Style::Etched, Polarity::DarkOnLight))
        .expect("json");
    assert_eq!(j, r#"["equiaxed","etched","dark-on-light"]"#);
}

#[test]
fn a_gradient_draws_bands_of_stepped_spacing_with_its_truth() {
    // The bands' drawn spacing follows the factors (within the arms'
    // jitter: a tenth, over some tens of spacings), the whole field's is
    // the count-weighted mean of the bands', and the slope is the
    // least-squares one of the bands against their centres (its
    // definition; common practice, no single source).
    let spec = FieldSpec {
        width: 600,
        gradient: Some(Gradient::parse("1:2:3").expect("gradient")),
        ..base(Morphology::Columnar, Style::Clean)
    };
    let (img, t) = render(&spec).expect("render");
    assert_eq!((img.width(), img.height()), (600, 240));
    let bands = t.bands.clone().expect("bands in the truth");
    assert_eq!(
        bands.iter().map(|b| (b.x0_px, b.x1_px)).collect::<Vec<_>>(),
        [(0, 200), (200, 400), (400, 600)]
    );
    for b in &bands {
        let want = 12.0 * b.factor;
        assert!((b.sdas_px / want - 1.0).abs() < 0.1, "{b:?}");
        assert!((b.sdas_um - b.sdas_px * 0.5).abs() < 1e-6);
    }
    let n: usize = bands.iter().map(|b| b.sdas_count).sum();
    let mean = bands
        .iter()
        .map(|b| b.sdas_px * b.sdas_count as f64)
        .sum::<f64>()
        / n as f64;
    assert_eq!(t.sdas_count, n);
    assert!((t.sdas_px - mean).abs() < 1e-6);
    // Centres at 50, 150 and 250 um = 0.05, 0.15, 0.25 mm: slope (s3 - s1) / 0.2.
    let slope = (bands[2].sdas_um - bands[0].sdas_um) / 0.2;
    assert!((t.gradient_um_per_mm.expect("slope") - slope).abs() < 1e-3);
    assert!(t.scale_bar.is_some());
    // The same spec renders the same pixels; without a gradient nothing of
    // it is written.
    assert_eq!(render(&spec).expect("again").0.as_raw(), img.as_raw());
    let plain = serde_json::to_string(
        &render(&base(Morphology::Columnar, Style::Clean))
            .expect("plain")
            .1,
    )
    .expect("json");
    assert!(!plain.contains("gradient") && !plain.contains("bands"));
    // Nothing to grade in a featureless field; bad text is refused.
    let featureless = FieldSpec {
        gradient: spec.gradient,
        ..base(Morphology::Columnar, Style::Featureless)
    };
    assert!(render(&featureless).is_err());
    for bad in ["1", "1:x", "0:1", "1:2:0", "1:2:3:4"] {
        assert!(Gradient::parse(bad).unwrap_err().contains(bad), "{bad}");
    }
}

#[test]
fn bar_options_leave_plain_bars_and_the_truth_as_before() {
    // A plain bar writes none of the new options, so truth.json of the
    // existing seeds is unchanged.
    let spec = base(Morphology::Columnar, Style::Etched);
    let json = serde_json::to_string(&spec).expect("spec as JSON");
    for key in ["ticks", "label", "ink", "inset_px"] {
        assert!(!json.contains(key), "{key} written for a plain bar: {json}");
    }
    // Ticks, a label, an ink and an inset: the bar's length edge to edge is
    // still its drawn pixel count, its ink the one asked for, and the ticks
    // do not reach beyond its ends.
    let mut spec = base(Morphology::Equiaxed, Style::Etched);
    spec.width = 400;
    spec.height = 320;
    let bar = spec.scale_bar.as_mut().expect("a bar");
    bar.backing_box = false;
    bar.ticks = true;
    bar.label = Some(LabelSide::Below);
    bar.ink = Some(0.9);
    bar.inset_px = Some(30);
    bar.thickness_px = 5;
    let (img, truth) = render(&spec).expect("render");
    let b = truth.scale_bar.expect("bar truth");
    assert_eq!(b.length_px, (b.x1 - b.x0 + 1) as f64);
    assert_eq!(b.bar_level, (0.9f64 * 65535.0).round() as u16);
    let px = |x: u32, y: u32| img.get_pixel(x, y).0[0];
    for y in b.y0..=b.y1 {
        for x in b.x0..=b.x1 {
            assert_eq!(px(x, y), b.bar_level);
        }
    }
    // The tick above the bar lies within its ends.
    assert_eq!(px(b.x0, b.y0 - 2), b.bar_level);
    assert_eq!(px(b.x1, b.y0 - 2), b.bar_level);
    // Inset: 30 px from the side, and label room below.
    assert_eq!(b.x1, 400 - 1 - 30);
    assert!(b.y1 < 320 - 1 - 30);
}
