//! Unit tests of the FFT method and its ladder and peak choice.

fn tile(spacing_px: f64, quality: f64) -> TileResult {
    TileResult {
        cx_px: 0.0,
        cy_px: 0.0,
        spacing_px,
        dir_deg: 0.0,
        quality,
        used: false,
        half_ratio: f64::NAN,
        cross_spacing_px: f64::NAN,
        cross_dir_deg: f64::NAN,
        cross_quality: 0.0,
    }
}

#[test]
fn two_reliable_tiles_are_not_enough_for_a_value() {
    // Common practice, no single source: a median with MAD-based outlier
    // rejection needs three values; with two, either may be the outlier.
    let params = FftParams::default();
    let two = aggregate(
        vec![tile(20.0, 10.0), tile(24.0, 10.0), tile(22.0, 1.0)],
        64,
        &params,
    );
    assert!(two.value_px.is_none());
    assert!(
        two.reason.as_deref().unwrap_or("").contains("at least 3"),
        "{:?}",
        two.reason
    );
    let three = aggregate(
        vec![tile(20.0, 10.0), tile(24.0, 10.0), tile(22.0, 10.0)],
        64,
        &params,
    );
    assert!(three.value_px.is_some());
}
use super::*;
use crate::load::GrayImage;
use crate::preprocess::{prepare, PreprocessParams};

fn sinusoid(n: usize, period: f64, angle_deg: f64) -> Vec<f32> {
    let (c, s) = (angle_deg.to_radians().cos(), angle_deg.to_radians().sin());
    (0..n * n)
        .map(|i| {
            let (x, y) = ((i % n) as f64, (i / n) as f64);
            // y points down in the image; the angle is counter-clockwise with y up.
            let t = x * c - y * s;
            (std::f64::consts::TAU * t / period).cos() as f32
        })
        .collect()
}

#[test]
fn peak_of_a_pure_sinusoid_at_a_non_integer_bin() {
    // A pure sinusoid's frequency is known exactly; the interpolated peak
    // must land within 0.01 bin of it (requirement of the method).
    let n = 128;
    for bin in [5.3, 9.5, 17.25, 30.8] {
        let period = n as f64 / bin;
        let img = sinusoid(n, period, 0.0);
        let mut a = SpectrumAnalyser::new(n);
        let mut p = Vec::new();
        a.power(&img, n, 0, 0, &mut p);
        let peak = choose_peak(&p, n, &FftParams::default()).unwrap();
        let got_bin = peak.freq() * n as f64;
        assert!((got_bin - bin).abs() < 0.01, "bin {bin}: got {got_bin}");
    }
}

#[test]
fn direction_follows_the_wave_vector() {
    let n = 128;
    for angle in [0.0, 30.0, 90.0, 135.0] {
        let img = sinusoid(n, 10.0, angle);
        let mut a = SpectrumAnalyser::new(n);
        let mut p = Vec::new();
        a.power(&img, n, 0, 0, &mut p);
        let peak = choose_peak(&p, n, &FftParams::default()).unwrap();
        assert!(
            axial_difference(peak.dir_deg(), angle) < 1.0,
            "{angle}: {}",
            peak.dir_deg()
        );
        assert!((peak.period_px() - 10.0).abs() < 0.1);
    }
}

#[test]
fn featureless_images_give_no_value() {
    let (w, h) = (256, 256);
    let flat = GrayImage::from_vec(w, h, vec![0.5; w * h]).unwrap();
    let out = measure(
        &prepare(&flat, None, &PreprocessParams::default()),
        &FftParams::default(),
    );
    assert!(out.value_px.is_none() && out.reason.is_some());
    // Pseudo-random white noise (a fixed linear congruential sequence) has no period.
    let mut state = 12345u64;
    let noise: Vec<f32> = (0..w * h)
        .map(|_| {
            state = state
                .wrapping_mul(6364136223846793005)
                .wrapping_add(1442695040888963407);
            (state >> 40) as f32 / (1u64 << 24) as f32
        })
        .collect();
    let img = GrayImage::from_vec(w, h, noise).unwrap();
    let out = measure(
        &prepare(&img, None, &PreprocessParams::default()),
        &FftParams::default(),
    );
    assert!(
        out.value_px.is_none(),
        "noise gave {:?}",
        out.value_px.map(|p| p.0)
    );
}

