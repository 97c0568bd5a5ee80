//! Pictures of what was measured, drawn on the micrograph, for the report.
//!
//! Colours (a palette safe for colour-blind readers) read on a grey
//! micrograph: sky blue, the direction along which the arms repeat in each
//! reliable FFT tile (short and orange: rejected as an outlier); bluish
//! green, intercept test lines with vermillion ticks at the arm centres they
//! cross; blue, chains of arm centres (dots at the centres; orange: chains
//! across rows, not used); reddish purple, the scale bar and its measured
//! length; yellow, regions left out of measurement. A measurement picture
//! carries a panel under it (`panel`) that says this in words, with the
//! value, the methods' values, the calibration, a scale drawn by the tool
//! and the caution.

use crate::annotations::Annotation;
use crate::calibrate::scale_bar::ScaleBar;
use crate::load::GrayImage;
use crate::methods::centres::CentresOutcome;
use crate::methods::fft::FftOutcome;
use crate::methods::intercept::InterceptOutcome;
use crate::methods::{Detail, Outcome};
use image::{Rgb, RgbImage};
use imageproc::drawing::{draw_hollow_rect_mut, draw_line_segment_mut};
use imageproc::rect::Rect;
use std::path::Path;

mod panel;
pub use panel::{round_length_um, with_panel, Caption, CAUTION};

// The colours of the marks: the palette of M. Okabe and K. Ito, "Color
// Universal Design: how to make figures and presentations that are friendly
// to colorblind people" (2008), whose eight colours stay apart for readers
// with any common colour-vision deficiency (the old red ticks on green
// lines merged for red-green colour-blind readers). The names keep the
// marks' old roles.
pub const MAGENTA: Rgb<u8> = Rgb([204, 121, 167]); // reddish purple
pub const YELLOW: Rgb<u8> = Rgb([240, 228, 66]);
pub const CYAN: Rgb<u8> = Rgb([86, 180, 233]); // sky blue
pub const ORANGE: Rgb<u8> = Rgb([230, 159, 0]);
pub const GREEN: Rgb<u8> = Rgb([0, 158, 115]); // bluish green
pub const RED: Rgb<u8> = Rgb([213, 94, 0]); // vermillion
pub const BLUE: Rgb<u8> = Rgb([0, 114, 178]);

/// Width of the marks' strokes, px: one pixel per 500 of the picture's
/// shorter side (at least one), and, when the picture will be shown scaled
/// down to `shown_width` pixels wide (a factor f), at least 2.5 f, that is
/// 2.5 pixels after scaling. The scaling's triangle filter averages over f
/// pixels on either side of each new pixel's centre, which lies up to f / 2
/// off the stroke's middle; a stroke 2.5 f wide then covers all of that
/// filter but its outer tails (3 % of its weight in one dimension), so the
/// pixel nearest the stroke's middle keeps nearly the mark's own colour at
/// any sub-pixel position, and every kind of mark stays visible and told
/// apart by its colour at a report's width (`tests/overlay_marks.rs`).
fn stroke_width(out: &RgbImage, shown_width: Option<u32>) -> u32 {
    let own = (out.width().min(out.height()) / 500).max(1);
    match shown_width {
        Some(w) if w > 0 && w < out.width() => {
            own.max((2.5 * out.width() as f64 / w as f64).ceil() as u32)
        }
        _ => own,
    }
}

/// A rectangle's outline `width` pixels thick, growing outwards from `r`.
fn thick_rect(out: &mut RgbImage, r: [u32; 4], width: u32, colour: Rgb<u8>) {
    for g in 0..width {
        if let Some(r) = rect(r, g) {
            draw_hollow_rect_mut(out, r, colour);
        }
    }
}

/// A straight stroke `width` pixels wide from a to b: parallel one-pixel
/// lines a pixel apart, centred on the segment.
fn stroke(out: &mut RgbImage, a: (f32, f32), b: (f32, f32), colour: Rgb<u8>, width: u32) {
    let (dx, dy) = (b.0 - a.0, b.1 - a.1);
    let len = dx.hypot(dy).max(1e-6);
    let (nx, ny) = (-dy / len, dx / len);
    for k in 0..width {
        let off = k as f32 - 0.5 * (width as f32 - 1.0);
        draw_line_segment_mut(
            out,
            (a.0 + off * nx, a.1 + off * ny),
            (b.0 + off * nx, b.1 + off * ny),
            colour,
        );
    }
}

