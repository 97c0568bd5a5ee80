//! The spatial index of local measurements (`armspace::spatial`): its
//! radius and nearest-neighbour queries against a brute-force search over
//! the same points (the definition of both queries; common practice, no
//! single source).

use armspace::methods::{Local, Method};
use armspace::spatial::{Entry, Index};
use armspace::units::{Micrometres, Pixels};
use proptest::prelude::*;

fn entry(x: f64, y: f64) -> Entry {
    Entry {
        method: Method::Fft,
        x_um: x,
        y_um: y,
        local: Local {
            x: Pixels(x),
            y: Pixels(y),
            spacing: Pixels(10.0),
            dir_deg: 0.0,
            quality: None,
            used: true,
        },
    }
}

/// The index moves each point by at most 2e-9 um per entry to keep grid
/// coordinates distinct (see `Index::of_entries`); points closer than this
/// to the radius may fall either way.
const SLACK: f64 = 1e-5;

fn points() -> impl Strategy<Value = Vec<(f64, f64)>> {
    // Free positions, and positions on a grid of tiles (many equal x and
    // y, which the tree's buckets must cope with).
    prop_oneof![
        prop::collection::vec((0.0..500.0f64, 0.0..400.0f64), 0..300),
        prop::collection::vec((0..40u32, 0..30u32), 0..600).prop_map(|v| v
            .into_iter()
            .map(|(i, j)| (12.5 * i as f64, 12.5 * j as f64))
            .collect()),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 64,
        failure_persistence: None,
        rng_seed: proptest::test_runner::RngSeed::Fixed(20261204),
        ..ProptestConfig::default()
    })]

    #[test]
    fn radius_and_nearest_queries_agree_with_brute_force(
        pts in points(),
        q in (-50.0..550.0f64, -50.0..450.0f64),
        r in 0.1..200.0f64,
        k in 1usize..40,
    ) {
        let index = Index::of_entries(pts.iter().map(|&(x, y)| entry(x, y)).collect());
        let dist = |i: usize| (pts[i].0 - q.0).hypot(pts[i].1 - q.1);
        let found = index.within([q.0, q.1], Micrometres(r));
        // Every point well inside is found, nothing well outside is, and
        // no point twice.
        for i in 0..pts.len() {
            let d = dist(i);
            if d < r - SLACK {
                prop_assert!(found.contains(&i), "missed {i} at {d} < {r}");
            }
            if d > r + SLACK {
                prop_assert!(!found.contains(&i), "found {i} at {d} > {r}");
            }
        }
        prop_assert!(found.windows(2).all(|w| w[0] < w[1]));
        // The k nearest: the same distances as the k smallest by brute force.
        let mut all: Vec<f64> = (0..pts.len()).map(dist).collect();
        all.sort_by(f64::total_cmp);
        let near = index.nearest([q.0, q.1], k);
        prop_assert_eq!(near.len(), k.min(pts.len()));
        for (j, &(i, d)) in near.iter().enumerate() {
            prop_assert!((d.0 - all[j]).abs() < SLACK, "{j}: {} against {}", d.0, all[j]);
            prop_assert!((d.0 - dist(i)).abs() < SLACK);
        }
    }
}

