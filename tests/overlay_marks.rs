//! Pictures scaled to a report's width keep every kind of mark: a
//! 2400 x 1800 field pictured at 800 px wide (`--overlay-max-width 800`).

mod common;
use common::*;
use serde_json::Value;

/// The Okabe-Ito colours of the marks (B. Wong, "Points of view: Color
/// blindness", Nature Methods 8 (2011) 441, which gives their RGB values).
const MARKS: [(&str, [u8; 3]); 7] = [
    ("FFT tile used (sky blue)", [86, 180, 233]),
    ("not used (orange)", [230, 159, 0]),
    ("intercept line (bluish green)", [0, 158, 115]),
    ("arm counted on a line (vermillion)", [213, 94, 0]),
    ("chain of centres (blue)", [0, 114, 178]),
    ("scale bar (reddish purple)", [204, 121, 167]),
    ("left out (yellow)", [240, 228, 66]),
];

/// Whether a pixel has nearly the mark's own colour: within 40 of it in RGB
/// (a mark blended half with a grey background lies 60 to 130 away).
fn near(p: &image::Rgb<u8>, c: [u8; 3]) -> bool {
    let d: f64 = (0..3)
        .map(|i| (p.0[i] as f64 - c[i] as f64).powi(2))
        .sum::<f64>()
        .sqrt();
    d <= 40.0
}

#[test]
fn every_kind_of_mark_stays_visible_at_800_px_wide() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // A clean columnar field with a scale bar in a box: it gives FFT tiles,
    // intercept lines with arm ticks, chains of centres, a bar and its
    // left-out box.
    std::fs::write(
        d.join("fields.json"),
        r#"{"images": [{"file": "big.png", "spec": {"width": 2400, "height": 1800, "morphology": "columnar", "style": "clean", "sdas_px": 24.0, "um_per_px": 0.5, "primary_angle_deg": 20.0, "primary_spacing_px": 110.0, "spacing_jitter": 0.05, "missing_arm_fraction": 0.0, "invert": false, "noise_sd": 0.01, "blur_sigma_px": 0.8, "illumination": 0.1, "scale_bar": {"length_um": 200.0, "thickness_px": 12, "polarity": "dark-on-light", "corner": "bottom-right", "backing_box": true}, "seed": 7}}]}"#,
    )
    .unwrap();
    let made = armspace(&[
        "synth",
        &path_str(&d.join("field")),
        "--fields",
        &path_str(&d.join("fields.json")),
    ]);
    assert_eq!(made.code, 0, "{}", made.stderr);
    // Pictured at 800 px wide, with every method, or with one.
    let picture = |method: &str| {
        let sub = d.join(method);
        let run = armspace(&[
            "measure",
            &path_str(&d.join("field/big.png")),
            "--um-per-px",
            "0.5",
            "--method",
            method,
            "--overlay",
            &path_str(&sub),
            "--overlay-max-width",
            "800",
            "--out",
            &path_str(&d.join(format!("{method}.json"))),
        ]);
        assert_eq!(run.code, 0, "{}", run.stderr);
        let rep: Value = serde_json::from_str(
            &std::fs::read_to_string(d.join(format!("{method}.json"))).unwrap(),
        )
        .unwrap();
        let pic = image::open(rep["images"][0]["overlay"].as_str().unwrap())
            .unwrap()
            .to_rgb8();
        (rep, pic)
    };
    let (rep, pic) = picture("all");
    let img = &rep["images"][0];
    assert_eq!(pic.width(), 800);
    // The micrograph's part of the picture (the panel lies under it).
    let h = 1800 * 800 / 2400;
    let count = |c: [u8; 3]| {
        (0..h)
            .flat_map(|y| (0..800).map(move |x| (x, y)))
            .filter(|&(x, y)| near(pic.get_pixel(x, y), c))
            .count()
    };
    // Which kinds the measurement drew, from the report.
    let m = &img["methods"];
    let tiles = m["fft"]["tiles"].as_array().unwrap();
    let drawn = [
        tiles.iter().any(|t| t["used"] == true),
        true, // chains across rows, tiles left out: checked below if any
        !m["intercept"]["lines"].as_array().unwrap().is_empty(),
        !m["intercept"]["lines"].as_array().unwrap().is_empty(),
        m["centres"]["chains"]
            .as_array()
            .unwrap()
            .iter()
            .any(|c| c["used"] == true),
        img["calibration"]["bar"].is_object() || !img["excluded_px"].as_array().unwrap().is_empty(),
        !img["excluded_px"].as_array().unwrap().is_empty(),
    ];
    assert!(
        drawn.iter().all(|&d| d),
        "the field must give every kind of mark: {drawn:?}"
    );
    for (name, colour) in MARKS {
        let n = count(colour);
        // At least 50 pixels of nearly the mark's own colour. Drawn at the
        // picture's own stroke width (3 px here) and scaled by a third, the
        // bar's left-out box kept 38 such pixels on this field (checked by
        // hand, with a triangle filter); drawn for the width they are shown
        // at, every kind keeps several hundred.
        assert!(n >= 50, "{name}: {n} pixels of its colour at 800 px wide");
    }
    // The width of the intercept lines, drawn alone (with every method the
    // chains of centres run along the same arms and cover them): across
    // each line, at 39 points along it, the run of pixels of its colour. The
    // arm ticks cross a line every arm, so a line's width is its widest run.
    let (rep, pic) = picture("intercept");
    let m = &rep["images"][0]["methods"];
    let scale = 800.0 / 2400.0 / 0.5; // um to picture pixels
    let mut widths = Vec::new();
    for l in m["intercept"]["lines"].as_array().unwrap() {
        let f = |k: &str| l[k].as_f64().unwrap() * scale;
        let (x0, y0, x1, y1) = (f("x0_um"), f("y0_um"), f("x1_um"), f("y1_um"));
        let len = (x1 - x0).hypot(y1 - y0);
        let (nx, ny) = (-(y1 - y0) / len, (x1 - x0) / len);
        let widest = (1..40)
            .map(|k| {
                let t = k as f64 / 40.0;
                let (cx, cy) = (x0 + t * (x1 - x0), y0 + t * (y1 - y0));
                (-4..=4)
                    .filter(|&s| {
                        let (x, y) = ((cx + s as f64 * nx).round(), (cy + s as f64 * ny).round());
                        x >= 0.0
                            && y >= 0.0
                            && (x as u32) < 800
                            && (y as u32) < h
                            && near(pic.get_pixel(x as u32, y as u32), MARKS[2].1)
                    })
                    .count()
            })
            .max()
            .unwrap();
        widths.push(widest);
    }
    widths.sort_unstable();
    // Drawn 2.5 picture pixels wide (overlay::stroke_width): every line
    // shows at least one pixel of its own colour across it, and the typical
    // line two.
    assert!(widths[0] >= 1, "a line vanished: {widths:?}");
    let median = widths[widths.len() / 2];
    assert!(
        median >= 2,
        "lines {median} px wide at the median: {widths:?}"
    );
}