/// The grey image as RGB, for drawing on.
pub fn to_rgb(img: &GrayImage) -> RgbImage {
    RgbImage::from_fn(img.width as u32, img.height as u32, |x, y| {
        let v = level(img.get(x as usize, y as usize));
        Rgb([v, v, v])
    })
}

/// The 8-bit level a grey value in [0, 1] is drawn with.
fn level(v: f32) -> u8 {
    (v.clamp(0.0, 1.0) * 255.0).round() as u8
}

/// The grey levels an overlay is drawn on, one byte a pixel: what
/// [`measurement`] needs of the micrograph, kept instead of its floats
/// (a quarter of the memory) while the methods run.
pub fn grey_levels(img: &GrayImage) -> image::GrayImage {
    image::GrayImage::from_fn(img.width as u32, img.height as u32, |x, y| {
        image::Luma([level(img.get(x as usize, y as usize))])
    })
}

fn rect(r: [u32; 4], grow: u32) -> Option<Rect> {
    let [x0, y0, x1, y1] = r;
    let (x0, y0) = (x0.saturating_sub(grow), y0.saturating_sub(grow));
    let (w, h) = (x1 + 1 + grow - x0, y1 + 1 + grow - y0);
    (w > 0 && h > 0).then(|| Rect::at(x0 as i32, y0 as i32).of_size(w, h))
}

/// The micrograph with the scale bar outlined (two pixels outside it), its
/// measured length marked by a line under it, and the excluded region.
pub fn calibration(img: &GrayImage, bar: Option<&ScaleBar>) -> RgbImage {
    let mut out = to_rgb(img);
    let width = stroke_width(&out, None);
    draw_bar(&mut out, bar, width);
    out
}

/// A line segment centred at (cx, cy), `len` long, at `dir_deg`
/// counter-clockwise from +x with y up (the methods' convention).
#[allow(clippy::too_many_arguments)]
fn segment(
    out: &mut RgbImage,
    cx: f64,
    cy: f64,
    dir_deg: f64,
    len: f64,
    colour: Rgb<u8>,
    width: u32,
) {
    let (c, s) = (dir_deg.to_radians().cos(), dir_deg.to_radians().sin());
    let (dx, dy) = (0.5 * len * c, -0.5 * len * s);
    let width = width + 1;
    stroke(
        out,
        ((cx - dx) as f32, (cy - dy) as f32),
        ((cx + dx) as f32, (cy + dy) as f32),
        colour,
        width,
    );
}

/// The micrograph with what was measured: the FFT tiles' directions, the
/// intercept lines with their arm centres, the scale bar and excluded
/// region, and the annotations left out. `shown_width`: the width the
/// picture will be scaled down to, when it will be (the strokes are drawn
/// wide enough to stay visible there; see [`stroke_width`]).
pub fn measurement(
    img: &image::GrayImage,
    bar: Option<&ScaleBar>,
    annotations: &[Annotation],
    outcomes: &[Outcome],
    fft_min_quality: f64,
    shown_width: Option<u32>,
) -> RgbImage {
    let mut out = RgbImage::from_fn(img.width(), img.height(), |x, y| {
        let v = img.get_pixel(x, y)[0];
        Rgb([v, v, v])
    });
    let width = stroke_width(&out, shown_width);
    for o in outcomes {
        match &o.detail {
            Detail::Fft(f) => draw_fft(&mut out, f, fft_min_quality, width),
            Detail::Intercept(i) => draw_intercept(&mut out, i, width),
            Detail::Centres(c) => draw_centres(&mut out, c, width),
        }
    }
    draw_bar(&mut out, bar, width);
    draw_annotations(&mut out, annotations, width);
    out
}

/// Each annotation left out, outlined in yellow: its box, or for the
/// outside of a round field of view the rim of the field kept.
fn draw_annotations(out: &mut RgbImage, annotations: &[Annotation], width: u32) {
    for a in annotations {
        match a.field_px {
            Some([cx, cy, ax, ay]) => {
                for g in 0..width as i32 {
                    imageproc::drawing::draw_hollow_ellipse_mut(
                        out,
                        (cx.round() as i32, cy.round() as i32),
                        ax.round() as i32 + g,
                        ay.round() as i32 + g,
                        YELLOW,
                    )
                }
            }
            None => thick_rect(out, a.rect, width, YELLOW),
        }
    }
}

