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
/// shorter side (at least one), so that a picture scaled down to a report's
/// column (about 800 px) keeps its marks at least a pixel wide.
fn stroke_width(out: &RgbImage) -> u32 {
    (out.width().min(out.height()) / 500).max(1)
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
    draw_bar(&mut out, bar);
    out
}

/// A line segment centred at (cx, cy), `len` long, at `dir_deg`
/// counter-clockwise from +x with y up (the methods' convention).
fn segment(out: &mut RgbImage, cx: f64, cy: f64, dir_deg: f64, len: f64, colour: Rgb<u8>) {
    let (c, s) = (dir_deg.to_radians().cos(), dir_deg.to_radians().sin());
    let (dx, dy) = (0.5 * len * c, -0.5 * len * s);
    let width = stroke_width(out) + 1;
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
/// region, and the annotations left out.
pub fn measurement(
    img: &image::GrayImage,
    bar: Option<&ScaleBar>,
    annotations: &[Annotation],
    outcomes: &[Outcome],
    fft_min_quality: f64,
) -> RgbImage {
    let mut out = RgbImage::from_fn(img.width(), img.height(), |x, y| {
        let v = img.get_pixel(x, y)[0];
        Rgb([v, v, v])
    });
    for o in outcomes {
        match &o.detail {
            Detail::Fft(f) => draw_fft(&mut out, f, fft_min_quality),
            Detail::Intercept(i) => draw_intercept(&mut out, i),
            Detail::Centres(c) => draw_centres(&mut out, c),
        }
    }
    draw_bar(&mut out, bar);
    draw_annotations(&mut out, annotations);
    out
}

/// Each annotation left out, outlined in yellow: its box, or for the
/// outside of a round field of view the rim of the field kept.
fn draw_annotations(out: &mut RgbImage, annotations: &[Annotation]) {
    for a in annotations {
        match a.field_px {
            Some([cx, cy, ax, ay]) => imageproc::drawing::draw_hollow_ellipse_mut(
                out,
                (cx.round() as i32, cy.round() as i32),
                ax.round() as i32,
                ay.round() as i32,
                YELLOW,
            ),
            None => {
                if let Some(r) = rect(a.rect, 0) {
                    draw_hollow_rect_mut(out, r, YELLOW);
                }
            }
        }
    }
}

/// Each analysed tile's direction: cyan where it entered the value, short
/// orange where it was reliable but rejected as an outlier.
fn draw_fft(out: &mut RgbImage, f: &FftOutcome, fft_min_quality: f64) {
    let len = 0.4 * f.window_px as f64;
    for t in f.tiles.iter().filter(|t| t.spacing_px.is_finite()) {
        if t.used {
            segment(out, t.cx_px, t.cy_px, t.dir_deg, len, CYAN);
        } else if t.quality >= fft_min_quality {
            segment(out, t.cx_px, t.cy_px, t.dir_deg, 0.5 * len, ORANGE);
        }
    }
}

/// Each test line in green, with red ticks at the arm centres it counted.
fn draw_intercept(out: &mut RgbImage, i: &InterceptOutcome) {
    for l in &i.lines {
        let (x0, y0, x1, y1) = (
            l.x0_px as f32,
            l.y0_px as f32,
            l.x1_px as f32,
            l.y1_px as f32,
        );
        let width = stroke_width(out);
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
fn draw_centres(out: &mut RgbImage, c: &CentresOutcome) {
    for ch in &c.chains {
        let colour = if ch.used && c.value_px.is_some() {
            BLUE
        } else {
            ORANGE
        };
        let width = stroke_width(out);
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
                2 * width as i32,
                colour,
            );
        }
    }
}

fn draw_bar(out: &mut RgbImage, bar: Option<&ScaleBar>) {
    let h = out.height();
    if let Some(b) = bar {
        if let Some(r) = rect(b.mask, 0) {
            draw_hollow_rect_mut(out, r, YELLOW);
        }
        for grow in [2, 3] {
            if let Some(r) = rect([b.x0, b.y0, b.x1, b.y1], grow) {
                draw_hollow_rect_mut(out, r, MAGENTA);
            }
        }
        // The measured length, centred on the bar, drawn below it.
        let cx = 0.5 * (b.x0 + b.x1) as f32;
        let half = 0.5 * b.length_px as f32;
        let y = (b.y1 + 6).min(h.saturating_sub(1)) as f32;
        draw_line_segment_mut(out, (cx - half, y), (cx + half - 1.0, y), MAGENTA);
        for x in [cx - half, cx + half - 1.0] {
            draw_line_segment_mut(out, (x, y - 3.0), (x, y + 3.0), MAGENTA);
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

/// Encodes a PNG in memory, marked as this tool's picture
/// ([`crate::files::OWN_PICTURE_TEXT`]), and writes it atomically.
pub fn write_png(path: &Path, img: &RgbImage) -> crate::Result<()> {
    let encode = || -> Result<Vec<u8>, png::EncodingError> {
        let mut buf = Vec::new();
        let mut enc = png::Encoder::new(&mut buf, img.width(), img.height());
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
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
