//! Writing images and truth sets (the only module doing I/O).

use super::{random_spec_styled, render, FieldSpec, Gray16, Style, SynthError, Truth};
use image::{DynamicImage, ImageBuffer, ImageFormat, Luma};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};
use std::io::Cursor;
use std::path::Path;

/// Schema tag of `truth.json`.
pub const TRUTH_SCHEMA: &str = "armspace.synth-truth/1";

/// Sample depth written to disk.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum BitDepth {
    Eight,
    Sixteen,
}

fn io_err(path: &Path) -> impl FnOnce(std::io::Error) -> SynthError + '_ {
    move |source| SynthError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// Writes `bytes` to `path` through the crate's one output writer
/// (`files::write_output`: atomic, never replacing a device or FIFO).
fn write_atomic(path: &Path, bytes: &[u8]) -> Result<(), SynthError> {
    crate::files::write_output(path, bytes).map_err(|e| match e {
        crate::Error::Write { path, source } => SynthError::Io { path, source },
        other => SynthError::Io {
            path: path.to_path_buf(),
            source: std::io::Error::other(other.to_string()),
        },
    })
}

fn to_u8(img: &Gray16) -> ImageBuffer<Luma<u8>, Vec<u8>> {
    let data: Vec<u8> = img
        .as_raw()
        .iter()
        .map(|&v| ((v as u32 * 255 + 32_767) / 65_535) as u8)
        .collect();
    ImageBuffer::from_raw(img.width(), img.height(), data)
        .unwrap_or_else(|| ImageBuffer::new(img.width(), img.height()))
}

/// Encode `img` as PNG or TIFF (chosen by the extension of `path`: `.png`,
/// `.tif`, `.tiff`) at the requested depth and write it atomically.
pub fn write_image(path: &Path, img: &Gray16, depth: BitDepth) -> Result<(), SynthError> {
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_ascii_lowercase())
        .unwrap_or_default();
    let format = match ext.as_str() {
        "png" => ImageFormat::Png,
        "tif" | "tiff" => ImageFormat::Tiff,
        _ => return Err(SynthError::UnsupportedFormat(path.to_path_buf())),
    };
    let dynimg = match depth {
        BitDepth::Eight => DynamicImage::ImageLuma8(to_u8(img)),
        BitDepth::Sixteen => DynamicImage::ImageLuma16(img.clone()),
    };
    let mut buf = Cursor::new(Vec::new());
    dynimg
        .write_to(&mut buf, format)
        .map_err(|source| SynthError::Encode {
            path: path.to_path_buf(),
            source,
        })?;
    write_atomic(path, buf.get_ref())
}

#[derive(Serialize)]
struct TruthFile<'a> {
    schema: &'a str,
    seed: Option<u64>,
    images: &'a [Truth],
}

/// Render `count` random specs (seeded from `seed`) into `outdir`:
/// `img_NNN.png` (8-bit) or, for every third image, `img_NNN.tif` (16-bit),
/// plus `truth.json`. Returns the truth records in image order.
pub fn write_set(outdir: &Path, seed: u64, count: usize) -> Result<Vec<Truth>, SynthError> {
    write_set_styled(outdir, seed, count, None)
}

/// `write_set` with every field drawn in `style` when one is given (see
/// `random_spec_styled`); `None` alternates the styles as `write_set` does.
pub fn write_set_styled(
    outdir: &Path,
    seed: u64,
    count: usize,
    style: Option<Style>,
) -> Result<Vec<Truth>, SynthError> {
    write_set_graded(outdir, seed, count, style, None)
}

/// `write_set_styled` with every field given the spacing `gradient` when
/// one is given (the random draws are those of `write_set_styled`: the same
/// fields, their spacing stepping across them).
pub fn write_set_graded(
    outdir: &Path,
    seed: u64,
    count: usize,
    style: Option<Style>,
    gradient: Option<super::Gradient>,
) -> Result<Vec<Truth>, SynthError> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let named: Vec<NamedSpec> = (0..count)
        .map(|i| NamedSpec {
            file: if i % 3 == 2 {
                format!("img_{i:03}.tif")
            } else {
                format!("img_{i:03}.png")
            },
            spec: FieldSpec {
                gradient,
                ..random_spec_styled(&mut rng, i, style)
            },
        })
        .collect();
    write_specs(outdir, &named, Some(seed))
}

/// One image of a spec file: the file name to write (`.png` is written with
/// 8-bit samples, `.tif`/`.tiff` with 16-bit) and what to draw.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct NamedSpec {
    pub file: String,
    pub spec: FieldSpec,
}

/// A spec file: `{"images": [{"file": ..., "spec": {...}}, ...]}`.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct SpecFile {
    pub images: Vec<NamedSpec>,
}

/// Render the given specs into `outdir` with `truth.json` (its "seed" is the
/// set's seed when there is one, else null).
pub fn write_specs(
    outdir: &Path,
    named: &[NamedSpec],
    seed: Option<u64>,
) -> Result<Vec<Truth>, SynthError> {
    for n in named {
        let plain = Path::new(&n.file)
            .file_name()
            .is_some_and(|f| f == n.file.as_str());
        if !plain || n.file.starts_with('.') {
            return Err(SynthError::InvalidSpec(format!(
                "file name '{}' must be a plain, visible file name",
                n.file
            )));
        }
    }
    std::fs::create_dir_all(outdir).map_err(io_err(outdir))?;
    let truths: Vec<Truth> = named
        .par_iter()
        .map(|n| {
            let (img, mut truth) = render(&n.spec)?;
            let lower = n.file.to_ascii_lowercase();
            let depth = if lower.ends_with(".png") {
                BitDepth::Eight
            } else {
                BitDepth::Sixteen
            };
            write_image(&outdir.join(&n.file), &img, depth)?;
            truth.file = n.file.clone();
            Ok(truth)
        })
        .collect::<Result<Vec<_>, SynthError>>()?;
    let doc = TruthFile {
        schema: TRUTH_SCHEMA,
        seed,
        images: &truths,
    };
    let mut json = serde_json::to_vec_pretty(&doc)?;
    json.push(b'\n');
    write_atomic(&outdir.join("truth.json"), &json)?;
    Ok(truths)
}
