//! The panel under a measurement picture: what was measured, in words, with
//! a legend of every mark, a scale bar drawn by the tool, and the caution,
//! so that the picture can go into a report and be read without the README.
//!
//! Text is set in DejaVu Sans (bundled, `assets/fonts`; Bitstream Vera
//! licence with public-domain DejaVu changes, in
//! `assets/fonts/DejaVuSans-LICENSE.txt`), drawn with imageproc.

use super::*;
use crate::combine::Estimate;
use crate::units::UmPerPx;
use ab_glyph::{FontRef, PxScale};
use imageproc::drawing::{draw_filled_rect_mut, draw_text_mut, text_size};

static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");

/// What the panel says about one image.
pub struct Caption<'a> {
    /// The file as the user named it.
    pub file: &'a str,
    pub sdas: &'a Estimate,
    pub outcomes: &'a [Outcome],
    pub um_per_px: UmPerPx,
    /// The calibration's source in words (`manual`, `scale-bar`, ...).
    pub calibration_source: &'a str,
    /// The decision against a limit, when a spec was given.
    pub acceptance: Option<&'a crate::interpret::acceptance::Acceptance>,
    /// Columnar, equiaxed or mixed, with the growth direction, when read.
    pub morphology: Option<&'a crate::spatial::morphology::Morphology>,
}

/// The morphology in one line: the class with its evidence, or why there
/// is none.
fn morphology_line(m: &crate::spatial::morphology::Morphology) -> String {
    let evidence = format!(
        "{} aligned, {} crossed of {} neighbourhoods{}",
        m.aligned,
        m.crossed,
        m.cells.len(),
        m.anisotropy
            .map(|a| format!(", anisotropy {a:.2}"))
            .unwrap_or_default()
    );
    match m.class {
        Some(class) => {
            let growth = match (m.growth_dir_deg, m.growth_spread_deg) {
                (Some(d), Some(s)) => format!(", growth axis {d:.0}° ccw from x (spread {s:.0}°)"),
                (Some(d), None) => format!(", growth axis {d:.0}° ccw from x"),
                _ => String::new(),
            };
            format!("Morphology: {}{growth} ({evidence})", class.name())
        }
        None => format!("Morphology: not decided ({evidence})"),
    }
}

/// The caution every page of the tool carries.
pub const CAUTION: &str = "Results support, and never replace, the judgement of qualified personnel and the applicable specification and codes.";

/// The marks of a measurement picture, as (colour, words), in the order the
/// legend lists them.
const LEGEND: [(Rgb<u8>, &str); 8] = [
    (
        CYAN,
        "FFT tile: direction the arms repeat in, 3 spacings long",
    ),
    (
        ORANGE,
        "tile or chain not used (ring: tile without a reliable period)",
    ),
    (GREEN, "intercept test line"),
    (RED, "arm counted on a line"),
    (BLUE, "chain of arm centres"),
    (MAGENTA, "scale bar found"),
    (YELLOW, "left out (bar, text, band)"),
    (WHITE, "scale drawn by armspace"),
];

/// A bright mark colour for the tool's own scale.
pub const WHITE: Rgb<u8> = Rgb([255, 255, 255]);
const PANEL: Rgb<u8> = Rgb([24, 24, 24]);
const TEXT: Rgb<u8> = Rgb([235, 235, 235]);

/// Text height for a picture `width` pixels wide: about 1/60 of the width,
/// so that a picture scaled to a report page keeps its text about as large
/// as the body text (common practice, no single source), and never below
/// 12 px, the smallest that stays legible on screen.
fn text_px(width: u32) -> f32 {
    (width as f32 / 60.0).clamp(12.0, 48.0)
}

/// A length of 1, 2 or 5 times a power of ten micrometres, the largest
/// such at most `max_um` (how scale bars are labelled; common practice, no
/// single source).
pub fn round_length_um(max_um: f64) -> Option<f64> {
    if !(max_um.is_finite() && max_um > 0.0) {
        return None;
    }
    let p = 10f64.powf(max_um.log10().floor());
    [5.0, 2.0, 1.0].iter().map(|m| m * p).find(|&l| l <= max_um)
}

fn fmt_um(v: f64) -> String {
    // Three significant figures are more than any interval here supports
    // and fewer would round visibly in a report.
    if v >= 100.0 {
        format!("{v:.0}")
    } else if v >= 10.0 {
        format!("{v:.1}")
    } else {
        format!("{v:.2}")
    }
}

