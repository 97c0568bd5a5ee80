//! Throughput of the measurement pipeline, in megapixels per second on one
//! core (the design target is at least 10 MP/s per core end to end).
//!
//!     cargo bench --bench pipeline
//!
//! Each case renders a synthetic etched micrograph once (src/synth), writes it
//! as PNG, and times the whole per-image pipeline on a single-threaded rayon
//! pool: read, hash, decode, scale-bar search, calibration, preprocessing,
//! all three methods (FFT, intercept, centres) and their statistics. Criterion reports
//! the time per image and the throughput in elements (pixels) per second.

use armspace::pipeline::{measure_file, MeasureOptions};
use armspace::synth::{render, Corner, FieldSpec, Morphology, Polarity, ScaleBarSpec, Style};
use armspace::units::UmPerPx;
use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use std::io::Cursor;

fn spec(side: u32, morphology: Morphology, sdas_px: f64) -> FieldSpec {
    FieldSpec {
        gradient: None,
        width: side,
        height: side,
        morphology,
        style: Style::Etched,
        sdas_px,
        um_per_px: 0.5,
        primary_angle_deg: 35.0,
        primary_spacing_px: 4.0 * sdas_px,
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
    let dir = std::env::temp_dir().join(format!("armspace-bench-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("scratch folder");
    let opts = MeasureOptions::manual(UmPerPx::new(0.5).expect("valid"));
    let mut group = c.benchmark_group("measure_one_core");
    group.sample_size(10);
    for (side, morph, sdas) in [
        (1024, Morphology::Columnar, 14.0),
        (2048, Morphology::Columnar, 20.0),
        (1024, Morphology::Equiaxed, 14.0),
    ] {
        let path = dir.join(format!("{morph:?}-{side}.png"));
        std::fs::write(&path, png_bytes(&spec(side, morph, sdas))).expect("bench image written");
        group.throughput(Throughput::Elements((side * side) as u64));
        let id = BenchmarkId::new(format!("{morph:?}").to_lowercase(), format!("{side}px"));
        group.bench_with_input(id, &path, |b, path| {
            b.iter(|| pool.install(|| measure_file(path, &opts)))
        });
    }
    group.finish();

    // The text finder alone (ten labellings of the image), on the 2048 px
    // field: its share of the end-to-end time above.
    let mut group = c.benchmark_group("annotations_one_core");
    group.sample_size(10);
    let path = dir.join("Columnar-2048.png");
    let loaded = armspace::load::load(&path, &Default::default()).expect("bench image loads");
    group.throughput(Throughput::Elements((2048 * 2048) as u64));
    group.bench_function("find_text/2048px", |b| {
        b.iter(|| pool.install(|| armspace::annotations::find_text(&loaded.image, None)))
    });
    group.finish();
    let _ = std::fs::remove_dir_all(&dir);
}

criterion_group!(benches, bench);
criterion_main!(benches);
