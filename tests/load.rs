//! Loading: formats, bit depths, colour reduction, multi-page TIFF, and the
//! pixel limit checked from the header before decoding.

mod common;
use armspace::load::{load, load_bytes, LoadOptions};
use armspace::Error;
use common::repo_file;
use std::path::Path;

#[test]
fn sixteen_bit_tiff_from_an_outside_writer_keeps_every_level() {
    // fixtures/loader/ramp16.tif was written by tifffile
    // (scripts/make_tiff_fixtures.py): value (x * 1021 + y * 37) mod 65536.
    let l = load(
        &repo_file("fixtures/loader/ramp16.tif"),
        &LoadOptions::default(),
    )
    .unwrap();
    assert_eq!((l.image.width, l.image.height, l.bit_depth), (64, 48, 16));
    for y in 0..48 {
        for x in 0..64 {
            let expected = ((x * 1021 + y * 37) % 65536) as f32;
            let got = l.image.get(x, y) * 65535.0;
            assert_eq!(got.round(), expected, "at ({x}, {y})");
        }
    }
    assert!(l.warnings.is_empty());
}

#[test]
fn sixteen_bit_round_trip_through_our_own_writer() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("r.tif");
    // Every 16-bit level that is odd and above 255: lost by any 8-bit path.
    let img = image::ImageBuffer::<image::Luma<u16>, Vec<u16>>::from_fn(256, 128, |x, y| {
        image::Luma([(((y * 256 + x) * 2 + 257) % 65536) as u16])
    });
    img.save(&path).unwrap();
    let l = load(&path, &LoadOptions::default()).unwrap();
    assert_eq!(l.bit_depth, 16);
    for (i, v) in img.as_raw().iter().enumerate() {
        assert_eq!((l.image.data[i] * 65535.0).round() as u16, *v);
    }
}

#[test]
fn multi_page_tiff_measures_the_first_page_with_a_warning() {
    let l = load(
        &repo_file("fixtures/loader/two_pages16.tif"),
        &LoadOptions::default(),
    )
    .unwrap();
    assert_eq!((l.image.data[0] * 65535.0).round(), 1000.0);
    assert!(
        l.warnings.iter().any(|w| w.contains("multi-page")),
        "{:?}",
        l.warnings
    );
}

#[test]
fn colour_is_reduced_to_bt709_luminance() {
    // Pure red in a 16-bit RGB TIFF (tifffile): Y = 0.2126 (ITU-R BT.709-6, item 3.2).
    let l = load(
        &repo_file("fixtures/loader/rgb16.tif"),
        &LoadOptions::default(),
    )
    .unwrap();
    assert_eq!(l.bit_depth, 16);
    assert!((l.image.data[0] - 0.2126).abs() < 1e-4);
    // RGBA PNG: alpha is ignored; pure green gives Y = 0.7152.
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("g.png");
    image::RgbaImage::from_pixel(40, 40, image::Rgba([0, 255, 0, 10]))
        .save(&p)
        .unwrap();
    let l = load(&p, &LoadOptions::default()).unwrap();
    assert_eq!(l.bit_depth, 8);
    assert!((l.image.data[0] - 0.7152).abs() < 1e-4);
}

#[test]
fn bmp_and_jpeg_load() {
    let dir = tempfile::tempdir().unwrap();
    let grey = image::GrayImage::from_fn(64, 40, |x, _| image::Luma([(x * 4) as u8]));
    let bmp = dir.path().join("a.bmp");
    let jpg = dir.path().join("a.jpg");
    image::DynamicImage::ImageLuma8(grey.clone())
        .to_rgb8()
        .save(&bmp)
        .unwrap();
    grey.save(&jpg).unwrap();
    let b = load(&bmp, &LoadOptions::default()).unwrap();
    assert_eq!((b.image.width, b.image.height), (64, 40));
    assert!((b.image.get(10, 5) - 40.0 / 255.0).abs() < 1e-3);
    let j = load(&jpg, &LoadOptions::default()).unwrap();
    // JPEG is lossy: within a few grey levels.
    assert!((j.image.get(10, 5) - 40.0 / 255.0).abs() < 6.0 / 255.0);
}

