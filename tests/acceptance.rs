//! Acceptance against an SDAS limit and the batch run: the decision rules at
//! and around the limit, zones, exit statuses, the CSV summary against the
//! JSON report, a corrupt file in a batch, and parallel runs.

mod common;
use armspace::interpret::acceptance::{
    assess, decide, decide_with_guard, measurements_for_probability,
    measurements_for_probability_guarded, verdict, Decision, Evidence, Rule, Spec,
    DECIDE_PROBABILITY,
};
use armspace::units::Micrometres;
use common::*;
use serde_json::Value;

fn ev(value: f64, ci: Option<[f64; 2]>, n: usize, cal_half: f64) -> Evidence {
    Evidence {
        value: Some(Micrometres(value)),
        ci95: ci.map(|[a, b]| [Micrometres(a), Micrometres(b)]),
        n,
        calibration_half_um: cal_half,
        bootstrap: None,
    }
}

#[test]
fn guarded_rule_at_and_around_the_limit() {
    // ISO 14253-1:2017 and JCGM 106:2012 guarded acceptance with the guard
    // band equal to the expanded uncertainty (95 %): conformance only when
    // the whole interval is at or below the upper limit, non-conformance only
    // when the whole interval is above it.
    let g =
        |v: f64, lo: f64, hi: f64| decide(&ev(v, Some([lo, hi]), 20, 0.0), 30.0, Rule::Guarded).0;
    assert_eq!(g(25.0, 23.0, 27.0), Decision::Pass);
    assert_eq!(g(35.0, 33.0, 37.0), Decision::Fail);
    // Upper bound exactly at the limit: the interval is within it, pass.
    assert_eq!(g(28.0, 26.0, 30.0), Decision::Pass);
    // Lower bound exactly at the limit: not above it, indeterminate.
    assert_eq!(g(32.0, 30.0, 34.0), Decision::Indeterminate);
    // Just above: fail.
    assert_eq!(g(32.0, 30.000001, 34.0), Decision::Fail);
    // Value exactly at the limit: the interval straddles it.
    assert_eq!(g(30.0, 28.0, 32.0), Decision::Indeterminate);
    // Straddling on either side.
    assert_eq!(g(29.5, 27.5, 31.5), Decision::Indeterminate);
    assert_eq!(g(30.5, 28.5, 32.5), Decision::Indeterminate);
    // No interval or no value: cannot be decided.
    assert_eq!(
        decide(&ev(20.0, None, 3, 0.0), 30.0, Rule::Guarded).0,
        Decision::Indeterminate
    );
    assert_eq!(
        decide(&Evidence::default(), 30.0, Rule::Guarded).0,
        Decision::Indeterminate
    );
}

#[test]
fn simple_rule_at_and_around_the_limit() {
    // Simple acceptance (zero guard band, ILAC-G8 "simple acceptance"): the
    // value alone against the limit; a value exactly at it conforms.
    let s = |v: f64| {
        decide(
            &ev(v, Some([v - 5.0, v + 5.0]), 20, 0.0),
            30.0,
            Rule::Simple,
        )
        .0
    };
    assert_eq!(s(29.99), Decision::Pass);
    assert_eq!(s(30.0), Decision::Pass);
    assert_eq!(s(30.01), Decision::Fail);
    assert_eq!(
        decide(&Evidence::default(), 30.0, Rule::Simple).0,
        Decision::Indeterminate
    );
}

