//! Plots of where in the casting: the profile along a line (`--along`,
//! SDAS and, with a correlation, the local solidification time against the
//! distance along the line, each bin's 95 % interval as a band) and the
//! maps over the micrograph (`--map`, local SDAS and local solidification
//! time in a perceptually uniform colour scale with a labelled colour
//! bar). Drawn with plotters' bitmap backend, text set in the bundled
//! DejaVu Sans (`assets/fonts`), written as PNG marked as the tool's own
//! picture (so a later run over the folder skips them).
//!
//! Stage: output, beside `overlay`; it reads `spatial` and `interpret`
//! results and nothing reads it back but the pipeline.

use crate::spatial::map::Map;
use image::{GrayImage, RgbImage};
use plotters::prelude::*;
use plotters::style::colors::colormaps::ViridisRGB;

static FONT_BYTES: &[u8] = include_bytes!("../assets/fonts/DejaVuSans.ttf");

/// The caution every picture carries (short form of the report's).
const CAUTION: &str = "Supports, never replaces, the judgement of qualified personnel and the applicable specification and codes.";

/// Registers the bundled DejaVu Sans as plotters' `sans-serif`, once per
/// process. plotters is built with its `ab_glyph` text feature (no system
/// fonts), which sets text only in fonts registered by name: every use of
/// plotters with text (these plots, the HTML page's histograms) needs this
/// first.
pub fn register_fonts() {
    static ONCE: std::sync::Once = std::sync::Once::new();
    ONCE.call_once(|| {
        // The font is compiled in and known to parse (the overlay's panel
        // sets it too); a failure leaves plotters without text, which the
        // drawing then reports.
        let _ = plotters::style::register_font("sans-serif", FontStyle::Normal, FONT_BYTES);
    });
}

/// The picture's title at `title_y` and the caution at the foot of a
/// picture `h` pixels high.
fn frame_text(
    root: &DrawingArea<BitMapBackend, plotters::coord::Shift>,
    title: &str,
    title_y: i32,
    h: u32,
) -> crate::Result<()> {
    root.draw(&Text::new(
        title.to_string(),
        (12, title_y),
        ("sans-serif", 17).into_font(),
    ))
    .map_err(draw_err)?;
    root.draw(&Text::new(
        CAUTION,
        (12, h as i32 - 18),
        ("sans-serif", 12).into_font(),
    ))
    .map_err(draw_err)
}

fn draw_err(e: impl std::fmt::Display) -> crate::Error {
    crate::Error::Value {
        reason: format!("the plot could not be drawn: {e}"),
    }
}

/// Whether `lo..hi` can be an axis: both ends and the span finite, and the
/// span positive. plotters' tick search does not end on an axis whose span
/// is infinite (ranges near f64::MAX overflow when padded); such values
/// come only from damaged or crafted input (a report given to `merge`, a
/// correlation file), and their plot is refused with an error instead.
pub fn axis_ok(lo: f64, hi: f64) -> bool {
    lo.is_finite() && hi.is_finite() && (hi - lo).is_finite() && hi > lo
}

fn axis_err(what: &str, lo: f64, hi: f64) -> crate::Error {
    crate::Error::Value {
        reason: format!(
            "the plot could not be drawn: its {what} axis from {lo} to {hi} is not a finite range"
        ),
    }
}

/// One point of a profile: a bin's centre, its length along the line, its
/// value and 95 % interval (none without support).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BinPoint {
    pub distance_um: f64,
    pub width_um: f64,
    pub value: Option<f64>,
    pub ci95: Option<[f64; 2]>,
}

/// One panel of a profile plot.
pub struct Panel<'a> {
    /// The quantity and its unit, for the y axis ("SDAS (um)").
    pub y_desc: &'a str,
    pub bins: &'a [BinPoint],
}

/// Blue of the Okabe and Ito palette (the overlay's), safe for
/// colour-blind readers.
const BLUE_OI: RGBColor = RGBColor(0, 114, 178);