/// A PNG signature and IHDR chunk claiming a huge image, then an empty IDAT
/// and IEND: no pixel data.
fn png_header_only(width: u32, height: u32) -> Vec<u8> {
    let mut ihdr = Vec::new();
    ihdr.extend_from_slice(b"IHDR");
    ihdr.extend_from_slice(&width.to_be_bytes());
    ihdr.extend_from_slice(&height.to_be_bytes());
    ihdr.extend_from_slice(&[8, 0, 0, 0, 0]); // 8-bit grey, no interlace
    let crc = crc32(&ihdr);
    let mut out = b"\x89PNG\r\n\x1a\n".to_vec();
    out.extend_from_slice(&13u32.to_be_bytes());
    out.extend_from_slice(&ihdr);
    out.extend_from_slice(&crc.to_be_bytes());
    for name in [b"IDAT", b"IEND"] {
        out.extend_from_slice(&0u32.to_be_bytes());
        out.extend_from_slice(name);
        out.extend_from_slice(&crc32(name).to_be_bytes());
    }
    out
}

/// CRC-32 (ISO-HDLC), as the PNG specification (ISO/IEC 15948, annex D) defines it.
fn crc32(data: &[u8]) -> u32 {
    let mut c = 0xFFFF_FFFFu32;
    for b in data {
        c ^= *b as u32;
        for _ in 0..8 {
            c = if c & 1 != 0 {
                0xEDB8_8320 ^ (c >> 1)
            } else {
                c >> 1
            };
        }
    }
    !c
}

#[test]
fn the_pixel_limit_is_checked_from_the_header_before_decoding() {
    // CRC-32 check value of "123456789" is 0xCBF43926 (the catalogue of CRC
    // parameter sets, CRC-32/ISO-HDLC).
    assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
    // 50000 x 50000 = 2500 megapixels, with no pixel data at all: refused as
    // too large, which proves the size was read before any decoding.
    let bytes = png_header_only(50_000, 50_000);
    let e = load_bytes(Path::new("huge.png"), &bytes, &LoadOptions::default()).unwrap_err();
    assert!(matches!(e, Error::TooLarge { .. }), "{e}");
    assert!(e.to_string().contains("huge.png") && e.to_string().contains("2500.0 megapixels"));
    // Under a raised limit the same file claims far more pixels than its
    // bytes can hold for a micrograph: refused from the header too.
    let raised = LoadOptions {
        max_megapixels: 5000.0,
        ..LoadOptions::default()
    };
    let e = load_bytes(Path::new("huge.png"), &bytes, &raised).unwrap_err();
    assert!(matches!(e, Error::ImplausibleSize { .. }), "{e}");
    // Told to accept it, it is refused for what it is: truncated.
    let accepted = LoadOptions {
        allow_high_compression: true,
        ..raised
    };
    let e = load_bytes(Path::new("huge.png"), &bytes, &accepted).unwrap_err();
    assert!(matches!(e, Error::Decode { .. }), "{e}");
}

#[test]
fn float_samples_that_are_not_numbers() {
    // A float TIFF may hold NaN (a masked region): a few are set to the
    // median grey with a warning; a large part makes the file unusable,
    // with a message naming it. Written with the tiff crate's encoder
    // (Gray32Float), the TIFF 6.0 SampleFormat = 3 layout.
    use tiff::encoder::{colortype::Gray32Float, TiffEncoder};
    let dir = tempfile::tempdir().unwrap();
    let write = |name: &str, nan_every: usize| {
        let (w, h) = (256u32, 256u32);
        let data: Vec<f32> = (0..w * h)
            .map(|i| {
                let x = (i % w) as f32;
                if (i as usize).is_multiple_of(nan_every) {
                    f32::NAN
                } else {
                    0.5 + 0.4 * (x * std::f32::consts::TAU / 16.0).sin()
                }
            })
            .collect();
        let path = dir.path().join(name);
        let f = std::fs::File::create(&path).unwrap();
        TiffEncoder::new(f)
            .unwrap()
            .write_image::<Gray32Float>(w, h, &data)
            .unwrap();
        path
    };
    let few = write("few.tif", 1000);
    let many = write("many.tif", 20);
    let opts = armspace::load::LoadOptions::default();
    let l = armspace::load::load(&few, &opts).unwrap();
    assert!(l.image.data.iter().all(|v| v.is_finite()));
    assert!(
        l.warnings.iter().any(|w| w.contains("NaN")),
        "{:?}",
        l.warnings
    );
    let e = armspace::load::load(&many, &opts).unwrap_err().to_string();
    assert!(e.contains("many.tif") && e.contains("NaN"), "{e}");
}

