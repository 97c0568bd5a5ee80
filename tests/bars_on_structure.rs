//! Scale bars lying directly on the structure (no backing box), dark or
//! light, 3 to 14 px thick, with or without end ticks, labelled above or
//! below, touching both phases, on busy synthetic fields of every style;
//! and no bar reported on fields where none is drawn.
//!
//! The truth is the generator's: the bar is drawn covering whole pixels
//! x0..=x1, so its length edge to edge is x1 - x0 + 1 px (`truth.json`'s
//! `scale_bar.length_px`). A blur that is the same on both sides of an end
//! does not move it. The tolerance of 0.5 px is the project's target for
//! the bar's length (issue 15); common practice, no single source.
//!
//! The checks state the targets of issue 15 and do not all hold yet, so
//! they are ignored in the suite (each says so); run them with
//! `cargo test --release --features synth --test bars_on_structure -- --ignored --nocapture`
//! (the sweep over fresh seeds: add `sweep`, seeds in
//! `ARMSPACE_BAR_SEEDS=15101,15102,15103`; one case as a PNG in /tmp:
//! `ARMSPACE_BAR_DUMP=seed:case` with `dump_case`).

mod common;
use armspace::calibrate::scale_bar::detect;
use armspace::synth::{
    render, Corner, FieldSpec, LabelSide, Morphology, Polarity, ScaleBarSpec, Style,
};
use common::fields::{gray, mix, soften, u01};

const BUSY: [Style; 5] = [
    Style::Etched,
    Style::Dense,
    Style::Lace,
    Style::Cut,
    Style::Binary,
];

/// A busy field, varied by (seed, i).
fn field(seed: u64, i: u64, style: Style) -> FieldSpec {
    let r = |k: u64| u01(seed, i, k);
    let width = 480 + (r(1) * 400.0) as u32;
    let height = 400 + (r(2) * 300.0) as u32;
    let sdas_px = 7.0 + r(3) * 12.0;
    FieldSpec {
        width,
        height,
        morphology: if r(4) < 0.5 {
            Morphology::Columnar
        } else {
            Morphology::Equiaxed
        },
        style,
        sdas_px,
        um_per_px: 0.3 + r(5) * 1.2,
        primary_angle_deg: r(6) * 180.0,
        primary_spacing_px: sdas_px * (3.0 + r(7) * 3.0),
        spacing_jitter: 0.1,
        missing_arm_fraction: 0.03,
        invert: r(8) < 0.4,
        noise_sd: r(9) * 0.04,
        blur_sigma_px: r(10) * 1.5,
        illumination: r(11) * 0.15,
        scale_bar: None,
        gradient: None,
        seed: mix(seed, i),
    }
}

/// One bar-on-structure case: the field, the bar, the variant applied.
struct Case {
    spec: FieldSpec,
    soften: Option<(f64, f64)>,
}

fn case(seed: u64, i: u64) -> Case {
    let r = |k: u64| u01(seed, i, 100 + k);
    let style = BUSY[(i % BUSY.len() as u64) as usize];
    let mut spec = field(seed, i, style);
    let thickness_px = 3 + (r(1) * 12.0) as u32; // 3..=14
    let polarity = if i.is_multiple_of(2) {
        Polarity::DarkOnLight
    } else {
        Polarity::LightOnDark
    };
    // 99 to about 45 % of the width long.
    let len_px = 99.0 + r(2) * (0.45 * spec.width as f64 - 99.0).max(1.0);
    let mut bar = ScaleBarSpec::plain(
        (len_px * spec.um_per_px * 1000.0).round() / 1000.0,
        thickness_px,
        polarity,
        if r(3) < 0.5 {
            Corner::BottomLeft
        } else {
            Corner::BottomRight
        },
        false,
    );
    bar.ticks = r(4) < 0.4;
    bar.label = match (r(5) * 3.0) as u32 {
        0 => None,
        1 => Some(LabelSide::Above),
        _ => Some(LabelSide::Below),
    };
    // Well inside the structure in most cases: the bar has structure on
    // every side.
    bar.inset_px = Some(10 + (r(6) * 60.0) as u32);
    // An ink a little off the extreme in some (a bar drawn in a grey).
    if r(7) < 0.3 {
        bar.ink = Some(match polarity {
            Polarity::DarkOnLight => 0.05 + 0.1 * r(8),
            Polarity::LightOnDark => 0.95 - 0.1 * r(8),
        });
    }
    spec.scale_bar = Some(bar);
    let soften = match i % 3 {
        0 => None,
        1 => Some((0.6 + r(9) * 0.8, 0.0)),
        _ => Some((0.8 + r(9) * 0.7, 0.01 + 0.02 * r(10))),
    };
    Case { spec, soften }
}