#[test]
fn indeterminate_results_say_how_many_more_measurements_would_decide() {
    // Worked by hand (formula in src/interpret/acceptance.rs), deciding with
    // 90 % probability: value 30, interval 28 to 32 (half-width h = 2),
    // limit 29 (d = 1), n = 10, no calibration part. Then
    // n' = n h^2 (1 + z_0.90 / z_0.975)^2 / d^2
    //    = 10 x 4 x (1 + 1.28155 / 1.95996)^2 = 109.4 -> 110, 11 fields.
    let (d, reason, n, fields) =
        decide(&ev(30.0, Some([28.0, 32.0]), 10, 0.0), 29.0, Rule::Guarded);
    assert_eq!(d, Decision::Indeterminate);
    assert_eq!((n, fields), (Some(110), Some(11)), "{reason}");
    assert!(reason.contains("with 90 % probability"), "{reason}");
    // With a calibration part c = 0.6: h = sqrt(4 - 0.36), and s solving
    // 1 - sqrt(0.36 + (1.95996 s)^2) - 1.28155 s = 0 is 0.21137 (computed
    // apart with Python's statistics.NormalDist and a bisection), sigma =
    // h sqrt(10) / 1.95996 = 3.0782, n' = (sigma / s)^2 = 212.1 -> 213.
    let (_, _, n, fields) = decide(&ev(30.0, Some([28.0, 32.0]), 10, 0.6), 29.0, Rule::Guarded);
    assert_eq!((n, fields), (Some(213), Some(22)));
    // A margin inside the calibration's part cannot be closed by more fields.
    let (_, reason, n, _) = decide(&ev(30.0, Some([28.0, 32.0]), 10, 1.5), 29.0, Rule::Guarded);
    assert!(n.is_none() && reason.contains("calibration"), "{reason}");
    // Exactly at the limit: no number of fields decides it.
    // Exactly at the limit, with or without a calibration part, the reason
    // is the value's place, not the calibration.
    for c in [0.0, 0.5] {
        let (_, reason, n, _) = decide(&ev(29.0, Some([27.0, 31.0]), 10, c), 29.0, Rule::Guarded);
        assert!(n.is_none());
        assert!(
            reason.contains("lies on the limit") && !reason.contains("calibration"),
            "{reason}"
        );
    }
}

#[test]
fn at_half_probability_the_count_only_puts_the_expected_bound_on_the_limit() {
    // At P = 0.5 (z_P = 0) the bound of a new estimate equal to the present
    // value lies on the limit: n' = n h^2 / (d^2 - c^2) (algebra in the
    // module docs). h = 2, c = 0.6, d = 1, n = 10: 10 x 3.64 / 0.64 = 56.9.
    let h = (4.0f64 - 0.36).sqrt();
    assert_eq!(measurements_for_probability(10, h, 0.6, 1.0, 0.5), 57.0);
    assert_eq!(measurements_for_probability(10, 2.0, 0.0, 1.0, 0.5), 40.0);
    assert!(measurements_for_probability(10, 2.0, 1.0, 1.0, 0.9).is_infinite());
}

