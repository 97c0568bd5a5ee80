//! Annotation text is found, left out of the measurement and reported; it
//! never yields a value, and a caption added under a micrograph leaves the
//! micrograph's value where it was.
//!
//! The expectations are those of the trade (common practice, no single
//! source): a line of letters is no structure, so it gives no arm spacing,
//! and a caption printed beside a field does not change what the field
//! shows. The micrograph is the demo's 12 mm step, whose spacing was also
//! counted by hand arm by arm (fixtures/end_to_end/hand_counts.json).
#![cfg(feature = "synth")]

mod common;

use armspace::annotations::{find_frame, AnnotationKind};
use armspace::load::{load, LoadOptions};
use armspace::pipeline::{measure_file, ImageResult, MeasureOptions};
use armspace::synth::{draw_text, write_set_styled, Style};
use armspace::units::UmPerPx;
use common::repo_file;
use std::path::Path;

const DEMO_UM_PER_PX: f64 = 1.25;

fn write_png(path: &Path, w: usize, h: usize, grey: &[f32]) {
    let img = image::GrayImage::from_fn(w as u32, h as u32, |x, y| {
        let v = grey[y as usize * w + x as usize].clamp(0.0, 1.0);
        image::Luma([(v * 255.0).round() as u8])
    });
    img.save(path).unwrap();
}

fn measure(path: &Path) -> ImageResult {
    measure_file(
        path,
        &MeasureOptions::manual(UmPerPx::new(DEMO_UM_PER_PX).unwrap()),
    )
}

/// A plain mid-grey field with a little deterministic texture.
fn plain(w: usize, h: usize) -> Vec<f32> {
    (0..w * h)
        .map(|i| 0.45 + 0.04 * (((i * 7919) % 101) as f32 / 101.0 - 0.5))
        .collect()
}

#[test]
fn lines_of_text_alone_give_no_value_and_are_left_out() {
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (900, 520);
    let mut g = plain(w, h);
    let lines = [
        "SAMPLE 12 PLATE SECT",
        "NORTH X100 HF 23:14",
        "ETCH 200 UM EDGE",
        "X50 NORTH SAMPLE",
    ];
    for (k, line) in lines.iter().enumerate() {
        draw_text(
            &mut g,
            w,
            h,
            line,
            40.0,
            60.0 + 90.0 * k as f64,
            36.0,
            0.45,
            0.05,
        );
    }
    let path = dir.path().join("text.png");
    write_png(&path, w, h, &g);
    let r = measure(&path);
    assert!(r.error.is_none(), "{:?}", r.error);
    assert!(r.sdas.value.is_none(), "text gave {:?}", r.sdas.value);
    assert!(!r.annotations.is_empty());
    // The letters' ink is inside the regions left out (a word gap may
    // split a line into two regions). Two digits after the colon of
    // "23:14" stand more than a letter height from the rest and make no
    // line of their own: they may stay (at most 5 % of the ink).
    let inside = |x: usize, y: usize| {
        r.excluded.iter().any(|e| {
            e[0] as usize <= x && x <= e[2] as usize && e[1] as usize <= y && y <= e[3] as usize
        })
    };
    let ink: Vec<(usize, usize)> = (0..w * h)
        .filter(|&i| g[i] < 0.25)
        .map(|i| (i % w, i / w))
        .collect();
    let covered = ink.iter().filter(|&&(x, y)| inside(x, y)).count();
    assert!(ink.len() > 5000);
    assert!(
        covered as f64 >= 0.95 * ink.len() as f64,
        "{covered} of {} ink pixels left out; {:?}",
        ink.len(),
        r.annotations
    );
}

