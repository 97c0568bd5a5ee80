//! Accuracy of the intercept method against synthetic micrographs of known
//! SDAS (src/synth; its truth is checked independently in
//! tests/synth_truth.rs), measured in pixels.

use armspace::calibrate::scale_bar;
use armspace::load::GrayImage;
use armspace::methods::intercept::{measure, InterceptOutcome, InterceptParams};
use armspace::preprocess::{prepare, Prepared, PreprocessParams};
use armspace::synth::{random_spec, render, FieldSpec, Morphology, Style, Truth};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Prepares a rendered image the way the pipeline does: scale bar found and
/// masked, then illumination flattening and normalisation.
fn prepared_of(spec: &FieldSpec) -> (Prepared, Truth) {
    let (img, truth) = render(spec).unwrap();
    let (w, h) = (img.width() as usize, img.height() as usize);
    let data = img.as_raw().iter().map(|&v| v as f32 / 65535.0).collect();
    let gray = GrayImage::from_vec(w, h, data).unwrap();
    let mask = scale_bar::detect(&gray)
        .ok()
        .map(|b| scale_bar::mask_of(&b, w, h));
    (prepare(&gray, mask, &PreprocessParams::default()), truth)
}

/// The specs `synth::write_set(dir, seed, count)` would render.
fn specs(seed: u64, count: usize) -> Vec<FieldSpec> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    (0..count).map(|i| random_spec(&mut rng, i)).collect()
}

fn run(seed: u64, count: usize, params: &InterceptParams) -> Vec<(Truth, InterceptOutcome)> {
    specs(seed, count)
        .par_iter()
        .map(|s| {
            let (p, t) = prepared_of(s);
            (t, measure(&p, params))
        })
        .collect()
}

struct Figures {
    n: usize,
    nulls: usize,
    median_abs: f64,
    p90_abs: f64,
    mean_signed: f64,
}

fn figures(errs: &[Option<f64>]) -> Figures {
    let mut v: Vec<f64> = errs.iter().flatten().copied().collect();
    let nulls = errs.len() - v.len();
    let mean_signed = v.iter().sum::<f64>() / v.len().max(1) as f64;
    for e in v.iter_mut() {
        *e = e.abs();
    }
    v.sort_by(|a, b| a.total_cmp(b));
    let q = |p: f64| -> f64 {
        if v.is_empty() {
            return f64::NAN;
        }
        // Nearest-rank percentile.
        let k = ((p * v.len() as f64).ceil() as usize).clamp(1, v.len());
        v[k - 1]
    };
    Figures {
        n: errs.len(),
        nulls,
        median_abs: armspace::stats::median(&v).unwrap_or(f64::NAN),
        p90_abs: q(0.9),
        mean_signed,
    }
}

fn report(label: &str, errs: &[Option<f64>]) -> Figures {
    let f = figures(errs);
    eprintln!(
        "{label:<28} n {:>3} nulls {:>2} median |err| {:>5.2} % p90 {:>5.2} % mean signed {:+.2} %",
        f.n,
        f.nulls,
        100.0 * f.median_abs,
        100.0 * f.p90_abs,
        100.0 * f.mean_signed
    );
    f
}

fn errors(
    results: &[(Truth, InterceptOutcome)],
    m: Morphology,
    s: Option<Style>,
) -> Vec<Option<f64>> {
    results
        .iter()
        .filter(|(t, _)| t.morphology == m && s.is_none_or(|s| t.style == s))
        .map(|(t, o)| o.value_px.map(|p| p.0).map(|v| v / t.sdas_px - 1.0))
        .collect()
}

fn print_all(results: &[(Truth, InterceptOutcome)]) {
    for (t, o) in results {
        eprintln!(
            "  {:?} {:?} inv {} true {:6.2} px -> {} ({} lines, RA {:?}) {}",
            t.morphology,
            t.style,
            t.spec.invert,
            t.sdas_px,
            o.value_px
                .map(|p| p.0)
                .map(|v| format!("{v:6.2} px {:+6.2} %", 100.0 * (v / t.sdas_px - 1.0)))
                .unwrap_or_else(|| "none".into()),
            o.n_lines,
            o.rel_accuracy_pct.map(|r| (r * 10.0).round() / 10.0),
            o.reason.clone().unwrap_or_default()
        );
    }
}

#[test]
fn columnar_targets_on_seed_2026() {
    // Targets of the method's brief: over the columnar images (clean and
    // etched, with noise, blur, illumination, inversion and a scale bar),
    // median |relative error| <= 3 %, 90th percentile <= 7 %, mean signed
    // error within 1.5 %, every image measured.
    assert_columnar_targets(2026, 24);
}

/// Nearest-rank 90th percentile of |error| with images without a value
/// counted as failures (an infinite error), as the targets require.
fn p90_with_nulls(errs: &[Option<f64>]) -> f64 {
    let mut v: Vec<f64> = errs
        .iter()
        .map(|e| e.map_or(f64::INFINITY, f64::abs))
        .collect();
    v.sort_by(|a, b| a.total_cmp(b));
    let k = ((0.9 * v.len() as f64).ceil() as usize).clamp(1, v.len());
    v[k - 1]
}

