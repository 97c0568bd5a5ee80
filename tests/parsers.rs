//! The text parsers a user feeds (spec files, correlation files, profile
//! files, hand-measured CSV, command-line values) return an error, never
//! panic, whatever they are given: random text, and mutations of valid files
//! (proptest, fixed seed so that a failure is reproducible).

use armspace::interpret::acceptance::Spec;
use armspace::interpret::{library, parse_composition, parse_kelvin};
use proptest::prelude::*;

const VALID_SPEC: &str = include_str!("../fixtures/demo-spec.json");
const VALID_LIBRARY: &str = include_str!("../data/correlations.json");

/// Every parser, on one text.
fn feed(text: &str) {
    let _ = Spec::parse(text, "spec.json");
    let _ = library::parse(text, "user.json", false);
    let _ = armspace::calibrate::profile::parse(text, "x20", "profiles.json");
    let _ = armspace::manual::parse(
        text,
        "lines.csv",
        armspace::methods::intercept::Convention::CentreToCentre,
    );
    let _ = parse_composition(text);
    let _ = parse_kelvin(text);
    let _ = armspace::calibrate::parse_length(text);
}

/// A valid file with one byte range replaced.
fn mutate(base: &str, at: usize, len: usize, with: &str) -> String {
    let b = base.as_bytes();
    let at = at % b.len();
    let end = (at + len).min(b.len());
    let mut out = b[..at].to_vec();
    out.extend_from_slice(with.as_bytes());
    out.extend_from_slice(&b[end..]);
    String::from_utf8_lossy(&out).into_owned()
}

proptest! {
    #![proptest_config(ProptestConfig {
        cases: 256,
        failure_persistence: None,
        rng_seed: proptest::test_runner::RngSeed::Fixed(20261202),
        ..ProptestConfig::default()
    })]

    #[test]
    fn random_text_never_panics(text in "\\PC{0,200}") {
        feed(&text);
    }

    #[test]
    fn mutated_files_never_panic(
        at in 0usize..10_000,
        len in 0usize..12,
        with in prop_oneof![
            Just(String::new()),
            Just("-1".to_string()),
            Just("0".to_string()),
            Just("1e308".to_string()),
            Just("null".to_string()),
            Just("\"".to_string()),
            Just("[]".to_string()),
            Just("{}".to_string()),
            "[a-z0-9 .,:{}\\[\\]\"-]{0,6}",
        ],
    ) {
        let spec = mutate(VALID_SPEC, at, len, &with);
        let lib = mutate(VALID_LIBRARY, at, len, &with);
        feed(&spec);
        feed(&lib);
    }
}

#[test]
fn a_valid_library_stays_valid_and_extreme_numbers_are_refused() {
    // The built-in data file parses as a user file would.
    assert!(library::parse(VALID_LIBRARY, "copy.json", true).is_ok());
    // Numbers that would make a law meaningless are refused, not computed.
    for bad in ["\"exponent\": 0.4935", "\"exponent\": 0.3616"] {
        for with in [
            "\"exponent\": 1e400",
            "\"exponent\": -0.0",
            "\"exponent\": 0",
        ] {
            let text = VALID_LIBRARY.replacen(bad, with, 1);
            assert!(
                library::parse(&text, "x.json", true).is_err(),
                "{with} accepted"
            );
        }
    }
}
