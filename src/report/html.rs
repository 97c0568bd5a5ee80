//! One self-contained HTML page per batch (`measure --html FILE`): the
//! run's header with the parameters to repeat it and the caution, a table
//! of all images, a panel per image (its picture, value and interval, each
//! method's value, a histogram of the local spacings, the decision,
//! cooling rate and solidification time, the warnings in words), and the
//! files that could not be measured, with the reason.
//!
//! The page is built from the report itself (its JSON form), so that it
//! says exactly what the report says; pictures are embedded as JPEG data
//! (no network, readable offline) and the histograms are inline SVG drawn
//! with `plotters`. Print styles set A4 pages with one image panel kept
//! whole on a page where it fits.

use super::Report;
use base64::Engine;
use serde_json::Value;
use std::collections::BTreeMap;
use std::fmt::Write as _;

/// Escapes text for HTML content and attribute values.
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// A number as the report gives it (already rounded there), or a dash.
fn num(v: &Value) -> String {
    match v.as_f64() {
        Some(x) => format!("{x}"),
        None => "&ndash;".into(),
    }
}

/// "lo to hi" of a two-number array, or a dash.
fn interval(v: &Value) -> String {
    match (
        v.get(0).and_then(Value::as_f64),
        v.get(1).and_then(Value::as_f64),
    ) {
        (Some(a), Some(b)) => format!("{a} to {b}"),
        _ => "&ndash;".into(),
    }
}

fn text(v: &Value) -> String {
    v.as_str().map(esc).unwrap_or_default()
}

/// The class and words of a decision.
fn decision(v: &Value) -> (&'static str, &'static str) {
    match v.as_str() {
        Some("pass") => ("pass", "PASS"),
        Some("fail") => ("fail", "FAIL"),
        Some("indeterminate") => ("indet", "INDETERMINATE"),
        _ => ("none", "not assessed"),
    }
}

