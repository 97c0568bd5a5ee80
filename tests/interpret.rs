//! From SDAS to cooling rate and solidification time: the correlation
//! library against its sources, the inversions, units, the coarsening
//! model, the uncertainty carried through, and bad correlation files.

mod common;
use armspace::interpret::library::{self, parse, Correlation, Status};
use armspace::interpret::{interpret, parse_composition, parse_kelvin, Composition, Request};
use armspace::units::{Kelvin, Micrometres};
use common::*;

fn lib() -> Vec<Correlation> {
    library::builtin()
}

fn entry(id: &str) -> Correlation {
    library::find(&lib(), id).unwrap().clone()
}

fn comp(text: &str) -> Composition {
    parse_composition(text).unwrap()
}

/// lambda2 (um) an entry predicts at x (its own variable unit).
fn predict(id: &str, composition: &str, x: f64) -> f64 {
    let c = if composition.is_empty() {
        Composition::new()
    } else {
        comp(composition)
    };
    entry(id).power_law(&c).unwrap().predict(x).unwrap().0
}

fn close(a: f64, b: f64, rel: f64) -> bool {
    (a / b - 1.0).abs() <= rel
}

#[test]
fn the_built_in_library_covers_the_families_the_labs_need() {
    let lib = lib();
    assert!(lib.len() >= 8, "the built-in file did not parse");
    for family in [
        "carbon steel",
        "Al-Cu",
        "Al-Si foundry alloys",
        "Al-Si-Cu foundry alloys",
        "magnesium",
    ] {
        assert!(
            lib.iter().any(|c| c.alloy_family == family),
            "no entry for {family}"
        );
    }
    // Every entry names a source, and one recalled rather than read says so.
    for c in &lib {
        assert!(
            !c.source.title.is_empty() && !c.source.authors.is_empty(),
            "{}",
            c.id
        );
        assert!(!c.status_note.is_empty(), "{} has no status note", c.id);
    }
    assert_eq!(
        entry("al-4.5cu-time-flemings-1974").status,
        Status::FromMemory
    );
    assert_eq!(
        entry("mg-az91d-cooling-rate-dube-1998").status,
        Status::FromMemory
    );
}

#[test]
fn each_entry_reproduces_its_source() {
    // Won & Thomas, Metall. Mater. Trans. A 32A (2001) 1755-1767, empirical
    // SDAS equation for C <= 0.15 wt%: lambda2 = (169.1 - 720.9 C) CR^-0.4935
    // (um, degC/s). By hand at C = 0.10: 169.1 - 72.09 = 97.01 um at 1 degC/s;
    // at 10 degC/s 97.01 x 10^-0.4935 = 97.01 / 3.1152 = 31.14 um.
    assert!(close(
        predict("steel-c-le-0.15-won-thomas-2001", "C=0.1", 1.0),
        97.01,
        1e-9
    ));
    assert!(close(
        predict("steel-c-le-0.15-won-thomas-2001", "C=0.1", 10.0),
        31.14,
        1e-3
    ));
    // Same paper, C > 0.15 wt%: lambda2 = 143.9 CR^-0.3616 C^(0.5501 - 1.996 C).
    // By hand at C = 0.45, 1 degC/s: exponent 0.5501 - 0.8982 = -0.3481,
    // 0.45^-0.3481 = 1.3204, lambda2 = 190.0 um.
    assert!(close(
        predict("steel-c-gt-0.15-won-thomas-2001", "C=0.45", 1.0),
        190.0,
        1e-3
    ));
    // Ronto & Roosz, Int. J. Cast Metals Res. 13 (2001) 337-342, abstract:
    // lambda2 = 77.09 Cu^-0.1989 Si^-0.078 CR^-0.252. By hand for
    // Al-3.5Cu-6Si at 1 K/s: 3.5^-0.1989 = 0.7794, 6^-0.078 = 0.8696,
    // 77.09 x 0.7794 x 0.8696 = 52.25 um.
    assert!(close(
        predict("al-cu-si-cooling-rate-ronto-roosz-2001", "Cu=3.5,Si=6", 1.0),
        52.25,
        1e-3
    ));
    // Same abstract: lambda2 = 34.9 Cu^-0.333 Si^-0.145 t_f^0.208. By hand at
    // 100 s: 3.5^-0.333 = 0.6588, 6^-0.145 = 0.7713, 100^0.208 = 2.6062,
    // 34.9 x 0.6588 x 0.7713 x 2.6062 = 46.22 um.
    assert!(close(
        predict("al-cu-si-time-ronto-roosz-2001", "Cu=3.5,Si=6", 100.0),
        46.22,
        1e-3
    ));
    // Flemings, Solidification Processing (1974), Al-4.5Cu, from memory:
    // 7.5 t_f^0.39; at 100 s, 7.5 x 6.026 = 45.2 um.
    assert!(close(
        predict("al-4.5cu-time-flemings-1974", "", 100.0),
        45.2,
        1e-3
    ));
    // Dube et al., Int. J. Cast Metals Res. 11 (1998), AZ91D, from memory:
    // 35.5 CR^-0.31; at 10 K/s, 35.5 / 2.0417 = 17.39 um.
    assert!(close(
        predict("mg-az91d-cooling-rate-dube-1998", "", 10.0),
        17.39,
        1e-3
    ));
}