#[test]
fn turned_and_light_text_is_found() {
    let dir = tempfile::tempdir().unwrap();
    // Light text on a dark band, and a caption turned by 90 degrees
    // (drawn across, then the image is transposed).
    let (w, h) = (700, 400);
    let mut g: Vec<f32> = plain(w, h).iter().map(|v| v - 0.3).collect();
    draw_text(
        &mut g,
        w,
        h,
        "PLATE 25 MM X200",
        30.0,
        150.0,
        30.0,
        0.4,
        0.95,
    );
    let path = dir.path().join("light.png");
    write_png(&path, w, h, &g);
    let r = measure(&path);
    assert!(r.annotations.len() == 1, "{:?}", r.annotations);
    assert!(r.sdas.value.is_none());

    let t: Vec<f32> = (0..w * h).map(|i| g[(i % h) * w + i / h]).collect();
    let path = dir.path().join("turned.png");
    write_png(&path, h, w, &t);
    let r = measure(&path);
    assert!(r.annotations.len() == 1, "{:?}", r.annotations);
    let a = r.annotations[0].rect;
    assert!(a[2] - a[0] < 60 && a[3] - a[1] > 300, "{a:?}");
}

#[test]
fn a_caption_under_a_micrograph_leaves_its_value() {
    let demo = repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png");
    let plain_result = measure(&demo);
    let [lo, hi] = plain_result
        .sdas
        .ci95
        .expect("the demo step has an interval");
    let v0 = plain_result.sdas.value.unwrap().0;
    assert!(
        plain_result.annotations.is_empty(),
        "{:?}",
        plain_result.annotations
    );

    // The same field with a white caption band of two lines below it.
    let img = image::open(&demo).unwrap().to_luma8();
    let (w, h0) = (img.width() as usize, img.height() as usize);
    let band = 110;
    let h = h0 + band;
    let mut g: Vec<f32> = img.pixels().map(|p| p.0[0] as f32 / 255.0).collect();
    g.resize(w * h, 1.0);
    draw_text(
        &mut g,
        w,
        h,
        "CVF SP4 STEP 12 MM X200",
        20.0,
        (h0 + 20) as f64,
        28.0,
        0.4,
        0.0,
    );
    draw_text(
        &mut g,
        w,
        h,
        "ETCH HF 0.5 NORTH EDGE",
        20.0,
        (h0 + 64) as f64,
        28.0,
        0.4,
        0.0,
    );
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("captioned.png");
    write_png(&path, w, h, &g);
    let r = measure(&path);
    assert!(!r.annotations.is_empty(), "caption not found");
    for a in &r.annotations {
        assert!(
            a.rect[1] as usize >= h0 - 5,
            "annotation inside the field: {a:?}"
        );
    }
    let v = r.sdas.value.expect("the captioned field has a value").0;
    assert!(
        lo.0 <= v && v <= hi.0,
        "{v} outside [{}, {}] of {v0}",
        lo.0,
        hi.0
    );
}

#[test]
fn the_demo_fields_hold_no_text() {
    for f in [
        "plate-CVF-SP4-step06mm.png",
        "plate-CVF-SP4-step25mm.png",
        "plate-CVF-SP4-step50mm.png",
    ] {
        let r = measure(&repo_file(&format!("fixtures/demo/{f}")));
        assert!(r.annotations.is_empty(), "{f}: {:?}", r.annotations);
    }
}

#[test]
fn a_comb_of_short_bars_is_no_text() {
    // A row of identical thin bars on a plain ground (arms seen end-on
    // along a trunk) stands on one baseline like letters, but its "letters"
    // are far narrower than any line of type's median letter.
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (600, 300);
    let mut g = plain(w, h);
    for k in 0..20 {
        let x0 = 60 + 20 * k;
        for y in 120..150 {
            for x in x0..x0 + 4 {
                g[y * w + x] = 0.05;
            }
        }
    }
    let path = dir.path().join("comb.png");
    write_png(&path, w, h, &g);
    let r = measure(&path);
    assert!(r.annotations.is_empty(), "{:?}", r.annotations);
}

// Data bars, caption bands and the outside of a round field of view. The
// expectations are again those of the trade (common practice, no single
// source): a flat bar or the dark ring outside an eyepiece's field stop
// shows no structure, so it gives no arm spacing and does not move the
// value of the field it frames.

