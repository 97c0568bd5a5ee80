use super::*;

fn reads(chars: &str) -> Vec<(GlyphRead, f64)> {
    chars
        .chars()
        .map(|c| {
            let meaning = CHARS
                .iter()
                .find(|(k, _)| *k == c)
                .map(|(_, m)| *m)
                .expect("a label character");
            (
                GlyphRead {
                    c,
                    meaning,
                    best: 1.0,
                    other: 0.0,
                    other_c: ' ',
                    size_ok: true,
                    agree: true,
                },
                1.0,
            )
        })
        .collect()
}

#[test]
fn the_grammar_of_a_label() {
    // SI prefixes: n = 1e-9, µ = 1e-6, m = 1e-3 (SI Brochure, 9th ed.,
    // table 7); the length in micrometres.
    let ok = [
        ("50um", 50.0),
        ("50\u{00b5}m", 50.0),
        ("0.5mm", 500.0),
        ("0,5mm", 500.0),
        ("200nm", 0.2),
        ("2.5um", 2.5),
        ("1mm", 1000.0),
        ("0.125mm", 125.0),
    ];
    for (t, um) in ok {
        let v = parse(&reads(t)).unwrap_or_else(|e| panic!("{t}: {e}"));
        assert!((v - um).abs() < 1e-9, "{t}: {v}");
    }
    // Not labels: no unit, a unit that is no length unit, two separators,
    // a separator at an end, a leading zero, and the ambiguous
    // thousands-or-decimal grouping.
    for t in [
        "50", "5nn", "5.0.1um", ".5um", "5.um", "05um", "1,000um", "2.500mm", "mm", "um5",
    ] {
        assert!(parse(&reads(t)).is_err(), "{t}");
    }
}

#[test]
fn confidence_is_the_share_of_the_gap_closed() {
    let g = |best: f64, other: f64, size_ok: bool| GlyphRead {
        c: '5',
        meaning: Meaning::Digit(5),
        best,
        other,
        other_c: '8',
        size_ok,
        agree: true,
    };
    assert!((glyph_confidence(&g(1.0, 0.5, true)) - 1.0).abs() < 1e-12);
    assert!((glyph_confidence(&g(0.8, 0.6, true)) - 0.5).abs() < 1e-12);
    assert_eq!(glyph_confidence(&g(0.6, 0.0, true)), 0.0);
    assert_eq!(glyph_confidence(&g(0.95, 0.1, false)), 0.0);
}

#[test]
fn templates_read_themselves() {
    // Each template, sampled as a glyph, is read as its own meaning: the
    // reader's least requirement.
    for h in [8.0, 13.0, 24.0, 40.0] {
        let t = Templates::at(h, None).expect("templates");
        for (c, m, s) in &t.glyphs {
            let grid = |_: f64| s.grid.clone();
            let r = classify(&grid, s.w_h, s.h_h, &t, false);
            assert_eq!(r.meaning, *m, "{c} at {h} px");
        }
    }
}

/// The running maximum is the window-by-window maximum (the definition),
/// on arbitrary coverages, sizes and half-widths, including windows wider
/// than the image.
#[test]
fn max_filter_is_the_maximum_over_each_window() {
    use proptest::prelude::*;
    let naive = |v: &[f32], w: usize, h: usize, r: usize| -> Vec<f32> {
        let mut out = vec![0.0f32; w * h];
        for y in 0..h {
            for x in 0..w {
                let mut m = 0.0f32;
                for yy in y.saturating_sub(r)..=(y + r).min(h - 1) {
                    for xx in x.saturating_sub(r)..=(x + r).min(w - 1) {
                        m = m.max(v[yy * w + xx]);
                    }
                }
                out[y * w + x] = m;
            }
        }
        out
    };
    proptest!(|(w in 1usize..20, h in 1usize..20, r in 0usize..25, seed in any::<u64>())| {
        let mut s = seed | 1;
        let v: Vec<f32> = (0..w * h)
            .map(|_| {
                s ^= s << 13;
                s ^= s >> 7;
                s ^= s << 17;
                (s % 1000) as f32 / 999.0
            })
            .collect();
        prop_assert_eq!(max_filter(&v, w, h, r), naive(&v, w, h, r));
    });
}
