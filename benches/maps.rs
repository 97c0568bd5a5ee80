//! What the maps, the profile plot and the point table add to an image's
//! measuring time (the budget: at most 20 % on a 4 MP image), and
//! what the morphology's tile analysis, which every image now runs, costs.
//!
//!     cargo bench --features synth --bench maps
//!
//! One etched columnar field of 2048 x 2048 px (4.2 MP, SDAS 20 px, the
//! pipeline benchmark's), measured on a single-threaded rayon pool: plain
//! (`measure_file` as `measure` without spatial options), and with a map
//! written (`--map`, with a correlation: the SDAS and solidification-time
//! pictures), a profile along the middle with its plot (`--along`, the
//! plot into the map's folder) and the point table built (`--points`).
//! Criterion's central estimates of the two are compared by hand (figures
//! in DEVELOPERS.md, "Benchmarks").

use armspace::pipeline::{measure_file, MeasureOptions};
use armspace::synth::{render, Corner, FieldSpec, Morphology, Polarity, ScaleBarSpec, Style};
use armspace::units::{Pixels, UmPerPx};
use criterion::{criterion_group, criterion_main, Criterion, Throughput};
use std::io::Cursor;

fn spec() -> FieldSpec {
    FieldSpec {
        gradient: None,
        width: 2048,
        height: 2048,
        morphology: Morphology::Columnar,
        style: Style::Etched,
        sdas_px: 20.0,
        um_per_px: 0.5,
        primary_angle_deg: 35.0,
        primary_spacing_px: 80.0,
        spacing_jitter: 0.1,
        missing_arm_fraction: 0.03,
        invert: false,
        noise_sd: 0.02,
        blur_sigma_px: 0.8,
        illumination: 0.05,
        scale_bar: Some(ScaleBarSpec {
            length_um: 100.0,
            thickness_px: 6,
            polarity: Polarity::DarkOnLight,
            corner: Corner::BottomRight,
            backing_box: true,
            ticks: false,
            label: None,
            ink: None,
            inset_px: None,
        }),
        seed: 11,
    }
}

fn png_bytes(s: &FieldSpec) -> Vec<u8> {
    let (img, _) = render(s).expect("benchmark field renders");
    let gray8 = image::DynamicImage::ImageLuma16(img).to_luma8();
    let mut buf = Cursor::new(Vec::new());
    gray8
        .write_to(&mut buf, image::ImageFormat::Png)
        .expect("PNG encodes");
    buf.into_inner()
}

fn bench(c: &mut Criterion) {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .expect("thread pool");
    let dir = std::env::temp_dir().join(format!("armspace-bench-maps-{}", std::process::id()));
    let pictures = dir.join("maps");
    std::fs::create_dir_all(&pictures).expect("scratch folder");
    let path = dir.join("columnar-2048.png");
    std::fs::write(&path, png_bytes(&spec())).expect("bench image written");
    let cal = UmPerPx::new(0.5).expect("valid");
    let plain = MeasureOptions::manual(cal);
    let lib = armspace::interpret::library::builtin();
    let settings = armspace::interpret::Settings {
        correlation: armspace::interpret::library::find(&lib, "al-4.5cu-time-flemings-1974")
            .expect("built-in correlation")
            .clone(),
        library: lib.clone(),
        composition: armspace::interpret::parse_composition("Cu=4.5").expect("composition"),
        freezing_range: None,
        extrapolate: false,
    };
    let with_correlation = MeasureOptions {
        interpret: Some(settings),
        ..MeasureOptions::manual(cal)
    };
    let spatial = MeasureOptions {
        along: vec![armspace::spatial::parse_along("0,512:1024,512").expect("line")],
        map_dir: Some(pictures.clone()),
        plot_dir: Some(pictures.clone()),
        points: true,
        ..with_correlation.clone()
    };
    let min_quality = plain.fft.min_quality;
    let mut group = c.benchmark_group("where_in_the_casting_one_core");
    group.sample_size(10);
    group.throughput(Throughput::Elements(2048 * 2048));
    group.bench_function("plain/2048px", |b| {
        b.iter(|| pool.install(|| measure_file(&path, &plain)))
    });
    group.bench_function("correlation/2048px", |b| {
        b.iter(|| pool.install(|| measure_file(&path, &with_correlation)))
    });
    group.bench_function("map_plot_points/2048px", |b| {
        b.iter(|| {
            pool.install(|| {
                let r = measure_file(&path, &spatial);
                armspace::report::points_csv(std::slice::from_ref(&r), min_quality)
                    .expect("point table")
                    .len()
            })
        })
    });
    group.finish();

    // The morphology's tile analysis alone on the prepared field (it runs
    // for every image).
    let mut group = c.benchmark_group("morphology_one_core");
    group.sample_size(10);
    let loaded = armspace::load::load(&path, &Default::default()).expect("bench image loads");
    let prepared = armspace::preprocess::prepare_owned(loaded.image, None, &Default::default());
    let fft = armspace::methods::fft::FftParams::default();
    group.throughput(Throughput::Elements(2048 * 2048));
    group.bench_function("direction_samples/2048px", |b| {
        b.iter(|| {
            pool.install(|| {
                armspace::spatial::morphology::direction_samples(&prepared, Pixels(20.0), cal, &fft)
                    .len()
            })
        })
    });
    group.finish();
    let _ = std::fs::remove_dir_all(&dir);
}

criterion_group!(benches, bench);
criterion_main!(benches);
