//! The main job end to end against values armspace did not compute: each
//! image of fixtures/end_to_end/reference.json (the demo steps and the
//! synthetic fields of fixtures/end_to_end/) measured by `measure_file` with
//! its known calibration, its combined value compared with
//!
//! (i)   an independent reference written with numpy, scipy and
//!       scikit-image from the published descriptions of the power-spectrum
//!       peak and the line intercept (scripts/end_to_end_reference.py, whose
//!       results are committed; this test runs no Python);
//! (ii)  hand counts written out arm by arm (fixtures/end_to_end/hand_counts.json);
//! (iii) the synthetic truth of the generator (fixtures/demo/truth.json,
//!       fixtures/end_to_end/truth.json).
//!
//! What disagrees today is listed in fixtures/end_to_end/README.md with the
//! figures, and below as "known gap (issue 13)".

mod common;
use armspace::pipeline::{measure_file, MeasureOptions};
use armspace::stats::t_quantile;
use armspace::units::UmPerPx;
use common::repo_file;
use serde_json::Value;

fn json(rel: &str) -> Value {
    serde_json::from_str(&std::fs::read_to_string(repo_file(rel)).unwrap()).unwrap()
}

/// armspace's combined value and 95 % interval, micrometres, or None.
struct Measured {
    value: Option<f64>,
    ci: Option<[f64; 2]>,
}

fn measure(file: &str, um_per_px: f64) -> Measured {
    let opts = MeasureOptions::manual(UmPerPx::new(um_per_px).unwrap());
    let r = measure_file(&repo_file(file), &opts);
    assert!(r.error.is_none(), "{file}: {:?}", r.error);
    Measured {
        value: r.sdas.value.map(|v| v.0),
        ci: r.sdas.ci95.map(|[a, b]| [a.0, b.0]),
    }
}

fn half_width(ci: [f64; 2]) -> f64 {
    0.5 * (ci[1] - ci[0])
}

/// The truth record of a fixture image, from the truth file beside it.
fn truth_um(file: &str) -> Option<f64> {
    let dir = std::path::Path::new(file).parent().unwrap();
    let name = std::path::Path::new(file).file_name().unwrap();
    let truth = json(&format!("{}/truth.json", dir.display()));
    truth["images"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["file"].as_str() == name.to_str())
        .and_then(|t| t["sdas_um"].as_f64())
}

/// Two independent 95 % intervals of the same quantity: their difference has
/// the half-width sqrt(h1^2 + h2^2) (sum of independent variances; both
/// intervals are roughly symmetric), so the values agree when they differ by
/// no more than that.
fn agree(a: f64, ha: f64, b: f64, hb: f64) -> bool {
    (a - b).abs() <= (ha * ha + hb * hb).sqrt()
}

#[test]
fn combined_value_against_the_independent_reference() {
    let reference = json("fixtures/end_to_end/reference.json");
    let mut compared = 0;
    for (file, rec) in reference["images"].as_object().unwrap() {
        let upp = rec["um_per_px"].as_f64().unwrap();
        let m = measure(file, upp);
        for part in ["spectrum", "intercept"] {
            let r = &rec[part];
            let (Some(rv), Some(rci)) = (r["spacing_um"].as_f64(), r["ci95_um"].as_array()) else {
                eprintln!("{file}: reference {part} gives no value: {}", r["reason"]);
                continue;
            };
            let rci = [rci[0].as_f64().unwrap(), rci[1].as_f64().unwrap()];
            let (Some(a), Some(aci)) = (m.value, m.ci) else {
                // Only the 50 mm demo step and the binary field lack an
                // armspace value, and the reference gives none there either
                // (checked: no reference value reaches this point).
                panic!("{file}: the reference's {part} gives {rv:.2} um, armspace no value");
            };
            let ok = agree(a, half_width(aci), rv, half_width(rci));
            eprintln!(
                "{file}: armspace {a:.2} [{:.2}, {:.2}] vs reference {part} {rv:.2} [{:.2}, {:.2}]: {}",
                aci[0],
                aci[1],
                rci[0],
                rci[1],
                if ok { "agree" } else { "DISAGREE" }
            );
            // known gap (issue 13): the reference's Otsu line intercept reads
            // 18-39 % above the synthetic truth where the arms fuse after
            // thresholding (it counts two fused arms as one), and armspace,
            // which sides with the truth there, disagrees with it on four
            // fields: demo 6 mm (armspace 17.57 um vs intercept 21.47
            // [20.18, 22.76]; truth 18.09), demo 12 mm (28.57 vs 33.28
            // [29.42, 37.15]; truth 27.91), e2e-etched-dark-arms (9.56 vs
            // 12.66 [10.42, 14.90]; truth 9.09), e2e-lace-95deg (16.07 vs
            // 21.20 [18.64, 23.76]; truth 15.92). The intercept is checked
            // on the other fields only (clean field, demo 25 mm).
            let intercept_gap = [
                "plate-CVF-SP4-step06mm.png",
                "plate-CVF-SP4-step12mm.png",
                "e2e-etched-dark-arms.png",
                "e2e-lace-95deg.png",
            ];
            if part == "intercept" && intercept_gap.iter().any(|g| file.ends_with(g)) {
                continue;
            }
            // Source: scripts/end_to_end_reference.py (numpy.fft power
            // spectrum peak / skimage Otsu line intercept), its 95 % interval
            // as committed in reference.json.
            assert!(
                ok,
                "{file}: armspace {a:.2} um [{:.2}, {:.2}] vs reference {part} {rv:.2} um [{:.2}, {:.2}]",
                aci[0], aci[1], rci[0], rci[1]
            );
            compared += 1;
        }
    }
    // Six spectrum comparisons and two intercept comparisons.
    assert_eq!(compared, 8);
}