/// Deterministic noise in [-0.5, 0.5) (a 64-bit linear congruential
/// generator's high bits).
fn noise(seed: u64, n: usize) -> Vec<f32> {
    let mut s = seed;
    (0..n)
        .map(|_| {
            s = s
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (s >> 40) as f32 / (1u64 << 24) as f32 - 0.5
        })
        .collect()
}

fn demo_grey() -> (Vec<f32>, usize, usize) {
    let img = image::open(repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png"))
        .unwrap()
        .to_luma8();
    let (w, h) = (img.width() as usize, img.height() as usize);
    (img.pixels().map(|p| p.0[0] as f32 / 255.0).collect(), w, h)
}

fn kinds(r: &ImageResult, kind: AnnotationKind) -> Vec<[u32; 4]> {
    r.annotations
        .iter()
        .filter(|a| a.kind == kind)
        .map(|a| a.rect)
        .collect()
}

/// A black data bar `band` px deep with a line of light text, added below
/// (or, `top`, above) a field.
fn with_data_bar(g: &[f32], w: usize, h0: usize, band: usize, top: bool) -> (Vec<f32>, usize) {
    let h = h0 + band;
    let mut out = vec![0.0f32; w * h];
    let off = if top { band } else { 0 };
    out[off * w..(off + h0) * w].copy_from_slice(g);
    let y = if top { 10 } else { h0 + 10 };
    draw_text(
        &mut out,
        w,
        h,
        "X200 CVF SP4 12 MM",
        16.0,
        y as f64,
        24.0,
        0.4,
        0.92,
    );
    (out, h)
}

#[test]
fn a_data_bar_under_a_micrograph_leaves_its_value_and_is_reported() {
    let plain_result = measure(&repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png"));
    let [lo, hi] = plain_result
        .sdas
        .ci95
        .expect("the demo step has an interval");
    let (g, w, h0) = demo_grey();
    let dir = tempfile::tempdir().unwrap();
    for top in [false, true] {
        let (bar, h) = with_data_bar(&g, w, h0, 46, top);
        let path = dir.path().join(format!("bar-{top}.png"));
        write_png(&path, w, h, &bar);
        let r = measure(&path);
        let bands = kinds(&r, AnnotationKind::Band);
        assert_eq!(bands.len(), 1, "{:?}", r.annotations);
        let b = bands[0];
        // The bar and at most the one pixel of its edge, across the width.
        if top {
            assert!(b[1] == 0 && (45..=47).contains(&b[3]), "{b:?}");
        } else {
            assert!(
                b[3] as usize == h - 1 && (h0 - 1..=h0).contains(&(b[1] as usize)),
                "{b:?}"
            );
        }
        assert!(b[0] == 0 && b[2] as usize == w - 1, "{b:?}");
        assert!(r.excluded.contains(&b));
        let v = r.sdas.value.expect("the field with a bar has a value").0;
        assert!(lo.0 <= v && v <= hi.0, "{v} outside [{}, {}]", lo.0, hi.0);
    }
}

#[test]
fn a_data_bar_on_a_featureless_field_gives_no_value() {
    let (w, h0) = (800, 560);
    let g: Vec<f32> = noise(7, w * h0).iter().map(|n| 0.5 + 0.08 * n).collect();
    let (bar, h) = with_data_bar(&g, w, h0, 50, false);
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("bar.png");
    write_png(&path, w, h, &bar);
    let r = measure(&path);
    assert!(r.sdas.value.is_none(), "{:?}", r.sdas.value);
    assert_eq!(
        kinds(&r, AnnotationKind::Band).len(),
        1,
        "{:?}",
        r.annotations
    );
}

/// The demo field seen through a round field stop of radius `radius` px:
/// black outside.
fn through_field_stop(radius: f64) -> (Vec<f32>, usize, usize) {
    let (mut g, w, h) = demo_grey();
    let (cx, cy) = (0.5 * w as f64, 0.5 * h as f64);
    for y in 0..h {
        for x in 0..w {
            if (x as f64 + 0.5 - cx).hypot(y as f64 + 0.5 - cy) > radius {
                g[y * w + x] = 0.0;
            }
        }
    }
    (g, w, h)
}

#[test]
fn a_round_field_of_view_keeps_its_value_and_its_outside_is_reported() {
    let plain_result = measure(&repo_file("fixtures/demo/plate-CVF-SP4-step12mm.png"));
    let [lo, hi] = plain_result
        .sdas
        .ci95
        .expect("the demo step has an interval");
    let v0 = plain_result
        .sdas
        .value
        .expect("the demo step has a value")
        .0;
    let dir = tempfile::tempdir().unwrap();
    // A stop cut by the picture's top and bottom, and one seen whole.
    for radius in [300.0, 250.0] {
        let (g, w, h) = through_field_stop(radius);
        let path = dir.path().join(format!("round-{radius}.png"));
        write_png(&path, w, h, &g);
        let r = measure(&path);
        let outside: Vec<_> = r
            .annotations
            .iter()
            .filter(|a| a.kind == AnnotationKind::OutsideField)
            .collect();
        assert_eq!(outside.len(), 1, "{:?}", r.annotations);
        let [cx, cy, ax, ay] = outside[0].field_px.expect("its ellipse");
        assert!(
            (cx - 320.0).abs() < 2.0 && (cy - 256.0).abs() < 2.0,
            "{cx} {cy}"
        );
        assert!(
            (ax - radius).abs() < 3.0 && (ay - radius).abs() < 3.0,
            "{ax} {ay}"
        );
        assert!(
            kinds(&r, AnnotationKind::Band).is_empty(),
            "{:?}",
            r.annotations
        );
        let v = r.sdas.value.expect("the round field has a value").0;
        if radius > 280.0 {
            // Nine tenths of the field are kept: the same value within the
            // plain field's interval.
            assert!(
                lo.0 <= v && v <= hi.0,
                "radius {radius}: {v} outside [{}, {}]",
                lo.0,
                hi.0
            );
        } else {
            // Three fifths are kept: a smaller sample of the same
            // structure, whose own (wider) interval holds the plain
            // field's value.
            let [a, b] = r.sdas.ci95.expect("the round field has an interval");
            assert!(
                a.0 <= v0 && v0 <= b.0,
                "radius {radius}: {v0} outside [{}, {}]",
                a.0,
                b.0
            );
        }
    }
}

#[test]
fn the_demo_fields_and_synthetic_structure_have_no_band_or_outside() {
    for f in [
        "plate-CVF-SP4-step06mm.png",
        "plate-CVF-SP4-step12mm.png",
        "plate-CVF-SP4-step25mm.png",
        "plate-CVF-SP4-step50mm.png",
    ] {
        let l = load(
            &repo_file(&format!("fixtures/demo/{f}")),
            &LoadOptions::default(),
        )
        .unwrap();
        let frame = find_frame(&l.image, None, &[]);
        assert!(frame.is_empty(), "{f}: {:?}", frame);
    }
    // Every structured style, the two-phase one above all (a trunk along
    // an edge is one flat phase across the picture's width).
    let dir = tempfile::tempdir().unwrap();
    for (k, style) in [
        Style::Clean,
        Style::Etched,
        Style::Lace,
        Style::Binary,
        Style::Cut,
        Style::Dense,
    ]
    .into_iter()
    .enumerate()
    {
        let sub = dir.path().join(format!("{k}"));
        write_set_styled(&sub, 5, 4, Some(style)).unwrap();
        for e in std::fs::read_dir(&sub).unwrap() {
            let p = e.unwrap().path();
            if p.extension().is_some_and(|x| x == "png" || x == "tif") {
                let l = load(&p, &LoadOptions::default()).unwrap();
                let frame = find_frame(&l.image, None, &[]);
                assert!(frame.is_empty(), "{style:?} {}: {:?}", p.display(), frame);
            }
        }
    }
}
