//! Loading micrographs: finding the files of a batch, checking their size from
//! the header before decoding, and converting them to a grey `f32` image.
//!
//! Grey values are scaled to [0, 1] from the full scale of the file's bit
//! depth; an `f32` holds every 16-bit level exactly. Colour images are
//! reduced to luminance with the ITU-R BT.709 weights (0.2126, 0.7152, 0.0722).

use crate::error::{Error, Result};
use image::{DynamicImage, ImageDecoder, ImageFormat, ImageReader};
use sha2::{Digest, Sha256};
use std::io::Cursor;
use std::path::{Path, PathBuf};

/// Smallest side, in pixels, of an image that can carry a measurement.
pub const MIN_SIDE_PX: u32 = 32;

/// Default limit on the pixel count of one image, in megapixels.
pub const DEFAULT_MAX_MEGAPIXELS: f64 = 400.0;

/// File extensions taken when a folder is walked (compared without case).
pub const IMAGE_EXTENSIONS: &[&str] = &["png", "jpg", "jpeg", "tif", "tiff", "bmp"];

/// A grey image, row-major, values in [0, 1].
#[derive(Clone, Debug, PartialEq)]
pub struct GrayImage {
    pub width: usize,
    pub height: usize,
    pub data: Vec<f32>,
}

impl GrayImage {
    pub fn new(width: usize, height: usize) -> Self {
        Self {
            width,
            height,
            data: vec![0.0; width * height],
        }
    }

    pub fn from_vec(width: usize, height: usize, data: Vec<f32>) -> Option<Self> {
        (data.len() == width * height).then_some(Self {
            width,
            height,
            data,
        })
    }

    #[inline]
    pub fn get(&self, x: usize, y: usize) -> f32 {
        self.data[y * self.width + x]
    }

    pub fn row(&self, y: usize) -> &[f32] {
        &self.data[y * self.width..(y + 1) * self.width]
    }
}

/// A decoded micrograph with what the report needs to know about its file.
#[derive(Clone, Debug)]
pub struct Loaded {
    pub image: GrayImage,
    /// Bits per sample of the file: 8, 16 or 32 (float).
    pub bit_depth: u8,
    /// Lowercase hexadecimal SHA-256 of the file's bytes.
    pub sha256: String,
    pub format: ImageFormat,
    /// TIFF resolution tags: (XResolution, YResolution, ResolutionUnit), when present.
    pub resolution: Option<(f64, f64, u16)>,
    pub warnings: Vec<String>,
}

/// Limits applied while loading, all checked from the header before
/// decoding.
#[derive(Clone, Copy, Debug)]
pub struct LoadOptions {
    pub max_megapixels: f64,
    /// Bytes an image's estimated peak ([`crate::memory::estimate_peak`])
    /// may reach; `None` checks no budget.
    pub memory_budget: Option<u64>,
    /// Accept a file that claims more pixels per byte than a real
    /// micrograph can be compressed to
    /// ([`crate::memory::MAX_PIXELS_PER_FILE_BYTE`]).
    pub allow_high_compression: bool,
}

impl Default for LoadOptions {
    fn default() -> Self {
        Self {
            max_megapixels: DEFAULT_MAX_MEGAPIXELS,
            memory_budget: None,
            allow_high_compression: false,
        }
    }
}

/// One entry of a batch, in the order it will be reported.
#[derive(Clone, Debug, PartialEq)]
pub enum Input {
    /// A file to measure (a path given directly, or an image found in a folder).
    Image(PathBuf),
    /// A path that was passed over, with the reason.
    Skipped { path: PathBuf, reason: String },
    /// A path given on the command line that does not exist.
    Missing(PathBuf),
    /// A path given on the command line that cannot be measured (a FIFO or
    /// device, a link to nothing or a loop of links), with the reason: a
    /// failed entry of the batch.
    Unusable { path: PathBuf, reason: String },
}

fn has_image_extension(path: &Path) -> bool {
    path.extension()
        .and_then(|e| e.to_str())
        .map(|e| IMAGE_EXTENSIONS.iter().any(|x| x.eq_ignore_ascii_case(e)))
        .unwrap_or(false)
}

fn is_hidden(path: &Path) -> bool {
    path.file_name()
        .and_then(|n| n.to_str())
        .map(|n| n.starts_with('.'))
        .unwrap_or(false)
}

