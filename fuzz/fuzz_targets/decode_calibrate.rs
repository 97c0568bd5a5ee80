//! Arbitrary bytes as an image file: decoding (`load::load_bytes`), the
//! scale-bar search and the calibration it gives. Beyond "no panic": a
//! decoded image has the size it says, every grey level finite and in
//! [0, 1]; a bar lies inside the image with a finite positive length; a
//! calibration is a finite positive um/px with a finite uncertainty; the
//! bar's label, when read, states a finite positive length with a
//! confidence the reader accepts and a box inside the image.
#![no_main]

use armspace::calibrate::{self, scale_bar, BarLength, CalibrationRequest, CalibrationSource};
use armspace::load::{load_bytes, LoadOptions, MIN_SIDE_PX};
use armspace::units::Micrometres;
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fn finite(x: f64, what: &str) {
    assert!(x.is_finite(), "{what} is {x}");
}

fuzz_target!(|data: &[u8]| {
    // A quarter of a megapixel keeps each run fast; the limit itself is
    // part of what is tested.
    let opts = LoadOptions {
        max_megapixels: 0.25,
        ..LoadOptions::default()
    };
    let loaded = match load_bytes(Path::new("fuzz-input"), data, &opts) {
        Ok(l) => l,
        Err(e) => {
            assert!(e.to_string().starts_with("fuzz-input: "), "{e}");
            return;
        }
    };
    let img = &loaded.image;
    let (w, h) = (img.width, img.height);
    assert_eq!(img.data.len(), w * h);
    assert!(w >= MIN_SIDE_PX as usize && h >= MIN_SIDE_PX as usize);
    assert!((w * h) as f64 <= 0.25e6);
    for v in &img.data {
        assert!(v.is_finite() && (0.0..=1.0).contains(v), "grey level {v}");
    }
    assert_eq!(loaded.sha256.len(), 64);

    let metadata = loaded.resolution.and_then(|(x, y, unit)| {
        calibrate::from_resolution(x, y, unit)
            .ok()
            .map(|(um, notes)| {
                finite(um.get(), "um/px from resolution tags");
                assert!(notes
                    .iter()
                    .all(|n| !n.contains("NaN") && !n.contains("inf")));
                um
            })
    });

    let detected = scale_bar::detect(img);
    if let Ok(bar) = &detected {
        assert!(
            bar.length_px.is_finite() && bar.length_px > 0.0,
            "bar length {}",
            bar.length_px
        );
        assert!(bar.length_sd_px.is_finite() && bar.length_sd_px >= 0.0);
        assert!(bar.rows >= 1);
        assert!((scale_bar::MIN_CONFIDENCE..=1.0).contains(&bar.confidence));
        assert!(bar.x0 <= bar.x1 && (bar.x1 as usize) < w);
        assert!(bar.y0 <= bar.y1 && (bar.y1 as usize) < h);
        let [mx0, my0, mx1, my1] = bar.mask;
        assert!(mx0 <= mx1 && (mx1 as usize) < w && my0 <= my1 && (my1 as usize) < h);
        if let Some([bx0, by0, bx1, by1]) = bar.backing_box {
            assert!(bx0 <= bx1 && (bx1 as usize) < w && by0 <= by1 && (by1 as usize) < h);
        }
        assert_eq!(scale_bar::mask_of(bar, w, h).len(), w * h);
    }
    let picture = armspace::overlay::calibration(img, detected.as_ref().ok());
    assert_eq!(
        (picture.width() as usize, picture.height() as usize),
        (w, h)
    );

    let req = CalibrationRequest {
        scale_bar: Some(BarLength {
            length: Micrometres(100.0),
            rel_uncertainty: 0.01,
        }),
        ..CalibrationRequest::default()
    };
    // The label is read on every image a bar length is given for (to
    // warn when it reads otherwise), so it must hold on any bytes.
    let label = detected.as_ref().ok().map(|b| calibrate::label::read(img, b));
    match &label {
        Some(Ok(l)) => {
            assert!(l.length_um.is_finite() && l.length_um > 0.0, "{l:?}");
            assert!(
                (calibrate::label::MIN_CONFIDENCE..=1.0).contains(&l.confidence),
                "{l:?}"
            );
            let [x0, y0, x1, y1] = l.rect;
            assert!(
                x0 <= x1 && (x1 as usize) < w && y0 <= y1 && (y1 as usize) < h,
                "{l:?}"
            );
            assert!(!l.text.is_empty());
        }
        Some(Err(m)) => assert!(!m.is_empty() && !m.contains("NaN"), "{m}"),
        None => {}
    }
    match calibrate::resolve_with_label(&req, Some(&detected), label.as_ref(), metadata) {
        Ok((c, warnings)) => {
            let v = c.um_per_px.get();
            assert!(v.is_finite() && v > 0.0);
            if let Some(u) = c.rel_uncertainty {
                assert!(u.is_finite() && u >= 0.0, "uncertainty {u}");
            }
            for o in &c.offers {
                finite(o.um_per_px.get(), "offered um/px");
                if let Some(u) = o.rel_uncertainty {
                    finite(u, "offered uncertainty");
                }
            }
            if c.source == CalibrationSource::ScaleBar {
                assert_eq!(c.bar.as_ref(), detected.as_ref().ok());
            }
            for w in &warnings {
                assert!(!w.message.contains("NaN"), "{}", w.message);
            }
        }
        Err(e) => {
            let m = e.to_string();
            assert!(!m.is_empty() && !m.contains("NaN"), "{m}");
        }
    }
});
