//! Scale-bar calibration against synthetic micrographs whose bar is known,
//! with the nuisances a real micrograph brings (noise, blur, JPEG, backing
//! boxes), and the end-to-end calibration choices of `measure`.

mod common;
use armspace::blocks::blur::gaussian_blur;
use armspace::calibrate::scale_bar::{detect, Polarity as DetPolarity};
use armspace::load::GrayImage;
use armspace::synth::{render, Corner, FieldSpec, Morphology, Polarity, ScaleBarSpec, Style};
use common::*;

fn spec(i: u64, bar: Option<ScaleBarSpec>) -> FieldSpec {
    FieldSpec {
        gradient: None,
        width: 560 + 37 * (i as u32 % 5),
        height: 420 + 23 * (i as u32 % 4),
        morphology: if i.is_multiple_of(2) {
            Morphology::Columnar
        } else {
            Morphology::Equiaxed
        },
        style: if i.is_multiple_of(3) {
            Style::Clean
        } else {
            Style::Etched
        },
        sdas_px: 9.0 + 3.0 * (i % 5) as f64,
        um_per_px: 0.5 + 0.37 * (i % 3) as f64,
        primary_angle_deg: 17.0 * i as f64,
        primary_spacing_px: 4.5 * (9.0 + 3.0 * (i % 5) as f64),
        spacing_jitter: 0.1,
        missing_arm_fraction: 0.03,
        invert: i % 4 == 1,
        noise_sd: 0.03,
        blur_sigma_px: 0.8,
        illumination: 0.08,
        scale_bar: bar,
        seed: 1000 + i,
    }
}

fn gray(img: &image::ImageBuffer<image::Luma<u16>, Vec<u16>>) -> GrayImage {
    GrayImage::from_vec(
        img.width() as usize,
        img.height() as usize,
        img.as_raw().iter().map(|v| *v as f32 / 65535.0).collect(),
    )
    .unwrap()
}

fn jpeg_round_trip(g: &GrayImage, quality: u8) -> GrayImage {
    let img8 = image::GrayImage::from_fn(g.width as u32, g.height as u32, |x, y| {
        image::Luma([(g.get(x as usize, y as usize) * 255.0).round() as u8])
    });
    let mut buf = Vec::new();
    image::codecs::jpeg::JpegEncoder::new_with_quality(&mut buf, quality)
        .encode_image(&img8)
        .unwrap();
    let back = image::load_from_memory(&buf).unwrap().to_luma8();
    GrayImage::from_vec(
        g.width,
        g.height,
        back.as_raw().iter().map(|v| *v as f32 / 255.0).collect(),
    )
    .unwrap()
}

#[test]
fn bar_lengths_within_half_a_pixel() {
    // 24 bars: both corners, both polarities, with and without a backing box,
    // thickness 3 to 10 px, lengths from about 8 % to 25 % of the width; each
    // measured as drawn, after a Gaussian blur of sigma 1 px over the whole
    // image (bar included), and after JPEG at quality 85.
    let mut worst: f64 = 0.0;
    let mut n = 0;
    for i in 0..24u64 {
        let bar = ScaleBarSpec {
            length_um: [20.0, 50.0, 100.0][(i % 3) as usize] * (1.0 + (i % 2) as f64),
            thickness_px: 3 + (i % 8) as u32,
            polarity: if i % 2 == 0 {
                Polarity::DarkOnLight
            } else {
                Polarity::LightOnDark
            },
            corner: if (i / 2) % 2 == 0 {
                Corner::BottomRight
            } else {
                Corner::BottomLeft
            },
            backing_box: (i / 4) % 2 == 0,
            ticks: false,
            label: None,
            ink: None,
            inset_px: None,
        };
        let s = spec(i, Some(bar));
        let Ok((img, truth)) = render(&s) else {
            continue;
        };
        let tb = truth.scale_bar.expect("a bar was drawn");
        let g = gray(&img);
        let blurred = GrayImage::from_vec(
            g.width,
            g.height,
            gaussian_blur(&g.data, g.width, g.height, 1.0),
        )
        .unwrap();
        for (variant, im) in [
            ("as drawn", g.clone()),
            ("blurred", blurred),
            ("jpeg", jpeg_round_trip(&g, 85)),
        ] {
            let found = detect(&im).unwrap_or_else(|e| panic!("image {i} {variant}: {e}"));
            let err = found.length_px - tb.length_px;
            assert!(
                err.abs() <= 0.5,
                "image {i} {variant}: measured {:.3} px, drawn {} px (bar at {},{}): {found:?}",
                found.length_px,
                tb.length_px,
                tb.x0,
                tb.y0
            );
            // The right bar: its box overlaps the drawn one.
            assert!(
                found.x0.abs_diff(tb.x0) <= 2 && found.y0.abs_diff(tb.y0) <= 2,
                "image {i} {variant}: wrong place"
            );
            let expected_polarity = match tb.polarity {
                Polarity::DarkOnLight => DetPolarity::DarkOnLight,
                Polarity::LightOnDark => DetPolarity::LightOnDark,
            };
            assert_eq!(found.polarity, expected_polarity, "image {i} {variant}");
            worst = worst.max(err.abs());
            n += 1;
        }
    }
    assert!(n >= 60, "only {n} bars measured");
    eprintln!("{n} bar measurements, worst length error {worst:.3} px");
}