/// `--at` on two-part fields (`synth --gradient 1:1.5:2`: the left half
/// drawn at the field's spacing, the right half at 1.5 times it; the
/// generator's truth gives each part's spacing): seeds 9302 (clean, six
/// fields) and 9311 (clean and etched, four fields each), at each part's
/// centre and at 0.3 and 0.7 of the height, with the default radius and
/// with a radius inside the part (0.45 of its width). The target:
/// a value is within 5 % of its part's drawn spacing, or its interval
/// covers it; and a value is never the other part's spacing (it lies
/// nearer its own part's). A point without a value says why. Before the
/// one-population test, the default radius read the finer part's spacing
/// at points of the coarser part (seed 9302: -13.6 % to -32.4 %, intervals
/// that did not cover the truth). Figures when this was written: 23 of 168
/// points with a value (16 of 72 on seed 9302, 7 of 48 on 9311 clean, 0 of
/// 48 on 9311 etched), all within 5 % or covering their part's spacing.
#[test]
fn at_a_part_of_a_two_part_field_reads_that_part_or_nothing() {
    use armspace::pipeline::{measure_file, MeasureOptions};
    use armspace::spatial::parse_at;
    use armspace::synth::{write_set_graded, Gradient, Style};
    use armspace::units::UmPerPx;
    let mut values = 0;
    let mut points = 0;
    let mut lines = Vec::new();
    for (seed, style, count) in [
        (9302, Style::Clean, 6),
        (9311, Style::Clean, 4),
        (9311, Style::Etched, 4),
    ] {
        let dir = tempfile::tempdir().unwrap();
        let g = Gradient::parse("1:1.5:2").unwrap();
        let truths = write_set_graded(dir.path(), seed, count, Some(style), Some(g)).unwrap();
        for t in truths {
            let bands = t.bands.clone().unwrap();
            assert_eq!(bands.len(), 2);
            let h = t.spec.height as f64;
            // (own part, other part, the point as given)
            let mut asked = Vec::new();
            for (k, b) in bands.iter().enumerate() {
                let (x0, x1) = (b.x0_px as f64, b.x1_px as f64);
                let x = 0.5 * (x0 + x1);
                for fy in [0.3, 0.5, 0.7] {
                    for r in [String::new(), format!(":{}px", 0.45 * (x1 - x0))] {
                        asked.push((b, &bands[1 - k], format!("{x}px,{}px{r}", fy * h)));
                    }
                }
            }
            let opts = MeasureOptions {
                at: asked.iter().map(|a| parse_at(&a.2).unwrap()).collect(),
                ..MeasureOptions::manual(UmPerPx::new(t.um_per_px).unwrap())
            };
            let r = measure_file(&dir.path().join(&t.file), &opts);
            assert_eq!(r.at.len(), asked.len());
            for (a, (own, other, given)) in r.at.iter().zip(&asked) {
                points += 1;
                match (a.estimate.value, a.estimate.ci95) {
                    (Some(v), Some([lo, hi])) => {
                        values += 1;
                        let e = v.0 / own.sdas_um - 1.0;
                        lines.push(format!(
                            "{seed} {style:?} {} {given}: {:+.1} %",
                            t.file,
                            100.0 * e
                        ));
                        let covers = lo.0 <= own.sdas_um && own.sdas_um <= hi.0;
                        assert!(
                            e.abs() <= 0.05 || covers,
                            "{seed} {} {given}: {v:?} against {} ({:+.1} %), interval {lo:?}..{hi:?}",
                            t.file,
                            own.sdas_um,
                            100.0 * e
                        );
                        assert!(
                            (v.0 - own.sdas_um).abs() < (v.0 - other.sdas_um).abs(),
                            "{seed} {} {given}: {v:?} is nearer the other part's {}",
                            t.file,
                            other.sdas_um
                        );
                    }
                    _ => {
                        let why = a.estimate.reason.clone().unwrap_or_default();
                        assert!(!why.is_empty(), "{seed} {} {given}", t.file);
                        lines.push(format!("{seed} {style:?} {} {given}: none", t.file));
                    }
                }
            }
        }
    }
    eprintln!(
        "{}\n{values} of {points} points with a value",
        lines.join("\n")
    );
    assert!(values > 0, "no part gave a value: {lines:?}");
}

/// Absurd `--at` arguments are usage errors (exit status 2, as the other
/// options' bad values) whose message names the option and the value; no
/// panic, and nothing is measured.
#[test]
fn absurd_points_are_usage_errors_naming_the_option_and_value() {
    let demo = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/fixtures/demo/plate-CVF-SP4-step06mm.png"
    );
    for (value, says) in [
        ("3,4:-2", "must be greater than zero"),
        ("abc", "expected X,Y"),
        ("1,x", "'x' is not a number"),
        ("-5,4", "cannot be negative"),
        ("4px,5um", "mixes um and px"),
        ("99999,5px", "lies outside every image"),
        ("99999,5", "lies outside every image"),
    ] {
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_armspace"))
            .args(["measure", demo, "--um-per-px", "1", "--at", value])
            .output()
            .unwrap();
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{value}: {stderr}");
        assert!(
            stderr.contains("--at") && stderr.contains(value) && stderr.contains(says),
            "{value}: {stderr}"
        );
        assert!(
            !stderr.contains("panicked") && out.stdout.is_empty(),
            "{value}"
        );
    }
}