const STYLE: &str = r#"
body{font-family:DejaVu Sans,Arial,Helvetica,sans-serif;font-size:10.5pt;color:#111;max-width:190mm;margin:8mm auto;}
h1{font-size:16pt;margin:0 0 4pt 0} h2{font-size:12.5pt;margin:10pt 0 4pt 0;word-break:break-all}
table{border-collapse:collapse;margin:4pt 0;width:100%} td,th{border:1px solid #bbb;padding:2pt 4pt;text-align:left;vertical-align:top;font-size:9.5pt}
th{background:#eee} .caution{border:2px solid #d55e00;padding:4pt 6pt;margin:6pt 0;font-weight:bold}
.pass{color:#fff;background:#009e73;padding:1pt 4pt} .fail{color:#fff;background:#d55e00;padding:1pt 4pt}
.indet{color:#000;background:#f0e442;padding:1pt 4pt} .none{color:#000;background:#ddd;padding:1pt 4pt}
section.image{border-top:2px solid #0072b2;margin-top:10pt;page-break-inside:avoid;break-inside:avoid}
img.picture{max-width:100%;height:auto;border:1px solid #888} .novalue{font-weight:bold;color:#d55e00}
dl{display:grid;grid-template-columns:max-content auto;gap:1pt 8pt;margin:4pt 0} dt{font-weight:bold} dd{margin:0}
pre{white-space:pre-wrap;font-size:8pt;background:#f6f6f6;padding:4pt} ul{margin:2pt 0 2pt 14pt;padding:0}
@page{size:A4;margin:12mm} @media print{body{margin:0;max-width:none} a{color:inherit;text-decoration:none}}
"#;

/// Where a picture written beside the page is linked from: a path relative
/// to the page's folder when the picture lies under it, else a file URL.
fn picture_link(picture: &str, page_dir: Option<&std::path::Path>) -> String {
    let abs = |p: &std::path::Path| std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf());
    let pic = abs(std::path::Path::new(picture));
    let href = match page_dir.map(abs) {
        Some(dir) => match pic.strip_prefix(&dir) {
            Ok(rel) => rel.to_string_lossy().replace('\\', "/"),
            Err(_) => format!("file://{}", pic.to_string_lossy().replace('\\', "/")),
        },
        None => format!("file://{}", pic.to_string_lossy().replace('\\', "/")),
    };
    // Characters a URL must not carry bare.
    href.replace('%', "%25")
        .replace(' ', "%20")
        .replace('#', "%23")
        .replace('?', "%3F")
}

/// The local spacings (um) that entered each method's value.
fn locals(image: &Value) -> Vec<(&'static str, Vec<f64>)> {
    let take = |method: &str, list: &str| -> Vec<f64> {
        image["methods"][method][list]
            .as_array()
            .map(|a| {
                a.iter()
                    .filter(|l| l.get("used").and_then(Value::as_bool).unwrap_or(true))
                    .filter_map(|l| l["sdas_um"].as_f64())
                    .filter(|x| x.is_finite() && *x > 0.0)
                    .collect()
            })
            .unwrap_or_default()
    };
    vec![
        ("FFT tiles", take("fft", "tiles")),
        ("intercept lines", take("intercept", "lines")),
        ("centre chains", take("centres", "chains")),
    ]
}

/// A histogram of the local spacings as inline SVG, with the value, its
/// interval and the limit marked; None when there is nothing to show.
fn histogram(image: &Value) -> Option<String> {
    use plotters::prelude::*;
    // plotters sets text only in fonts registered by name (its ab_glyph
    // feature): the bundled one, once per process.
    crate::plots::register_fonts();
    let sets = locals(image);
    let all: Vec<f64> = sets.iter().flat_map(|(_, v)| v.iter().copied()).collect();
    if all.len() < 3 {
        return None;
    }
    let value = image["sdas_um"]["value"].as_f64();
    let ci = [
        image["sdas_um"]["ci95"][0].as_f64(),
        image["sdas_um"]["ci95"][1].as_f64(),
    ];
    let limit = image["acceptance"]["limit_um"].as_f64();
    // The axis holds the middle 98 % of the values and the marks; the few
    // beyond are counted in the end bins.
    let mut sorted = all.clone();
    sorted.sort_by(f64::total_cmp);
    let q =
        |p: f64| sorted[((p * (sorted.len() - 1) as f64).round() as usize).min(sorted.len() - 1)];
    let mut lo = q(0.01);
    let mut hi = q(0.99);
    for m in [value, ci[0], ci[1], limit].into_iter().flatten() {
        lo = lo.min(m);
        hi = hi.max(m);
    }
    if hi.partial_cmp(&lo) != Some(std::cmp::Ordering::Greater) {
        hi = lo * 1.1 + 1.0;
    }
    let pad = 0.05 * (hi - lo);
    let (lo, hi) = ((lo - pad).max(0.0), hi + pad);
    // No histogram of values beyond a finite axis (a damaged or crafted
    // report given to `merge`): plotters would not end.
    if !crate::plots::axis_ok(lo, hi) {
        return None;
    }
    let bins = 30usize;
    let width = (hi - lo) / bins as f64;
    let bin = |x: f64| (((x - lo) / width).floor().max(0.0) as usize).min(bins - 1);
    let counts: Vec<Vec<u32>> = sets
        .iter()
        .map(|(_, v)| {
            let mut c = vec![0u32; bins];
            for &x in v {
                c[bin(x)] += 1;
            }
            c
        })
        .collect();
    let top = (0..bins)
        .map(|b| counts.iter().map(|c| c[b]).sum::<u32>())
        .max()
        .unwrap_or(1)
        .max(1);
    let colours = [
        RGBColor(0, 114, 178),
        RGBColor(0, 158, 115),
        RGBColor(204, 121, 167),
    ];
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, (640, 240)).into_drawing_area();
        root.fill(&WHITE).ok()?;
        let mut chart = ChartBuilder::on(&root)
            .margin(8)
            .x_label_area_size(36)
            .y_label_area_size(44)
            .build_cartesian_2d(lo..hi, 0u32..(top + top / 5 + 1))
            .ok()?;
        chart
            .configure_mesh()
            .disable_mesh()
            .x_desc("local SDAS (um)")
            .y_desc("count")
            .draw()
            .ok()?;
        // Stacked bars, one colour per kind of local measurement.
        for b in 0..bins {
            let mut base = 0u32;
            for (k, c) in counts.iter().enumerate() {
                if c[b] == 0 {
                    continue;
                }
                let x0 = lo + b as f64 * width;
                chart
                    .draw_series(std::iter::once(Rectangle::new(
                        [(x0, base), (x0 + width, base + c[b])],
                        colours[k].filled(),
                    )))
                    .ok()?;
                base += c[b];
            }
        }
        for (k, (name, v)) in sets.iter().enumerate() {
            if v.is_empty() {
                continue;
            }
            let colour = colours[k];
            chart
                .draw_series(std::iter::empty::<Rectangle<(f64, u32)>>())
                .ok()?
                .label(format!("{name} ({})", v.len()))
                .legend(move |(x, y)| {
                    Rectangle::new([(x, y - 4), (x + 10, y + 4)], colour.filled())
                });
        }
        let ymax = top + top / 5 + 1;
        // Vertical marks: the value, the interval's two ends (one legend
        // entry), the limit.
        let grey = RGBColor(110, 110, 110).stroke_width(1);
        let mut marks: Vec<(f64, ShapeStyle, Option<String>)> = Vec::new();
        if let Some(v) = value {
            marks.push((v, BLACK.stroke_width(2), Some(format!("SDAS {v} um"))));
        }
        if let (Some(a), Some(b)) = (ci[0], ci[1]) {
            marks.push((a, grey, Some("95 % interval".into())));
            marks.push((b, grey, None));
        }
        if let Some(l) = limit {
            marks.push((
                l,
                RGBColor(213, 94, 0).stroke_width(2),
                Some(format!("limit {l} um")),
            ));
        }
        for (x, style, name) in marks {
            let drawn = chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(x, 0), (x, ymax)],
                    style,
                )))
                .ok()?;
            if let Some(name) = name {
                drawn
                    .label(name)
                    .legend(move |(lx, ly)| PathElement::new(vec![(lx, ly), (lx + 12, ly)], style));
            }
        }
        chart
            .configure_series_labels()
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .position(SeriesLabelPosition::UpperRight)
            .draw()
            .ok()?;
        root.present().ok()?;
    }
    Some(svg)
}

/// The page. `pictures` holds the JPEG copy of each image's picture by the
/// image's `file` as the report names it; `figures` the JPEG copies of the
/// maps and profile plots written beside the report, by their paths as the
/// report names them; `page_dir` is the folder the page is written to (for
/// links to full-size pictures written beside it).
pub fn page(
    report: &Report,
    pictures: &BTreeMap<String, Vec<u8>>,
    figures: &BTreeMap<String, Vec<u8>>,
    page_dir: Option<&std::path::Path>,
) -> crate::Result<String> {
    let figure = |path: &Value, caption: &str| -> String {
        match path.as_str().and_then(|p| Some((p, figures.get(p)?))) {
            Some((p, jpeg)) => format!(
                "<figure><a href=\"{}\"><img class=\"picture\" alt=\"{}\" src=\"data:image/jpeg;base64,{}\"></a><figcaption>{}</figcaption></figure>",
                esc(&picture_link(p, page_dir)),
                esc(caption),
                base64::engine::general_purpose::STANDARD.encode(jpeg),
                esc(caption)
            ),
            None => String::new(),
        }
    };
    let r = serde_json::to_value(report).map_err(|e| crate::Error::Value {
        reason: format!("the report cannot be put on a page: {e}"),
    })?;
    let mut h = String::with_capacity(64 * 1024);
    let caution = text(&r["caution"]);
    let summary = &r["summary"];
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>SDAS measurement report, {}</title><style>{STYLE}</style></head><body>\n",
        text(&r["created_utc"])
    );
    // Header.
    let _ = write!(
        h,
        "<header><h1>SDAS measurement report</h1><p class=\"caution\">{caution}</p><dl>"
    );
    let _ = write!(
        h,
        "<dt>Run</dt><dd>{}</dd><dt>Tool</dt><dd>{} {}</dd>",
        text(&r["created_utc"]),
        text(&r["tool"]["name"]),
        text(&r["tool"]["version"])
    );
    let p = &r["parameters"];
    let inputs: Vec<String> = p["inputs"]
        .as_array()
        .map(|a| a.iter().map(text).collect())
        .unwrap_or_default();
    let _ = write!(h, "<dt>Inputs</dt><dd>{}</dd>", inputs.join(", "));
    let cal = if let Some(u) = p["um_per_px"].as_f64() {
        format!("given: {u} um/px")
    } else if let Some(b) = p["scale_bar_um"].as_f64() {
        format!("from each image's scale bar of {b} um")
    } else if p["scale_bar_auto"].as_bool() == Some(true) {
        "from each image's scale bar, its length read from its label".into()
    } else if p["profile"].is_object() {
        format!("profile {}", text(&p["profile"]["name"]))
    } else {
        "from each image (scale bar or file tags)".into()
    };
    let _ = write!(h, "<dt>Calibration</dt><dd>{cal}</dd>");
    let methods: Vec<String> = p["methods"]
        .as_array()
        .map(|a| a.iter().map(text).collect())
        .unwrap_or_default();
    let _ = write!(h, "<dt>Methods</dt><dd>{}</dd>", methods.join(", "));
    if p["spec"].is_object() {
        let _ = write!(
            h,
            "<dt>Specification</dt><dd>{} (rule: {})</dd>",
            text(&p["spec"]["title"]),
            text(&p["spec"]["rule"])
        );
    }
    if let Some(acc) = summary.get("acceptance").filter(|a| a.is_object()) {
        let (class, words) = decision(&acc["verdict"]);
        let _ = write!(
            h,
            "<dt>Batch verdict</dt><dd><span class=\"{class}\">{words}</span> ({} pass, {} fail, {} indeterminate, {} not assessed)</dd>",
            num(&acc["pass"]), num(&acc["fail"]), num(&acc["indeterminate"]), num(&acc["not_assessed"])
        );
    }
    let _ = write!(
        h,
        "<dt>Images</dt><dd>{} in all: {} with a value, {} without, {} unreadable, {} files skipped</dd>",
        num(&summary["images"]),
        num(&summary["measured"]),
        num(&summary["without_value"]),
        num(&summary["failed"]),
        num(&summary["skipped"])
    );
    if summary["partial"].as_bool() == Some(true) {
        let _ = write!(h, "<dt>Partial</dt><dd class=\"novalue\">The run was interrupted: this page holds only part of what was asked.</dd>");
    }
    let params = serde_json::to_string_pretty(p).unwrap_or_default();
    let _ = writeln!(
        h,
        "</dl><details><summary>Parameters to repeat the run</summary><pre>{}</pre></details></header>",
        esc(&params)
    );

    // The zones of the spec, each with its verdict (and its pooled mean).
    if let Some(zones) = summary["acceptance"]["zones"]
        .as_array()
        .filter(|z| !z.is_empty())
    {
        h.push_str("<h2>Zones</h2><table><tr><th>Zone</th><th>Limit (um)</th><th>Images</th><th>Pass</th><th>Fail</th><th>Indeterminate</th><th>Verdict</th><th>Pooled mean (um)</th></tr>");
        for z in zones {
            let (class, words) = decision(&z["verdict"]);
            let pooled = if z["pooled"].is_object() {
                let p = &z["pooled"];
                format!(
                    "{} (95 % interval {}); {}",
                    num(&p["value_um"]),
                    interval(&p["ci95_um"]),
                    text(&p["reason"])
                )
            } else {
                "&ndash;".into()
            };
            let _ = write!(
                h,
                "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td><td><span class=\"{class}\">{words}</span></td><td>{pooled}</td></tr>",
                z["zone"].as_str().map(esc).unwrap_or_else(|| "general limit".into()),
                num(&z["limit_um"]),
                num(&z["images"]),
                num(&z["pass"]),
                num(&z["fail"]),
                num(&z["indeterminate"])
            );
        }
        h.push_str("</table>\n");
    }

    // Table of all images.
    let images = r["images"].as_array().cloned().unwrap_or_default();
    let _ = write!(
        h,
        "<h2>All images</h2><table id=\"images\"><tr><th>#</th><th>File</th><th>SDAS (um)</th><th>95 % interval (um)</th><th>n</th><th>Methods</th><th>Calibration</th><th>Decision</th></tr>"
    );
    for (k, im) in images.iter().enumerate() {
        let s = &im["sdas_um"];
        let (class, words) = decision(&im["acceptance"]["decision"]);
        let value = if s["value"].is_number() {
            num(&s["value"])
        } else {
            "<span class=\"novalue\">no value</span>".into()
        };
        let methods: Vec<String> = s["methods"]
            .as_array()
            .map(|a| a.iter().map(text).collect())
            .unwrap_or_default();
        let cal = match im["calibration"]["um_per_px"].as_f64() {
            Some(u) => format!("{u} um/px ({})", text(&im["calibration"]["source"])),
            None => "&ndash;".into(),
        };
        let _ = write!(
            h,
            "<tr><td><a href=\"#image-{k}\">{}</a></td><td>{}</td><td>{value}</td><td>{}</td><td>{}</td><td>{}</td><td>{cal}</td><td>{}</td></tr>",
            k + 1,
            text(&im["file"]),
            interval(&s["ci95"]),
            num(&s["n"]),
            methods.join(", "),
            if im["acceptance"].is_object() { format!("<span class=\"{class}\">{words}</span>") } else { "&ndash;".into() }
        );
    }
    h.push_str("</table>\n");

    // A panel per image.
    for (k, im) in images.iter().enumerate() {
        let file = im["file"].as_str().unwrap_or_default();
        let _ = write!(
            h,
            "<section class=\"image\" id=\"image-{k}\"><h2>{}. {}</h2>",
            k + 1,
            esc(file)
        );
        if let Some(e) = im["error"].as_str() {
            let _ = writeln!(
                h,
                "<p class=\"novalue\">Not measured: {}</p></section>",
                esc(e)
            );
            continue;
        }
        match pictures.get(file) {
            Some(jpeg) => {
                let data = base64::engine::general_purpose::STANDARD.encode(jpeg);
                let img = format!(
                    "<img class=\"picture\" alt=\"picture of what was measured in {}\" src=\"data:image/jpeg;base64,{data}\">",
                    esc(file)
                );
                match im["overlay"].as_str() {
                    Some(full) => {
                        let _ = write!(
                            h,
                            "<figure><a href=\"{}\">{img}</a><figcaption>Open the picture for the full size ({}).</figcaption></figure>",
                            esc(&picture_link(full, page_dir)),
                            esc(full)
                        );
                    }
                    None => {
                        let _ = write!(h, "<figure>{img}</figure>");
                    }
                }
            }
            None => h.push_str("<p>No picture of this image (it was taken over from an earlier run's journal, or its picture could not be made).</p>"),
        }
        let s = &im["sdas_um"];
        h.push_str("<dl>");
        if s["value"].is_number() {
            let _ = write!(
                h,
                "<dt>SDAS</dt><dd><b>{} um</b>, 95 % interval {} um, n = {} (independent: {})</dd>",
                num(&s["value"]),
                interval(&s["ci95"]),
                num(&s["n"]),
                num(&s["n_eff"])
            );
        } else {
            let _ = write!(
                h,
                "<dt>SDAS</dt><dd class=\"novalue\">No value: {}</dd>",
                text(&s["reason"])
            );
        }
        if let Some(u) = s["uncertainty"].as_object() {
            let g = |k: &str| u.get(k).map(num).unwrap_or_default();
            let _ = write!(
                h,
                "<dt>Uncertainty</dt><dd>standard uncertainties: statistical {} um, calibration {} um, method bias {} um; combined {} um, coverage factor {}</dd>",
                g("statistical_um"), g("calibration_um"), g("method_bias_um"), g("combined_standard_um"), g("coverage_factor")
            );
        }
        if let Some(c) = im["calibration"].as_object() {
            let _ = write!(
                h,
                "<dt>Calibration</dt><dd>{} um/px, from {}</dd>",
                c.get("um_per_px").map(num).unwrap_or_default(),
                c.get("source").map(text).unwrap_or_default()
            );
        }
        h.push_str("</dl>");
        // Each method.
        h.push_str("<table><tr><th>Method</th><th>Value (um)</th><th>95 % interval (um)</th><th>In the value</th><th>Note</th></tr>");
        let used: Vec<&str> = s["methods"]
            .as_array()
            .map(|a| a.iter().filter_map(Value::as_str).collect())
            .unwrap_or_default();
        let left_out: BTreeMap<&str, &str> = s["left_out"]
            .as_array()
            .map(|a| {
                a.iter()
                    .filter_map(|l| Some((l["method"].as_str()?, l["reason"].as_str()?)))
                    .collect()
            })
            .unwrap_or_default();
        // In the run's method order; each value rounded as the image's own
        // is, to two significant digits of its interval's half-width.
        let order: Vec<&str> = r["parameters"]["methods"]
            .as_array()
            .map(|a| a.iter().filter_map(Value::as_str).collect())
            .unwrap_or_default();
        for name in order {
            let m = &im["methods"][name];
            if !m.is_object() {
                continue;
            }
            let note = match (left_out.get(name), m["reason"].as_str()) {
                (Some(why), _) => format!("left out: {}", esc(why)),
                (None, Some(why)) => esc(why),
                _ => String::new(),
            };
            let (value, ci) = match (
                m["value"].as_f64(),
                m["ci95"][0].as_f64(),
                m["ci95"][1].as_f64(),
            ) {
                (Some(v), Some(a), Some(b)) => {
                    let d = super::digits_for_uncertainty((b - a) / 2.0);
                    (
                        format!("{}", super::round(v, d)),
                        format!("{} to {}", super::round(a, d), super::round(b, d)),
                    )
                }
                _ => ("&ndash;".to_string(), "&ndash;".to_string()),
            };
            let _ = write!(
                h,
                "<tr><td>{}</td><td>{value}</td><td>{ci}</td><td>{}</td><td>{note}</td></tr>",
                esc(name),
                if used.contains(&name) { "yes" } else { "no" }
            );
        }
        h.push_str("</table>");
        if let Some(svg) = histogram(im) {
            let _ = write!(h, "<figure class=\"histogram\">{svg}<figcaption>Local spacings that entered each method's value, with the image's SDAS, its 95 % interval and the limit.</figcaption></figure>");
        }
        if let Some(a) = im["acceptance"].as_object() {
            let (class, words) = decision(&im["acceptance"]["decision"]);
            let _ = write!(
                h,
                "<dl><dt>Decision</dt><dd><span class=\"{class}\">{words}</span> {}</dd><dt>Zone and limit</dt><dd>{} (limit {} um, statistic {}, rule {})</dd></dl>",
                a.get("reason").map(text).unwrap_or_default(),
                a.get("zone").map(text).filter(|z| !z.is_empty()).unwrap_or_else(|| "general".into()),
                a.get("limit_um").map(num).unwrap_or_default(),
                a.get("statistic").map(text).unwrap_or_default(),
                a.get("rule").map(text).unwrap_or_default()
            );
        }
        if let Some(it) = im["interpretation"].as_object() {
            let q = |key: &str, unit: &str| -> String {
                let v = &it.get(key).cloned().unwrap_or(Value::Null);
                if v["value"].is_number() {
                    let scatter = if v["ci95_with_scatter"].is_array() {
                        format!(
                            "; with the law's scatter {}",
                            interval(&v["ci95_with_scatter"])
                        )
                    } else {
                        "; the law's own scatter is not included".into()
                    };
                    format!(
                        "{} {unit} (95 % interval {}{scatter})",
                        num(&v["value"]),
                        interval(&v["ci95"])
                    )
                } else {
                    format!("no value: {}", text(&v["reason"]))
                }
            };
            let c = &it.get("correlation").cloned().unwrap_or(Value::Null);
            let _ = write!(
                h,
                "<dl><dt>Cooling rate</dt><dd>{}</dd><dt>Solidification time</dt><dd>{}</dd><dt>Correlation</dt><dd>{}: {} ({})</dd></dl>",
                q("cooling_rate_K_per_s", "K/s"),
                q("solidification_time_s", "s"),
                text(&c["id"]),
                text(&c["law"]),
                text(&c["source"])
            );
        }
        if let Some(points) = im["at"].as_array().filter(|a| !a.is_empty()) {
            h.push_str("<p>SDAS at points asked for (--at):</p><table><tr><th>Point (um)</th><th>Radius (um)</th><th>SDAS (um)</th><th>95 % interval (um)</th><th>Note</th></tr>");
            for a in points {
                let _ = write!(
                    h,
                    "<tr><td>{} ({}, {})</td><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                    text(&a["given"]),
                    num(&a["x_um"]),
                    num(&a["y_um"]),
                    num(&a["radius_um"]),
                    num(&a["value_um"]),
                    interval(&a["ci95_um"]),
                    text(&a["reason"])
                );
            }
            h.push_str("</table>");
        }
        if let Some(lines) = im["profile"].as_array().filter(|a| !a.is_empty()) {
            for l in lines {
                let _ = write!(
                    h,
                    "<p>SDAS along {} (--along), bins of {} um:</p><table><tr><th>Distance (um)</th><th>SDAS (um)</th><th>95 % interval (um)</th><th>Note</th></tr>",
                    text(&l["given"]),
                    num(&l["bin_um"])
                );
                for b in l["bins"].as_array().into_iter().flatten() {
                    let _ = write!(
                        h,
                        "<tr><td>{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
                        num(&b["distance_um"]),
                        num(&b["value_um"]),
                        interval(&b["ci95_um"]),
                        text(&b["reason"])
                    );
                }
                h.push_str("</table>");
            }
        }
        if let Some(class) = im["morphology"]["class"].as_str() {
            let dir = match im["morphology"]["growth_direction_deg"].as_f64() {
                Some(d) => format!(", growth direction {d} deg"),
                None => String::new(),
            };
            let _ = write!(h, "<p>Morphology: {}{dir}.</p>", esc(class));
        }
        h.push_str(&figure(
            &im["map"]["picture_sdas"],
            "Local SDAS over the micrograph (uncoloured: no value).",
        ));
        h.push_str(&figure(
            &im["map"]["picture_solidification_time"],
            "Local solidification time over the micrograph (uncoloured: no value).",
        ));
        for p in im["profile"].as_array().into_iter().flatten() {
            h.push_str(&figure(
                &p["plot"],
                "SDAS along the line, each bin with its 95 % interval.",
            ));
        }
        if let Some(ws) = im["warnings"].as_array().filter(|w| !w.is_empty()) {
            h.push_str("<p>Warnings:</p><ul>");
            for w in ws {
                let _ = write!(h, "<li>{}</li>", text(w));
            }
            h.push_str("</ul>");
        }
        h.push_str("</section>\n");
    }

    // What could not be measured.
    let failed: Vec<&Value> = images
        .iter()
        .filter(|im| im["error"].is_string() || !im["sdas_um"]["value"].is_number())
        .collect();
    let skipped = r["skipped"].as_array().cloned().unwrap_or_default();
    if !failed.is_empty() || !skipped.is_empty() {
        h.push_str("<section><h2>Not measured</h2><table><tr><th>File</th><th>Reason</th></tr>");
        for im in failed {
            let why = im["error"]
                .as_str()
                .or(im["sdas_um"]["reason"].as_str())
                .unwrap_or("");
            let _ = write!(
                h,
                "<tr><td>{}</td><td>{}</td></tr>",
                text(&im["file"]),
                esc(why)
            );
        }
        for s in &skipped {
            let _ = write!(
                h,
                "<tr><td>{}</td><td>skipped: {}</td></tr>",
                text(&s["file"]),
                text(&s["reason"])
            );
        }
        h.push_str("</table></section>\n");
    }
    let _ = writeln!(
        h,
        "<footer><p class=\"caution\">{caution}</p></footer></body></html>"
    );
    Ok(h)
}

