//! Accuracy of `measure` against synthetic micrographs of known SDAS
//! (src/synth; its truth is checked independently in tests/synth_truth.rs).

use armspace::pipeline::{measure_file, MeasureOptions, Method};
use armspace::synth::{write_set, write_set_styled, Morphology, Style, Truth};
use armspace::units::UmPerPx;

/// Relative errors (measured / true - 1) of the images of a synthetic set,
/// with the truth record of each; `None` where no value was given.
fn relative_errors(seed: u64, count: usize) -> Vec<(Truth, Option<f64>)> {
    relative_errors_styled(seed, count, None)
}

/// `relative_errors` on a set drawn in one style (`None`: alternating).
fn relative_errors_styled(
    seed: u64,
    count: usize,
    style: Option<Style>,
) -> Vec<(Truth, Option<f64>)> {
    let dir = tempfile::tempdir().unwrap();
    let truths = write_set_styled(dir.path(), seed, count, style).unwrap();
    truths
        .into_iter()
        .map(|t| {
            let opts = MeasureOptions {
                methods: vec![Method::Fft],
                ..MeasureOptions::manual(UmPerPx::new(t.um_per_px).unwrap())
            };
            let r = measure_file(&dir.path().join(&t.file), &opts);
            assert!(r.error.is_none(), "{}: {:?}", t.file, r.error);
            let err = r.sdas.value.map(|v| v.0 / t.sdas_um - 1.0);
            (t, err)
        })
        .collect()
}

#[test]
fn columnar_fields_are_within_15_percent() {
    // The foundation's acceptance figure for a first measurement: every
    // columnar image of the set (clean and etched, with noise, blur, uneven
    // illumination, inversion and a scale bar) within 15 % of its truth.
    let results = relative_errors(2026, 24);
    let columnar: Vec<&(Truth, Option<f64>)> = results
        .iter()
        .filter(|(t, _)| t.morphology == Morphology::Columnar)
        .collect();
    assert_eq!(columnar.len(), 12);
    let mut worst = 0.0f64;
    for (t, e) in &columnar {
        let e = e.unwrap_or_else(|| panic!("{}: no value", t.file));
        eprintln!(
            "{} {:?} {:?} true {:.2} px: error {:+.2} %",
            t.file,
            t.morphology,
            t.style,
            t.sdas_px,
            100.0 * e
        );
        worst = worst.max(e.abs());
        assert!(e.abs() <= 0.15, "{}: {:+.1} %", t.file, 100.0 * e);
    }
    eprintln!("columnar worst error {:.2} %", 100.0 * worst);
}

/// |relative error| quantile (nearest rank) with images without a value
/// counted as failures (infinite error).
fn quantile(errors: &[Option<f64>], q: f64) -> f64 {
    let mut e: Vec<f64> = errors
        .iter()
        .map(|e| e.map_or(f64::INFINITY, f64::abs))
        .collect();
    e.sort_by(|a, b| a.total_cmp(b));
    let k = ((q * e.len() as f64).ceil() as usize).clamp(1, e.len()) - 1;
    e[k]
}

#[test]
fn fft_accuracy_on_a_48_image_set() {
    // The FFT method's acceptance figures for columnar fields: median
    // |relative error| <= 2 % and 90th percentile <= 5 %, over clean and
    // etched fields with spacings of 6 to 80 px, noise, blur, uneven
    // illumination, inversion and scale bars; an image without a value counts
    // as a failure. Equiaxed figures are printed: most etched equiaxed fields
    // give no value (README, known limits); the equiaxed target, 4 % and
    // 10 %, is asserted on the nuisance-only set of
    // `fft_targets_on_a_nuisance_only_set`. Whatever
    // the morphology, a value that is given must not be a harmonic reading:
    // off by a factor 2 or more from the truth would be a harmonic or a
    // sub-harmonic, and sqrt 2 is the geometric midpoint (common practice, no
    // single source).
    let results = relative_errors(4040, 48);
    for (t, e) in &results {
        if let Some(e) = e {
            assert!(
                (1.0 + e).ln().abs() < std::f64::consts::SQRT_2.ln(),
                "{} {:?}: {:+.1} %, a harmonic reading",
                t.file,
                t.morphology,
                100.0 * e
            );
        }
    }
    for morph in [Morphology::Columnar, Morphology::Equiaxed] {
        let errs: Vec<Option<f64>> = results
            .iter()
            .filter(|(t, _)| t.morphology == morph)
            .map(|(_, e)| *e)
            .collect();
        let nulls = errs.iter().filter(|e| e.is_none()).count();
        let (median, p90) = (quantile(&errs, 0.5), quantile(&errs, 0.9));
        eprintln!(
            "{morph:?}: n {} median {:.2} % p90 {:.2} % without value {nulls}",
            errs.len(),
            100.0 * median,
            100.0 * p90
        );
        if morph == Morphology::Columnar {
            assert!(median <= 0.02, "columnar median {:.2} %", 100.0 * median);
            assert!(p90 <= 0.05, "columnar p90 {:.2} %", 100.0 * p90);
        }
    }
}