/// Expands the paths of a batch: files are taken as they are, folders are
/// walked recursively in sorted order. In folders, hidden entries are ignored
/// and files without an image extension are reported as skipped. Each file
/// and folder is visited once, by its resolved path: a link loop or a second
/// link to the same place is named as skipped instead of measured again (or
/// walked for ever). Special files (FIFOs, devices, sockets) are never read:
/// skipped with the reason in a folder, refused when named. The tool's own
/// pictures ([`crate::files::is_own_picture`]) are skipped wherever they are.
pub fn collect_inputs(paths: &[PathBuf]) -> Vec<Input> {
    let mut out = Vec::new();
    let mut seen = Seen::default();
    for p in paths {
        match crate::files::kind(p) {
            crate::files::Kind::Folder => walk(p, &mut out, &mut seen),
            crate::files::Kind::Regular if crate::files::is_own_picture(p) => {
                out.push(Input::Skipped {
                    path: p.clone(),
                    reason: "a picture written by armspace (an overlay), not a micrograph".into(),
                })
            }
            crate::files::Kind::Regular => {
                if let Some(first) = seen.file(p) {
                    out.push(Input::Skipped {
                        path: p.clone(),
                        reason: format!(
                            "the same file as {} (already in this batch)",
                            first.display()
                        ),
                    });
                } else {
                    out.push(Input::Image(p.clone()));
                }
            }
            crate::files::Kind::Special => out.push(Input::Unusable {
                path: p.clone(),
                reason: "is not a regular file (a FIFO, device or socket); not read".into(),
            }),
            crate::files::Kind::Missing => match crate::files::broken_link_reason(p) {
                Some(reason) => out.push(Input::Unusable {
                    path: p.clone(),
                    reason,
                }),
                None => out.push(Input::Missing(p.clone())),
            },
        }
    }
    out
}

/// Resolved paths already taken, each with the path by which it was first met.
#[derive(Default)]
struct Seen {
    files: std::collections::HashMap<PathBuf, PathBuf>,
    folders: std::collections::HashMap<PathBuf, PathBuf>,
}

impl Seen {
    /// `None` the first time a file is met, else the path it was first met by.
    fn file(&mut self, p: &Path) -> Option<PathBuf> {
        Self::first(&mut self.files, p)
    }

    fn folder(&mut self, p: &Path) -> Option<PathBuf> {
        Self::first(&mut self.folders, p)
    }

    fn first(map: &mut std::collections::HashMap<PathBuf, PathBuf>, p: &Path) -> Option<PathBuf> {
        let key = std::fs::canonicalize(p).unwrap_or_else(|_| p.to_path_buf());
        match map.get(&key) {
            Some(first) => Some(first.clone()),
            None => {
                map.insert(key, p.to_path_buf());
                None
            }
        }
    }
}

/// Walks a folder with `walkdir` (links followed, entries sorted by name,
/// depth first), which stops at a link back to a folder above it; a folder
/// met a second time by another link is named and not walked again.
fn walk(dir: &Path, out: &mut Vec<Input>, seen: &mut Seen) {
    let mut entries = walkdir::WalkDir::new(dir)
        .follow_links(true)
        .sort_by_file_name()
        .into_iter()
        .filter_entry(|e| e.depth() == 0 || !is_hidden(e.path()));
    while let Some(entry) = entries.next() {
        let entry = match entry {
            Ok(e) => e,
            Err(e) => {
                let path = e.path().unwrap_or(dir).to_path_buf();
                let reason = if let Some(ancestor) = e.loop_ancestor() {
                    format!(
                        "a link back to {} (already walked); each folder is measured once",
                        ancestor.display()
                    )
                } else if e.depth() > 0 && crate::files::kind(&path) == crate::files::Kind::Missing
                {
                    crate::files::broken_link_reason(&path)
                        .unwrap_or_else(|| "a link to nothing".into())
                } else {
                    match e.io_error() {
                        Some(io) => format!("folder cannot be read: {io}"),
                        None => format!("folder cannot be read: {e}"),
                    }
                };
                out.push(Input::Skipped { path, reason });
                continue;
            }
        };
        let p = entry.path().to_path_buf();
        match crate::files::kind(&p) {
            crate::files::Kind::Folder => {
                if let Some(first) = seen.folder(&p) {
                    out.push(Input::Skipped {
                        reason: format!(
                            "a link back to {} (already walked); each folder is measured once",
                            first.display()
                        ),
                        path: p,
                    });
                    entries.skip_current_dir();
                }
            }
            crate::files::Kind::Special => out.push(Input::Skipped {
                path: p,
                reason: "not a regular file (a FIFO, device or socket); not read".into(),
            }),
            crate::files::Kind::Missing => out.push(Input::Skipped {
                reason: crate::files::broken_link_reason(&p)
                    .unwrap_or_else(|| "a link to nothing".into()),
                path: p,
            }),
            crate::files::Kind::Regular if !has_image_extension(&p) => out.push(Input::Skipped {
                path: p,
                reason: "not an image file (by its extension)".into(),
            }),
            crate::files::Kind::Regular if crate::files::is_own_picture(&p) => {
                out.push(Input::Skipped {
                    path: p,
                    reason: "a picture written by armspace (an overlay), not a micrograph".into(),
                })
            }
            crate::files::Kind::Regular => match seen.file(&p) {
                Some(first) => out.push(Input::Skipped {
                    reason: format!(
                        "the same file as {} (already in this batch)",
                        first.display()
                    ),
                    path: p,
                }),
                None => out.push(Input::Image(p)),
            },
        }
    }
}