#[cfg(test)]
mod tests {
    use super::*;

    // A crafted report given to `merge --html`: local spacings near
    // f64::MAX (JSON holds them) gave an axis whose padded span is
    // infinite, on which plotters never returned.
    #[test]
    fn a_histogram_of_values_near_the_largest_float_is_left_out() {
        let image = serde_json::json!({
            "sdas_um": {"value": 1e308, "ci95": [1.0, 1.79e308]},
            "methods": {"fft": {"tiles": [
                {"sdas_um": 1.0}, {"sdas_um": 1e308}, {"sdas_um": 1.79e308}
            ]}}
        });
        assert_eq!(histogram(&image), None);
        let fine = serde_json::json!({
            "sdas_um": {"value": 20.0, "ci95": [19.0, 21.0]},
            "methods": {"fft": {"tiles": [
                {"sdas_um": 19.0}, {"sdas_um": 20.0}, {"sdas_um": 21.0}
            ]}}
        });
        assert!(histogram(&fine).is_some_and(|svg| svg.contains("<svg")));
    }

    #[test]
    fn text_is_escaped() {
        assert_eq!(esc("a<b>&\"c'"), "a&lt;b&gt;&amp;&quot;c&#39;");
    }

    #[test]
    fn links_are_relative_under_the_page_and_escaped() {
        let dir = std::env::temp_dir();
        let pic = dir.join("pics").join("a b#1.png");
        let link = picture_link(&pic.to_string_lossy(), Some(&dir));
        assert_eq!(link, "pics/a%20b%231.png");
    }
}