/// The plot of a profile: one panel per quantity (SDAS; with a
/// correlation the local solidification time below it), distance along
/// the line (um) on x, each bin's value as a dot and its 95 % interval as
/// a band across the bin; bins without a value are left blank.
pub fn profile_picture(title: &str, length_um: f64, panels: &[Panel]) -> crate::Result<RgbImage> {
    register_fonts();
    let (w, panel_h) = (960u32, 380u32);
    let h = 40 + panel_h * panels.len() as u32 + 24;
    let mut buf = vec![255u8; (w * h * 3) as usize];
    {
        let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
        frame_text(&root, title, 10, h)?;
        let body = root.margin(40, 24, 0, 0);
        let areas = body.split_evenly((panels.len().max(1), 1));
        for (area, panel) in areas.iter().zip(panels) {
            let valued: Vec<&BinPoint> = panel.bins.iter().filter(|b| b.value.is_some()).collect();
            let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
            for b in &valued {
                let [a, c] = b.ci95.unwrap_or([b.value.unwrap_or(0.0); 2]);
                lo = lo.min(a).min(b.value.unwrap_or(a));
                hi = hi.max(c).max(b.value.unwrap_or(c));
            }
            let empty = valued.is_empty();
            if empty || hi.partial_cmp(&lo) != Some(std::cmp::Ordering::Greater) {
                let m = if empty { 1.0 } else { lo.abs().max(1e-9) };
                (lo, hi) = (
                    if empty { 0.0 } else { 0.9 * m },
                    if empty { 1.0 } else { 1.1 * m },
                );
            }
            let pad = 0.1 * (hi - lo);
            let (lo, hi) = ((lo - pad).max(0.0), hi + pad);
            if !axis_ok(lo, hi) {
                return Err(axis_err("value", lo, hi));
            }
            if !axis_ok(0.0, length_um.max(1e-9)) {
                return Err(axis_err("distance", 0.0, length_um));
            }
            let mut chart = ChartBuilder::on(area)
                .margin(12)
                .x_label_area_size(44)
                .y_label_area_size(72)
                .build_cartesian_2d(0.0..length_um.max(1e-9), lo..hi)
                .map_err(draw_err)?;
            let mut mesh = chart.configure_mesh();
            mesh.x_desc("distance along the line (um)")
                .y_desc(panel.y_desc)
                .light_line_style(RGBColor(235, 235, 235))
                .label_style(("sans-serif", 13));
            if empty {
                mesh.disable_y_axis();
            }
            mesh.draw().map_err(draw_err)?;
            if empty {
                chart
                    .draw_series(std::iter::once(Text::new(
                        "no bin has a value (the report gives each bin's reason)",
                        (0.05 * length_um, 0.5),
                        ("sans-serif", 15).into_font(),
                    )))
                    .map_err(draw_err)?;
                continue;
            }
            let band = BLUE_OI.mix(0.25).filled();
            chart
                .draw_series(panel.bins.iter().filter_map(|b| {
                    let [a, c] = b.ci95?;
                    b.value?;
                    let half = 0.5 * b.width_um;
                    Some(Rectangle::new(
                        [(b.distance_um - half, a), (b.distance_um + half, c)],
                        band,
                    ))
                }))
                .map_err(draw_err)?
                .label("95 % interval of the bin")
                .legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 14, y + 5)], band));
            chart
                .draw_series(valued.iter().filter_map(|b| {
                    Some(Circle::new((b.distance_um, b.value?), 4, BLUE_OI.filled()))
                }))
                .map_err(draw_err)?
                .label("the bin's value (bins without one left blank)")
                .legend(|(x, y)| Circle::new((x + 7, y), 4, BLUE_OI.filled()));
            chart
                .configure_series_labels()
                .background_style(WHITE.mix(0.85))
                .border_style(RGBColor(150, 150, 150))
                .label_font(("sans-serif", 13))
                .position(SeriesLabelPosition::UpperRight)
                .draw()
                .map_err(draw_err)?;
        }
        root.present().map_err(draw_err)?;
    }
    RgbImage::from_raw(w, h, buf).ok_or_else(|| draw_err("buffer of the wrong size"))
}

/// The values the colour scale spans: from the smallest to the largest
/// value, widened about their middle to at least `typical_width` (the
/// cells' median 95 % interval width), so that cells whose values their
/// own intervals cannot tell apart are not drawn in colours from opposite
/// ends of the scale; without intervals, to at least 10 % of the middle.
pub fn colour_range(values: &[f64], typical_width: Option<f64>) -> Option<(f64, f64)> {
    let lo = values.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(lo.is_finite() && hi.is_finite()) {
        return None;
    }
    let mid = 0.5 * (lo + hi);
    let least = typical_width
        .filter(|w| w.is_finite() && *w > 0.0)
        .unwrap_or(0.1 * mid.abs().max(1e-12));
    if hi - lo >= least {
        Some((lo, hi))
    } else {
        Some((mid - 0.5 * least, mid + 0.5 * least))
    }
}

/// Tick labels with as many decimals as the span needs (three to four
/// significant steps), so that no label carries digits the scale cannot
/// show.
fn tick_label(v: f64, span: f64) -> String {
    let decimals = if span >= 20.0 {
        0
    } else if span >= 2.0 {
        1
    } else if span >= 0.2 {
        2
    } else {
        3
    };
    format!("{v:.decimals$}")
}