struct Tally {
    cases: usize,
    found: usize,
    wrong_place: usize,
    worst: f64,
    misses: Vec<String>,
}

fn run_bars(seed: u64, n: u64) -> Tally {
    let mut t = Tally {
        cases: 0,
        found: 0,
        wrong_place: 0,
        worst: 0.0,
        misses: Vec::new(),
    };
    for i in 0..n {
        let c = case(seed, i);
        let Ok((img, truth)) = render(&c.spec) else {
            continue;
        };
        let Some(tb) = truth.scale_bar else { continue };
        let mut g = gray(&img);
        if let Some((sigma, sd)) = c.soften {
            g = soften(&g, sigma, sd, mix(seed, i));
        }
        t.cases += 1;
        let b = c.spec.scale_bar.as_ref().unwrap();
        let what = format!(
            "seed {seed} case {i}: {:?} {:?} {}x{} px, ticks {}, label {:?}, ink {:?}, soften {:?}",
            c.spec.style,
            b.polarity,
            tb.length_px,
            b.thickness_px,
            b.ticks,
            b.label,
            b.ink,
            c.soften
        );
        match detect(&g) {
            Ok(found) => {
                let err = (found.length_px - tb.length_px).abs();
                // At the drawn place: the rows found lie within the drawn
                // bar's rows (2 px of blur either side; the outer rows of
                // a bar touched by structure of its ink may be left out)
                // and the left end within 3 px.
                let right_place =
                    found.y0 + 2 >= tb.y0 && found.y1 <= tb.y1 + 2 && found.x0.abs_diff(tb.x0) <= 3;
                if !right_place {
                    t.wrong_place += 1;
                    t.misses.push(format!(
                        "{what}: found elsewhere {found:?}, drawn at {},{}",
                        tb.x0, tb.y0
                    ));
                    continue;
                }
                t.found += 1;
                t.worst = t.worst.max(err);
                if err > 0.5 {
                    t.misses
                        .push(format!("{what}: measured {:.3} px", found.length_px));
                }
            }
            Err(e) => t.misses.push(format!("{what}: {e}")),
        }
    }
    t
}

/// Fields of every style, none with a bar: how many report one.
fn run_false(seed: u64, n: u64) -> (usize, Vec<String>) {
    let styles = [
        Style::Clean,
        Style::Etched,
        Style::Cut,
        Style::Dense,
        Style::Lace,
        Style::Binary,
        Style::Featureless,
    ];
    let mut fields = 0;
    let mut false_bars = Vec::new();
    for i in 0..n {
        let style = styles[(i % styles.len() as u64) as usize];
        let spec = field(seed, 1000 + i, style);
        let Ok((img, _)) = render(&spec) else {
            continue;
        };
        let mut g = gray(&img);
        if i % 2 == 1 {
            g = soften(&g, 0.8, 0.02, mix(seed, i));
        }
        fields += 1;
        if let Ok(b) = detect(&g) {
            false_bars.push(format!("seed {seed} field {i} ({style:?}): {b:?}"));
        }
    }
    (fields, false_bars)
}