/// Reads, checks and decodes one image file.
pub fn load(path: &Path, opts: &LoadOptions) -> Result<Loaded> {
    let bytes = crate::files::read_image_bytes(path)?;
    load_bytes(path, &bytes, opts)
}

/// Decodes an image already in memory; `path` only names it in messages.
pub fn load_bytes(path: &Path, bytes: &[u8], opts: &LoadOptions) -> Result<Loaded> {
    // Decoders' messages may end in a newline: trimmed, so that a message
    // stays one line on the terminal and in the report.
    let format_err = |reason: String| Error::Format {
        path: path.to_path_buf(),
        reason: reason.trim_end().to_string(),
    };
    let decode_err = |reason: String| Error::Decode {
        path: path.to_path_buf(),
        reason: reason.trim_end().to_string(),
    };
    // A valid file in a layout the decoder does not take is not damaged.
    let image_err = |e: image::ImageError| match e {
        image::ImageError::Unsupported(u) => format_err(u.to_string()),
        e => decode_err(e.to_string()),
    };
    if bytes.is_empty() {
        return Err(format_err("the file is empty".into()));
    }
    // TIFF files the image crate does not take (grey floats, BigTIFF) are
    // decoded with the tiff crate directly.
    let is_tiff = [b"II*\0", b"MM\0*", b"II+\0", b"MM\0+"]
        .iter()
        .any(|m| bytes.starts_with(*m));
    let reader = ImageReader::new(Cursor::new(bytes))
        .with_guessed_format()
        .map_err(|e| format_err(e.to_string()))?;
    let Some(format) = reader.format() else {
        if is_tiff {
            return load_tiff_direct(path, bytes, opts);
        }
        return Err(format_err(
            "the file's content is not a known image format".into(),
        ));
    };
    if !matches!(
        format,
        ImageFormat::Png | ImageFormat::Jpeg | ImageFormat::Tiff | ImageFormat::Bmp
    ) {
        return Err(format_err(format!("{format:?} files are not supported")));
    }
    let (width, height, decoded_bytes_per_px) = match reader.into_decoder() {
        Ok(d) => {
            let (w, h) = d.dimensions();
            (w, h, d.color_type().bytes_per_pixel() as u64)
        }
        Err(_) if format == ImageFormat::Tiff => return load_tiff_direct(path, bytes, opts),
        Err(e @ image::ImageError::Unsupported(_)) => return Err(image_err(e)),
        Err(e) => return Err(decode_err(format!("header unreadable: {e}"))),
    };
    check_size(
        path,
        &crate::memory::Header {
            width,
            height,
            decoded_bytes_per_px,
            file_bytes: bytes.len() as u64,
        },
        opts,
    )?;

    let mut warnings = Vec::new();
    let mut resolution = None;
    if format == ImageFormat::Tiff {
        crate::packbits::check_tiff(bytes).map_err(damaged_packbits(path))?;
        let info = tiff_info(bytes);
        if info.more_pages {
            warnings.push("multi-page TIFF: only the first page is measured".to_string());
        }
        resolution = info.resolution;
    }

    let mut reader = ImageReader::with_format(Cursor::new(bytes), format);
    let mut limits = image::Limits::default();
    // The pixel count was checked above; allow the decoder what that needs
    // (up to 4 channels of 32-bit floats) and no more.
    let px = width as u64 * height as u64;
    limits.max_alloc = Some(px.saturating_mul(16).saturating_add(64 << 20));
    reader.limits(limits);
    let decoded = reader.decode().map_err(image_err)?;
    if format == ImageFormat::Png {
        png_check_value(bytes).map_err(|e| {
            let e = e.to_string();
            if e.contains("Checksum") {
                decode_err(format!(
                    "the compressed image data fails its check value (zlib Adler-32), so its bytes are not the ones written: {e}"
                ))
            } else {
                decode_err(e)
            }
        })?;
    }
    if alpha_only(&decoded) {
        return Err(alpha_only_err(path));
    }
    let (mut image, bit_depth) = to_gray(decoded).ok_or_else(|| Error::OutOfMemory {
        path: path.to_path_buf(),
        what: "hold its grey levels".into(),
    })?;
    replace_non_finite(path, &mut image, &mut warnings)?;
    if format == ImageFormat::Jpeg {
        let missing = jpeg_fill_rows(&image);
        if missing >= JPEG_MCU_ROWS {
            return Err(decode_err(format!(
                "the JPEG ends early: its last {missing} of {} rows are the decoder's flat grey fill (level 128) for data that is not in the file",
                image.height
            )));
        }
    }

    let sha256 = sha256_hex(bytes);
    Ok(Loaded {
        image,
        bit_depth,
        sha256,
        format,
        resolution,
        warnings,
    })
}