/// Each analysed tile: a stroke along the direction its arms repeat in,
/// three of its measured spacings long (so the stroke carries the quantity:
/// a finer spacing draws a shorter stroke; at most 0.8 of the tile), sky
/// blue where it entered the value and orange where it was reliable but
/// left out as an outlier; an orange ring where the tile was analysed but
/// showed no reliable period (told apart from a place never analysed,
/// which carries no mark).
fn draw_fft(out: &mut RgbImage, f: &FftOutcome, fft_min_quality: f64, width: u32) {
    let cap = 0.8 * f.window_px as f64;
    for t in &f.tiles {
        // A used tile is reliable whatever its quality figure says (a tile
        // read from its ring, methods::fft::radial, has a quality of
        // another scale).
        let reliable = t.spacing_px.is_finite()
            && t.spacing_px > 0.0
            && (t.used || t.quality >= fft_min_quality);
        if !reliable {
            let r = 2 * width as i32 + 1;
            for g in 0..width as i32 {
                imageproc::drawing::draw_hollow_circle_mut(
                    out,
                    (t.cx_px.round() as i32, t.cy_px.round() as i32),
                    r + g,
                    ORANGE,
                );
            }
            continue;
        }
        let len = (3.0 * t.spacing_px).min(cap);
        let colour = if t.used { CYAN } else { ORANGE };
        segment(out, t.cx_px, t.cy_px, t.dir_deg, len, colour, width);
    }
}

/// Each test line in green, with red ticks at the arm centres it counted.
fn draw_intercept(out: &mut RgbImage, i: &InterceptOutcome, width: u32) {
    for l in &i.lines {
        let (x0, y0, x1, y1) = (
            l.x0_px as f32,
            l.y0_px as f32,
            l.x1_px as f32,
            l.y1_px as f32,
        );
        stroke(out, (x0, y0), (x1, y1), GREEN, width);
        // Ticks across the line at each arm centre, their length scaled
        // with the strokes.
        let len = ((x1 - x0).hypot(y1 - y0)).max(1e-3);
        let half = 3.0 * width as f32;
        let (nx, ny) = (-(y1 - y0) / len * half, (x1 - x0) / len * half);
        for &(cx, cy) in &l.arm_centres_px {
            let (cx, cy) = (cx as f32, cy as f32);
            stroke(out, (cx - nx, cy - ny), (cx + nx, cy + ny), RED, width);
        }
    }
}

/// Each chain of arm centres as a blue polyline (orange when it runs across
/// rows and was not used), with a dot at each centre.
fn draw_centres(out: &mut RgbImage, c: &CentresOutcome, width: u32) {
    for ch in &c.chains {
        let colour = if ch.used && c.value_px.is_some() {
            BLUE
        } else {
            ORANGE
        };
        for pair in ch.points.windows(2) {
            let (a, b) = (pair[0], pair[1]);
            stroke(
                out,
                (a[0] as f32, a[1] as f32),
                (b[0] as f32, b[1] as f32),
                colour,
                width,
            );
        }
        for p in &ch.points {
            imageproc::drawing::draw_filled_circle_mut(
                out,
                (p[0].round() as i32, p[1].round() as i32),
                width as i32,
                colour,
            );
        }
    }
}

fn draw_bar(out: &mut RgbImage, bar: Option<&ScaleBar>, width: u32) {
    let h = out.height();
    if let Some(b) = bar {
        thick_rect(out, b.mask, width, YELLOW);
        // Outlined two pixels outside the bar, the outline as thick as the
        // other strokes (at least two pixels, as it always was).
        for grow in 2..2 + width.max(2) {
            if let Some(r) = rect([b.x0, b.y0, b.x1, b.y1], grow) {
                draw_hollow_rect_mut(out, r, MAGENTA);
            }
        }
        // The measured length, centred on the bar, drawn below it.
        let cx = 0.5 * (b.x0 + b.x1) as f32;
        let half = 0.5 * b.length_px as f32;
        let y = (b.y1 + 4 + 2 * width.max(2)).min(h.saturating_sub(1)) as f32;
        let tick = 3.0 * width as f32;
        if width <= 1 {
            draw_line_segment_mut(out, (cx - half, y), (cx + half - 1.0, y), MAGENTA);
        } else {
            stroke(out, (cx - half, y), (cx + half - 1.0, y), MAGENTA, width);
        }
        for x in [cx - half, cx + half - 1.0] {
            stroke(out, (x, y - tick), (x, y + tick), MAGENTA, width);
        }
    }
}

/// The picture scaled down to at most `max_width` pixels wide (aspect kept;
/// a triangle filter, which averages the marks rather than dropping their
/// pixels), or as it is.
pub fn fit_width(picture: RgbImage, max_width: Option<u32>) -> RgbImage {
    match max_width {
        Some(m) if m > 0 && picture.width() > m => {
            let h = ((picture.height() as u64 * m as u64) / picture.width() as u64).max(1) as u32;
            image::imageops::resize(&picture, m, h, image::imageops::FilterType::Triangle)
        }
        _ => picture,
    }
}