#[test]
fn columnar_targets_on_seed_4040() {
    // An independent set (not used while the method was developed before
    // issue #5; 48 images as `armspace synth --seed 4040 --count 48` writes
    // them, 24 columnar). Targets of the method's brief (issue #5): median
    // |relative error| <= 3 %, 90th percentile <= 7 % with an image
    // without a value counted as a failure, mean signed error within 1.5 %.
    // Before the pooled recount used the stereological arm run and a fixed
    // point for the period, two fine etched images read +9 % and +20 %.
    assert_columnar_targets(4040, 48);
}

/// The brief's columnar targets on a synthetic set: every columnar image
/// measured, median |error| <= 3 %, p90 <= 7 % (an image without a value
/// counted as a failure), mean signed error within 1.5 %.
fn assert_columnar_targets(seed: u64, count: usize) {
    let results = run(seed, count, &InterceptParams::default());
    print_all(&results);
    let col = errors(&results, Morphology::Columnar, None);
    let f = report(&format!("seed {seed} columnar"), &col);
    report(
        &format!("seed {seed} equiaxed"),
        &errors(&results, Morphology::Equiaxed, None),
    );
    assert_eq!(f.nulls, 0, "columnar images without a value");
    assert!(
        f.median_abs <= 0.03,
        "median |error| {:.2} %",
        100.0 * f.median_abs
    );
    let p90 = p90_with_nulls(&col);
    assert!(p90 <= 0.07, "p90 |error| {:.2} %", 100.0 * p90);
    assert!(
        f.mean_signed.abs() <= 0.015,
        "mean signed error {:+.2} %",
        100.0 * f.mean_signed
    );
}

#[test]
#[ignore = "survey over several seed sets; run with --ignored --nocapture"]
fn survey_seed_sets() {
    let mut params = InterceptParams::default();
    if let Ok(c) = std::env::var("MINCOH") {
        params.min_coherence = c.parse().unwrap();
    }
    if let Ok(c) = std::env::var("MINRUN") {
        params.min_run_px = c.parse().unwrap();
    }
    let seeds: Vec<u64> = std::env::var("SEEDS")
        .unwrap_or("7,11,23,2026".into())
        .split(',')
        .map(|s| s.parse().unwrap())
        .collect();
    let count: usize = std::env::var("COUNT")
        .map(|c| c.parse().unwrap())
        .unwrap_or(24);
    let mut all = Vec::new();
    for seed in seeds {
        let results = run(seed, count, &params);
        if std::env::var("VERBOSE").is_ok() {
            print_all(&results);
        }
        for (m, s) in [
            (Morphology::Columnar, Style::Etched),
            (Morphology::Columnar, Style::Clean),
            (Morphology::Equiaxed, Style::Etched),
            (Morphology::Equiaxed, Style::Clean),
        ] {
            report(
                &format!("seed {seed} {m:?} {s:?}"),
                &errors(&results, m, Some(s)),
            );
        }
        report(
            &format!("seed {seed} columnar"),
            &errors(&results, Morphology::Columnar, None),
        );
        all.extend(results);
    }
    for (m, s) in [
        (Morphology::Columnar, Some(Style::Etched)),
        (Morphology::Columnar, Some(Style::Clean)),
        (Morphology::Columnar, None),
        (Morphology::Equiaxed, Some(Style::Etched)),
        (Morphology::Equiaxed, Some(Style::Clean)),
        (Morphology::Equiaxed, None),
    ] {
        report(&format!("all {m:?} {s:?}"), &errors(&all, m, s));
    }
}

#[test]
#[ignore = "timing report, not a check; run in release with --ignored --nocapture"]
fn timing_of_a_1024_square_image() {
    // The method runs on one thread (no rayon inside `measure`).
    let mut rng = ChaCha8Rng::seed_from_u64(99);
    for i in 0..4 {
        let mut spec = random_spec(&mut rng, i);
        spec.width = 1024;
        spec.height = 1024;
        let (p, t) = prepared_of(&spec);
        let params = InterceptParams::default();
        let _ = measure(&p, &params);
        let t0 = std::time::Instant::now();
        let reps = 3;
        let mut o = None;
        for _ in 0..reps {
            o = Some(measure(&p, &params));
        }
        let dt = t0.elapsed().as_secs_f64() / reps as f64;
        let o = o.unwrap();
        eprintln!(
            "{:?} {:?} 1024x1024, true {:.2} px: {:.1} ms, value {:?}, {} lines",
            t.morphology,
            t.style,
            t.sdas_px,
            1e3 * dt,
            o.value_px.map(|p| p.0).map(|v| (v * 100.0).round() / 100.0),
            o.n_lines
        );
    }
}