#[test]
fn coarsening_constant_matches_a_hand_calculation() {
    // M = Gamma D ln(CE/C0) / (|m| (1 - k) (CE - C0)) (Kurz & Fisher,
    // Fundamentals of Solidification, 1998; form from memory), Al-4.5Cu with
    // the preset's parameters (Sci. Rep. 7 (2017) 45770, Table 1):
    //   Gamma D        = 2.36e-7 K m x 2.4e-9 m2/s      = 5.664e-16
    //   ln(33.2 / 4.5) = ln(7.3778)                      = 1.99846
    //   numerator      = 5.664e-16 x 1.99846             = 1.13193e-15
    //   denominator    = 2.65 x 0.86 x (33.2 - 4.5)      = 65.4073
    //   M              = 1.13193e-15 / 65.4073           = 1.7306e-17 m3/s
    // lambda2 at 100 s = 5.5 (1.7306e-15)^(1/3) m = 5.5 x 1.2007e-5 m = 66.04 um.
    let c = entry("al-cu-coarsening");
    let armspace::interpret::library::Law::Coarsening(p) = &c.law else {
        panic!("not a coarsening entry")
    };
    let m = p.m_constant(4.5).unwrap();
    assert!(close(m, 1.7306e-17, 2e-4), "M = {m:e}");
    assert!(close(predict("al-cu-coarsening", "", 100.0), 66.04, 1e-3));
    // The given composition replaces the default C0; C0 at or above the
    // eutectic is refused.
    assert!(predict("al-cu-coarsening", "Cu=2", 100.0) > 66.04);
    assert!(c.power_law(&comp("Cu=34")).is_err());
}

#[test]
fn forward_then_inverse_round_trips_for_every_entry() {
    // Algebra of the power law: x = (lambda2 / c)^(1/e) inverts lambda2 = c x^e.
    let compositions = ["C=0.1", "C=0.45", "Cu=3.5,Si=6", ""];
    for c in lib() {
        let law = compositions
            .iter()
            .find_map(|t| {
                let cmp = if t.is_empty() {
                    Composition::new()
                } else {
                    comp(t)
                };
                c.power_law(&cmp).ok()
            })
            .unwrap_or_else(|| panic!("{}: no composition fits", c.id));
        for x in [0.05, 1.0, 7.3, 250.0] {
            let l = law.predict(x).unwrap();
            let back = law.invert(l).unwrap();
            assert!(close(back, x, 1e-12), "{}: {x} -> {} -> {back}", c.id, l.0);
        }
    }
}

fn user_file(entries: &str) -> String {
    format!("{{\"format\": \"armspace.correlations/1\", \"correlations\": [{entries}]}}")
}