#[test]
fn no_bar_gives_no_bar() {
    for i in 0..12u64 {
        let (img, _) = render(&spec(i, None)).unwrap();
        let g = gray(&img);
        if let Ok(b) = detect(&g) {
            panic!("image {i}: a bar was reported where none is: {b:?}");
        }
    }
}

/// Draws a scratch: a line of the given thickness from (x0, y0) to (x1, y1),
/// darkened unevenly (a scratch is not a uniform overlay).
fn scratch(g: &mut GrayImage, (x0, y0): (f64, f64), (x1, y1): (f64, f64), thick: f64) {
    let len = (x1 - x0).hypot(y1 - y0);
    let steps = (len * 4.0) as usize;
    for s in 0..=steps {
        let t = s as f64 / steps as f64;
        let (cx, cy) = (x0 + t * (x1 - x0), y0 + t * (y1 - y0));
        for dy in -(thick as i64)..=(thick as i64) {
            let y = (cy + dy as f64 * 0.5).round() as i64;
            let x = cx.round() as i64;
            if x >= 0 && y >= 0 && (x as usize) < g.width && (y as usize) < g.height {
                let v = 0.05 + 0.1 * ((s / 7) % 3) as f32;
                g.data[y as usize * g.width + x as usize] = v;
            }
        }
    }
}

#[test]
fn a_scratch_longer_than_the_bar_is_not_taken_for_it() {
    for i in 0..8u64 {
        let bar = ScaleBarSpec {
            length_um: 50.0,
            thickness_px: 5,
            polarity: Polarity::DarkOnLight,
            corner: Corner::BottomRight,
            backing_box: i % 2 == 0,
            ticks: false,
            label: None,
            ink: None,
            inset_px: None,
        };
        let (img, truth) = render(&spec(i, Some(bar))).unwrap();
        let tb = truth.scale_bar.unwrap();
        let mut g = gray(&img);
        // A scratch 2.5 times the bar's length, at a shallow angle, 2 px wide,
        // in the upper half of the field.
        let (w, h) = (g.width as f64, g.height as f64);
        let l = 2.5 * tb.length_px;
        let angle = (1.5 + i as f64).to_radians();
        scratch(
            &mut g,
            (0.1 * w, 0.3 * h),
            (0.1 * w + l * angle.cos(), 0.3 * h + l * angle.sin()),
            2.0,
        );
        // And a thin perfectly horizontal one, 1 px, longer still.
        scratch(
            &mut g,
            (0.05 * w, 0.6 * h),
            (0.05 * w + 3.0 * tb.length_px.min(0.28 * w), 0.6 * h),
            0.0,
        );
        // A clear failure is acceptable; a wrong bar is not.
        if let Ok(b) = detect(&g) {
            assert!(
                b.x0.abs_diff(tb.x0) <= 2
                    && b.y0.abs_diff(tb.y0) <= 2
                    && (b.length_px - tb.length_px).abs() <= 0.5,
                "image {i}: took {b:?} for the bar at {},{}",
                tb.x0,
                tb.y0
            );
        }
    }
}