fn stat(n: usize, period_px: f64, support: f64) -> ScaleStat {
    ScaleStat {
        n,
        period_px,
        support,
        n_tiles: 20,
    }
}

#[test]
fn ladder_keeps_the_finest_period_reproduced_across_scales() {
    // Basis: a real period does not move with the analysis window while
    // resolution artefacts do (common practice, no single source), and
    // secondary arms are finer than the primary spacing.
    let p = FftParams::default();
    let ladder = [
        stat(32, 4.6, 0.3),  // drifts to 5.4 at the next scale: artefact
        stat(48, 5.4, 0.3),  // not reproduced at 72
        stat(72, 13.6, 0.4), // reproduced at 108: secondary arms
        stat(108, 13.4, 0.5),
        stat(162, 36.0, 0.6), // reproduced at 250: primary spacing
        stat(250, 36.5, 0.8),
    ];
    let got = ladder_period(&ladder, &p).unwrap();
    assert!((got - 13.4).abs() < 1e-9, "{got}");
    // Without enough agreeing tiles no scale supports a period.
    let weak: Vec<ScaleStat> = ladder.iter().map(|s| stat(s.n, s.period_px, 0.1)).collect();
    assert!(ladder_period(&weak, &p).is_none());
    // A tile must span MIN_PERIODS_PER_TILE periods at the finer scale.
    let coarse = [stat(32, 12.0, 0.5), stat(48, 12.0, 0.5)];
    assert!(ladder_period(&coarse, &p).is_none());
}

#[test]
fn the_largest_tile_that_fits_ends_the_ladder() {
    // Basis: rungs 1.5 apart (common practice, no single source), and a
    // last rung at least 25 % above the one before (a resolution artefact
    // at 4 bins or more then moves by a bin or more).
    let sizes = smooth_sizes(524);
    assert_eq!(
        ladder_sizes(&sizes),
        vec![32, 48, 72, 108, 162, 250, 384, 512]
    );
    // 400 is within 25 % of 384: no extra rung.
    let sizes = smooth_sizes(400);
    assert_eq!(ladder_sizes(&sizes), vec![32, 48, 72, 108, 162, 250, 384]);
}

#[test]
fn the_short_last_rung_pairs_only_on_the_largest_periods() {
    // A period that the regular rungs could reproduce on two pairs (the
    // rung three below the last holds 4 periods of it) is not taken from
    // the short last rung alone; a period too large for that is.
    let p = FftParams::default();
    let base = [
        stat(108, 9.0, 0.0),
        stat(162, 9.0, 0.0),
        stat(250, 9.0, 0.0),
    ];
    let with = |period: f64| {
        let mut l = base.to_vec();
        l.push(stat(384, period, 0.6));
        l.push(stat(512, period * 1.02, 0.6));
        ladder_period(&l, &p)
    };
    // 162 >= 4 x 15: pairs (108, 162) and (162, 250) could have shown it.
    assert!(with(15.0).is_none());
    // 162 < 4 x 45: only (250, 384) could; the last rung may confirm it.
    assert!((with(45.0).unwrap() - 45.9).abs() < 1e-9);
}

