//! Correlation files (`interpret::library::parse`, the reader behind
//! `--correlations FILE`), and every entry accepted used as
//! `interpret --correlation` would use it: with the built-in library beside
//! it (its alternatives), at a few SDAS values with and without an interval
//! and a freezing range. Beyond "no panic": every number of an
//! interpretation, as computed and as rounded for the report, is finite;
//! values and interval bounds are positive; where there is no value, a
//! reason says why.
#![no_main]

use armspace::interpret::library::{self, Composition, Correlation, Law};
use armspace::interpret::{interpret_with_alternatives, Interpretation, Quantity, Request};
use armspace::units::{Kelvin, Micrometres};
use libfuzzer_sys::fuzz_target;
use std::sync::OnceLock;

fn builtin() -> &'static [Correlation] {
    static LIB: OnceLock<Vec<Correlation>> = OnceLock::new();
    LIB.get_or_init(library::builtin)
}

fn finite(x: f64, what: &str, id: &str) {
    assert!(x.is_finite(), "'{id}': {what} is {x}");
}

fn check_pair(p: Option<[f64; 2]>, what: &str, id: &str, positive: bool) {
    if let Some([a, b]) = p {
        finite(a, what, id);
        finite(b, what, id);
        assert!(a <= b, "'{id}': {what} [{a}, {b}] out of order");
        if positive {
            assert!(a > 0.0, "'{id}': {what} lower bound {a}");
        }
    }
}

fn check_quantity(q: &Quantity, what: &str, id: &str) {
    match q.value {
        Some(v) => {
            finite(v, what, id);
            assert!(v > 0.0, "'{id}': {what} = {v}");
        }
        None => assert!(
            q.reason.is_some(),
            "'{id}': {what} has neither value nor reason"
        ),
    }
    check_pair(q.ci95, what, id, true);
    check_pair(q.ci95_with_scatter, what, id, true);
    if let Some(p) = q.ci95_rel_pct {
        finite(p[0], what, id);
        finite(p[1], what, id);
    }
    if let Some(g) = q.uncertainty_gain {
        finite(g, what, id);
    }
}

fn check(i: &Interpretation, input: &str) {
    let id = i.correlation.id.as_str();
    finite(i.correlation.coefficient_um, "coefficient", id);
    assert!(i.correlation.coefficient_um > 0.0);
    finite(i.correlation.exponent, "exponent", id);
    assert!(i.correlation.exponent != 0.0);
    if let Some(r) = &i.correlation.fitted_range {
        for v in [r.min, r.max].into_iter().flatten() {
            finite(v, "fitted range bound", id);
        }
    }
    if let Some(v) = i.sdas_um {
        finite(v, "sdas", id);
    }
    check_pair(i.sdas_ci95_um, "sdas interval", id, false);
    check_quantity(&i.cooling_rate_k_per_s, "cooling rate", id);
    check_quantity(&i.solidification_time_s, "solidification time", id);
    if let Some(c) = &i.comparison {
        for v in [c.chosen_value, c.value, c.ratio].into_iter().flatten() {
            finite(v, "comparison", id);
        }
        check_pair(c.chosen_ci95, "comparison interval", id, true);
        check_pair(c.ci95, "comparison interval", id, true);
    }
    for w in &i.warnings {
        assert!(!nan_in(w, input), "'{id}': {w}");
    }
    i.alternatives.iter().for_each(|a| check(a, input));
}

/// Whether a message shows a NaN or an infinity that was computed: the
/// file's own text (an id, a solute) may spell one, so a word the input
/// holds anywhere is not looked for.
fn nan_in(message: &str, input: &str) -> bool {
    ["NaN", "inf "]
        .iter()
        .any(|w| !input.contains(w.trim()) && message.contains(w))
}

/// A content for every element an entry names: inside its stated range
/// when it has one.
fn composition_for(c: &Correlation, scale: f64) -> Composition {
    let mut out = Composition::new();
    for (el, r) in &c.composition {
        let v = match (r.min, r.max) {
            (Some(a), Some(b)) => 0.5 * (a + b),
            (Some(a), None) => a + 0.5,
            (None, Some(b)) => 0.5 * b,
            (None, None) => 1.0,
        };
        out.insert(el.clone(), v.clamp(0.0, 100.0));
    }
    match &c.law {
        Law::Power { coefficient, .. } => {
            for el in coefficient.elements() {
                out.entry(el.to_string()).or_insert(scale);
            }
        }
        Law::Coarsening(p) => {
            out.entry(p.solute.clone()).or_insert(scale);
        }
    }
    out
}

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    let user = match library::parse(text, "user.json", false) {
        Ok(u) => u,
        Err(e) => {
            assert!(e.to_string().starts_with("user.json: "), "{e}");
            return;
        }
    };
    let mut all: Vec<Correlation> = builtin().to_vec();
    all.extend(
        user.iter()
            .filter(|u| !builtin().iter().any(|b| b.id == u.id))
            .cloned(),
    );
    let _ = library::table(&all);
    for c in user.iter().take(4) {
        let _ = (c.law_text(), c.validity_text());
        for scale in [0.5, 7.0] {
            let composition = composition_for(c, scale);
            for (sdas, ci) in [
                (25.0, Some([22.0, 28.0])),
                (25.0, None),
                (1e-3, Some([1e-4, 1e-2])),
                (4e4, Some([1.0, 1e5])),
            ] {
                for freezing_range in [None, Some(Kelvin(60.0))] {
                    let req = Request {
                        sdas: Some(Micrometres(sdas)),
                        ci95: ci.map(|[a, b]| [Micrometres(a), Micrometres(b)]),
                        composition: composition.clone(),
                        freezing_range,
                        extrapolate: true,
                    };
                    match interpret_with_alternatives(c, &all, &req) {
                        Ok(i) => {
                            check(&i, text);
                            check(&i.rounded(), text);
                        }
                        Err(e) => {
                            let m = e.to_string();
                            assert!(!m.is_empty() && !nan_in(&m, text), "{m}");
                        }
                    }
                }
            }
        }
    }
});