/// Largest size, bytes, of a picture's copy on the HTML page: a page of 200
/// images must stay under 30 MB, and base64 adds a third to each picture,
/// so 90 KB a picture (120 KB on the page) leaves room for the histograms
/// and text (about 15 KB an image).
pub const PAGE_PICTURE_BYTES: usize = 90 * 1024;

/// Encodes a picture as JPEG bytes of at most `max_bytes`: the highest of a
/// few qualities (75 down to 45) that fits, then the picture at three
/// quarters of its width, and so on. A grey micrograph's noise does not
/// compress, so a fixed quality would let a page grow with its images'
/// noise.
pub fn encode_jpeg_within(img: &RgbImage, max_bytes: usize) -> crate::Result<Vec<u8>> {
    let encode = |img: &RgbImage, q: u8| -> crate::Result<Vec<u8>> {
        let mut buf = Vec::new();
        image::codecs::jpeg::JpegEncoder::new_with_quality(&mut buf, q)
            .encode_image(img)
            .map_err(|e| crate::Error::Write {
                path: std::path::PathBuf::from("(picture in memory)"),
                source: std::io::Error::other(e.to_string()),
            })?;
        Ok(buf)
    };
    let mut current = img.clone();
    loop {
        let mut last = Vec::new();
        for q in [75, 65, 55, 45] {
            last = encode(&current, q)?;
            if last.len() <= max_bytes {
                return Ok(last);
            }
        }
        if current.width() <= 200 {
            return Ok(last);
        }
        current = fit_width(current.clone(), Some(current.width() * 3 / 4));
    }
}

/// Encodes a PNG in memory, marked as this tool's picture
/// ([`crate::files::OWN_PICTURE_TEXT`]), and writes it atomically.
pub fn write_png(path: &Path, img: &RgbImage) -> crate::Result<()> {
    write_png_with(path, img, png::Compression::default())
}

/// [`write_png`] at the given deflate level (the plots use the fast one).
pub fn write_png_with(path: &Path, img: &RgbImage, level: png::Compression) -> crate::Result<()> {
    let encode = || -> Result<Vec<u8>, png::EncodingError> {
        let mut buf = Vec::new();
        let mut enc = png::Encoder::new(&mut buf, img.width(), img.height());
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
        enc.set_compression(level);
        let (key, value) = crate::files::OWN_PICTURE_TEXT;
        enc.add_text_chunk(key.to_string(), value.to_string())?;
        let mut w = enc.write_header()?;
        w.write_image_data(img.as_raw())?;
        w.finish()?;
        Ok(buf)
    };
    let bytes = encode().map_err(|e| crate::Error::Write {
        path: path.to_path_buf(),
        source: std::io::Error::other(e.to_string()),
    })?;
    crate::files::write_output(path, &bytes)
}

/// The file format of the pictures written with `--overlay`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum PictureFormat {
    /// Lossless, marked by a PNG text entry (the default).
    #[default]
    Png,
    /// A fraction of a PNG's size for a report, marked by a JPEG comment.
    Jpeg,
}

impl PictureFormat {
    /// The file extension of the format.
    pub fn extension(self) -> &'static str {
        match self {
            PictureFormat::Png => "png",
            PictureFormat::Jpeg => "jpg",
        }
    }

    /// Writes `img` to `path` in this format, marked as the tool's own.
    pub fn write(self, path: &Path, img: &RgbImage) -> crate::Result<()> {
        match self {
            PictureFormat::Png => write_png(path, img),
            PictureFormat::Jpeg => write_jpeg(path, img),
        }
    }
}

/// JPEG quality of a picture written as JPEG (`--overlay-format jpeg`):
/// 90 keeps the marks' edges and the panel's text sharp at a fraction of a
/// PNG's size for a noisy grey micrograph.
pub const OVERLAY_JPEG_QUALITY: u8 = 90;

