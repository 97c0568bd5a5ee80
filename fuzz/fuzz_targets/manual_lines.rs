//! The hand-measured lines CSV (`manual::parse`) and its statistics
//! (`manual::summarise`). Beyond "no panic": every line accepted has a
//! finite positive length and spacing, and the statistics of an accepted
//! file are finite, with a positive mean.
#![no_main]

use armspace::manual::{parse, summarise};
use armspace::methods::intercept::Convention;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Some((&first, rest)) = data.split_first() else {
        return;
    };
    let convention = if first & 1 == 0 {
        Convention::CentreToCentre
    } else {
        Convention::LengthOverCount
    };
    let Ok(text) = std::str::from_utf8(rest) else {
        return;
    };
    let lines = match parse(text, "lines.csv", convention) {
        Ok(l) => l,
        Err(e) => {
            assert!(e.to_string().starts_with("lines.csv: "), "{e}");
            return;
        }
    };
    for l in &lines {
        assert!(l.length_um.is_finite() && l.length_um > 0.0);
        assert!(l.sdas_um.is_finite() && l.sdas_um > 0.0, "{l:?}");
    }
    match summarise(lines, "lines.csv", 10.0, convention) {
        Ok(s) => {
            assert!(s.mean_um.is_finite() && s.mean_um > 0.0, "{s:?}");
            assert!(s.sd_um.is_finite() && s.sd_um >= 0.0, "{s:?}");
            assert!(s.ci95_um.iter().all(|v| v.is_finite()), "{s:?}");
            assert!(s.ci95_um[0] <= s.ci95_um[1], "{s:?}");
            assert!(
                s.rel_accuracy_pct.is_finite() && s.rel_accuracy_pct >= 0.0,
                "{s:?}"
            );
            if let Some(n) = s.lines_for_target {
                assert!(n >= 2);
            }
        }
        Err(e) => assert!(e.to_string().contains("at least two lines"), "{e}"),
    }
});