/// The checks [`load`] makes from the header before decoding (see
/// [`check_size`]), for a header read with [`read_header`].
pub fn check_header(path: &Path, header: &crate::memory::Header, opts: &LoadOptions) -> Result<()> {
    check_size(path, header, opts)
}

/// The checks made from the header before decoding: the pixel limit, the
/// smallest side, the pixels claimed against the file's size, and the
/// estimated peak memory against the budget.
fn check_size(path: &Path, header: &crate::memory::Header, opts: &LoadOptions) -> Result<()> {
    let (width, height) = (header.width, header.height);
    let mpx = width as f64 * height as f64 / 1e6;
    if mpx > opts.max_megapixels {
        return Err(Error::TooLarge {
            path: path.to_path_buf(),
            width,
            height,
            limit_mpx: opts.max_megapixels,
        });
    }
    if width < MIN_SIDE_PX || height < MIN_SIDE_PX {
        return Err(Error::TooSmall {
            path: path.to_path_buf(),
            width,
            height,
            min: MIN_SIDE_PX,
        });
    }
    let px = width as u64 * height as u64;
    let per_byte = px as f64 / header.file_bytes.max(1) as f64;
    if px > crate::memory::COMPRESSION_CHECK_MIN_PX
        && per_byte > crate::memory::MAX_PIXELS_PER_FILE_BYTE
        && !opts.allow_high_compression
    {
        return Err(Error::ImplausibleSize {
            path: path.to_path_buf(),
            width,
            height,
            file_bytes: header.file_bytes,
            per_byte,
        });
    }
    if let Some(budget) = opts.memory_budget {
        let estimate = crate::memory::estimate_peak(header);
        if estimate > budget {
            return Err(Error::OverBudget {
                path: path.to_path_buf(),
                width,
                height,
                estimate,
                budget,
            });
        }
    }
    Ok(())
}

/// The header of an image file, read without decoding its pixels (for the
/// batch's admission, [`crate::pipeline::measure_batch`]); the same facts
/// [`load`] checks before decoding.
pub fn read_header(path: &Path) -> Result<crate::memory::Header> {
    use image::ImageDecoder;
    let file_bytes = crate::files::image_file_len(path)?;
    let unreadable = |reason: String| Error::Decode {
        path: path.to_path_buf(),
        reason: format!("header unreadable: {reason}"),
    };
    let reader = ImageReader::new(crate::files::open_image(path)?)
        .with_guessed_format()
        .map_err(|e| unreadable(e.to_string()))?;
    let from_image_crate = match reader.format() {
        Some(_) => reader.into_decoder().ok().map(|d| {
            let (w, h) = d.dimensions();
            (w, h, d.color_type().bytes_per_pixel() as u64)
        }),
        None => None,
    };
    let (width, height, decoded_bytes_per_px) = match from_image_crate {
        Some(v) => v,
        None => {
            // TIFF layouts the image crate does not take (see load_bytes).
            let mut d = tiff::decoder::Decoder::new(crate::files::open_image(path)?)
                .map_err(|e| unreadable(e.to_string()))?;
            let (w, h) = d.dimensions().map_err(|e| unreadable(e.to_string()))?;
            let ct = d.colortype().map_err(|e| unreadable(e.to_string()))?;
            (w, h, tiff_bytes_per_px(ct))
        }
    };
    Ok(crate::memory::Header {
        width,
        height,
        decoded_bytes_per_px,
        file_bytes,
    })
}