fn user_entry(id: &str, form: &str, unit: &str, a: f64, n: f64, extra: &str) -> String {
    format!(
        r#"{{"id": "{id}", "alloy_family": "test", "form": "{form}", "sdas_unit": "um",
            "variable_unit": "{unit}", "coefficient": {{"value": {a}}}, "exponent": {n},
            "source": {{"authors": "Lab", "year": 2026, "title": "in-house fit", "published_in": "report"}}{extra}}}"#
    )
}

fn interpret_with(c: &Correlation, sdas: f64, req: Request) -> armspace::interpret::Interpretation {
    interpret(
        c,
        &Request {
            sdas: Some(Micrometres(sdas)),
            ..req
        },
    )
    .unwrap()
}

#[test]
fn units_of_a_correlation_are_converted() {
    // 1 K/min = 1/60 K/s and 1 min = 60 s (SI definitions); a kelvin and a
    // degree Celsius are the same interval (SI brochure). The same law
    // written in K/s, degC/s and K/min gives the same cooling rate in K/s:
    // lambda2 = 50 CR_s^-0.4 = 50 (CR_min / 60)^-0.4 = 50 x 60^0.4 CR_min^-0.4.
    let a_min = 50.0 * 60f64.powf(0.4);
    let text = user_file(
        &[
            user_entry("per-s", "cooling_rate", "K/s", 50.0, 0.4, ""),
            user_entry("per-degc-s", "cooling_rate", "degC/s", 50.0, 0.4, ""),
            user_entry("per-min", "cooling_rate", "K/min", a_min, 0.4, ""),
            // lambda2 = 10 t_s^0.35 = 10 (60 t_min)^0.35.
            user_entry("t-s", "solidification_time", "s", 10.0, 0.35, ""),
            user_entry(
                "t-min",
                "solidification_time",
                "min",
                10.0 * 60f64.powf(0.35),
                0.35,
                "",
            ),
        ]
        .join(","),
    );
    let lib = parse(&text, "units.json", false).unwrap();
    let cr = |id: &str| {
        interpret_with(library::find(&lib, id).unwrap(), 30.0, Request::default())
            .cooling_rate_k_per_s
            .value
            .unwrap()
    };
    let expected = (30.0f64 / 50.0).powf(-1.0 / 0.4);
    for id in ["per-s", "per-degc-s", "per-min"] {
        assert!(close(cr(id), expected, 1e-12), "{id}: {}", cr(id));
    }
    let tf = |id: &str| {
        interpret_with(library::find(&lib, id).unwrap(), 30.0, Request::default())
            .solidification_time_s
            .value
            .unwrap()
    };
    assert!(close(tf("t-s"), tf("t-min"), 1e-12));
    assert!(close(tf("t-s"), 3f64.powf(1.0 / 0.35), 1e-12));
    // The freezing-range link in K: t_f = 60 K / CR.
    let i = interpret_with(
        library::find(&lib, "per-s").unwrap(),
        30.0,
        Request {
            freezing_range: Some(Kelvin(60.0)),
            ..Request::default()
        },
    );
    assert!(close(
        i.solidification_time_s.value.unwrap(),
        60.0 / expected,
        1e-12
    ));
    // Units written on the command line.
    assert_eq!(parse_kelvin("60K").unwrap(), Kelvin(60.0));
    assert_eq!(parse_kelvin("45 degC").unwrap(), Kelvin(45.0));
    assert_eq!(parse_kelvin("45\u{00b0}C").unwrap(), Kelvin(45.0));
    assert!(parse_kelvin("-5K").is_err() && parse_kelvin("hot").is_err());
}