/// The lines of text the panel holds, without the legend.
fn lines(c: &Caption) -> Vec<String> {
    let mut out = vec![format!("armspace · {}", c.file)];
    match (c.sdas.value, c.sdas.ci95) {
        (Some(v), Some([lo, hi])) => out.push(format!(
            "SDAS {} µm (95 % CI {} to {} µm), n = {} ({:.1} independent), from {}",
            fmt_um(v.0),
            fmt_um(lo.0),
            fmt_um(hi.0),
            c.sdas.n,
            c.sdas.n_eff,
            c.sdas
                .methods
                .iter()
                .map(|m| m.name())
                .collect::<Vec<_>>()
                .join(", ")
        )),
        _ => out
            .push("NO VALUE: no supported, corroborated SDAS (the report gives the reason)".into()),
    }
    let per: Vec<String> = c
        .outcomes
        .iter()
        .map(|o| match o.value {
            // Values left out of the image's value are indicative by now
            // (`combine::withhold_unused`).
            Some(v) => format!("{} {} µm", o.method.name(), fmt_um(c.um_per_px.to_um(v).0)),
            None => match o.indicative {
                Some(v) => format!(
                    "{} ({} µm, not used)",
                    o.method.name(),
                    fmt_um(c.um_per_px.to_um(v).0)
                ),
                None => format!("{} none", o.method.name()),
            },
        })
        .collect();
    if !per.is_empty() {
        out.push(format!("Methods: {}", per.join(" · ")));
    }
    if let Some(a) = c.acceptance {
        let zone = a
            .zone
            .as_deref()
            .map(|z| format!(" [{z}]"))
            .unwrap_or_default();
        let what = match a.statistic {
            crate::interpret::acceptance::Statistic::Value => "image value",
            crate::interpret::acceptance::Statistic::MaxLocal => "largest local value",
        };
        let compared = match (a.compared_um, a.compared_ci95_um) {
            (Some(v), Some([lo, hi])) => {
                format!(
                    "{what} {} µm (95 % CI {} to {})",
                    fmt_um(v),
                    fmt_um(lo),
                    fmt_um(hi)
                )
            }
            (Some(v), None) => format!("{what} {} µm", fmt_um(v)),
            _ => format!("{what}: none"),
        };
        let limit = a
            .limit_um
            .map(|l| format!(", limit {} µm", fmt_um(l)))
            .unwrap_or_default();
        out.push(match a.decision {
            Some(d) => format!("{}{zone}: {compared}{limit}", d.name().to_uppercase()),
            None => format!("NOT ASSESSED{zone}: {}", a.reason),
        });
    }
    if let Some(m) = c.morphology {
        out.push(morphology_line(m));
    }
    out.push(format!(
        "Calibration {} µm/px ({})",
        fmt_um(c.um_per_px.get()),
        c.calibration_source
    ));
    out
}

/// The picture with the panel under it. Without the bundled font (a defect
/// of the build) the picture is returned as it is.
pub fn with_panel(picture: RgbImage, c: &Caption) -> RgbImage {
    let Ok(font) = FontRef::try_from_slice(FONT_BYTES) else {
        return picture;
    };
    let (w, h) = picture.dimensions();
    let size = text_px(w);
    let scale = PxScale::from(size);
    let line_h = (1.35 * size).ceil() as u32;
    let pad = (0.6 * size).ceil() as u32;
    // Each line of text, and the caution, wrapped to the width at word
    // boundaries (a word longer than the width, such as a long path, stays
    // whole on its own line).
    let wrap = |line: &str| -> Vec<String> {
        let mut rows = vec![String::new()];
        for word in line.split(' ') {
            let last = rows.last().cloned().unwrap_or_default();
            let trial = if last.is_empty() {
                word.to_string()
            } else {
                format!("{last} {word}")
            };
            if text_size(scale, &font, &trial).0 + 2 * pad > w && !last.is_empty() {
                rows.push(word.to_string());
            } else if let Some(l) = rows.last_mut() {
                *l = trial;
            }
        }
        rows
    };
    let mut text: Vec<String> = lines(c).iter().flat_map(|l| wrap(l)).collect();
    // The legend, as swatch + words, wrapped to the picture's width.
    let swatch = size.ceil() as u32;
    let mut legend_rows: Vec<Vec<(Rgb<u8>, &str)>> = vec![Vec::new()];
    let mut x = pad;
    for &(colour, words) in &LEGEND {
        let (tw, _) = text_size(scale, &font, words);
        let item = swatch + pad / 2 + tw + pad;
        if x + item > w && !legend_rows.last().is_some_and(|r| r.is_empty()) {
            legend_rows.push(Vec::new());
            x = pad;
        }
        if let Some(r) = legend_rows.last_mut() {
            r.push((colour, words));
        }
        x += item;
    }
    let caution = wrap(CAUTION);
    let scale_row = 1u32;
    let rows = text.len() as u32 + legend_rows.len() as u32 + caution.len() as u32 + scale_row;
    let panel_h = rows * line_h + 2 * pad;
    let mut out = RgbImage::from_pixel(w, h + panel_h, PANEL);
    image::imageops::replace(&mut out, &picture, 0, 0);
    let mut y = h + pad;
    for l in text.drain(..) {
        draw_text_mut(&mut out, TEXT, pad as i32, y as i32, scale, &font, &l);
        y += line_h;
    }
    for row in &legend_rows {
        let mut x = pad;
        for &(colour, words) in row {
            let top = y + (line_h - swatch) / 2;
            draw_filled_rect_mut(
                &mut out,
                Rect::at(x as i32, top as i32).of_size(swatch, swatch),
                colour,
            );
            x += swatch + pad / 2;
            draw_text_mut(&mut out, TEXT, x as i32, y as i32, scale, &font, words);
            x += text_size(scale, &font, words).0 + pad;
        }
        y += line_h;
    }
    // The tool's own scale: a round length about a fifth of the width.
    let um_per_px = c.um_per_px.get();
    if let Some(len_um) = round_length_um(0.2 * w as f64 * um_per_px) {
        let len_px = (len_um / um_per_px).round() as u32;
        let bar_h = (0.35 * size).ceil().max(2.0) as u32;
        let top = y + (line_h - bar_h) / 2;
        if len_px >= 1 && pad + len_px < w {
            draw_filled_rect_mut(
                &mut out,
                Rect::at(pad as i32, top as i32).of_size(len_px, bar_h),
                WHITE,
            );
            let label = format!("{} µm", fmt_um(len_um));
            draw_text_mut(
                &mut out,
                TEXT,
                (2 * pad + len_px) as i32,
                y as i32,
                scale,
                &font,
                &label,
            );
        }
    }
    y += line_h;
    for l in &caution {
        draw_text_mut(&mut out, TEXT, pad as i32, y as i32, scale, &font, l);
        y += line_h;
    }
    if c.sdas.value.is_none() {
        no_value_band(&mut out, w, h, &font);
    }
    out
}