/// Bytes a pixel of the tiff crate's decoded samples.
fn tiff_bytes_per_px(ct: tiff::ColorType) -> u64 {
    use tiff::ColorType::*;
    let (bits, samples) = match ct {
        Gray(b) => (b, 1),
        GrayA(b) => (b, 2),
        RGB(b) | YCbCr(b) | Lab(b) => (b, 3),
        RGBA(b) | CMYK(b) => (b, 4),
        Multiband {
            bit_depth,
            num_samples,
        } => (bit_depth, num_samples),
        // Any layout not listed: the widest the crate decodes to.
        _ => (64, 4),
    };
    (bits as u64).div_ceil(8).max(1) * samples as u64
}

/// The error for PackBits data whose structure does not fit the image
/// (see [`crate::packbits`]).
fn damaged_packbits(path: &Path) -> impl Fn(String) -> Error + '_ {
    move |reason| Error::Decode {
        path: path.to_path_buf(),
        reason: format!("{reason}, so rows would be shifted or invented"),
    }
}

struct TiffInfo {
    more_pages: bool,
    resolution: Option<(f64, f64, u16)>,
}

/// Page count and resolution tags of a TIFF's first page (TIFF 6.0,
/// section 8: XResolution, YResolution as RATIONAL, ResolutionUnit as SHORT,
/// default 2 = inch).
fn tiff_info(bytes: &[u8]) -> TiffInfo {
    use tiff::decoder::ifd::Value;
    use tiff::tags::Tag;
    let Ok(mut d) = tiff::decoder::Decoder::new(Cursor::new(bytes)) else {
        return TiffInfo {
            more_pages: false,
            resolution: None,
        };
    };
    let rational = |v: Option<Value>| -> Option<f64> {
        match v? {
            Value::Rational(n, den) if den != 0 => Some(n as f64 / den as f64),
            Value::Float(f) => Some(f as f64),
            Value::Double(f) => Some(f),
            _ => None,
        }
    };
    let x = rational(d.find_tag(Tag::XResolution).ok().flatten());
    let y = rational(d.find_tag(Tag::YResolution).ok().flatten());
    let unit = d
        .find_tag(Tag::ResolutionUnit)
        .ok()
        .flatten()
        .and_then(|v| v.into_u16().ok())
        .unwrap_or(2);
    TiffInfo {
        more_pages: d.more_images(),
        resolution: x.map(|x| (x, y.unwrap_or(x), unit)),
    }
}

/// Rows of one block row of a JPEG (8 px; 16 with chroma subsampling).
const JPEG_MCU_ROWS: usize = 8;

/// Trailing rows of a decoded JPEG in which every sample is exactly level
/// 128 of 255. A baseline decoder given a file cut short fills the blocks it
/// never received with a zero DC coefficient, i.e. the flat mid level (ITU-T
/// T.81: samples are level-shifted by 128 after the inverse DCT); a real
/// micrograph never holds whole rows of one exact level, because of noise
/// and of the quantisation's ringing.
fn jpeg_fill_rows(image: &GrayImage) -> usize {
    let fill = 128.0f32 / 255.0;
    let w = image.width;
    (0..image.height)
        .rev()
        .take_while(|&y| {
            image.data[y * w..(y + 1) * w]
                .iter()
                .all(|v| (v - fill).abs() < 1e-5)
        })
        .count()
}

/// Float files may hold NaN or infinite samples (a masked region, a failed
/// pixel). They carry no grey level; more than 1 % of them leave too little
/// of the field to trust (an error naming `path`), fewer are set to the
/// median of the rest (a level that adds no edge of its own) with a warning.
fn replace_non_finite(
    path: &Path,
    image: &mut GrayImage,
    warnings: &mut Vec<String>,
) -> Result<()> {
    let bad = image.data.iter().filter(|v| !v.is_finite()).count();
    if bad == 0 {
        return Ok(());
    }
    let frac = bad as f64 / image.data.len().max(1) as f64;
    if frac > 0.01 {
        return Err(Error::Decode {
            path: path.to_path_buf(),
            reason: format!(
                "{bad} of {} samples ({:.1} %) are NaN or infinite: too few usable pixels",
                image.data.len(),
                100.0 * frac
            ),
        });
    }
    let mut finite: Vec<f32> = image
        .data
        .iter()
        .copied()
        .filter(|v| v.is_finite())
        .collect();
    // At most 1 % of the pixels are not finite here, so the median exists.
    let fill = crate::stats::median_in_place(&mut finite).unwrap_or(0.0) as f32;
    for v in image.data.iter_mut().filter(|v| !v.is_finite()) {
        *v = fill;
    }
    warnings.push(format!(
        "{bad} NaN or infinite samples were set to the median grey level"
    ));
    Ok(())
}

