//! The intercept method on inputs whose answer is known from outside:
//! hand counts written out below, featureless images, inverted contrast,
//! and the number of lines needed for a target relative accuracy.

use armspace::calibrate::scale_bar;
use armspace::load::GrayImage;
use armspace::methods::intercept::{
    count_runs, measure, merge_grazing_runs, runs_of_profile, Convention, InterceptParams,
};
use armspace::preprocess::{prepare, Prepared, PreprocessParams};
use armspace::stats::{measurements_for_target, t_quantile, Summary};
use armspace::synth::{random_spec, render};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// A binary profile sampled every 1 px: `1` is arm phase. With values 0 and
/// 1 and threshold 0.5 each boundary falls half way between two samples.
fn profile(bits: &str) -> Vec<f32> {
    bits.chars()
        .filter(|c| *c == '0' || *c == '1')
        .map(|c| if c == '1' { 1.0 } else { 0.0 })
        .collect()
}

#[test]
fn hand_count_of_a_regular_row() {
    // Samples 0..=25 (line length L_line = 25 px):
    //   index: 0 1 | 2 3 4 | 5 6 7 | 8 9 10 11 | 12 13 14 | 15 16 17 | 18 19 20 | 21 22 23 | 24 25
    //   phase: 0 0 | 1 1 1 | 0 0 0 | 1 1 1  1  | 0  0  0  | 1  1  1  | 0  0  0  | 1  1  1  | 0  0
    // Runs (boundaries half way between samples):
    //   gap [0, 1.5]  arm [1.5, 4.5]  gap [4.5, 7.5]  arm [7.5, 11.5]  gap [11.5, 14.5]
    //   arm [14.5, 17.5]  gap [17.5, 20.5]  arm [20.5, 23.5]  gap [23.5, 25]
    // Arm centres: 3.0, 9.5, 16.0, 22.0, so n = 4 arms, periods 6.5, 6.5, 6.0.
    // Median arm run w = 3, median inner gap g = 3, period m = 6; no run is
    // longer than w + m/2 = 6 (no merged arms), no period near 2m (no missing arm).
    // Centre-to-centre: L = 22.0 - 3.0 = 19.0 px over n - 1 = 3 spacings: 6.333 px.
    // Length over count: the line from mid-gap before the first arm to mid-gap
    // after the last, L = 19.0 + m = 25.0 px, over n = 4 arms: 6.25 px.
    let v = profile("00 111 000 1111 000 111 000 111 00");
    let runs = runs_of_profile(&v, 1.0, 0.5, false);
    assert_eq!(runs.len(), 9);
    assert!((runs[1].start - 1.5).abs() < 1e-12 && (runs[1].end - 4.5).abs() < 1e-12);
    let c = count_runs(&runs, 25.0, &InterceptParams::default()).unwrap();
    assert_eq!(c.centres, vec![3.0, 9.5, 16.0, 22.0]);
    assert_eq!((c.positions, c.spacings, c.inferred), (4, 3, 0));
    assert!((c.centre_to_centre - 19.0 / 3.0).abs() < 1e-12);
    assert!((c.length_over_count - 6.25).abs() < 1e-12);
}

#[test]
fn hand_count_with_a_missing_arm() {
    //   index: 0 1 | 2-4 | 5-7 | 8-10 | 11-13 | 14-16 | 17-25     | 26-28 | 29-31 | 32-34 | 35 36
    //   phase: 0 0 | 111 | 000 | 111  | 000   | 111   | 000000000 | 111   | 000   | 111   | 0  0
    // Arm centres 3, 9, 15, 27, 33: periods 6, 6, 12, 6. w = 3, g = 3, m = 6;
    // the period of 12 = 2m holds one arm out of the section plane, so there
    // are 4 + 1 + ... = 5 spacings between the first and last centre and
    // n = 6 positions (one inferred).
    // Centre-to-centre: (33 - 3) / 5 = 6.0 px (uncorrected it would be 30 / 4 = 7.5).
    // Length over count: (30 + m) / 6 = 36 / 6 = 6.0 px.
    let v = profile("00 111 000 111 000 111 000000000 111 000 111 00");
    let runs = runs_of_profile(&v, 1.0, 0.5, false);
    let c = count_runs(&runs, 36.0, &InterceptParams::default()).unwrap();
    assert_eq!(c.centres, vec![3.0, 9.0, 15.0, 27.0, 33.0]);
    assert_eq!((c.positions, c.spacings, c.inferred), (6, 5, 1));
    assert!((c.centre_to_centre - 6.0).abs() < 1e-12);
    assert!((c.length_over_count - 6.0).abs() < 1e-12);
}