#[test]
fn the_two_methods_agree_on_columnar_fields() {
    // Both methods on the columnar fields of the 48-image set: where both
    // give a value they must agree within 10 % on at least 90 % of the
    // images; a larger disagreement is a warning in the report.
    let dir = tempfile::tempdir().unwrap();
    let truths = write_set(dir.path(), 4040, 48).unwrap();
    let (mut both, mut agree) = (0, 0);
    for t in truths
        .iter()
        .filter(|t| t.morphology == Morphology::Columnar)
    {
        // The two methods alone, so that the disagreement warning is theirs.
        let opts = MeasureOptions {
            methods: vec![Method::Fft, Method::Intercept],
            ..MeasureOptions::manual(UmPerPx::new(t.um_per_px).unwrap())
        };
        let r = measure_file(&dir.path().join(&t.file), &opts);
        let f = r.method(Method::Fft).and_then(|o| o.value).map(|v| v.0);
        let i = r
            .method(Method::Intercept)
            .and_then(|o| o.value)
            .map(|v| v.0);
        if let (Some(f), Some(i)) = (f, i) {
            both += 1;
            let close = (i / f - 1.0).abs() <= 0.10;
            agree += usize::from(close);
            let warned = r.warnings.iter().any(|w| w.code == "methods.disagree");
            assert_eq!(
                warned, !close,
                "{}: fft {f:.2} px, intercept {i:.2} px",
                t.file
            );
            eprintln!(
                "{} fft {f:.2} intercept {i:.2} true {:.2}",
                t.file, t.sdas_px
            );
        }
    }
    eprintln!("both methods on {both} columnar images, {agree} within 10 %");
    assert!(both >= 20, "only {both} images with both values");
    assert!(agree as f64 >= 0.9 * both as f64, "{agree} of {both} agree");
}

#[test]
fn disagreement_warning_threshold() {
    use armspace::combine::disagreement;
    use armspace::units::Micrometres;
    let fft = |v| (Method::Fft, Micrometres(v));
    let intercept = |v| (Method::Intercept, Micrometres(v));
    assert!(disagreement(fft(30.0), intercept(32.9)).is_none());
    let w = disagreement(fft(30.0), intercept(33.3)).unwrap();
    assert_eq!(w.code, "methods.disagree");
    assert!(w.message.contains("+11.0 %"), "{w}");
    assert!(disagreement(fft(30.0), intercept(26.7)).is_some());
}

#[test]
fn fft_targets_on_a_nuisance_only_set() {
    // The FFT method's acceptance figures on a set of 48 fields drawn as
    // smooth bars with the nuisances only (noise, blur, uneven
    // illumination, inversion, missing arms, spacing jitter, scale bars;
    // spacings of 6 to 80 px), seed 555, a seed not used while the method
    // was developed: median |relative error| <= 2 % and 90th percentile
    // <= 5 % for columnar fields, <= 4 % and <= 10 % for equiaxed ones, an
    // image without a value counting as a failure. The etched look is a
    // harder set of its own (fft_accuracy_on_a_48_image_set; README, known
    // limits).
    let results = relative_errors_styled(555, 48, Some(Style::Clean));
    for (morph, median_max, p90_max) in [
        (Morphology::Columnar, 0.02, 0.05),
        (Morphology::Equiaxed, 0.04, 0.10),
    ] {
        let errs: Vec<Option<f64>> = results
            .iter()
            .filter(|(t, _)| t.morphology == morph)
            .map(|(_, e)| *e)
            .collect();
        assert_eq!(errs.len(), 24);
        let (median, p90) = (quantile(&errs, 0.5), quantile(&errs, 0.9));
        let nulls = errs.iter().filter(|e| e.is_none()).count();
        eprintln!(
            "{morph:?} (nuisances only): median {:.2} % p90 {:.2} % without value {nulls}",
            100.0 * median,
            100.0 * p90
        );
        assert!(
            median <= median_max,
            "{morph:?} median {:.2} %",
            100.0 * median
        );
        assert!(p90 <= p90_max, "{morph:?} p90 {:.2} %", 100.0 * p90);
    }
}