/// A standard normal deviate (Box-Muller) from a SplitMix stream.
fn normal(rng: &mut armspace::blocks::point_pattern::SplitMix) -> f64 {
    let u1 = 1.0 - rng.unit();
    let u2 = rng.unit();
    (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
}

#[test]
fn the_stated_count_decides_with_the_stated_probability_by_simulation() {
    // Simulation: the truth is the present value, each measurement has the
    // present spread; n' measurements give a mean and a guarded interval
    // (statistical part 1.96 s / sqrt(n'), calibration part c, combined in
    // quadrature as the report does). The fraction of repetitions in which
    // the interval clears the limit is DECIDE_PROBABILITY within 1.5 %
    // (20,000 repetitions: binomial sd 0.2 %; the count is rounded up, which
    // raises the probability a little), and with n' / 2 measurements it is
    // clearly lower. Seed 0x5eed_0acc.
    let mut rng = armspace::blocks::point_pattern::SplitMix(0x5eed_0acc);
    let z95 = armspace::stats::Z95;
    for &(x, half, n, c, limit) in &[
        (30.0f64, 2.0f64, 10usize, 0.0f64, 29.0f64),
        (30.0, 2.0, 10, 0.6, 29.0),
        (41.1, 20.7, 13, 1.0, 50.0),
        (17.6, 0.65, 93, 0.2, 17.0),
    ] {
        let h = (half * half - c * c).sqrt();
        let np = measurements_for_probability(n, h, c, (x - limit).abs(), DECIDE_PROBABILITY);
        assert!(np.is_finite() && np >= 1.0, "{np}");
        let sigma = h * (n as f64).sqrt() / z95;
        let rate = |m: f64, rng: &mut armspace::blocks::point_pattern::SplitMix| {
            let reps = 20_000;
            let s = sigma / m.sqrt();
            let bound = c.hypot(z95 * s);
            let decided = (0..reps)
                .filter(|_| {
                    let xm = x + s * normal(rng);
                    xm + bound <= limit || xm - bound > limit
                })
                .count();
            decided as f64 / reps as f64
        };
        let p = rate(np, &mut rng);
        assert!(
            (p - DECIDE_PROBABILITY).abs() <= 0.015,
            "x {x}, limit {limit}: {np} measurements decide {p}"
        );
        let p_half = rate((np / 2.0).max(1.0), &mut rng);
        assert!(p_half < DECIDE_PROBABILITY - 0.05, "{p_half}");
    }
}

fn spec(text: &str) -> Spec {
    Spec::parse(text, "spec.json").unwrap()
}

#[test]
fn a_guard_band_set_by_the_spec_moves_both_zones() {
    // ISO 14253-1:2017: the acceptance zone is the specification zone
    // reduced by the guard band g, the rejection zone the outside enlarged
    // by g; here g is a percentage of the expanded uncertainty U (the form
    // of ASME B89.7.3.1-2001, from memory). Value 28, U = 2 (interval 26 to
    // 30), upper limit 29.5: with g = U the upper bound 30 is above the
    // limit (indeterminate); with g = 50 % of U, 28 + 1 = 29 <= 29.5 passes;
    // with g = 0 the value alone decides; with g = 200 % the zone 24 to 32
    // straddles a limit of 31.5, which g = 100 % passes.
    let e = ev(28.0, Some([26.0, 30.0]), 20, 0.0);
    let d = |limit: f64, pct: f64| decide_with_guard(&e, limit, Rule::Guarded, pct);
    assert_eq!(d(29.5, 100.0).0, Decision::Indeterminate);
    assert_eq!(d(29.5, 50.0).0, Decision::Pass);
    assert!(
        d(29.5, 50.0).1.contains("guard band 50 % of U"),
        "{}",
        d(29.5, 50.0).1
    );
    assert_eq!(d(28.0, 0.0).0, Decision::Pass);
    assert_eq!(d(27.9, 0.0).0, Decision::Fail);
    assert_eq!(d(31.5, 100.0).0, Decision::Pass);
    assert_eq!(d(31.5, 200.0).0, Decision::Indeterminate);
    // Rejection: value 33 (31 to 35), limit 31.5: g = U keeps it open, 50 %
    // rejects (33 - 1 = 32 > 31.5).
    let f = ev(33.0, Some([31.0, 35.0]), 20, 0.0);
    assert_eq!(
        decide_with_guard(&f, 31.5, Rule::Guarded, 100.0).0,
        Decision::Indeterminate
    );
    assert_eq!(
        decide_with_guard(&f, 31.5, Rule::Guarded, 50.0).0,
        Decision::Fail
    );
    // The default is the guarded rule as before, word for word.
    assert_eq!(d(29.5, 100.0), decide(&e, 29.5, Rule::Guarded));
    // The count to decide: a smaller guard band needs fewer measurements; at
    // 100 % it is the plain count.
    let (h, c, dd) = (2.0, 0.3, 1.0);
    let full = measurements_for_probability_guarded(10, h, c, dd, DECIDE_PROBABILITY, 1.0);
    assert_eq!(
        full,
        measurements_for_probability(10, h, c, dd, DECIDE_PROBABILITY)
    );
    let half = measurements_for_probability_guarded(10, h, c, dd, DECIDE_PROBABILITY, 0.5);
    assert!(half < full, "{half} vs {full}");
    // Without a guard band the decision needs d >= z_0.90 s: the one-sided
    // test's count n' = (z_0.90 sigma / d)^2 (textbook sample size, from
    // memory), z_0.90 = 1.2816 (standard normal table).
    let sigma = h * 10f64.sqrt() / armspace::stats::Z95;
    let zero = measurements_for_probability_guarded(10, h, c, dd, DECIDE_PROBABILITY, 0.0);
    let expected = (1.281_551_6 * sigma / dd).powi(2).ceil();
    assert!((zero - expected).abs() <= 1.0, "{zero} vs {expected}");
}

#[test]
fn a_guard_band_is_checked_and_inherited_by_zones() {
    let s = spec(
        r#"{"format": "armspace.spec/1", "limit_um": 30, "guard_band_pct": 50,
            "zones": [{"name": "rim", "pattern": "rim-*.png", "limit_um": 25},
                      {"name": "hub", "pattern": "hub-*.png", "limit_um": 40, "guard_band_pct": 0}]}"#,
    );
    let a = |f: &str| {
        assess(
            &s,
            std::path::Path::new(f),
            ev(24.0, Some([22.0, 26.0]), 20, 0.0),
            Evidence::default(),
        )
    };
    // rim inherits 50 %: 24 + 1 = 25 <= 25, pass; hub has none.
    assert_eq!(a("rim-1.png").decision, Some(Decision::Pass));
    assert_eq!(a("rim-1.png").guard_band_pct, Some(50.0));
    assert_eq!(a("hub-1.png").guard_band_pct, Some(0.0));
    for bad in [
        r#"{"format": "armspace.spec/1", "limit_um": 30, "guard_band_pct": -5}"#,
        r#"{"format": "armspace.spec/1", "limit_um": 30, "guard_band_pct": 401}"#,
        r#"{"format": "armspace.spec/1", "limit_um": 30, "rule": "simple", "guard_band_pct": 50}"#,
        r#"{"format": "armspace.spec/1", "limit_um": 30,
            "zones": [{"name": "z", "pattern": "*", "limit_um": 3, "rule": "simple", "guard_band_pct": 10}]}"#,
    ] {
        let e = Spec::parse(bad, "spec.json").unwrap_err().to_string();
        assert!(
            e.contains("guard_band_pct") && e.contains("spec.json"),
            "{e}"
        );
    }
}