#[test]
#[ignore = "target of issue 15 item 1, not met yet (seed 15001: 19 of 40 found right, 1 elsewhere); see DEVELOPERS.md"]
fn bars_on_busy_fields_are_found_within_half_a_pixel() {
    let t = run_bars(15_001, 40);
    eprintln!(
        "seed 15001: {} bars, {} found, {} wrong place, worst error {:.3} px",
        t.cases, t.found, t.wrong_place, t.worst
    );
    for m in &t.misses {
        eprintln!("  {m}");
    }
    assert!(t.cases >= 36, "only {} cases rendered", t.cases);
    assert_eq!(t.wrong_place, 0, "{:#?}", t.misses);
    assert!(t.worst <= 0.5, "{:#?}", t.misses);
    // Target: every bar found. Allow none missed here.
    assert_eq!(t.found, t.cases, "{:#?}", t.misses);
}

/// Issue 15's target "no bar found where none is drawn": 42 fields of
/// every style (seed 15002). Held since bars must stand out from the
/// bands of their ink in the structure (`scale_bar::rival_band`); on the
/// sweep seeds 15101-15103 and 15201-15203 no false bar on 504 fields.
#[test]
fn no_bar_on_fields_without_one() {
    let (fields, false_bars) = run_false(15_002, 42);
    assert!(fields >= 40);
    assert!(false_bars.is_empty(), "{false_bars:#?}");
}

/// The heavy sweep: fresh seeds, many cases. Prints the figures.
#[test]
#[ignore]
fn sweep_bars_on_structure() {
    let seeds: Vec<u64> = std::env::var("ARMSPACE_BAR_SEEDS")
        .ok()
        .map(|s| s.split(',').filter_map(|v| v.trim().parse().ok()).collect())
        .unwrap_or_else(|| vec![15_101, 15_102, 15_103]);
    let (mut cases, mut found, mut wrong, mut worst, mut fields, mut fbars) =
        (0, 0, 0, 0.0f64, 0, 0);
    for &seed in &seeds {
        let t = run_bars(seed, 120);
        let (f, fb) = run_false(seed, 84);
        eprintln!(
            "seed {seed}: {} bars, {} found, {} wrong place, worst error {:.3} px; {} fields without a bar, {} false bars",
            t.cases, t.found, t.wrong_place, t.worst, f, fb.len()
        );
        for m in t.misses.iter().chain(&fb) {
            eprintln!("  {m}");
        }
        cases += t.cases;
        found += t.found;
        wrong += t.wrong_place;
        worst = worst.max(t.worst);
        fields += f;
        fbars += fb.len();
    }
    eprintln!(
        "all seeds {seeds:?}: {found}/{cases} bars found, {wrong} wrong place, worst error {worst:.3} px; {fbars} false bars on {fields} fields"
    );
    assert_eq!(fbars, 0);
    assert_eq!(wrong, 0);
}

/// Writes one case as an 8-bit PNG for a look (`ARMSPACE_BAR_DUMP=seed:case`).
#[test]
#[ignore]
fn dump_case() {
    let Ok(v) = std::env::var("ARMSPACE_BAR_DUMP") else {
        return;
    };
    let mut it = v.split(':').filter_map(|s| s.parse::<u64>().ok());
    let (Some(seed), Some(i)) = (it.next(), it.next()) else {
        return;
    };
    let c = case(seed, i);
    let (img, truth) = render(&c.spec).unwrap();
    let mut g = gray(&img);
    if let Some((sigma, sd)) = c.soften {
        g = soften(&g, sigma, sd, mix(seed, i));
    }
    let tb = truth.scale_bar.unwrap();
    eprintln!("{tb:?}");
    eprintln!("{:?}", detect(&g));
    let out = image::GrayImage::from_fn(g.width as u32, g.height as u32, |x, y| {
        image::Luma([(g.get(x as usize, y as usize) * 255.0).round() as u8])
    });
    out.save(format!("/tmp/bar_{seed}_{i}.png")).unwrap();
}
