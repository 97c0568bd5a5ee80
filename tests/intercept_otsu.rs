//! Otsu's threshold against scikit-image on committed 8-bit images
//! (fixtures/otsu/, made by scripts/otsu_reference.py; the reference values
//! are skimage.filters.threshold_otsu, scikit-image 0.26).

mod common;
use armspace::load::{load, LoadOptions};
use armspace::segment::{otsu_threshold, otsu_threshold_binned, OTSU_BINS};
use common::repo_file;

fn reference() -> serde_json::Value {
    serde_json::from_str(
        &std::fs::read_to_string(repo_file("fixtures/otsu/reference.json")).unwrap(),
    )
    .unwrap()
}

#[test]
fn otsu_matches_skimage_float_histogram_exactly() {
    // Same histogram as skimage.filters.threshold_otsu(image / 255.0,
    // nbins=256): 256 equal bins between the image's minimum and maximum,
    // threshold = centre of the last bin of the lower class. Equal up to f32
    // rounding of the grey values.
    let refs = reference();
    for (name, r) in refs["images"].as_object().unwrap() {
        let img = load(
            &repo_file(&format!("fixtures/otsu/{name}")),
            &LoadOptions::default(),
        )
        .unwrap()
        .image;
        let (lo, hi) = (
            r["float_min"].as_f64().unwrap(),
            r["float_max"].as_f64().unwrap(),
        );
        let t = otsu_threshold_binned(&img.data, None, lo as f32, hi as f32, OTSU_BINS).unwrap();
        let expected = r["float"].as_f64().unwrap();
        assert!(
            (t as f64 - expected).abs() < 1e-5,
            "{name}: armspace {t} vs skimage {expected}"
        );
    }
}

#[test]
fn otsu_with_robust_range_is_within_one_bin_of_skimage_uint8() {
    // skimage.filters.threshold_otsu(uint8 image): one bin per grey level
    // (width 1/255). armspace's default bins 256 ways between the 0.5th and
    // 99.5th percentiles (width (p99.5 - p0.5)/256 < 1/255 here), so the two
    // thresholds can differ by one bin of either histogram: the test allows
    // the larger of the two widths, plus half of the other for the differing
    // bin centres.
    let refs = reference();
    for (name, r) in refs["images"].as_object().unwrap() {
        let img = load(
            &repo_file(&format!("fixtures/otsu/{name}")),
            &LoadOptions::default(),
        )
        .unwrap()
        .image;
        let t = otsu_threshold(&img.data, None).unwrap() as f64;
        let expected = r["uint8"].as_f64().unwrap();
        let level = 1.0 / 255.0;
        let tol = 1.5 * level;
        eprintln!(
            "{name}: armspace {t:.5} skimage {expected:.5} ({:+.2} levels)",
            (t - expected) / level
        );
        assert!(
            (t - expected).abs() <= tol,
            "{name}: armspace {t} vs skimage {expected}"
        );
    }
}

#[test]
fn otsu_respects_the_mask() {
    // Masked pixels do not enter the histogram: a masked block of extreme
    // values leaves the threshold of the rest unchanged.
    let img = load(
        &repo_file("fixtures/otsu/bimodal.png"),
        &LoadOptions::default(),
    )
    .unwrap()
    .image;
    let t0 = otsu_threshold(&img.data, None).unwrap();
    let mut data = img.data.clone();
    let mut mask = vec![false; data.len()];
    for (i, (d, m)) in data.iter_mut().zip(mask.iter_mut()).enumerate().take(2000) {
        *d = if i % 2 == 0 { 0.0 } else { 1.0 };
        *m = true;
    }
    // The unmasked remainder differs from the full image, so compare with
    // the threshold of the remainder alone.
    let rest: Vec<f32> = img.data[2000..].to_vec();
    let t_rest = otsu_threshold(&rest, None).unwrap();
    let t_masked = otsu_threshold(&data, Some(&mask)).unwrap();
    assert_eq!(t_masked, t_rest);
    assert!(t0.is_finite());
}