#[test]
fn a_pattern_with_a_folder_matches_however_the_path_was_written() {
    // A lab user writes `demo/*.png` and expects it to apply to the images of
    // that folder whether the command named `demo/x.png`, `./demo/x.png` or
    // an absolute path (what a user expects, no single source).
    let s = spec(
        r#"{"format": "armspace.spec/1",
            "zones": [{"name": "rim", "pattern": "demo/rim-*.png", "limit_um": 30},
                      {"name": "abs", "pattern": "/lab/hub/*.png", "limit_um": 45}]}"#,
    );
    let zone = |p: &str| s.zone_of(std::path::Path::new(p)).map(|z| z.name.clone());
    for p in [
        "demo/rim-1.png",
        "./demo/rim-1.png",
        "/home/lab/demo/rim-1.png",
        "demo/./rim-1.png",
        "other/../demo/rim-1.png",
    ] {
        assert_eq!(zone(p).as_deref(), Some("rim"), "{p}");
    }
    assert_eq!(zone("demo/sub/rim-1.png"), None);
    assert_eq!(zone("notdemo/rim-1.png"), None);
    assert_eq!(zone("demo/../rim-1.png"), None);
    assert_eq!(zone("/lab/hub/a.png").as_deref(), Some("abs"));
    assert_eq!(zone("/other/lab/hub/a.png"), None);
}