/// Decodes a TIFF with the tiff crate itself: grey floats (32 or 64 bit),
/// BigTIFF, and the integer layouts, grey or RGB(A). Float samples in any
/// range are mapped linearly onto [0, 1] by their finite minimum and
/// maximum (a linear map changes no spacing, and preprocessing normalises
/// the grey levels anyway).
fn load_tiff_direct(path: &Path, bytes: &[u8], opts: &LoadOptions) -> Result<Loaded> {
    use tiff::decoder::{Decoder, DecodingResult, Limits};
    use tiff::ColorType;
    let decode_err = |reason: String| Error::Decode {
        path: path.to_path_buf(),
        reason: reason.trim_end().to_string(),
    };
    // A layout the tiff crate does not take (a palette, a photometric
    // interpretation it cannot convert) is unsupported, not damaged.
    let unsupported = |reason: String| Error::Format {
        path: path.to_path_buf(),
        reason: reason.trim_end().to_string(),
    };
    let tiff_err = |e: tiff::TiffError| match e {
        tiff::TiffError::UnsupportedError(u) => unsupported(format!("{u}")),
        e => decode_err(e.to_string()),
    };
    let mut d = Decoder::new(Cursor::new(bytes))
        .map_err(|e| decode_err(format!("TIFF header unreadable: {e}")))?;
    let (width, height) = d
        .dimensions()
        .map_err(|e| decode_err(format!("TIFF header unreadable: {e}")))?;
    let channels_hint = d.colortype().map(tiff_bytes_per_px).unwrap_or(8);
    check_size(
        path,
        &crate::memory::Header {
            width,
            height,
            decoded_bytes_per_px: channels_hint,
            file_bytes: bytes.len() as u64,
        },
        opts,
    )?;
    let px = width as usize * height as usize;
    let mut limits = Limits::default();
    limits.decoding_buffer_size = px.saturating_mul(32).saturating_add(64 << 20);
    limits.intermediate_buffer_size = limits.decoding_buffer_size;
    d = d.with_limits(limits);
    let channels = match d.colortype().map_err(tiff_err)? {
        ColorType::Gray(_) => 1,
        ColorType::GrayA(_) => 2,
        // Grey with one extra sample (alpha, TIFF 6.0 ExtraSamples): the
        // tiff crate names it Multiband; the grey is the first sample.
        ColorType::Multiband { num_samples: 2, .. } => 2,
        ColorType::RGB(_) => 3,
        ColorType::RGBA(_) => 4,
        other => {
            return Err(unsupported(format!(
                "TIFF colour type {other:?} is not supported; save the image as grey or RGB"
            )))
        }
    };
    crate::packbits::check_tiff(bytes).map_err(damaged_packbits(path))?;
    let mut warnings = Vec::new();
    if d.more_images() {
        warnings.push("multi-page TIFF: only the first page is measured".to_string());
    }
    let result = d.read_image().map_err(tiff_err)?;
    let only_alpha = match &result {
        DecodingResult::U8(v) => picture_only_in_alpha(v, channels),
        DecodingResult::U16(v) => picture_only_in_alpha(v, channels),
        DecodingResult::F32(v) => picture_only_in_alpha(v, channels),
        DecodingResult::F64(v) => picture_only_in_alpha(v, channels),
        _ => false,
    };
    if only_alpha {
        return Err(alpha_only_err(path));
    }
    let (data, depth) = match result {
        DecodingResult::U8(v) => (samples_to_gray(&v, channels, 1.0 / 255.0), 8u8),
        DecodingResult::U16(v) => (samples_to_gray(&v, channels, 1.0 / 65535.0), 16),
        DecodingResult::F32(v) => (float_to_unit(&v, channels), 32),
        DecodingResult::F64(v) => (float_to_unit(&v, channels), 32),
        _ => {
            return Err(unsupported(
                "TIFF sample format not supported (signed or wide integers); save as 8- or 16-bit unsigned or as float".into(),
            ))
        }
    };
    let data = data.ok_or_else(|| Error::OutOfMemory {
        path: path.to_path_buf(),
        what: "hold its grey levels".into(),
    })?;
    if data.len() != px {
        return Err(decode_err(format!(
            "the TIFF holds {} samples for {width} x {height} pixels",
            data.len()
        )));
    }
    let mut image = GrayImage {
        width: width as usize,
        height: height as usize,
        data,
    };
    replace_non_finite(path, &mut image, &mut warnings)?;
    let info = tiff_info(bytes);
    Ok(Loaded {
        image,
        bit_depth: depth,
        sha256: sha256_hex(bytes),
        format: ImageFormat::Tiff,
        resolution: info.resolution,
        warnings,
    })
}