/// "NO VALUE" across the middle of the picture, on a dark band, so that a
/// picture of an image without a value is never taken for an untouched
/// micrograph.
fn no_value_band(out: &mut RgbImage, w: u32, h: u32, font: &FontRef) {
    let size = (w as f32 / 12.0).clamp(16.0, 160.0);
    let scale = PxScale::from(size);
    let words = "NO VALUE";
    let (tw, th) = text_size(scale, font, words);
    let band_h = (th as f32 * 1.6) as u32;
    let top = h.saturating_sub(band_h) / 2;
    for y in top..(top + band_h).min(h) {
        for x in 0..w {
            let p = out.get_pixel_mut(x, y);
            // Darkened to a third, so the structure still shows through.
            *p = Rgb([p[0] / 3, p[1] / 3, p[2] / 3]);
        }
    }
    let x = w.saturating_sub(tw) / 2;
    let y = top + (band_h.saturating_sub(th)) / 2;
    draw_text_mut(out, ORANGE, x as i32, y as i32, scale, font, words);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_panel_states_the_morphology_and_its_evidence() {
        use crate::spatial::morphology::{Class, Morphology};
        let mut m = Morphology {
            class: Some(Class::Columnar),
            reason: None,
            samples: 40,
            spacing_um: 28.0,
            anisotropy: Some(0.99),
            step_um: 280.0,
            radius_um: 280.0,
            columns: 3,
            rows: 3,
            cells: vec![],
            aligned: 6,
            crossed: 0,
            growth_dir_deg: Some(115.2),
            growth_spread_deg: Some(3.6),
            aligned_agreement: Some(0.99),
            whole_image: false,
        };
        let line = morphology_line(&m);
        assert!(
            line.starts_with("Morphology: columnar, growth axis 115° ccw from x (spread 4°)"),
            "{line}"
        );
        assert!(line.contains("6 aligned, 0 crossed"), "{line}");
        m.class = None;
        m.growth_dir_deg = None;
        assert!(morphology_line(&m).starts_with("Morphology: not decided"));
    }

    #[test]
    fn scale_lengths_are_one_two_or_five_times_a_power_of_ten() {
        // Common practice, no single source: scale bars are labelled 1, 2
        // or 5 times a power of ten.
        assert_eq!(round_length_um(730.0), Some(500.0));
        assert_eq!(round_length_um(199.0), Some(100.0));
        assert_eq!(round_length_um(20.0), Some(20.0));
        assert_eq!(round_length_um(0.7), Some(0.5));
        assert_eq!(round_length_um(0.0), None);
        assert_eq!(round_length_um(f64::NAN), None);
    }

    #[test]
    fn the_bundled_font_loads() {
        assert!(FontRef::try_from_slice(FONT_BYTES).is_ok());
    }
}