/// Encodes a JPEG in memory, marked as this tool's picture by a comment
/// segment (COM, ITU-T T.81 B.2.4.5) holding [`crate::files::OWN_PICTURE_TEXT`]
/// right after the start of image, and writes it atomically.
pub fn write_jpeg(path: &Path, img: &RgbImage) -> crate::Result<()> {
    let mut body = Vec::new();
    image::codecs::jpeg::JpegEncoder::new_with_quality(&mut body, OVERLAY_JPEG_QUALITY)
        .encode_image(img)
        .map_err(|e| crate::Error::Write {
            path: path.to_path_buf(),
            source: std::io::Error::other(e.to_string()),
        })?;
    let text = crate::files::own_picture_comment();
    // SOI, then the comment (its length counts its own two bytes), then the
    // rest of the encoder's stream.
    let mut bytes = Vec::with_capacity(body.len() + text.len() + 4);
    bytes.extend_from_slice(&body[..2]);
    bytes.extend_from_slice(&[0xFF, 0xFE]);
    bytes.extend_from_slice(&((text.len() + 2) as u16).to_be_bytes());
    bytes.extend_from_slice(&text);
    bytes.extend_from_slice(&body[2..]);
    crate::files::write_output(path, &bytes)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tile(cx: f64, spacing: f64, quality: f64, used: bool) -> crate::methods::fft::TileResult {
        crate::methods::fft::TileResult {
            cx_px: cx,
            cy_px: 50.0,
            spacing_px: spacing,
            dir_deg: 0.0,
            quality,
            used,
            half_ratio: 0.0,
            cross_spacing_px: f64::NAN,
            cross_dir_deg: 0.0,
            cross_quality: 0.0,
        }
    }

    #[test]
    fn a_tile_stroke_is_three_spacings_long_and_an_unreliable_tile_a_ring() {
        // Geometry of the marks: a used tile of spacing 10 px draws a
        // horizontal sky-blue stroke 30 px long through its centre; a tile
        // analysed without a reliable period an orange ring around its
        // centre, empty inside.
        let f = FftOutcome {
            value_px: None,
            ci95_px: None,
            spread_px: None,
            n_tiles_used: 1,
            n_tiles_analysed: 2,
            window_px: 64,
            orientation_deg: None,
            orientation_coherence: None,
            tiles: vec![
                tile(50.0, 10.0, 20.0, true),
                tile(150.0, f64::NAN, 0.0, false),
            ],
            reason: None,
            row_spacing_px: None,
            read_along_rows: false,
            rows_undecided: None,
        };
        let mut out = RgbImage::from_pixel(200, 100, Rgb([128, 128, 128]));
        draw_fft(&mut out, &f, 6.0, 1);
        let blue: Vec<u32> = (0..200)
            .filter(|&x| *out.get_pixel(x, 50) == CYAN)
            .collect();
        let span = blue.last().unwrap() - blue.first().unwrap() + 1;
        assert!((29..=31).contains(&span), "{span}");
        assert!(blue.iter().all(|&x| (34..=66).contains(&x)));
        let orange = (100..200)
            .filter(|&x| *out.get_pixel(x, 50) == ORANGE)
            .count();
        assert_eq!(orange, 2, "a ring crosses the row through its centre twice");
        assert_eq!(*out.get_pixel(150, 50), Rgb([128, 128, 128]));
    }

    #[test]
    fn a_jpeg_picture_decodes_and_is_known_as_the_tools_own() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("pic.jpg");
        let img = RgbImage::from_fn(64, 48, |x, y| Rgb([(x * 4) as u8, (y * 5) as u8, 90]));
        write_jpeg(&p, &img).unwrap();
        let back = image::open(&p).unwrap();
        assert_eq!((back.width(), back.height()), (64, 48));
        assert!(crate::files::is_own_picture(&p));
        // A JPEG without the comment is a micrograph like any other.
        let plain = dir.path().join("plain.jpg");
        image::DynamicImage::ImageRgb8(img).save(&plain).unwrap();
        assert!(!crate::files::is_own_picture(&plain));
    }

    #[test]
    fn a_noisy_picture_is_held_to_the_page_budget_and_decodes() {
        // White noise is the worst case for JPEG (no two neighbouring pixels
        // alike, so nothing to compress): at 2560 x 1920 it must still come
        // out within the budget, as a JPEG that decodes (to the same size,
        // or scaled down by quarters).
        let mut state = 0x2545_f491_4f6c_dd1du64;
        let img = RgbImage::from_fn(2560, 1920, |_, _| {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            let v = (state >> 56) as u8;
            Rgb([v, v / 2, 255 - v])
        });
        let bytes = encode_jpeg_within(&img, PAGE_PICTURE_BYTES).unwrap();
        assert!(bytes.len() <= PAGE_PICTURE_BYTES, "{}", bytes.len());
        let back = image::load_from_memory_with_format(&bytes, image::ImageFormat::Jpeg).unwrap();
        assert!(back.width() <= 2560 && back.width() >= 200);
        assert_eq!(
            back.height(),
            ((1920u64 * back.width() as u64) / 2560) as u32,
            "aspect kept"
        );
    }
}