/// Opacity of a map's colour over the micrograph: 0.6, the colour read
/// against the colour bar while the structure still shows through.
const MAP_ALPHA: f32 = 0.6;
/// How much of the micrograph's contrast shows under the map: 0.45
/// (faint, so that its dark phase does not read as a colour of the scale).
const BASE_CONTRAST: f32 = 0.45;

/// A map over the micrograph: the micrograph faint, each cell with a value
/// coloured by it (viridis, perceptually uniform and readable by
/// colour-blind readers), cells without one left uncoloured, axes in um
/// from the image's top-left corner, a colour bar labelled with
/// `quantity` ("local SDAS (um)").
pub fn map_picture(
    base: &GrayImage,
    map: &Map,
    values: &[Option<f64>],
    intervals: &[Option<[f64; 2]>],
    quantity: &str,
    title: &str,
    um_per_px: f64,
) -> crate::Result<RgbImage> {
    register_fonts();
    let (iw, ih) = (base.width().max(1), base.height().max(1));
    let s = (820.0 / iw.max(ih) as f64).min(2.0);
    let (pw, ph) = (
        ((iw as f64 * s).round() as u32).max(1),
        ((ih as f64 * s).round() as u32).max(1),
    );
    let (left, top, bottom, right_gap, bar_w, foot) = (84u32, 44u32, 56u32, 24u32, 150u32, 24u32);
    let w = left + pw + right_gap + bar_w;
    let h = top + ph + bottom + foot;
    let (w_um, h_um) = (iw as f64 * um_per_px, ih as f64 * um_per_px);
    let valued: Vec<f64> = values
        .iter()
        .flatten()
        .copied()
        .filter(|v| v.is_finite())
        .collect();
    let widths: Vec<f64> = intervals
        .iter()
        .flatten()
        .map(|[a, b]| b - a)
        .filter(|w| w.is_finite() && *w > 0.0)
        .collect();
    let range = colour_range(&valued, crate::stats::median(&widths));
    if !axis_ok(0.0, w_um) || !axis_ok(0.0, h_um) {
        return Err(axis_err("position", 0.0, w_um.max(h_um)));
    }
    if let Some((a, b)) = range.filter(|&(a, b)| !axis_ok(a, b)) {
        return Err(axis_err("colour scale", a, b));
    }
    let mut buf = vec![255u8; (w * h * 3) as usize];
    let plot;
    {
        let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
        frame_text(&root, title, 12, h)?;
        let body = root.margin(0, foot, 0, 0);
        let (main, bar) = body.split_horizontally(left + pw + right_gap);
        let mut chart = ChartBuilder::on(&main)
            .margin_top(top)
            .margin_right(right_gap)
            .x_label_area_size(bottom)
            .y_label_area_size(left)
            .build_cartesian_2d(0.0..w_um, h_um..0.0)
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc("x from the image's left edge (um)")
            .y_desc("y from the top edge (um)")
            .x_label_formatter(&|v| tick_label(*v, w_um))
            .y_label_formatter(&|v| tick_label(*v, h_um))
            .label_style(("sans-serif", 13))
            .draw()
            .map_err(draw_err)?;
        plot = chart.plotting_area().get_pixel_range();
        let mut bar_chart = ChartBuilder::on(&bar)
            .margin_top(top)
            .margin_bottom(bottom)
            .margin_right(20)
            .y_label_area_size(90)
            .build_cartesian_2d(0.0..1.0, range.map_or(0.0..1.0, |(a, b)| a..b))
            .map_err(draw_err)?;
        let mut mesh = bar_chart.configure_mesh();
        let span = range.map_or(1.0, |(a, b)| b - a);
        let bar_label = |v: &f64| tick_label(*v, span);
        mesh.disable_mesh()
            .disable_x_axis()
            .y_desc(quantity)
            .y_label_formatter(&bar_label)
            .label_style(("sans-serif", 13));
        if range.is_none() {
            mesh.disable_y_axis();
        }
        mesh.draw().map_err(draw_err)?;
        match range {
            Some((lo, hi)) => {
                let n = 128;
                bar_chart
                    .draw_series((0..n).map(|k| {
                        let a = lo + (hi - lo) * k as f64 / n as f64;
                        let b = lo + (hi - lo) * (k + 1) as f64 / n as f64;
                        let c = ViridisRGB::get_color_normalized(0.5 * (a + b), lo, hi);
                        Rectangle::new([(0.0, a), (1.0, b)], c.filled())
                    }))
                    .map_err(draw_err)?;
            }
            None => {
                bar.draw(&Text::new(
                    "no cell has a value",
                    (4, (top + ph / 2) as i32),
                    ("sans-serif", 13).into_font(),
                ))
                .map_err(draw_err)?;
            }
        }
        bar.draw(&Text::new(
            "uncoloured: no value",
            (4, (top + ph + 20) as i32),
            ("sans-serif", 12).into_font(),
        ))
        .map_err(draw_err)?;
        root.present().map_err(draw_err)?;
    }
    // The micrograph, faint, and the cells' colours, in the plotting area.
    let (x0, x1) = (plot.0.start.max(0) as u32, plot.0.end.max(0) as u32);
    let (y0, y1) = (plot.1.start.max(0) as u32, plot.1.end.max(0) as u32);
    let (aw, ah) = ((x1 - x0).max(1), (y1 - y0).max(1));
    // Each cell's colour once; each picture column's and row's image
    // column, row and cell once.
    let colours: Vec<Option<[f32; 3]>> = (0..map.cells.len())
        .map(|k| {
            let (lo, hi) = range?;
            let v = values.get(k).copied().flatten()?;
            let c = ViridisRGB::get_color_normalized(v, lo, hi);
            Some([c.0 as f32, c.1 as f32, c.2 as f32])
        })
        .collect();
    let step = map.step_um;
    let axis = |n: u32,
                len_img: u32,
                len_um: f64,
                origin: f64,
                cells: usize|
     -> Vec<(u32, Option<usize>)> {
        (0..n)
            .map(|p| {
                let f = (p as f64 + 0.5) / n as f64;
                let i = ((f * len_img as f64) as u32).min(len_img - 1);
                let c = ((f * len_um - origin) / step).floor();
                let c = (step > 0.0 && c >= 0.0 && cells > 0).then(|| (c as usize).min(cells - 1));
                (i, c)
            })
            .collect()
    };
    let xs = axis(aw, iw, w_um, map.origin_um[0], map.columns);
    let ys = axis(ah, ih, h_um, map.origin_um[1], map.rows);
    for (py, &(iy, row)) in (y0..y1.min(h)).zip(&ys) {
        for (px, &(ix, col)) in (x0..x1.min(w)).zip(&xs) {
            let g = base.get_pixel(ix, iy).0[0] as f32;
            let faint = 255.0 - BASE_CONTRAST * (255.0 - g);
            let mut rgb = [faint; 3];
            if let (Some(r), Some(c)) = (row, col) {
                if let Some(Some(c)) = colours.get(r * map.columns + c) {
                    for (o, c) in rgb.iter_mut().zip(c) {
                        *o = MAP_ALPHA * c + (1.0 - MAP_ALPHA) * *o;
                    }
                }
            }
            let at = ((py * w + px) * 3) as usize;
            for (k, v) in rgb.iter().enumerate() {
                buf[at + k] = (v + 0.5).clamp(0.0, 255.0) as u8;
            }
        }
    }
    // A frame round the plotting area (the micrograph covered the axes'
    // first pixels).
    {
        let root = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
        root.draw(&Rectangle::new(
            [(x0 as i32 - 1, y0 as i32 - 1), (x1 as i32, y1 as i32)],
            BLACK.stroke_width(1),
        ))
        .map_err(draw_err)?;
        root.present().map_err(draw_err)?;
    }
    RgbImage::from_raw(w, h, buf).ok_or_else(|| draw_err("buffer of the wrong size"))
}