#[test]
fn power_at_twice_the_spacing_shows_a_weaker_fundamental() {
    // Basis: the DFT is linear, so a wave of period 16 px added to one of
    // period 8 px puts its power at half the 8 px wave's frequency
    // vector, far above the white-noise level of that ring; without it,
    // that bin holds noise only, at about its ring's median (ratio near
    // 1, below the HARMONIC_RATIO of 2).
    let n = 128;
    let mut state = 777u64;
    let mut noise = || {
        state = state
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (state >> 40) as f32 / (1u64 << 24) as f32 - 0.5
    };
    let fine = sinusoid(n, 8.0, 30.0);
    let coarse = sinusoid(n, 16.0, 30.0);
    let p = FftParams::default();
    let ratio = |with_coarse: bool, noise: &mut dyn FnMut() -> f32| {
        let img: Vec<f32> = fine
            .iter()
            .zip(&coarse)
            .map(|(f, c)| f + if with_coarse { 0.3 * c } else { 0.0 } + noise())
            .collect();
        let mut a = SpectrumAnalyser::new(n);
        let mut power = Vec::new();
        a.power(&img, n, 0, 0, &mut power);
        let mut search = CandidateSearch::new(n, p.min_period_px);
        let (cands, _) = search.run(&power);
        let top = cands
            .iter()
            .max_by(|a, b| a.power.total_cmp(&b.power))
            .copied()
            .unwrap();
        assert!((top.period_px() - 8.0).abs() < 0.1);
        search.ratio_at(top.fx / 2.0, top.fy / 2.0)
    };
    let with = ratio(true, &mut noise);
    let without = ratio(false, &mut noise);
    assert!(with > 10.0 * HARMONIC_RATIO, "{with}");
    assert!(without < HARMONIC_RATIO, "{without}");
}

#[test]
fn tiles_locked_on_a_harmonic_are_incompatible() {
    // Basis: sqrt 2 is the geometric midpoint between a period and its
    // second harmonic (or sub-harmonic).
    assert!(compatible(13.0, 10.0) && compatible(7.5, 10.0));
    assert!(!compatible(20.0, 10.0) && !compatible(5.0, 10.0));
}

#[test]
fn finer_of_two_crossed_periods_is_measured() {
    // A strong coarse wave (period 30, as a primary spacing) across a
    // weaker fine one (period 8, as secondary arms): the finer period is
    // the one reproduced at the smallest scales and is measured.
    // Basis: secondary arms are finer than the primary spacing.
    let n = 384;
    let coarse = sinusoid(n, 30.0, 0.0);
    let fine = sinusoid(n, 8.0, 90.0);
    let data: Vec<f32> = coarse
        .iter()
        .zip(&fine)
        .map(|(a, b)| 0.5 + 0.3 * a + 0.15 * b)
        .collect();
    let img = GrayImage::from_vec(n, n, data).unwrap();
    let out = measure(
        &prepare(&img, None, &PreprocessParams::default()),
        &FftParams::default(),
    );
    let v = out.value_px.map(|p| p.0).unwrap();
    assert!((v - 8.0).abs() < 0.2, "{v}");
}

#[test]
fn a_side_lobe_is_not_the_strongest_feature_of_its_ray() {
    // Basis: the first side lobe of a rectangle of width w lies at
    // 1.43 / w, 13.3 dB (21 times) below its main lobe (Harris 1978);
    // a fundamental is the strongest feature of its ray.
    let n = 96;
    let w = 12usize;
    let bar: Vec<f32> = (0..n * n)
        .map(|i| f32::from(u8::from((42..42 + w).contains(&(i % n)))))
        .collect();
    let mut a = SpectrumAnalyser::new(n);
    let mut p = Vec::new();
    a.power(&bar, n, 0, 0, &mut p);
    let mut search = CandidateSearch::new(n, 3.0);
    let (cands, _) = search.run(&p);
    // The candidate nearest the first side lobe, 1.43 / 12 px.
    let lobe = cands
        .iter()
        .min_by(|x, y| {
            (x.freq() - 1.43 / w as f64)
                .abs()
                .total_cmp(&(y.freq() - 1.43 / w as f64).abs())
        })
        .unwrap();
    assert!((lobe.freq() * w as f64 - 1.43).abs() < 0.15, "{lobe:?}");
    let excess = search.ray_excess_below(lobe);
    assert!(excess >= MAX_RAY_EXCESS, "side lobe excess {excess}");
    // A row of such bars, 24 px apart (duty 0.5): its fundamental is the
    // strongest feature of its ray.
    let row: Vec<f32> = (0..n * n)
        .map(|i| f32::from(u8::from((i % n) % 24 < w)))
        .collect();
    a.power(&row, n, 0, 0, &mut p);
    let (cands, _) = search.run(&p);
    let fundamental = cands
        .iter()
        .max_by(|x, y| x.power.total_cmp(&y.power))
        .unwrap();
    assert!((fundamental.period_px() - 24.0).abs() < 0.5);
    let excess = search.ray_excess_below(fundamental);
    assert!(excess < 1.0, "fundamental excess {excess}");
}