#[test]
fn zones_are_matched_by_file_name_pattern() {
    let s = spec(
        r#"{"format": "armspace.spec/1",
            "zones": [{"name": "spoke", "pattern": "spoke-*", "limit_um": 30},
                      {"name": "hub", "pattern": "hub-??.png", "limit_um": 45, "rule": "simple"}]}"#,
    );
    let e = ev(40.0, Some([38.0, 42.0]), 20, 0.0);
    let a = assess(
        &s,
        std::path::Path::new("run/spoke-3.png"),
        e,
        Evidence::default(),
    );
    assert_eq!(
        (a.zone.as_deref(), a.decision),
        (Some("spoke"), Some(Decision::Fail))
    );
    let a = assess(
        &s,
        std::path::Path::new("hub-07.png"),
        e,
        Evidence::default(),
    );
    assert_eq!(
        (a.zone.as_deref(), a.decision),
        (Some("hub"), Some(Decision::Pass))
    );
    assert_eq!(a.rule, Rule::Simple);
    // A file in no zone, and no general limit: not assessed.
    let a = assess(
        &s,
        std::path::Path::new("rim-1.png"),
        e,
        Evidence::default(),
    );
    assert_eq!((a.zone, a.decision), (None, None));
    assert!(a.reason.contains("matches no zone"));
    // With a general limit it falls under that.
    let s2 = spec(
        r#"{"format": "armspace.spec/1", "limit_um": 50,
                      "zones": [{"name": "spoke", "pattern": "spoke-*", "limit_um": 30}]}"#,
    );
    let a = assess(
        &s2,
        std::path::Path::new("rim-1.png"),
        e,
        Evidence::default(),
    );
    assert_eq!(
        (a.zone, a.limit_um, a.decision),
        (None, Some(50.0), Some(Decision::Pass))
    );
    // The statistic "max_local" compares the largest local value.
    let s3 = spec(r#"{"format": "armspace.spec/1", "limit_um": 41, "statistic": "max_local"}"#);
    let a = assess(
        &s3,
        std::path::Path::new("x.png"),
        e,
        ev(47.0, Some([44.0, 50.0]), 0, 0.0),
    );
    assert_eq!(
        (a.compared_um, a.decision),
        (Some(47.0), Some(Decision::Fail))
    );
    // Verdicts: any fail fails; then any undecided is indeterminate.
    use Decision::*;
    assert_eq!(
        verdict([Some(Pass), Some(Fail), Some(Indeterminate)]),
        Some(Fail)
    );
    assert_eq!(verdict([Some(Pass), None]), Some(Indeterminate));
    assert_eq!(verdict([Some(Pass), Some(Pass)]), Some(Pass));
    assert_eq!(verdict([]), None);
}

#[test]
fn bad_spec_files_are_refused_with_the_reason() {
    for (text, expected) in [
        (r#"{"format": "armspace.spec/1"}"#, "no limit"),
        (
            r#"{"format": "armspace.spec/1", "limit_um": -3}"#,
            "positive",
        ),
        (r#"{"format": "other", "limit_um": 30}"#, "format"),
        (
            r#"{"format": "armspace.spec/1", "limit_um": 30, "rule": "lenient"}"#,
            "unknown variant",
        ),
        (
            r#"{"format": "armspace.spec/1", "zones": [{"name": "a", "pattern": "[", "limit_um": 3}]}"#,
            "pattern",
        ),
        (
            r#"{"format": "armspace.spec/1", "zones": [{"name": "a", "pattern": "a*", "limit_um": 3},
                                                      {"name": "a", "pattern": "b*", "limit_um": 3}]}"#,
            "named twice",
        ),
        ("{", "EOF"),
    ] {
        let e = Spec::parse(text, "spec.json").unwrap_err().to_string();
        assert!(
            e.contains("spec.json") && e.contains(expected),
            "expected '{expected}': {e}"
        );
    }
}

/// A folder with two comb images (SDAS 16 um at 1 um/px) named for zones.
fn batch_dir() -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    write_comb_png(&dir.path().join("spoke-1.png"), 320, 320, 16.0);
    write_comb_png(&dir.path().join("hub-1.png"), 320, 320, 16.0);
    dir
}

fn write_spec(dir: &std::path::Path, spoke: f64, hub: f64) -> String {
    let p = dir.join(format!("spec-{spoke}-{hub}.json"));
    std::fs::write(
        &p,
        format!(
            r#"{{"format": "armspace.spec/1",
                 "zones": [{{"name": "spoke", "pattern": "spoke-*", "limit_um": {spoke}}},
                           {{"name": "hub", "pattern": "hub-*", "limit_um": {hub}}}]}}"#
        ),
    )
    .unwrap();
    path_str(&p)
}

