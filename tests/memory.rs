//! Memory bounded by the image and by a budget: an image over the budget
//! is refused before decoding, naming the file, its estimate and the
//! budget; a small file whose header claims a huge image is refused before
//! decoding; the batch's other images are measured all the same; the
//! report's lists of local measurements are bounded. (Peaks themselves are
//! measured by `scripts/memory_peaks.sh`, not here.)

use armspace::load::{load, load_bytes, Input, LoadOptions};
use armspace::memory;
use armspace::pipeline::{measure_batch, measure_file, MeasureOptions, Method};
use armspace::report::{self, MAX_LOCALS};
use armspace::units::UmPerPx;
use armspace::Error;
use std::path::{Path, PathBuf};
use std::sync::atomic::AtomicBool;

fn demo(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/demo")
        .join(name)
}

fn opts() -> MeasureOptions {
    MeasureOptions::manual(UmPerPx::new(0.5).unwrap())
}

/// A PNG of `w` x `h` black pixels.
fn flat_png(dir: &Path, w: u32, h: u32) -> PathBuf {
    let path = dir.join(format!("flat-{w}x{h}.png"));
    image::GrayImage::new(w, h).save(&path).unwrap();
    path
}

/// The corpus's deflate bomb: a complete 8000 x 8000 PNG of zeros in
/// 62 kB (`scripts/make_bad_fixtures.py`), about 1000 pixels a byte.
fn deflate_bomb(dir: &Path) -> PathBuf {
    let path = dir.join("bomb-8000x8000.png");
    std::fs::copy(
        Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("fixtures/bad/images/bomb-deflate-8000x8000.png"),
        &path,
    )
    .unwrap();
    path
}

/// A real 64 x 64 JPEG whose frame header (SOF0) is rewritten to claim
/// 19000 x 19000 pixels: a file of about a kilobyte.
fn forged_jpeg(dir: &Path) -> PathBuf {
    let mut bytes = Vec::new();
    let img =
        image::GrayImage::from_fn(64, 64, |x, y| image::Luma([((x * 7 + y * 3) % 256) as u8]));
    img.write_to(
        &mut std::io::Cursor::new(&mut bytes),
        image::ImageFormat::Jpeg,
    )
    .unwrap();
    // SOF0: FF C0, length (2), precision (1), height (2), width (2).
    let at = bytes.windows(2).position(|w| w == [0xFF, 0xC0]).unwrap();
    bytes[at + 5..at + 7].copy_from_slice(&19000u16.to_be_bytes());
    bytes[at + 7..at + 9].copy_from_slice(&19000u16.to_be_bytes());
    let path = dir.join("forged.jpg");
    std::fs::write(&path, bytes).unwrap();
    path
}

#[test]
fn an_image_over_the_budget_is_refused_naming_file_estimate_and_budget() {
    let path = demo("plate-CVF-SP4-step06mm.png");
    let header = armspace::load::read_header(&path).unwrap();
    assert_eq!((header.width, header.height), (640, 512));
    let estimate = memory::estimate_peak(&header);
    let mut o = opts();
    o.load.memory_budget = Some(estimate - 1);
    let r = measure_file(&path, &o);
    let e = r.error.expect("refused");
    assert!(e.contains("plate-CVF-SP4-step06mm.png"), "{e}");
    assert!(e.contains(&memory::fmt_bytes(estimate)), "{e}");
    assert!(e.contains(&memory::fmt_bytes(estimate - 1)), "{e}");
    assert!(e.contains("memory budget"), "{e}");
    // At the estimate itself it is measured.
    o.load.memory_budget = Some(estimate);
    assert!(measure_file(&path, &o).error.is_none());
}

#[test]
fn a_small_file_claiming_a_huge_image_is_refused_before_decoding() {
    let dir = tempfile::tempdir().unwrap();
    // 64 megapixels in a PNG of 62 kB.
    let png = deflate_bomb(dir.path());
    let len = std::fs::metadata(&png).unwrap().len();
    assert!(
        64e6 / len as f64 > memory::MAX_PIXELS_PER_FILE_BYTE,
        "{len}"
    );
    let e = load(&png, &LoadOptions::default()).unwrap_err();
    assert!(matches!(e, Error::ImplausibleSize { .. }), "{e}");
    assert!(e.to_string().contains("bomb-8000x8000.png"), "{e}");
    // Accepted when asked for (the pixels are all there).
    let ok = LoadOptions {
        allow_high_compression: true,
        ..LoadOptions::default()
    };
    assert_eq!(load(&png, &ok).unwrap().image.width, 8000);

    // A forged JPEG header: refused from the header alone (the decoder
    // would otherwise be asked for 361 megapixels).
    let jpg = forged_jpeg(dir.path());
    let bytes = std::fs::read(&jpg).unwrap();
    let e = load_bytes(&jpg, &bytes, &LoadOptions::default()).unwrap_err();
    assert!(
        matches!(
            e,
            Error::ImplausibleSize {
                width: 19000,
                height: 19000,
                ..
            }
        ),
        "{e}"
    );
    // Below the size the rule applies to, a well-packed file is taken.
    let small = flat_png(dir.path(), 1000, 1000);
    assert!(load(&small, &LoadOptions::default()).is_ok());
}