#[test]
fn measure_calibrates_from_the_bar_and_reports_disagreement() {
    // The demo images carry a 200 um bar drawn at 1.25 um/px (fixtures/README.md).
    let img = path_str(&repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png"));
    let run = armspace(&["measure", &img, "--scale-bar", "200um"]);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let c = &rep["images"][0]["calibration"];
    assert_eq!(c["source"], "scale-bar");
    assert!(
        (c["um_per_px"].as_f64().unwrap() - 1.25).abs() < 1.25 * 0.005,
        "{c}"
    );
    assert!(c["rel_uncertainty"].as_f64().unwrap() > 0.0);
    assert!(c["bar"]["length_px"].as_f64().is_some());
    assert!(!rep["images"][0]["excluded_px"]
        .as_array()
        .unwrap()
        .is_empty());
    // An explicit value is reported as the calibration, but a 4 % disagreement
    // with the bar (beyond the 2 % a sound bar reading allows) is a conflict
    // that leaves the image undecided (see calibration_conflict tests).
    let run = armspace(&[
        "measure",
        &img,
        "--scale-bar",
        "200um",
        "--um-per-px",
        "1.30",
    ]);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let im = &rep["images"][0];
    assert_eq!(im["calibration"]["source"], "manual");
    assert_eq!(im["calibration"]["um_per_px"], 1.30);
    assert!(im["calibration"]["sources"]["scale-bar"].as_f64().is_some());
    let warnings: Vec<&str> = im["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .filter_map(|w| w.as_str())
        .collect();
    assert!(
        warnings
            .iter()
            .any(|w| w.contains("conflict") && w.contains("-3.8 %")),
        "{warnings:?}"
    );
}

#[test]
fn profiles_and_missing_calibration() {
    let dir = tempfile::tempdir().unwrap();
    let profiles = dir.path().join("profiles.json");
    std::fs::write(
        &profiles,
        r#"{"profiles": {"x10": {"um_per_px": 1.25, "rel_uncertainty": 0.002}, "x20": 0.625}}"#,
    )
    .unwrap();
    let img = path_str(&repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png"));
    let run = armspace(&[
        "measure",
        &img,
        "--profiles",
        &path_str(&profiles),
        "--profile",
        "x10",
    ]);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    assert_eq!(rep["images"][0]["calibration"]["source"], "profile");
    assert_eq!(rep["images"][0]["calibration"]["rel_uncertainty"], 0.002);
    let run = armspace(&[
        "measure",
        &img,
        "--profiles",
        &path_str(&profiles),
        "--profile",
        "x40",
    ]);
    assert_eq!(run.code, 2);
    assert!(
        run.stderr.contains("x40") && run.stderr.contains("x10, x20"),
        "{}",
        run.stderr
    );
    // No calibration at all: the image fails with advice, the run says so.
    let run = armspace(&["measure", &img]);
    assert_eq!(run.code, 3);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let e = rep["images"][0]["error"].as_str().unwrap();
    assert!(
        e.contains("no calibration") && e.contains("--um-per-px"),
        "{e}"
    );
    // A bar asked for where there is none: the message says what to do instead.
    let plain = dir.path().join("plain.png");
    write_comb_png(&plain, 300, 200, 12.0);
    let run = armspace(&["measure", &path_str(&plain), "--scale-bar", "50um"]);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let e = rep["images"][0]["error"].as_str().unwrap();
    assert!(
        e.contains("no scale bar") && e.contains("--um-per-px"),
        "{e}"
    );
    // Units: a bare number or an unknown unit is a usage error.
    for bad in ["100", "100 inch", "-3um"] {
        let run = armspace(&["measure", &img, "--scale-bar", bad]);
        assert_eq!(run.code, 2, "{bad}");
        assert!(run.stderr.contains("--scale-bar"), "{}", run.stderr);
    }
}

#[test]
fn tiff_resolution_tags_from_an_outside_writer() {
    // fixtures/calibration/res_2um.tif: written by tifffile with XResolution =
    // YResolution = 5000 pixels per centimetre, ResolutionUnit = 3 (cm), i.e.
    // 10 000 um / 5000 = 2 um per pixel (TIFF 6.0, section 8);
    // res_72dpi.tif carries the usual 72 pixels per inch default.
    let run = armspace(&[
        "measure",
        &path_str(&repo_file("fixtures/calibration/res_2um.tif")),
    ]);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let c = &rep["images"][0]["calibration"];
    assert_eq!(c["source"], "file-metadata", "{}", rep["images"][0]);
    assert!((c["um_per_px"].as_f64().unwrap() - 2.0).abs() < 1e-9);
    let run = armspace(&[
        "measure",
        &path_str(&repo_file("fixtures/calibration/res_72dpi.tif")),
    ]);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let im = &rep["images"][0];
    // The error says why the tags did not calibrate.
    let error = im["error"].as_str().unwrap();
    assert!(error.contains("no calibration"), "{error}");
    assert!(error.contains("screen or print"), "{error}");
    // With a calibration given, the unusable tags bear on no number and
    // are not raised.
    let run = armspace(&[
        "measure",
        &path_str(&repo_file("fixtures/calibration/res_72dpi.tif")),
        "--um-per-px",
        "1",
    ]);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let im = &rep["images"][0];
    assert!(im["error"].is_null(), "{im}");
    assert!(!run.stderr.contains("resolution tags"), "{}", run.stderr);
    assert!(!im["warning_codes"]
        .as_array()
        .unwrap()
        .iter()
        .any(|c| c.as_str().unwrap().starts_with("calibration.metadata")));
}