#[test]
fn a_single_bar_is_not_a_period() {
    // Basis: N periods under a Hann window give a peak of relative
    // half-power width 1.44 / N (Harris 1978); one feature's form factor
    // gives a lobe of relative width of order one.
    let n = 64;
    // One bright bar, 6 px wide, across the tile: no repetition.
    let bar: Vec<f32> = (0..n * n)
        .map(|i| {
            if (29..35).contains(&(i % n)) {
                1.0
            } else {
                0.0
            }
        })
        .collect();
    let mut a = SpectrumAnalyser::new(n);
    let mut p = Vec::new();
    a.power(&bar, n, 0, 0, &mut p);
    // Its strongest lobe (the first side lobe of its sinc-squared form
    // factor; higher lobes are relatively narrower but far weaker) is
    // broad and is not taken as a period.
    let (cands, _) = candidates(&p, n, &FftParams::default());
    let strongest = cands
        .iter()
        .max_by(|a, b| a.power.total_cmp(&b.power))
        .unwrap();
    assert!(relative_width(&p, n, strongest) > MAX_RELATIVE_WIDTH);
    let chosen = choose_peak(&p, n, &FftParams::default());
    assert!(chosen.is_none_or(|c| c.power < strongest.power));
    // Eight periods of 8 px: a narrow peak.
    let wave = sinusoid(n, 8.0, 0.0);
    a.power(&wave, n, 0, 0, &mut p);
    let peak = choose_peak(&p, n, &FftParams::default()).unwrap();
    let w = relative_width(&p, n, &peak);
    assert!(w < 0.3, "{w}");
}

#[test]
fn finer_period_parallel_to_a_coarser_one_is_dropped() {
    // Basis: secondary arms repeat along the trunk and the primary
    // spacing across it (perpendicular); a finer period along the same
    // direction as a coarser one at the same place belongs to the same
    // rows (harmonic or side lobe). Common practice, no single source.
    let p = FftParams::default();
    let tile = |cx: f64, cy: f64, spacing_px: f64, dir_deg: f64| TileResult {
        cx_px: cx,
        cy_px: cy,
        spacing_px,
        dir_deg,
        quality: 20.0,
        used: false,
        half_ratio: f64::NAN,
        cross_spacing_px: f64::NAN,
        cross_dir_deg: f64::NAN,
        cross_quality: 0.0,
    };
    let build = |coarse_dir: f64| {
        let mut scales = Vec::new();
        for (n, per, dir) in [
            (32usize, 5.0, 30.0),
            (48, 5.1, 30.0),
            (72, 14.0, coarse_dir),
            (108, 14.2, coarse_dir),
        ] {
            let tiles: Vec<TileResult> = (0..9)
                .map(|k| tile(100.0 + 5.0 * k as f64, 100.0, per, dir))
                .collect();
            scales.push((n, tiles));
        }
        let ladder: Vec<ScaleStat> = scales.iter().map(|(n, t)| scale_stat(*n, t, &p)).collect();
        resolve_ladder(&ladder, &scales, &p)
    };
    // Parallel: the fine period is a feature of the coarser rows.
    assert!((build(35.0).unwrap() - 14.2).abs() < 1e-9);
    // Perpendicular: the fine period is the secondary spacing.
    assert!((build(120.0).unwrap() - 5.1).abs() < 1e-9);
}