#[test]
fn the_batch_measures_its_other_images() {
    let dir = tempfile::tempdir().unwrap();
    let forged = forged_jpeg(dir.path());
    let bomb = deflate_bomb(dir.path());
    let small = demo("plate-CVF-SP4-step06mm.png");
    let big = demo("plate-CVF-SP4-step50mm.png");
    let small_need = memory::estimate_peak(&armspace::load::read_header(&small).unwrap());
    let big_need = memory::estimate_peak(&armspace::load::read_header(&big).unwrap());
    assert!(big_need > small_need);
    let mut o = opts();
    // Room for one 640 x 512 demo image at a time (the second waits for the
    // first), not for the 1024 x 768 one.
    o.load.memory_budget = Some(small_need + 1);
    let also = demo("plate-CVF-SP4-step12mm.png");
    let inputs: Vec<Input> = [&forged, &small, &bomb, &big, &also]
        .into_iter()
        .map(|p| Input::Image(p.clone()))
        .collect();
    let (results, _) = measure_batch(&inputs, &o, &|_| {}, &AtomicBool::new(false));
    let files: Vec<&PathBuf> = results.iter().map(|r| &r.file).collect();
    assert_eq!(files, [&forged, &small, &bomb, &big, &also]);
    let error = |i: usize| results[i].error.clone().unwrap_or_default();
    assert!(
        error(0).contains("forged.jpg") && error(0).contains("pixels a byte"),
        "{}",
        error(0)
    );
    assert!(error(2).contains("bomb-8000x8000.png"), "{}", error(2));
    assert!(
        error(3).contains("plate-CVF-SP4-step50mm.png") && error(3).contains("memory budget"),
        "{}",
        error(3)
    );
    for i in [1, 4] {
        assert!(results[i].error.is_none(), "{:?}", results[i].error);
        assert!(
            results[i].sdas.value.is_some(),
            "{:?}",
            results[i].sdas.reason
        );
    }
}

#[test]
fn the_reports_lists_of_local_measurements_are_bounded() {
    use armspace::synth::{render, FieldSpec, Morphology, Style};
    // A fine field of 4096 x 4096 px: tens of thousands of FFT tiles.
    let spec = FieldSpec {
        gradient: None,
        width: 4096,
        height: 4096,
        morphology: Morphology::Columnar,
        style: Style::Clean,
        sdas_px: 5.0,
        um_per_px: 0.5,
        primary_angle_deg: 30.0,
        primary_spacing_px: 25.0,
        spacing_jitter: 0.08,
        missing_arm_fraction: 0.02,
        invert: false,
        noise_sd: 0.03,
        blur_sigma_px: 0.8,
        illumination: 0.05,
        scale_bar: None,
        seed: 1606,
    };
    let (img, _) = render(&spec).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("fine.png");
    img.save(&path).unwrap();
    let mut o = opts();
    o.methods = vec![Method::Fft];
    let r = measure_file(&path, &o);
    assert!(r.error.is_none(), "{:?}", r.error);
    let all = match &r.method(Method::Fft).unwrap().detail {
        armspace::methods::Detail::Fft(f) => f.tiles.len(),
        _ => unreachable!(),
    };
    assert!(all > MAX_LOCALS, "{all} tiles");
    let rep = report::image_report(&r, &o);
    let fft = rep.methods.fft.as_ref().unwrap();
    assert_eq!(fft.tiles.len(), MAX_LOCALS);
    let omitted = fft.omitted.as_ref().expect("summary of the rest");
    assert_eq!(omitted.count, all - MAX_LOCALS);
    let (lo, mid, hi) = (
        omitted.sdas_um_min.unwrap(),
        omitted.sdas_um_median.unwrap(),
        omitted.sdas_um_max.unwrap(),
    );
    assert!(lo <= mid && mid <= hi, "{lo} {mid} {hi}");
    // The listed tiles are spread over the field, not its first rows.
    let last_y = fft.tiles.iter().map(|t| t.y_um).fold(0.0, f64::max);
    assert!(last_y > 0.8 * 4096.0 * 0.5, "{last_y}");
    // And the whole report stays small: under 200 bytes a listed tile.
    let json = serde_json::to_string(&rep).unwrap();
    assert!(json.len() < 200 * MAX_LOCALS, "{} bytes", json.len());
    // The summary is described by the committed schema, with every object
    // closed (no key written that it leaves out).
    let full = report::build(
        &["fine.png".to_string()],
        &o,
        std::slice::from_ref(&r),
        &[],
        "2026-12-04T00:00:00Z".into(),
    );
    let value: serde_json::Value = serde_json::from_str(&report::to_json(&full)).unwrap();
    assert!(value
        .pointer("/images/0/methods/fft/omitted/count")
        .is_some());
    let text = std::fs::read_to_string(
        Path::new(env!("CARGO_MANIFEST_DIR")).join("schema/report.schema.json"),
    )
    .unwrap();
    let mut schema: serde_json::Value = serde_json::from_str(&text).unwrap();
    close(&mut schema);
    let validator = jsonschema::validator_for(&schema).unwrap();
    let errors: Vec<String> = validator
        .iter_errors(&value)
        .map(|e| format!("{e} at {}", e.instance_path))
        .collect();
    assert!(errors.is_empty(), "{errors:#?}");
}

/// Every object schema closed (`additionalProperties: false`), as in
/// tests/schema.rs.
fn close(v: &mut serde_json::Value) {
    use serde_json::Value;
    match v {
        Value::Object(map) => {
            let is_object = match map.get("type") {
                Some(Value::String(t)) => t == "object",
                Some(Value::Array(ts)) => ts.iter().any(|t| t == "object"),
                _ => false,
            };
            if is_object && map.contains_key("properties") {
                map.entry("additionalProperties")
                    .or_insert(Value::Bool(false));
            }
            map.values_mut().for_each(close);
        }
        Value::Array(items) => items.iter_mut().for_each(close),
        _ => {}
    }
}