#[test]
fn a_10_percent_sdas_interval_is_about_30_percent_in_t_f() {
    // With m = 1/3 the bounds transform as (1 -+ 0.1)^3: 0.729 and 1.331 of
    // t_f (algebra of the power law), the amplification a report must show.
    let c = entry("al-si-coarsening");
    let i = interpret_with(
        &c,
        40.0,
        Request {
            ci95: Some([Micrometres(36.0), Micrometres(44.0)]),
            ..Request::default()
        },
    );
    let t = &i.solidification_time_s;
    let [lo, hi] = t.ci95.unwrap();
    let v = t.value.unwrap();
    assert!(close(lo / v, 0.729, 1e-9) && close(hi / v, 1.331, 1e-9));
    assert!(close(t.uncertainty_gain.unwrap(), 3.0, 1e-12));
    let [rl, rh] = t.ci95_rel_pct.unwrap();
    assert!((rl + 27.1).abs() < 1e-6 && (rh - 33.1).abs() < 1e-6);
    // For a cooling-rate law the bounds swap: the larger SDAS bound gives
    // the lower cooling rate.
    let s = entry("steel-c-le-0.15-won-thomas-2001");
    let i = interpret_with(
        &s,
        50.0,
        Request {
            ci95: Some([Micrometres(45.0), Micrometres(55.0)]),
            composition: comp("C=0.1"),
            ..Request::default()
        },
    );
    let law = s.power_law(&comp("C=0.1")).unwrap();
    let [lo, hi] = i.cooling_rate_k_per_s.ci95.unwrap();
    assert!(close(lo, law.invert(Micrometres(55.0)).unwrap(), 1e-12));
    assert!(hi > lo);
    assert!(close(hi, law.invert(Micrometres(45.0)).unwrap(), 1e-12));
    // Won-Thomas inverse at C = 0.10, 50 um: (50 / 97.01)^(-1/0.4935) = 3.831 K/s.
    assert!(close(i.cooling_rate_k_per_s.value.unwrap(), 3.831, 1e-3));
}

#[test]
fn published_scatter_widens_the_interval_in_quadrature_in_log_space() {
    // Documented combination (src/interpret/mod.rs): d = sqrt(ln(v/b)^2 +
    // (1.96 ln(1 + s))^2) on each side. With no SDAS interval and 10 %
    // scatter, lambda2 spans v x exp(-+1.96 ln 1.1), and t_f (m = 0.5)
    // spans that squared.
    let text = user_file(&user_entry(
        "scattered",
        "solidification_time",
        "s",
        10.0,
        0.5,
        r#", "scatter_pct": 10"#,
    ));
    let lib = parse(&text, "scatter.json", false).unwrap();
    let c = &lib[0];
    let i = interpret_with(c, 40.0, Request::default());
    let v = i.solidification_time_s.value.unwrap();
    let [lo, hi] = i.solidification_time_s.ci95.unwrap();
    let d = 1.96 * 1.1f64.ln();
    assert!(close(lo / v, (-2.0 * d).exp(), 1e-12) && close(hi / v, (2.0 * d).exp(), 1e-12));
    // With an SDAS interval too, each side combines both.
    let i = interpret_with(
        c,
        40.0,
        Request {
            ci95: Some([Micrometres(38.0), Micrometres(43.0)]),
            ..Request::default()
        },
    );
    let [lo, _] = i.solidification_time_s.ci95.unwrap();
    let d_lo = ((40.0f64 / 38.0).ln().powi(2) + d * d).sqrt();
    assert!(close(
        lo / i.solidification_time_s.value.unwrap(),
        (-2.0 * d_lo).exp(),
        1e-12
    ));
}

#[test]
fn outside_the_fitted_range_warns_and_far_outside_needs_the_flag() {
    // lambda2 = 100 CR^-0.5 fitted over 1-10 K/s: 50 um is 4 K/s (inside),
    // 20 um is 25 K/s (2.5x above: a warning), 10 um is 100 K/s (10x above:
    // only with --extrapolate).
    let text = user_file(&user_entry(
        "ranged",
        "cooling_rate",
        "K/s",
        100.0,
        0.5,
        r#", "fitted_range": {"min": 1, "max": 10}"#,
    ));
    let lib = parse(&text, "range.json", false).unwrap();
    let c = &lib[0];
    let inside = interpret_with(c, 50.0, Request::default());
    assert!(close(
        inside.cooling_rate_k_per_s.value.unwrap(),
        4.0,
        1e-12
    ));
    assert!(!inside.warnings.iter().any(|w| w.contains("outside")));
    let near = interpret_with(c, 20.0, Request::default());
    assert!(near.cooling_rate_k_per_s.value.is_some());
    assert!(near
        .warnings
        .iter()
        .any(|w| w.contains("outside the fitted range")));
    let far = interpret_with(c, 10.0, Request::default());
    assert!(far.cooling_rate_k_per_s.value.is_none());
    assert!(far
        .cooling_rate_k_per_s
        .reason
        .as_deref()
        .unwrap()
        .contains("--extrapolate"));
    let forced = interpret_with(
        c,
        10.0,
        Request {
            extrapolate: true,
            ..Request::default()
        },
    );
    assert!(close(
        forced.cooling_rate_k_per_s.value.unwrap(),
        100.0,
        1e-12
    ));
    assert!(forced.warnings.iter().any(|w| w.contains("extrapolated")));
    // Below the range by more than 3x as well: 400 um is 0.0625 K/s.
    let slow = interpret_with(c, 400.0, Request::default());
    assert!(slow.cooling_rate_k_per_s.value.is_none());
}

