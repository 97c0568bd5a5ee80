//! Acceptance spec files (`Spec::parse`) and the decisions they give
//! (`acceptance::assess`) for a few evidences. Beyond "no panic": an
//! accepted spec has usable limits and a matcher for every zone; every
//! decision has a reason without NaN, and a count to decide of at least 1.
#![no_main]

use armspace::interpret::acceptance::{assess, Evidence, Spec};
use armspace::units::Micrometres;
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fn evidences() -> Vec<Evidence> {
    let e = |v: f64, lo: f64, hi: f64, n: usize, cal: f64| Evidence {
        value: Some(Micrometres(v)),
        ci95: Some([Micrometres(lo), Micrometres(hi)]),
        n,
        calibration_half_um: cal,
        bootstrap: None,
    };
    vec![
        Evidence::default(),
        e(20.0, 18.0, 22.0, 12, 0.1),
        e(20.0, 19.999, 20.001, 1, 0.0),
        e(1e-300, 1e-301, 1e-299, 3, 0.0),
        e(9e4, 1.0, 1e5, 0, 5.0),
        Evidence {
            value: Some(Micrometres(35.0)),
            ci95: None,
            n: 4,
            calibration_half_um: 0.0,
            bootstrap: None,
        },
    ]
}

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let spec = match Spec::parse(text, "spec.json") {
        Ok(s) => s,
        Err(e) => {
            assert!(e.to_string().starts_with("spec.json: "), "{e}");
            return;
        }
    };
    let ok_limit = |l: f64| l.is_finite() && l > 0.0;
    assert!(spec.limit_um.is_some() || !spec.zones.is_empty());
    assert!(spec.limit_um.is_none_or(ok_limit));
    assert!(spec.zones.iter().all(|z| ok_limit(z.limit_um)));
    let mut files: Vec<String> = vec!["a.png".into(), "zone/b.tif".into()];
    files.extend(
        spec.zones
            .iter()
            .take(4)
            .map(|z| z.pattern.replace(['*', '?'], "x")),
    );
    for f in &files {
        for v in evidences() {
            let a = assess(&spec, Path::new(f), v, v);
            assert!(!a.reason.contains("NaN"), "{}", a.reason);
            assert_eq!(a.decision.is_some(), a.limit_um.is_some());
            assert!(a.measurements_to_decide.is_none_or(|n| n >= 1));
            assert!(a.fields_to_decide.is_none_or(|n| n >= 1));
        }
    }
});