#[test]
fn float_and_big_tiffs_are_read() {
    // Grey 32-bit float samples (SampleFormat 3) in any range, and BigTIFF
    // (64-bit offsets), both written with the tiff crate's encoder: the
    // samples come back as written, mapped linearly onto [0, 1].
    use tiff::encoder::{colortype::Gray16, colortype::Gray32Float, TiffEncoder};
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (64u32, 48u32);
    let floats: Vec<f32> = (0..w * h).map(|i| 100.0 + (i % 7) as f32 * 50.0).collect();
    let fp = dir.path().join("float.tif");
    TiffEncoder::new(std::fs::File::create(&fp).unwrap())
        .unwrap()
        .write_image::<Gray32Float>(w, h, &floats)
        .unwrap();
    let l = armspace::load::load(&fp, &Default::default()).unwrap();
    assert_eq!(l.bit_depth, 32);
    for (got, want) in l.image.data.iter().zip(&floats) {
        assert!((got - (want - 100.0) / 300.0).abs() < 1e-6);
    }
    let words: Vec<u16> = (0..w * h).map(|i| (i * 13 % 65536) as u16).collect();
    let bp = dir.path().join("big.tif");
    TiffEncoder::new_big(std::fs::File::create(&bp).unwrap())
        .unwrap()
        .write_image::<Gray16>(w, h, &words)
        .unwrap();
    let l = armspace::load::load(&bp, &Default::default()).unwrap();
    assert_eq!((l.image.width, l.image.height, l.bit_depth), (64, 48, 16));
    for (got, want) in l.image.data.iter().zip(&words) {
        assert!((got - *want as f32 / 65535.0).abs() < 1e-7);
    }
}

#[test]
fn a_jpeg_cut_short_is_refused() {
    // A baseline decoder fills the blocks a truncated file never delivered
    // with level 128 (ITU-T T.81 level shift of a zero DC coefficient); such
    // a file must not be measured as if the grey were structure.
    let dir = tempfile::tempdir().unwrap();
    let img = image::GrayImage::from_fn(256, 256, |x, y| {
        image::Luma([(128.0 + 90.0 * ((x as f32 / 7.0).sin() * (y as f32 / 11.0).cos())) as u8])
    });
    let mut buf = std::io::Cursor::new(Vec::new());
    img.write_to(&mut buf, image::ImageFormat::Jpeg).unwrap();
    let bytes = buf.into_inner();
    let full = dir.path().join("full.jpg");
    let half = dir.path().join("half.jpg");
    std::fs::write(&full, &bytes).unwrap();
    std::fs::write(&half, &bytes[..bytes.len() / 2]).unwrap();
    let opts = armspace::load::LoadOptions::default();
    assert!(armspace::load::load(&full, &opts).is_ok());
    let e = armspace::load::load(&half, &opts).unwrap_err().to_string();
    assert!(e.contains("half.jpg") && e.contains("ends early"), "{e}");
}

/// A grey 8-bit TIFF with one PackBits strip, written here from the TIFF
/// 6.0 description (section 9; each row packed on its own), with the
/// offset of every row's first control byte.
fn packbits_tiff(w: usize, h: usize, px: &[u8]) -> (Vec<u8>, Vec<usize>) {
    let mut strip = Vec::new();
    let mut controls = Vec::new();
    for row in px.chunks(w) {
        for chunk in row.chunks(128) {
            controls.push(strip.len());
            strip.push((chunk.len() - 1) as u8); // n + 1 literal bytes
            strip.extend_from_slice(chunk);
        }
    }
    let n_tags: u16 = 8;
    let ifd = 8u32;
    let data_at = ifd + 2 + 12 * n_tags as u32 + 4;
    let mut t = b"II*\0".to_vec();
    t.extend(ifd.to_le_bytes());
    t.extend(n_tags.to_le_bytes());
    let mut tag = |id: u16, typ: u16, v: u32| {
        t.extend(id.to_le_bytes());
        t.extend(typ.to_le_bytes());
        t.extend(1u32.to_le_bytes());
        t.extend(v.to_le_bytes());
    };
    tag(256, 4, w as u32); // ImageWidth
    tag(257, 4, h as u32); // ImageLength
    tag(258, 3, 8); // BitsPerSample
    tag(259, 3, 32773); // Compression: PackBits
    tag(262, 3, 1); // PhotometricInterpretation: black is zero
    tag(273, 4, data_at); // StripOffsets
    tag(278, 4, h as u32); // RowsPerStrip
    tag(279, 4, strip.len() as u32); // StripByteCounts
    t.extend(0u32.to_le_bytes());
    assert_eq!(t.len(), data_at as usize);
    let controls = controls.iter().map(|c| c + data_at as usize).collect();
    t.extend(strip);
    (t, controls)
}

