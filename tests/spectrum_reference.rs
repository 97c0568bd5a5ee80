//! The windowed power spectrum against numpy.fft on a committed tile
//! (fixtures/spectrum/, made by scripts/spectrum_reference.py).

mod common;
use armspace::blocks::spectrum::SpectrumAnalyser;
use armspace::load::{load, LoadOptions};
use common::repo_file;

#[test]
fn power_spectrum_matches_numpy() {
    let tile = load(
        &repo_file("fixtures/spectrum/tile64.png"),
        &LoadOptions::default(),
    )
    .unwrap();
    let reference: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(repo_file("fixtures/spectrum/tile64_power.json")).unwrap(),
    )
    .unwrap();
    let n = reference["n"].as_u64().unwrap() as usize;
    assert_eq!((tile.image.width, tile.image.height), (n, n));
    let expected: Vec<f64> = reference["power"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|row| row.as_array().unwrap().iter().map(|v| v.as_f64().unwrap()))
        .collect();
    let mut analyser = SpectrumAnalyser::new(n);
    let mut got = Vec::new();
    analyser.power(&tile.image.data, n, 0, 0, &mut got);
    // Relative to the spectrum's largest bin: the tile's energy sits in a
    // few peaks and the smallest bins are at the rounding floor of any FFT.
    let max = expected.iter().cloned().fold(0.0, f64::max);
    let worst = got
        .iter()
        .zip(&expected)
        .map(|(a, b)| (a - b).abs() / max)
        .fold(0.0, f64::max);
    assert!(
        worst <= 1e-6,
        "largest difference {worst:e} of the peak power"
    );
    // Each of the strongest bins (above 1 % of the peak) to 1e-6 of itself.
    for (a, b) in got.iter().zip(&expected) {
        if *b > 0.01 * max {
            assert!((a - b).abs() / b <= 1e-6, "{a} vs {b}");
        }
    }
}