#[test]
fn hand_count_with_merged_arms() {
    //   index: 0 1 | 2-4 | 5-7 | 8-16      | 17-19 | 20-22 | 23-25 | 26-28 | 29 30
    //   phase: 0 0 | 111 | 000 | 111111111 | 000   | 111   | 000   | 111   | 0  0
    // Runs of 3, 9, 3, 3 px: w = 3, g = 3, m = 6. The 9 px run [7.5, 16.5] is
    // longer than w + m/2 = 6: it holds k = 1 + round((9 - 3)/6) = 2 arms,
    // centred at 7.5 + 1.5 = 9.0 and 9.0 + (9 - 3)/1 = 15.0.
    // Centres 3, 9, 15, 21, 27: n = 5, centre-to-centre 24 / 4 = 6.0 px;
    // length over count (24 + m) / 5 = 30 / 5 = 6.0 px.
    let v = profile("00 111 000 111111111 000 111 000 111 00");
    let runs = runs_of_profile(&v, 1.0, 0.5, false);
    let c = count_runs(&runs, 30.0, &InterceptParams::default()).unwrap();
    assert_eq!(c.centres, vec![3.0, 9.0, 15.0, 21.0, 27.0]);
    assert_eq!((c.positions, c.inferred), (5, 1));
    assert!((c.centre_to_centre - 6.0).abs() < 1e-12);
    assert!((c.length_over_count - 6.0).abs() < 1e-12);
}

#[test]
fn arms_cut_by_the_line_ends_are_not_counted() {
    // Both ends inside arms: samples 0-1 and 23-24 are arm phase.
    //   1 1 | 000 | 111 | 000 | 111 | 000 | 111 | 000 | 1 1   (25 samples)
    // The end runs have no centre (their extent beyond the line is unknown).
    // Complete arms at 6, 12, 18 (3 arms, 2 spacings): centre-to-centre 12/2 = 6.
    // w = 3, inner gaps 3, 3 so m = 6; length over count (12 + 6) / 3 = 6.
    let v = profile("11 000 111 000 111 000 111 000 11");
    let runs = runs_of_profile(&v, 1.0, 0.5, false);
    let p = InterceptParams {
        min_arms: 3,
        ..Default::default()
    };
    let c = count_runs(&runs, 24.0, &p).unwrap();
    assert_eq!(c.centres, vec![6.0, 12.0, 18.0]);
    assert!((c.centre_to_centre - 6.0).abs() < 1e-12);
    assert!((c.length_over_count - 6.0).abs() < 1e-12);
    // With the default minimum of four arms the line is not enough.
    assert!(count_runs(&runs, 24.0, &InterceptParams::default()).is_none());
}

fn prepared(img: &GrayImage) -> Prepared {
    let mask = scale_bar::detect(img)
        .ok()
        .map(|b| scale_bar::mask_of(&b, img.width, img.height));
    prepare(img, mask, &PreprocessParams::default())
}

#[test]
fn featureless_images_give_no_value_with_a_reason() {
    let flat = GrayImage::from_vec(256, 256, vec![0.4; 256 * 256]).unwrap();
    let o = measure(&prepared(&flat), &InterceptParams::default());
    assert!(o.value_px.is_none());
    assert!(o
        .reason
        .as_deref()
        .unwrap()
        .starts_with("no reliable arm rows"));

    for seed in [1u64, 2, 3] {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        let data: Vec<f32> = (0..512 * 512).map(|_| rng.random::<f32>()).collect();
        let noise = GrayImage::from_vec(512, 512, data).unwrap();
        let o = measure(&prepared(&noise), &InterceptParams::default());
        assert!(
            o.value_px.is_none(),
            "white noise (seed {seed}) gave {:?} from {} lines",
            o.value_px.map(|p| p.0),
            o.n_lines
        );
        assert!(o.reason.is_some());
    }
}

/// A columnar image of the synthetic generator as a grey image in [0, 1].
fn columnar_image(seed: u64, index: usize) -> (GrayImage, f64) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut spec = random_spec(&mut rng, 0);
    for i in 1..=index {
        spec = random_spec(&mut rng, i);
    }
    spec.scale_bar = None;
    let (img, truth) = render(&spec).unwrap();
    let (w, h) = (img.width() as usize, img.height() as usize);
    let data = img.as_raw().iter().map(|&v| v as f32 / 65535.0).collect();
    (GrayImage::from_vec(w, h, data).unwrap(), truth.sdas_px)
}

#[test]
fn inverted_contrast_gives_the_same_value_within_2_percent() {
    // Columnar etched (index 0) and clean (index 2) images; the inverted copy
    // has grey value 1 - v. The phase is chosen by area, not brightness.
    for (seed, index) in [(5u64, 0usize), (5, 2)] {
        let (img, truth) = columnar_image(seed, index);
        let inv = GrayImage::from_vec(
            img.width,
            img.height,
            img.data.iter().map(|v| 1.0 - v).collect(),
        )
        .unwrap();
        let p = InterceptParams::default();
        let a = measure(&prepared(&img), &p).value_px.map(|p| p.0).unwrap();
        let b = measure(&prepared(&inv), &p).value_px.map(|p| p.0).unwrap();
        eprintln!("truth {truth:.2}: {a:.3} vs inverted {b:.3}");
        assert!((a / b - 1.0).abs() <= 0.02, "{a} vs {b}");
    }
}

