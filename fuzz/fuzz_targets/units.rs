//! The small value parsers of the command line: lengths with a unit
//! ("50um", "0.1 mm"), um/px, temperature intervals, compositions, the
//! correlation units, and `fmt_num`. Beyond "no panic": what is accepted
//! is finite and in the stated range, and a formatted number reads back as
//! itself.
#![no_main]

use armspace::calibrate::{parse_length, parse_um_per_px};
use armspace::interpret::library::{rate_unit, time_unit};
use armspace::interpret::{parse_composition, parse_kelvin};
use armspace::units::{fmt_num, Pixels, UmPerPx};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    // Every 8-byte window as a number: the formatter and the calibration
    // type on any bit pattern.
    for chunk in data.chunks_exact(8).take(4) {
        let v = f64::from_le_bytes(chunk.try_into().unwrap());
        let s = fmt_num(v);
        if v.is_finite() {
            let back: f64 = s
                .parse()
                .unwrap_or_else(|_| panic!("{s} does not read back"));
            assert_eq!(back, v, "{s}");
        }
        match UmPerPx::new(v) {
            Ok(c) => {
                assert!((1e-6..=1e6).contains(&c.get()));
                let px = c.to_px(c.to_um(Pixels(1000.0)));
                assert!(px.0.is_finite());
            }
            Err(e) => assert!(!e.to_string().is_empty()),
        }
    }
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match parse_length(text) {
        Ok(um) => assert!(um.0.is_finite() && um.0 > 0.0, "{text:?}: {}", um.0),
        Err(e) => assert!(e.to_string().contains('\''), "{e}"),
    }
    if let Ok(v) = parse_um_per_px(text) {
        assert!((1e-6..=1e6).contains(&v.get()));
    }
    if let Ok(k) = parse_kelvin(text) {
        assert!(k.0.is_finite() && k.0 > 0.0 && k.0 < 2000.0);
    }
    match parse_composition(text) {
        Ok(c) => {
            assert!(!c.is_empty());
            for (el, v) in &c {
                assert!((1..=2).contains(&el.len()), "{el}");
                assert!(v.is_finite() && (0.0..=100.0).contains(v), "{el}={v}");
            }
        }
        Err(e) => assert!(!e.to_string().is_empty()),
    }
    for u in [rate_unit(text), time_unit(text)].into_iter().flatten() {
        assert!(u.to_base.is_finite() && u.to_base > 0.0);
    }
});