#[test]
fn a_clean_grating_is_measured() {
    // A pure sinusoid has no power at half its frequency (a fact of Fourier
    // analysis), so it must not be taken for the second harmonic of a longer
    // period: the simplest periodic field gets its period. 8-bit levels, as
    // a camera would record it.
    for period in [8.0, 20.0] {
        let n = 512;
        let data: Vec<f32> = sinusoid(n, period, 0.0)
            .into_iter()
            .map(|v| ((0.5 + 0.4 * v) * 255.0).round() / 255.0)
            .collect();
        let img = GrayImage::from_vec(n, n, data).unwrap();
        let out = measure(
            &prepare(&img, None, &PreprocessParams::default()),
            &FftParams::default(),
        );
        let v = out
            .value_px
            .map(|p| p.0)
            .unwrap_or_else(|| panic!("{period}: {:?}", out.reason));
        assert!((v / period - 1.0).abs() < 0.01, "{period}: {v}");
    }
}

/// Dark elliptical spots in rows: spacing `a` along each row, rows `b`
/// apart, the whole lattice turned by `angle_deg`; odd rows shifted by
/// `stagger` x a. The spots are 0.7 a long along the row and 0.6 b across
/// it, so the channels between rows (0.4 b) are wider than the gaps along a
/// row (0.3 a), as in a section that cuts arms across.
fn spots_in_rows(n: usize, a: f64, b: f64, angle_deg: f64, stagger: f64) -> Vec<f32> {
    let (c, s) = (angle_deg.to_radians().cos(), angle_deg.to_radians().sin());
    (0..n * n)
        .map(|i| {
            let (x, y) = ((i % n) as f64, (i / n) as f64);
            // Lattice coordinates: u along the rows, v across them.
            let (u, v) = (x * c + y * s, -x * s + y * c);
            let row = (v / b).round();
            let dv = v - row * b;
            let shift = if (row as i64).rem_euclid(2) == 1 {
                stagger * a
            } else {
                0.0
            };
            let du = (u - shift) - ((u - shift) / a).round() * a;
            let r = ((du / (0.35 * a)).powi(2) + (dv / (0.3 * b)).powi(2)).sqrt();
            // A soft edge about a pixel wide.
            let ink = (1.0 - (r - 1.0) * 0.35 * a).clamp(0.0, 1.0);
            (0.8 - 0.5 * ink) as f32
        })
        .collect()
}

#[test]
fn spots_in_rows_are_measured_along_the_rows() {
    // Geometry of the lattice (drawn here): the spots stand `a` apart along
    // their rows and the rows `b` apart, so the arm spacing is `a` and the
    // row spacing `b` (common practice, no single source: cut arms are
    // counted along their row). A staggered lattice (a centred rectangular
    // one) has no spectral peak exactly along the rows; its peaks at
    // (1/a, +-1/(2b)) carry 1/a along the rows (its reciprocal lattice, a
    // fact of Fourier analysis).
    for (a, b, angle, stagger) in [
        (10.0, 20.0, 0.0, 0.0),
        (10.0, 17.0, 30.0, 0.0),
        (12.0, 22.0, 115.0, 0.2),
        (8.0, 15.0, 60.0, 0.0),
    ] {
        let n = 512;
        // 8-bit levels with a camera's noise (uniform, +-0.03 of the
        // range, from a fixed-seed SplitMix64 sequence).
        let mut state = 0x9E37_79B9_7F4A_7C15u64;
        let data: Vec<f32> = spots_in_rows(n, a, b, angle, stagger)
            .into_iter()
            .map(|v| {
                state = state.wrapping_add(0x9E37_79B9_7F4A_7C15);
                let mut z = state;
                z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
                z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
                z ^= z >> 31;
                let u = (z >> 11) as f32 / (1u64 << 53) as f32;
                ((v + 0.06 * (u - 0.5)) * 255.0).round() / 255.0
            })
            .collect();
        let img = GrayImage::from_vec(n, n, data).unwrap();
        let out = measure(
            &prepare(&img, None, &PreprocessParams::default()),
            &FftParams::default(),
        );
        let v = out.value_px.map(|p| p.0);
        let rows = out.row_spacing_px.map(|p| p.0);
        // The rows are named whenever the value was read along them; a
        // tile sized on the finer period may hold too few row periods (three
        // here) for a narrow peak, and then the rows go unreported.
        let ok = v.is_some_and(|v| (v / a - 1.0).abs() < 0.03)
            && (!out.read_along_rows || rows.is_some_and(|r| (r / b - 1.0).abs() < 0.05));
        assert!(
            ok,
            "a {a} b {b} angle {angle} stagger {stagger}: value {v:?} rows {rows:?} ({:?})",
            out.reason
        );
    }
}

