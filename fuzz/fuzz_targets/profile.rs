//! Calibration profile files (`calibrate::profile::parse`), each profile of
//! the file selected in turn, and the calibration a profile gives beside a
//! manual value (`calibrate::resolve`). Beyond "no panic": an accepted
//! profile is a usable um/px with an uncertainty in [0, 1), and the
//! comparison of sources stays finite.
#![no_main]

use armspace::calibrate::{self, profile, CalibrationRequest, CalibrationSource};
use armspace::units::UmPerPx;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    // The names asked for: one that may not be there, then the file's own.
    let mut names = vec!["x20".to_string()];
    if let Ok(v) = serde_json::from_str::<serde_json::Value>(text) {
        if let Some(p) = v.get("profiles").and_then(|p| p.as_object()) {
            names.extend(p.keys().take(8).cloned());
        }
    }
    for name in &names {
        let p = match profile::parse(text, name, "profiles.json") {
            Ok(p) => p,
            Err(e) => {
                assert!(e.to_string().starts_with("profiles.json: "), "{e}");
                continue;
            }
        };
        assert_eq!(&p.name, name);
        let v = p.um_per_px.get();
        assert!((1e-6..=1e6).contains(&v));
        if let Some(u) = p.rel_uncertainty {
            assert!(u.is_finite() && (0.0..1.0).contains(&u));
        }
        for trust in [None, Some(CalibrationSource::Profile)] {
            let req = CalibrationRequest {
                manual: Some(UmPerPx::new(0.5).unwrap()),
                manual_rel_uncertainty: None,
                profile: Some(p.clone()),
                scale_bar: None,
                read_label: false,
                trust,
            };
            let (c, warnings) = calibrate::resolve(&req, None, None).expect("two sources given");
            assert!(c.um_per_px.get().is_finite());
            for w in &warnings {
                assert!(
                    !w.message.contains("NaN") && !w.message.contains("inf"),
                    "{}",
                    w.message
                );
            }
            if let Some(m) = &c.conflict {
                assert!(!m.contains("NaN") && !m.contains("inf"), "{m}");
            }
        }
    }
});