fn measure(dir: &std::path::Path, extra: &[&str]) -> Run {
    let mut args = vec!["measure", "--um-per-px", "1"];
    let spoke = path_str(&dir.join("spoke-1.png"));
    let hub = path_str(&dir.join("hub-1.png"));
    args.push(&spoke);
    args.push(&hub);
    args.extend_from_slice(extra);
    armspace(&args)
}

#[test]
fn exit_statuses_tell_the_casting_from_the_tool() {
    let dir = batch_dir();
    let d = dir.path();
    let specs = tempfile::tempdir().unwrap();
    // Both images (about 16 um) well under their limits: 0.
    let run = measure(d, &["--spec", &write_spec(specs.path(), 30.0, 40.0)]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let rep: Value = serde_json::from_str(&run.stdout).unwrap();
    assert_eq!(rep["summary"]["acceptance"]["verdict"], "pass");
    // The spoke over its limit: 4.
    let run = measure(d, &["--spec", &write_spec(specs.path(), 10.0, 40.0)]);
    assert_eq!(run.code, 4, "{}", run.stderr);
    let rep: Value = serde_json::from_str(&run.stdout).unwrap();
    let spoke = &rep["images"][0];
    assert_eq!(spoke["acceptance"]["zone"], "spoke");
    assert_eq!(spoke["acceptance"]["decision"], "fail");
    assert_eq!(rep["summary"]["acceptance"]["zones"][0]["verdict"], "fail");
    assert_eq!(rep["summary"]["acceptance"]["zones"][1]["verdict"], "pass");
    // A limit at the measured value: the interval straddles it, 5.
    let v = spoke["sdas_um"]["value"].as_f64().unwrap();
    let run = measure(d, &["--spec", &write_spec(specs.path(), v, 40.0)]);
    assert_eq!(run.code, 5, "{}", run.stderr);
    // A corrupt file in the batch: the others are measured and decided, the
    // status says a file could not be measured (3).
    let bad = d.join("spoke-2.png");
    std::fs::write(&bad, b"\x89PNG\r\n\x1a\n truncated").unwrap();
    let bad_s = path_str(&bad);
    let run = measure(
        d,
        &[&bad_s, "--spec", &write_spec(specs.path(), 30.0, 40.0)],
    );
    assert_eq!(run.code, 3, "{}", run.stderr);
    assert!(run.stderr.contains("spoke-2.png"), "{}", run.stderr);
    let rep: Value = serde_json::from_str(&run.stdout).unwrap();
    assert_eq!(rep["images"][0]["acceptance"]["decision"], "pass");
    assert_eq!(rep["images"][1]["acceptance"]["decision"], "pass");
    assert_eq!(rep["images"][2]["acceptance"]["decision"], "indeterminate");
    assert_eq!(rep["summary"]["acceptance"]["unreadable"], 1);
    // A failed limit outranks the unreadable file (4).
    let run = measure(
        d,
        &[&bad_s, "--spec", &write_spec(specs.path(), 10.0, 40.0)],
    );
    assert_eq!(run.code, 4, "{}", run.stderr);
    // A bad spec is a usage error (2); so is an output that cannot be
    // written, found before any image is measured.
    let run = measure(d, &["--spec", "/no/such/spec.json"]);
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert!(run.stderr.contains("/no/such/spec.json"));
    let same = path_str(&specs.path().join("both.json"));
    let run = measure(d, &["--csv", &same, "--out", &same]);
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert!(run.stderr.contains("same file"), "{}", run.stderr);
    let run = measure(d, &["--csv", "/no/such/folder/out.csv"]);
    assert_eq!(run.code, 2, "{}", run.stderr);
    assert!(run.stderr.contains("out.csv"), "{}", run.stderr);
}

/// Parses the CSV summary as a spreadsheet would: the header on the first
/// row (RFC 4180's optional header line), then the rows.
fn read_csv(text: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let mut r = csv::Reader::from_reader(text.as_bytes());
    let header = r.headers().unwrap().iter().map(String::from).collect();
    let rows = r
        .records()
        .map(|rec| rec.unwrap().iter().map(String::from).collect())
        .collect();
    (header, rows)
}

#[test]
fn the_csv_agrees_with_the_json_and_parallel_runs_agree() {
    let dir = batch_dir();
    let d = dir.path();
    let bad = d.join("spoke-2.png");
    std::fs::write(&bad, b"not a png").unwrap();
    let specs = tempfile::tempdir().unwrap();
    let spec = write_spec(specs.path(), 10.0, 40.0);
    let out = tempfile::tempdir().unwrap();
    let mut texts = Vec::new();
    for jobs in ["1", "2"] {
        let csv_path = out.path().join(format!("summary-{jobs}.csv"));
        let json_path = out.path().join(format!("report-{jobs}.json"));
        let run = measure(
            d,
            &[
                &path_str(&bad),
                "--spec",
                &spec,
                "--alloy",
                "al-si-coarsening",
                "--jobs",
                jobs,
                "--csv",
                &path_str(&csv_path),
                "--out",
                &path_str(&json_path),
            ],
        );
        assert_eq!(run.code, 4, "{}", run.stderr);
        texts.push((
            std::fs::read_to_string(&csv_path).unwrap(),
            std::fs::read_to_string(&json_path).unwrap(),
        ));
    }
    let strip = |s: &str| {
        s.lines()
            .filter(|l| !l.contains("created_utc") && !l.starts_with("# armspace"))
            .collect::<Vec<_>>()
            .join("\n")
    };
    assert_eq!(
        strip(&texts[0].0),
        strip(&texts[1].0),
        "CSV differs between --jobs 1 and 2"
    );
    assert_eq!(
        strip(&texts[0].1),
        strip(&texts[1].1),
        "JSON differs between --jobs 1 and 2"
    );

    let (csv_text, json_text) = &texts[0];
    assert!(csv_text.starts_with("file,"), "the header is the first row");
    let rep: Value = serde_json::from_str(json_text).unwrap();
    let (header, rows) = read_csv(csv_text);
    // A reader that is told nothing and works the dialect out from the
    // bytes, as spreadsheet imports do (csv-nose, the Table Uniformity
    // Method of W. Garcia, Data Science 7 (2024) 55-72): it must find the
    // comma, the header on row 1 and every column.
    let sniffed = csv_nose::Sniffer::new()
        .sniff_bytes(csv_text.as_bytes())
        .expect("the dialect is found");
    assert_eq!(sniffed.dialect.delimiter, b',');
    assert!(sniffed.dialect.header.has_header_row);
    assert_eq!(sniffed.num_fields, header.len());
    assert_eq!(sniffed.fields, header);
    let col = |name: &str| header.iter().position(|h| h == name).unwrap();
    for row in &rows {
        assert!(row[col("caution")].contains("qualified personnel"));
        assert_eq!(row[col("schema")], "armspace.report/1");
    }
    let images = rep["images"].as_array().unwrap();
    assert_eq!(rows.len(), images.len());
    let num = |cell: &str| -> Option<f64> { (!cell.is_empty()).then(|| cell.parse().unwrap()) };
    for (row, img) in rows.iter().zip(images) {
        assert_eq!(row[col("file")], img["file"].as_str().unwrap());
        assert_eq!(num(&row[col("sdas_um")]), img["sdas_um"]["value"].as_f64());
        assert_eq!(
            num(&row[col("ci95_low_um")]),
            img["sdas_um"]["ci95"][0].as_f64()
        );
        assert_eq!(
            num(&row[col("ci95_high_um")]),
            img["sdas_um"]["ci95"][1].as_f64()
        );
        assert_eq!(
            num(&row[col("um_per_px")]),
            img["calibration"]["um_per_px"].as_f64()
        );
        assert_eq!(
            num(&row[col("fft_um")]),
            img["methods"]["fft"]["value"].as_f64()
        );
        assert_eq!(
            num(&row[col("intercept_um")]),
            img["methods"]["intercept"]["value"].as_f64()
        );
        assert_eq!(
            num(&row[col("solidification_time_s")]),
            img["interpretation"]["solidification_time_s"]["value"].as_f64()
        );
        assert_eq!(
            row[col("decision")],
            img["acceptance"]["decision"].as_str().unwrap()
        );
        assert_eq!(
            row[col("warnings")],
            img["warnings"].as_array().unwrap().len().to_string()
        );
        assert_eq!(row[col("error")], img["error"].as_str().unwrap_or(""));
        assert_eq!(
            num(&row[col("centres_um")]),
            img["methods"]["centres"]["value"].as_f64()
        );
        assert_eq!(
            row[col("statistic")],
            img["acceptance"]["statistic"].as_str().unwrap()
        );
        assert_eq!(
            num(&row[col("compared_um")]),
            img["acceptance"]["compared_um"].as_f64()
        );
        assert_eq!(
            num(&row[col("compared_ci95_high_um")]),
            img["acceptance"]["compared_ci95_um"][1].as_f64()
        );
        assert_eq!(
            num(&row[col("cooling_rate_ci95_low_K_per_s")]),
            img["interpretation"]["cooling_rate_K_per_s"]["ci95"][0].as_f64()
        );
        // The interpretation's caveats (textbook parameters, a default
        // composition, no published scatter) bear on the quoted cooling
        // rate: they travel with the row, not only in the JSON block.
        if img["interpretation"]["cooling_rate_K_per_s"]["value"].is_number() {
            assert!(
                row[col("warning_codes")].contains("interpretation.caveat"),
                "{}",
                row[col("warning_codes")]
            );
        }
        assert_eq!(
            row[col("correlation")],
            img["interpretation"]["correlation"]["id"]
                .as_str()
                .unwrap_or("")
        );
    }
}

#[test]
fn a_calibration_the_sources_contradict_decides_nothing() {
    // The demo's 6 mm step passes its 25 um limit when calibrated from its
    // 200 um scale bar (README). A --um-per-px value five times finer than
    // the bar's contradicts it far beyond any uncertainty: the image must not
    // be decided (exit status 5, indeterminate) until one source is named as
    // trusted; then it is decided as usual.
    let img = "fixtures/demo/plate-CVF-SP4-step06mm.png";
    let spec = "fixtures/demo-spec.json";
    let run = armspace(&["measure", img, "--scale-bar", "200um", "--spec", spec]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let rep: Value = serde_json::from_str(&run.stdout).unwrap();
    let bar = rep["images"][0]["calibration"]["um_per_px"]
        .as_f64()
        .unwrap();
    let manual = format!("{}", bar / 5.0);
    let args = [
        "measure",
        img,
        "--scale-bar",
        "200um",
        "--um-per-px",
        &manual,
        "--spec",
        spec,
    ];
    let run = armspace(&args);
    assert_eq!(run.code, 5, "{}", run.stderr);
    let rep: Value = serde_json::from_str(&run.stdout).unwrap();
    let a = &rep["images"][0]["acceptance"];
    assert_eq!(a["decision"], "indeterminate");
    let reason = a["reason"].as_str().unwrap();
    assert!(
        reason.contains("calibration sources conflict") && reason.contains("+400.0 %"),
        "{reason}"
    );
    assert!(rep["images"][0]["warning_codes"]
        .as_array()
        .unwrap()
        .contains(&Value::from("calibration.conflict")));
    let mut trusted = args.to_vec();
    trusted.extend(["--trust-calibration", "scale-bar"]);
    let run = armspace(&trusted);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let rep: Value = serde_json::from_str(&run.stdout).unwrap();
    assert_eq!(rep["images"][0]["acceptance"]["decision"], "pass");
    assert_eq!(rep["images"][0]["calibration"]["source"], "scale-bar");
}