/// Reads a PNG's image data again with the zlib check value verified
/// (Adler-32, RFC 1950 section 2.2; the PNG specification, ISO/IEC 15948
/// section 10.1, requires the zlib format), which the image crate's decoder
/// skips for speed. A file whose compressed bytes were altered after it was
/// written can still inflate to a picture, a different one; the check value
/// tells it from the one written. Rows are read one at a time (no second
/// image in memory); the file's size was checked from its header before.
fn png_check_value(bytes: &[u8]) -> std::result::Result<(), png::DecodingError> {
    let limits = png::Limits { bytes: usize::MAX };
    let mut d = png::Decoder::new_with_limits(Cursor::new(bytes), limits);
    d.ignore_checksums(false);
    let mut r = d.read_info()?;
    while r.next_row()?.is_some() {}
    r.finish()
}

/// Whether interleaved samples with an alpha channel (`channels` 2 or 4,
/// alpha last) hold their picture only in the alpha channel: every pixel
/// of one colour, the alpha varying. Grey levels are what is measured, so
/// such a file would be measured as a flat field.
fn picture_only_in_alpha<T: Copy + PartialEq>(samples: &[T], channels: usize) -> bool {
    if !(channels == 2 || channels == 4) || samples.len() < channels {
        return false;
    }
    let (first_colour, first_alpha) = samples[..channels].split_at(channels - 1);
    let mut alpha_varies = false;
    for px in samples.chunks_exact(channels) {
        let (colour, alpha) = px.split_at(channels - 1);
        if colour != first_colour {
            return false;
        }
        alpha_varies |= alpha != first_alpha;
    }
    alpha_varies
}

fn alpha_only(img: &DynamicImage) -> bool {
    match img {
        DynamicImage::ImageLumaA8(b) => picture_only_in_alpha(b.as_raw(), 2),
        DynamicImage::ImageRgba8(b) => picture_only_in_alpha(b.as_raw(), 4),
        DynamicImage::ImageLumaA16(b) => picture_only_in_alpha(b.as_raw(), 2),
        DynamicImage::ImageRgba16(b) => picture_only_in_alpha(b.as_raw(), 4),
        DynamicImage::ImageRgba32F(b) => picture_only_in_alpha(b.as_raw(), 4),
        _ => false,
    }
}

fn alpha_only_err(path: &Path) -> Error {
    Error::Input {
        path: path.to_path_buf(),
        reason: "every pixel has the same grey level: the picture is only in the alpha (transparency) channel, which is not measured; save the image as grey".into(),
    }
}

/// SHA-256 of a file's bytes, as lowercase hexadecimal.
pub fn sha256_hex(bytes: &[u8]) -> String {
    hex(&Sha256::digest(bytes))
}

fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write;
    bytes.iter().fold(String::with_capacity(64), |mut s, b| {
        let _ = write!(s, "{b:02x}");
        s
    })
}

const BT709: [f32; 3] = [0.2126, 0.7152, 0.0722];

