//! Pictures of what was measured, drawn on the micrograph, for the report.
//!
//! Colours read on a grey micrograph: calibration features in magenta (the
//! bar's outline and its measured ends) and yellow (the region excluded from
//! measurement).

use crate::calibrate::scale_bar::ScaleBar;
use crate::load::GrayImage;
use image::{Rgb, RgbImage};
use imageproc::drawing::{draw_hollow_rect_mut, draw_line_segment_mut};
use imageproc::rect::Rect;
use std::path::Path;

pub const MAGENTA: Rgb<u8> = Rgb([255, 0, 200]);
pub const YELLOW: Rgb<u8> = Rgb([255, 220, 0]);

/// The grey image as RGB, for drawing on.
pub fn to_rgb(img: &GrayImage) -> RgbImage {
    RgbImage::from_fn(img.width as u32, img.height as u32, |x, y| {
        let v = (img.get(x as usize, y as usize).clamp(0.0, 1.0) * 255.0).round() as u8;
        Rgb([v, v, v])
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
    if let Some(b) = bar {
        if let Some(r) = rect(b.mask, 0) {
            draw_hollow_rect_mut(&mut out, r, YELLOW);
        }
        for grow in [2, 3] {
            if let Some(r) = rect([b.x0, b.y0, b.x1, b.y1], grow) {
                draw_hollow_rect_mut(&mut out, r, MAGENTA);
            }
        }
        // The measured length, centred on the bar, drawn below it.
        let cx = 0.5 * (b.x0 + b.x1) as f32;
        let half = 0.5 * b.length_px as f32;
        let y = (b.y1 + 6).min(img.height as u32 - 1) as f32;
        draw_line_segment_mut(&mut out, (cx - half, y), (cx + half - 1.0, y), MAGENTA);
        for x in [cx - half, cx + half - 1.0] {
            draw_line_segment_mut(&mut out, (x, y - 3.0), (x, y + 3.0), MAGENTA);
        }
    }
    out
}

/// Encodes a PNG in memory and writes it atomically.
pub fn write_png(path: &Path, img: &RgbImage) -> crate::Result<()> {
    let mut buf = std::io::Cursor::new(Vec::new());
    img.write_to(&mut buf, image::ImageFormat::Png)
        .map_err(|e| crate::Error::Write {
            path: path.to_path_buf(),
            source: std::io::Error::other(e.to_string()),
        })?;
    crate::report::write_atomic(path, buf.get_ref())
}