#[test]
fn packbits_whose_runs_do_not_fit_the_image_are_refused() {
    let (w, h) = (200, 40);
    let px: Vec<u8> = (0..w * h).map(|i| ((i * 7919) % 251) as u8).collect();
    let (good, controls) = packbits_tiff(w, h, &px);
    let path = Path::new("packbits.tif");
    let opts = LoadOptions::default();
    let l = load_bytes(path, &good, &opts).unwrap();
    assert_eq!((l.image.width, l.image.height), (w, h));
    assert_eq!((l.image.get(13, 7) * 255.0).round() as u8, px[7 * w + 13]);
    // A literal byte changed: one grey level, which nothing can tell from
    // the picture's own; it loads.
    let mut one = good.clone();
    one[controls[3] + 5] ^= 0x55;
    assert!(load_bytes(path, &one, &opts).is_ok());
    // A control byte changed (a literal run of 128 said to be of 100, a
    // repeat, a no-op): the rows after it would shift; refused, naming the
    // damage.
    for (k, v) in [(3usize, 99u8), (5, 0xF0), (0, 0x80)] {
        let mut bad = good.clone();
        bad[controls[k]] = v;
        match load_bytes(path, &bad, &opts) {
            Err(e @ Error::Decode { .. }) => {
                let m = e.to_string();
                assert!(
                    m.contains("PackBits block 1 of 1") && m.contains("shifted"),
                    "{m}"
                );
            }
            other => panic!(
                "control byte {k} set to {v}: {:?}",
                other.map(|l| l.image.width)
            ),
        }
    }
    // The file cut 50 bytes short of the strip's byte count.
    let mut short = good.clone();
    short.truncate(good.len() - 50);
    assert!(load_bytes(path, &short, &opts).is_err());
}

#[test]
fn float_tiffs_spanning_the_whole_float_range_keep_their_picture() {
    // A comb whose levels span f32::MIN to f32::MAX (32-bit) and -1e307 to
    // 1e307 (64-bit): the span overflows if taken in the samples' own type;
    // the picture must come back as the two levels 0 and 1, not flat.
    use tiff::encoder::{colortype::Gray32Float, colortype::Gray64Float, TiffEncoder};
    let dir = tempfile::tempdir().unwrap();
    let (w, h) = (64u32, 48u32);
    let on = |i: u32| ((i % w) / 4).is_multiple_of(2);
    let f32s: Vec<f32> = (0..w * h)
        .map(|i| if on(i) { f32::MAX } else { f32::MIN })
        .collect();
    let f64s: Vec<f64> = (0..w * h)
        .map(|i| if on(i) { 1e307 } else { -1e307 })
        .collect();
    let p32 = dir.path().join("f32.tif");
    TiffEncoder::new(std::fs::File::create(&p32).unwrap())
        .unwrap()
        .write_image::<Gray32Float>(w, h, &f32s)
        .unwrap();
    let p64 = dir.path().join("f64.tif");
    TiffEncoder::new(std::fs::File::create(&p64).unwrap())
        .unwrap()
        .write_image::<Gray64Float>(w, h, &f64s)
        .unwrap();
    for p in [p32, p64] {
        let l = armspace::load::load(&p, &Default::default()).unwrap();
        for (i, v) in l.image.data.iter().enumerate() {
            let want = if on(i as u32) { 1.0 } else { 0.0 };
            assert!(
                (v - want).abs() < 1e-6,
                "{}: sample {i} is {v}",
                p.display()
            );
        }
        assert!(l.warnings.is_empty(), "{:?}", l.warnings);
    }
}