/// Encodes a picture as PNG marked as this tool's own (as the overlays,
/// [`crate::files::OWN_PICTURE_TEXT`], so that a later run over the folder
/// skips it) and writes it atomically. The fast deflate (fdeflate) is used:
/// these pictures are mostly flat colour, and the balanced level took a
/// sixth of a 4 MP image's whole measuring time for its three pictures
/// (perf, December 2026), for files a few per cent smaller.
pub fn write_png(path: &std::path::Path, img: &RgbImage) -> crate::Result<()> {
    crate::overlay::write_png_with(path, img, png::Compression::Fast)
}

/// The colour of a value on the maps' scale (viridis between `lo` and
/// `hi`), for tests and legends.
pub fn scale_colour(v: f64, lo: f64, hi: f64) -> [u8; 3] {
    let c = ViridisRGB::get_color_normalized(v, lo, hi);
    [c.0, c.1, c.2]
}

#[cfg(test)]
mod tests {
    use super::*;

    // Before the axis check each of these never returned (plotters' tick
    // search on an infinite span; found by reading, then reproduced).
    #[test]
    fn values_beyond_a_finite_axis_are_refused_not_drawn_forever() {
        let bins = |v: f64| {
            [
                BinPoint {
                    distance_um: 0.0,
                    width_um: 1.0,
                    value: Some(v),
                    ci95: Some([v * 0.5, v * 2.0]),
                },
                BinPoint {
                    distance_um: 1.0,
                    width_um: 1.0,
                    value: Some(1.0),
                    ci95: None,
                },
            ]
        };
        for (v, len) in [(1e308, 10.0), (f64::INFINITY, 10.0), (1.0, f64::INFINITY)] {
            let b = bins(v);
            let r = profile_picture(
                "t",
                len,
                &[Panel {
                    y_desc: "x",
                    bins: &b,
                }],
            );
            let e = r.err().map(|e| e.to_string()).unwrap_or_default();
            assert!(e.contains("not a finite range"), "{v} {len}: {e}");
        }
        // Large but finite ranges are still drawn.
        let b = bins(1e300);
        assert!(profile_picture(
            "t",
            10.0,
            &[Panel {
                y_desc: "x",
                bins: &b
            }]
        )
        .is_ok());
        assert!(axis_ok(0.0, 1e-300) && !axis_ok(-f64::MAX, f64::MAX) && !axis_ok(1.0, 1.0));
    }