#[test]
fn a_grating_has_no_rows() {
    // A sinusoid repeats in one direction only (a fact of Fourier
    // analysis): no period across it, no row spacing.
    let n = 512;
    let img = GrayImage::from_vec(n, n, sinusoid(n, 12.0, 20.0)).unwrap();
    let out = measure(
        &prepare(&img, None, &PreprocessParams::default()),
        &FftParams::default(),
    );
    assert!(out.value_px.is_some());
    assert_eq!(out.row_spacing_px, None);
    assert!(!out.read_along_rows);
}

/// `used` tiles of period 13.5 px, `finer` of them also showing a period
/// of 7.5 px at right angles (the geometry of spots 7.5 px apart along rows
/// 13.5 px apart, which the tiles read as rows), through the aggregate and
/// the rows rule.
fn rows_minority(used: usize, finer: usize) -> FftOutcome {
    let params = FftParams::default();
    let tiles: Vec<TileResult> = (0..used)
        .map(|i| {
            let mut t = tile(13.5, 10.0);
            if i < finer {
                t.cross_spacing_px = 7.5;
                t.cross_dir_deg = 90.0;
                t.cross_quality = 10.0;
            }
            t
        })
        .collect();
    along_rows(aggregate(tiles, 64, &params), &params)
}

#[test]
fn a_minority_of_tiles_with_rows_leaves_the_field_undecided_when_it_may_be_half() {
    // 10 of 40 tiles, 10 effective trials (a quarter each): the Wilson 95 %
    // interval of the share reaches 0.56 (scipy, see stats), so the field
    // may be mostly rows: the value stands as read, with the finer period
    // kept as evidence for the combination.
    let out = rows_minority(40, 10);
    assert!((out.value_px.unwrap().0 - 13.5).abs() < 1e-9);
    assert!(!out.read_along_rows);
    let ev = out.rows_undecided.unwrap();
    assert_eq!((ev.tiles, ev.used), (10, 40));
    assert!((ev.period_px - 7.5).abs() < 1e-9);
    assert!((ev.share_upper95 - 0.557_818_575_721_450_2).abs() < 1e-9);
    // The same share over 400 tiles (100 effective trials) is clearly a
    // minority (upper bound 0.34): no evidence kept.
    assert!(rows_minority(400, 100).rows_undecided.is_none());
    // 2 of 40 (upper bound 0.34): a chance minority.
    assert!(rows_minority(40, 2).rows_undecided.is_none());
    // 1 of 18: the share's interval reaches 0.52, but one tile measures no
    // period on its own (a value needs at least three tiles): no evidence.
    assert!(rows_minority(18, 1).rows_undecided.is_none());
    // 25 of 40, a majority: read along the rows, as before.
    let most = rows_minority(40, 25);
    assert!(most.read_along_rows && most.rows_undecided.is_none());
    assert!((most.value_px.unwrap().0 - 7.5).abs() < 1e-9);
}