#[test]
fn compositions_are_required_and_checked() {
    let s = entry("steel-c-le-0.15-won-thomas-2001");
    let e = s.power_law(&Composition::new()).unwrap_err();
    assert!(e.contains("--composition C="), "{e}");
    let e = s.power_law(&comp("C=0.3")).unwrap_err();
    assert!(e.contains("outside"), "{e}");
    let r = entry("al-cu-si-cooling-rate-ronto-roosz-2001");
    assert!(
        r.power_law(&comp("Cu=0,Si=7")).is_err(),
        "a power of zero Cu"
    );
    assert!(parse_composition("Si=7, Cu=0.2").is_ok());
    for bad in ["Si", "si=7", "Si=abc", "Si=120", "Si=7,Si=8", ""] {
        assert!(parse_composition(bad).is_err(), "{bad} accepted");
    }
}

#[test]
fn bad_correlation_files_are_refused_with_the_reason() {
    let cases: Vec<(String, &str)> = vec![
        (
            user_file(
                &user_entry("x", "cooling_rate", "K/s", 50.0, 0.4, "")
                    .replace(r#""sdas_unit": "um","#, ""),
            ),
            "missing unit",
        ),
        (
            user_file(
                &user_entry("x", "cooling_rate", "", 50.0, 0.4, "")
                    .replace(r#""variable_unit": "","#, ""),
            ),
            "missing unit",
        ),
        (
            user_file(&user_entry("x", "cooling_rate", "furlongs", 50.0, 0.4, "")),
            "unknown cooling-rate unit",
        ),
        (
            user_file(&user_entry("x", "cooling_rate", "K/s", 50.0, 0.0, "")),
            "positive number",
        ),
        (
            user_file(&user_entry("x", "cooling_rate", "K/s", 50.0, -0.3, "")),
            "positive number",
        ),
        (
            user_file(&user_entry("x", "growth_velocity", "K/s", 50.0, 0.4, "")),
            "unknown form",
        ),
        (
            user_file(
                &[
                    user_entry("twice", "cooling_rate", "K/s", 50.0, 0.4, ""),
                    user_entry("twice", "cooling_rate", "K/s", 60.0, 0.4, ""),
                ]
                .join(","),
            ),
            "duplicate id",
        ),
        (
            user_file(&user_entry(
                "x",
                "cooling_rate",
                "K/s",
                50.0,
                0.4,
                r#", "colour": 1"#,
            )),
            "unknown field",
        ),
        ("{\"correlations\": []}".to_string(), "missing \"format\""),
        ("not json".to_string(), "expected"),
    ];
    for (text, expected) in cases {
        let e = parse(&text, "mine.json", false).unwrap_err();
        assert!(e.contains("mine.json"), "{e}");
        assert!(e.contains(expected), "expected '{expected}' in: {e}");
    }
    // An id that is already built in is refused, naming the file.
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("mine.json");
    std::fs::write(
        &path,
        user_file(&user_entry(
            "al-si-coarsening",
            "cooling_rate",
            "K/s",
            50.0,
            0.4,
            "",
        )),
    )
    .unwrap();
    let e = library::with_file(&path).unwrap_err();
    assert!(e.contains("duplicate id") && e.contains("mine.json"), "{e}");
}

#[test]
fn the_commands_list_and_interpret() {
    let run = armspace(&["correlations"]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    for c in lib() {
        assert!(run.stdout.contains(&c.id), "{} not listed", c.id);
    }
    assert!(run.stdout.contains("from memory") && run.stdout.contains("Won"));
    // interpret: value, interval and the caution, as JSON.
    let run = armspace(&[
        "interpret",
        "--sdas",
        "40um",
        "--ci",
        "36,44",
        "--alloy",
        "al-si-coarsening",
    ]);
    assert_eq!(run.code, 0, "{}", run.stderr);
    let v: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    assert!(v["caution"]
        .as_str()
        .unwrap()
        .contains("qualified personnel"));
    let t = &v["interpretation"]["solidification_time_s"];
    assert!(t["value"].as_f64().unwrap() > 0.0);
    assert_eq!(t["uncertainty_gain"].as_f64().unwrap(), 3.0);
    // Usage errors: an unknown id, a composition the entry excludes, an
    // interval that does not hold the value, a bad file.
    for args in [
        vec!["interpret", "--sdas", "40um", "--alloy", "no-such-alloy"],
        vec![
            "interpret",
            "--sdas",
            "40um",
            "--alloy",
            "steel-c-le-0.15-won-thomas-2001",
            "--composition",
            "C=0.4",
        ],
        vec![
            "interpret",
            "--sdas",
            "40um",
            "--ci",
            "41,44",
            "--alloy",
            "al-si-coarsening",
        ],
        vec!["correlations", "--correlations", "/no/such/file.json"],
    ] {
        let run = armspace(&args);
        assert_eq!(run.code, 2, "{args:?}: {}", run.stderr);
        assert!(run.stderr.contains("armspace:"), "{}", run.stderr);
    }
}

#[test]
fn users_give_their_own_coarsening_parameters() {
    // An Al-7Si parameter set with D = 3e-9 m2/s. By hand:
    //   Gamma D        = 1.96e-7 x 3e-9               = 5.88e-16
    //   ln(12.6 / 7)   = ln(1.8)                      = 0.587787
    //   denominator    = 6.5 x (1 - 0.13) x (12.6 - 7) = 31.668
    //   M              = 5.88e-16 x 0.587787 / 31.668 = 1.0914e-17 m3/s
    // lambda2 at 100 s = 5.5 (1.0914e-15)^(1/3) m = 5.5 x 1.0296e-5 m = 56.63 um.
    let p = |v: f64| format!("{{\"value\": {v}}}");
    let text = user_file(&format!(
        r#"{{"id": "my-alsi", "form": "coarsening", "sdas_unit": "um", "variable_unit": "s",
            "coarsening": {{"solute": "Si", "prefactor": {}, "gibbs_thomson_K_m": {},
              "diffusivity_m2_per_s": {}, "liquidus_slope_K_per_wt_pct": {},
              "partition_coefficient": {}, "ce_wt_pct": {}}},
            "source": {{"authors": "Lab", "year": 2026, "title": "parameter set", "published_in": "report"}}}}"#,
        p(5.5),
        p(1.96e-7),
        p(3e-9),
        p(-6.5),
        p(0.13),
        p(12.6)
    ));
    let lib = parse(&text, "mine.json", false).unwrap();
    let c = &lib[0];
    assert_eq!(c.status, Status::User);
    // No default C0 in this file: the composition must be given.
    assert!(c
        .power_law(&Composition::new())
        .unwrap_err()
        .contains("--composition Si="));
    let law = c.power_law(&comp("Si=7")).unwrap();
    assert!(close(law.predict(100.0).unwrap().0, 56.63, 1e-3));
    // A partition coefficient of 1 is no alloy for this model.
    let bad = text.replace(
        "\"partition_coefficient\": {\"value\": 0.13}",
        "\"partition_coefficient\": {\"value\": 1.0}",
    );
    assert!(parse(&bad, "mine.json", false)
        .unwrap_err()
        .contains("between 0 and 1"));
}