#[test]
fn combined_value_against_hand_counts() {
    let hand = json("fixtures/end_to_end/hand_counts.json");
    let counts = hand["counts"].as_array().unwrap();
    assert!(counts.len() >= 2);
    for c in counts {
        assert_eq!(c["method"].as_str(), Some("hand count"));
        let file = c["file"].as_str().unwrap();
        let upp = c["um_per_px"].as_f64().unwrap();
        // Source: hand count (fixtures/end_to_end/hand_counts.json), arms
        // counted by eye along one trunk; spacing = first-to-last distance
        // / gaps. Its uncertainty: the spread of the single gaps read by
        // hand, t(0.975, gaps - 1) sd / sqrt(gaps) (one trunk is a small
        // sample of a field whose spacings scatter by 10-15 %).
        let centres: Vec<f64> = c["arm_centres_along_trunk_px"]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_f64().unwrap())
            .collect();
        let gaps: Vec<f64> = centres.windows(2).map(|w| w[1] - w[0]).collect();
        let g = gaps.len() as f64;
        assert_eq!(gaps.len() as u64, c["gaps"].as_u64().unwrap());
        let mean = gaps.iter().sum::<f64>() / g;
        let sd = (gaps.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (g - 1.0)).sqrt();
        let hand_um = c["spacing_um"].as_f64().unwrap();
        let hand_hw = t_quantile(0.975, g - 1.0).unwrap() * sd / g.sqrt() * upp;
        let m = measure(file, upp);
        let (a, aci) = (m.value.unwrap(), m.ci.unwrap());
        eprintln!(
            "{file}: armspace {a:.2} [{:.2}, {:.2}] vs hand count {hand_um:.2} +- {hand_hw:.2} um ({} arms)",
            aci[0],
            aci[1],
            centres.len()
        );
        assert!(
            agree(a, half_width(aci), hand_um, hand_hw),
            "{file}: armspace {a:.2} um vs hand count {hand_um:.2} +- {hand_hw:.2} um"
        );
    }
}

#[test]
fn combined_value_against_synthetic_truth() {
    let reference = json("fixtures/end_to_end/reference.json");
    let mut checked = 0;
    for (file, rec) in reference["images"].as_object().unwrap() {
        let upp = rec["um_per_px"].as_f64().unwrap();
        let truth = truth_um(file).expect("every fixture here has a truth record");
        let m = measure(file, upp);
        // known gap (issue 13): no value on the two equiaxed fields, the
        // 50 mm demo step (truth 61.88 um) and e2e-binary (drawn as dense
        // equiaxed grains, truth 14.81 um); the reference gives none there
        // either (its whole-image peaks, 181 and 60 px, are no arm spacing,
        // and fewer than two tiles of eight such periods fit).
        let (Some(a), Some(aci)) = (m.value, m.ci) else {
            eprintln!("{file}: armspace no value (truth {truth:.2} um): known gap");
            assert!(
                file.ends_with("plate-CVF-SP4-step50mm.png") || file.ends_with("e2e-binary.png"),
                "{file}: no value, truth {truth:.2} um"
            );
            continue;
        };
        eprintln!(
            "{file}: armspace {a:.2} [{:.2}, {:.2}] vs truth {truth:.2} um",
            aci[0], aci[1]
        );
        // Source: synthetic truth (the generator's record of the drawn arm
        // positions, checked on the pixels by tests/synth_truth.rs): the
        // field's own mean spacing, so armspace's 95 % interval should hold it.
        assert!(
            aci[0] <= truth && truth <= aci[1],
            "{file}: truth {truth:.2} um outside armspace's [{:.2}, {:.2}]",
            aci[0],
            aci[1]
        );
        checked += 1;
    }
    assert_eq!(checked, 6);
}