    #[test]
    fn a_profile_plot_draws_bands_dots_and_leaves_empty_bins_blank() {
        let bins = [
            BinPoint {
                distance_um: 50.0,
                width_um: 100.0,
                value: Some(20.0),
                ci95: Some([18.0, 22.0]),
            },
            BinPoint {
                distance_um: 150.0,
                width_um: 100.0,
                value: None,
                ci95: None,
            },
            BinPoint {
                distance_um: 250.0,
                width_um: 100.0,
                value: Some(30.0),
                ci95: Some([27.0, 33.0]),
            },
        ];
        let img = profile_picture(
            "test",
            300.0,
            &[Panel {
                y_desc: "SDAS (um)",
                bins: &bins,
            }],
        )
        .unwrap();
        // The dots are the Okabe-Ito blue; the empty bin's column holds
        // none of it.
        let blue = |p: &image::Rgb<u8>| p.0 == [0, 114, 178];
        let n_blue = img.pixels().filter(|p| blue(p)).count();
        assert!(n_blue > 20, "{n_blue}");
        // Text was set (dark pixels other than the axes' lines).
        let dark = img.pixels().filter(|p| p.0.iter().all(|&c| c < 80)).count();
        assert!(dark > 500, "{dark}");
    }

    #[test]
    fn the_colour_scale_never_separates_values_their_intervals_cannot() {
        // Two cells 1.6 um apart with 95 % intervals 8 um wide are drawn
        // on a scale 8 um wide about their middle; cells farther apart than
        // the intervals keep the scale of their own range.
        let (lo, hi) = colour_range(&[27.7, 29.3], Some(8.0)).unwrap();
        assert!((lo - 24.5).abs() < 1e-12 && (hi - 32.5).abs() < 1e-12);
        assert_eq!(colour_range(&[20.0, 40.0], Some(8.0)), Some((20.0, 40.0)));
        let (lo, hi) = colour_range(&[30.0, 30.0], None).unwrap();
        assert!((lo - 28.5).abs() < 1e-12 && (hi - 31.5).abs() < 1e-12);
        assert_eq!(colour_range(&[], Some(1.0)), None);
    }

    #[test]
    fn the_scale_runs_from_dark_purple_to_yellow() {
        // Viridis' ends as matplotlib ships the colormap (van der Walt and
        // Smith): #440154 and #fde725; plotters' copy within one level.
        let near = |a: [u8; 3], b: [u8; 3]| a.iter().zip(b).all(|(x, y)| x.abs_diff(y) <= 1);
        assert!(near(scale_colour(0.0, 0.0, 1.0), [0x44, 0x01, 0x54]));
        assert!(near(scale_colour(1.0, 0.0, 1.0), [0xfd, 0xe7, 0x25]));
        // Lightness rises along the scale (perceptually ordered): the
        // middle is lighter than the start and darker than the end.
        let lum = |c: [u8; 3]| 0.2126 * c[0] as f64 + 0.7152 * c[1] as f64 + 0.0722 * c[2] as f64;
        let (a, m, b) = (
            lum(scale_colour(0.0, 0.0, 1.0)),
            lum(scale_colour(0.5, 0.0, 1.0)),
            lum(scale_colour(1.0, 0.0, 1.0)),
        );
        assert!(a < m && m < b, "{a} {m} {b}");
    }
}