/// Grey values in [0, 1] from interleaved samples with `channels` channels,
/// luminance taken from the first three when there are three or more.
/// Grey float samples (first sample, or BT.709 luma of the first three) as
/// f32 in [0, 1]: samples already in [0, 1] are kept, any other finite range
/// is mapped linearly onto [0, 1] by its finite minimum and maximum.
/// Everything is computed in f64 on a quarter of each sample, so that no
/// range a float TIFF can hold overflows (a span of f32::MIN to f32::MAX,
/// or of nearly the whole f64 range); non-finite samples stay non-finite
/// for `replace_non_finite`.
fn float_to_unit<T: Copy + Into<f64>>(samples: &[T], channels: usize) -> Option<Vec<f32>> {
    // The quarter of each pixel's value, computed where it is needed (once
    // for the range, once for the result) rather than held: 8 bytes a
    // pixel less at the peak of a float TIFF's loading.
    let quarter = |c: &[T]| -> f64 {
        match channels {
            1 | 2 => c[0].into() / 4.0,
            _ => {
                let l = |k: usize| BT709[k] as f64 * (c[k].into() / 4.0);
                l(0) + l(1) + l(2)
            }
        }
    };
    let channels = channels.max(1);
    let (lo, hi) = samples
        .chunks_exact(channels)
        .map(quarter)
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
    let rescale = lo.is_finite() && (lo < 0.0 || hi > 0.25) && hi > lo;
    crate::memory::try_collect(
        samples.len() / channels,
        samples.chunks_exact(channels).map(quarter).map(|v| {
            if rescale {
                ((v - lo) / (hi - lo)) as f32
            } else {
                (4.0 * v) as f32
            }
        }),
    )
}

/// `None` when the grey image's memory cannot be had (a fallible
/// reservation: the image's error, not the end of the run).
fn samples_to_gray<T: Copy + Into<f32>>(
    samples: &[T],
    channels: usize,
    scale: f32,
) -> Option<Vec<f32>> {
    let n = samples.len() / channels.max(1);
    match channels {
        1 | 2 => crate::memory::try_collect(
            n,
            samples.chunks_exact(channels).map(|c| c[0].into() * scale),
        ),
        _ => crate::memory::try_collect(
            n,
            samples.chunks_exact(channels).map(|c| {
                (BT709[0] * c[0].into() + BT709[1] * c[1].into() + BT709[2] * c[2].into()) * scale
            }),
        ),
    }
}

/// `None` when the grey image's memory cannot be had.
fn to_gray(img: DynamicImage) -> Option<(GrayImage, u8)> {
    let (w, h) = (img.width() as usize, img.height() as usize);
    let (data, depth) = match &img {
        DynamicImage::ImageLuma8(b) => (samples_to_gray(b.as_raw(), 1, 1.0 / 255.0), 8),
        DynamicImage::ImageLumaA8(b) => (samples_to_gray(b.as_raw(), 2, 1.0 / 255.0), 8),
        DynamicImage::ImageRgb8(b) => (samples_to_gray(b.as_raw(), 3, 1.0 / 255.0), 8),
        DynamicImage::ImageRgba8(b) => (samples_to_gray(b.as_raw(), 4, 1.0 / 255.0), 8),
        DynamicImage::ImageLuma16(b) => (samples_to_gray(b.as_raw(), 1, 1.0 / 65535.0), 16),
        DynamicImage::ImageLumaA16(b) => (samples_to_gray(b.as_raw(), 2, 1.0 / 65535.0), 16),
        DynamicImage::ImageRgb16(b) => (samples_to_gray(b.as_raw(), 3, 1.0 / 65535.0), 16),
        DynamicImage::ImageRgba16(b) => (samples_to_gray(b.as_raw(), 4, 1.0 / 65535.0), 16),
        DynamicImage::ImageRgb32F(b) => (samples_to_gray(b.as_raw(), 3, 1.0), 32),
        DynamicImage::ImageRgba32F(b) => (samples_to_gray(b.as_raw(), 4, 1.0), 32),
        other => {
            let b = other.to_luma32f();
            (samples_to_gray(b.as_raw(), 1, 1.0), 32)
        }
    };
    // In place (same element type): no second allocation.
    let data = data?.into_iter().map(|v| v.clamp(0.0, 1.0)).collect();
    Some((
        GrayImage {
            width: w,
            height: h,
            data,
        },
        depth,
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_of_known_string() {
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn bt709_luma_of_primaries() {
        // ITU-R BT.709-6, item 3.2: Y = 0.2126 R + 0.7152 G + 0.0722 B.
        let px: [u8; 9] = [255, 0, 0, 0, 255, 0, 0, 0, 255];
        let g = samples_to_gray(&px, 3, 1.0 / 255.0).unwrap();
        assert!((g[0] - 0.2126).abs() < 1e-6);
        assert!((g[1] - 0.7152).abs() < 1e-6);
        assert!((g[2] - 0.0722).abs() < 1e-6);
    }
}