/// `--along` on graded fields (`synth --gradient 1:1.6:4`, fresh seed 9334 (9331 to 9333 draw fields too narrow for 4 bands: refused by the generator),
/// clean style, four fields): the line across the middle from the wall
/// (left edge) to the right edge, one bin per band. The bins lie where they
/// should (centres at the bands' centres), every bin without a value says
/// why, and a bin's value, when there is one, is within 10 % of its band's
/// drawn spacing (the generator's truth). Figures when this was written:
/// 3 of 16 bins have a combined value (-0.4 %, +1.1 %, +1.2 %, all in one
/// field); the others hold too few measurements of two methods that agree
/// (the FFT's own bin values, where it has one, -2.3 % to +4.1 %; printed
/// with --nocapture). The targets (slope within 10 %, 90 % of bins
/// covering the drawn value) are not met: too few bins have a value.
#[test]
fn along_a_graded_field_bins_follow_the_bands() {
    use armspace::pipeline::{measure_file, MeasureOptions};
    use armspace::spatial::parse_along;
    use armspace::synth::{write_set_graded, Gradient, Style};
    use armspace::units::UmPerPx;
    let dir = tempfile::tempdir().unwrap();
    let g = Gradient::parse("1:1.6:4").unwrap();
    let truths = write_set_graded(dir.path(), 9334, 4, Some(Style::Clean), Some(g)).unwrap();
    let mut lines = Vec::new();
    for t in truths {
        let bands = t.bands.clone().unwrap();
        let (w, h) = (t.spec.width as f64, t.spec.height as f64);
        let line = format!("0,{}px:{w},{}px:{}px", h / 2.0, h / 2.0, w / 4.0);
        let opts = MeasureOptions {
            along: vec![parse_along(&line).unwrap()],
            ..MeasureOptions::manual(UmPerPx::new(t.um_per_px).unwrap())
        };
        let r = measure_file(&dir.path().join(&t.file), &opts);
        let p = &r.profiles[0];
        assert!(p.reason.is_none(), "{:?}", p.reason);
        assert_eq!(p.bins.len(), 4);
        for (b, band) in p.bins.iter().zip(&bands) {
            let centre_um = 0.5 * f64::from(band.x0_px + band.x1_px) * t.um_per_px;
            assert!(
                (b.x_um - centre_um).abs() <= t.um_per_px,
                "{} {centre_um}",
                b.x_um
            );
            assert!((b.distance_um - b.x_um).abs() < 1e-6);
            let parts: Vec<String> = b
                .methods
                .iter()
                .filter_map(|m| {
                    m.value.map(|v| {
                        format!(
                            "{} {:+.1} %",
                            m.method.name(),
                            100.0 * (v.0 / band.sdas_um - 1.0)
                        )
                    })
                })
                .collect();
            match b.estimate.value {
                Some(v) => {
                    let e = v.0 / band.sdas_um - 1.0;
                    assert!(e.abs() <= 0.10, "{}: {:+.1} %", t.file, 100.0 * e);
                    lines.push(format!(
                        "{} bin {:.0}: {:+.1} % ({parts:?})",
                        t.file,
                        b.distance_um,
                        100.0 * e
                    ));
                }
                None => {
                    assert!(b.estimate.reason.is_some());
                    lines.push(format!(
                        "{} bin {:.0}: none ({parts:?})",
                        t.file, b.distance_um
                    ));
                }
            }
        }
    }
    eprintln!("{}", lines.join("\n"));
}