#[test]
fn measurement_is_deterministic_and_respects_the_convention() {
    let (img, truth) = columnar_image(5, 2);
    let prep = prepared(&img);
    let p = InterceptParams::default();
    let a = measure(&prep, &p);
    let b = measure(&prep, &p);
    assert_eq!(a, b);
    let v = a.value_px.map(|p| p.0).unwrap();
    assert!((v / truth - 1.0).abs() < 0.05, "{v} vs {truth}");
    // Each line's spacing is its centre span over its count (convention L/(n-1)).
    for l in &a.lines {
        let (f, g) = (
            l.arm_centres_px[0],
            l.arm_centres_px[l.arm_centres_px.len() - 1],
        );
        let span = (g.0 - f.0).hypot(g.1 - f.1);
        assert!((span / (l.arms - 1) as f64 - l.spacing_px).abs() < 1e-9);
    }
    let c = measure(
        &prep,
        &InterceptParams {
            convention: Convention::LengthOverCount,
            ..p
        },
    );
    let w = c.value_px.map(|p| p.0).unwrap();
    assert!((w / truth - 1.0).abs() < 0.05, "L/n {w} vs {truth}");
}

#[test]
fn lines_needed_for_a_target_relative_accuracy() {
    // Worked by hand from the sample 10, 12, 14, 16, 18 (mean 14, s = sqrt 10,
    // %RA 28.04, tests in src/stats.rs). For a 10 % target:
    // %RA(n) = 100 t(0.975, n-1) sqrt(10) / (sqrt(n) 14). With t(0.975, 21) = 2.080
    // and t(0.975, 22) = 2.074 (NIST/SEMATECH e-Handbook, 1.3.6.7.2):
    // %RA(22) = 100 x 2.080 x 3.1623 / (4.6904 x 14) = 10.02 > 10, and
    // %RA(23) = 100 x 2.074 x 3.1623 / (4.7958 x 14) = 9.77 <= 10: 23 lines.
    let s = Summary::of(&[10.0, 12.0, 14.0, 16.0, 18.0]).unwrap();
    assert_eq!(measurements_for_target(&s, 10.0), Some(23));
    let ra = |n: f64| 100.0 * t_quantile(0.975, n - 1.0).unwrap() * s.sd / (n.sqrt() * s.mean);
    assert!(ra(23.0) <= 10.0 && ra(22.0) > 10.0);
    // A target already met needs no more than the lines there are.
    assert!(measurements_for_target(&s, 30.0).unwrap() <= 5);
    assert_eq!(measurements_for_target(&s, 0.0), None);
}

#[test]
fn grazing_runs_are_merged_and_crossings_kept() {
    // Worked by hand. A field sampled every 1 px, threshold 0.5:
    //   index: 0    1    2    3    4    5    6    7    8    9    10
    //   value: 0.0  0.0  1.0  1.0  0.0  0.0  0.6  0.45 0.6  0.0  0.0
    // Runs (linear-interpolated crossings of 0.5):
    //   gap [0, 1.5]  arm [1.5, 3.5]  gap [3.5, 5+5/6]
    //   arm [5+5/6, 6+0.1/0.15]  gap [6+2/3, 7+1/3]  arm [7+1/3, 8+1/6]  gap [8+1/6, 10]
    // Depths (farthest the field gets from 0.5 inside the run): the arm at
    // 2-3 reaches 1.0 (0.5); the three runs about index 7 reach 0.6, 0.45
    // and 0.6 (depths 0.1, 0.05, 0.1), all under 0.183: the line grazed a
    // boundary there. The shallowest (the gap at index 7) goes first and its
    // arms either side become one arm [5+5/6, 8+1/6] of depth 0.1, which is
    // merged in turn with the gaps either side of it: one gap [3.5, 10].
    let v = [0.0f32, 0.0, 1.0, 1.0, 0.0, 0.0, 0.6, 0.45, 0.6, 0.0, 0.0];
    let mut runs = runs_of_profile(&v, 1.0, 0.5, false);
    assert_eq!(runs.len(), 7);
    merge_grazing_runs(&mut runs, &v, 1.0, 0.183);
    assert_eq!(runs.len(), 3, "{runs:?}");
    assert!(runs[1].fg && (runs[1].start - 1.5).abs() < 1e-9 && (runs[1].end - 3.5).abs() < 1e-9);
    assert!(!runs[2].fg && (runs[2].start - 3.5).abs() < 1e-9 && (runs[2].end - 10.0).abs() < 1e-9);
    // A zero depth merges nothing.
    let mut again = runs_of_profile(&v, 1.0, 0.5, false);
    merge_grazing_runs(&mut again, &v, 1.0, 0.0);
    assert_eq!(again.len(), 7);
}
