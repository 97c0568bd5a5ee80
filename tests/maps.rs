//! Where in the casting, drawn and tabled: the map of local SDAS
//! (`--map`), the profile plot (`--along`) and the point table
//! (`--points`).

mod common;
use common::*;

/// The map on graded fields (`synth --gradient 1:1.6:4`, clean and
/// etched, fresh seed 9413, three fields each; seeds 9411 and 9412 draw
/// fields too narrow for four bands and are refused by the generator): every cell with a value
/// reads a spacing the generator drew within its neighbourhood (between
/// the finest and coarsest band its disc reaches, widened by 10 %, the
/// issue's tolerance for a profile's slope), or its interval covers one of
/// them; a cell without a value says why. The expectation follows from the
/// generator's truth (`bands`). Figures are printed (--nocapture).
#[test]
fn map_cells_read_the_bands_their_neighbourhood_holds() {
    use armspace::pipeline::{measure_file, MeasureOptions};
    use armspace::synth::{write_set_graded, Gradient, Style};
    use armspace::units::UmPerPx;
    let mut lines = Vec::new();
    let (mut valued, mut cells) = (0, 0);
    for style in [Style::Clean, Style::Etched] {
        let dir = tempfile::tempdir().unwrap();
        let g = Gradient::parse("1:1.6:4").unwrap();
        let truths = write_set_graded(dir.path(), 9413, 3, Some(style), Some(g)).unwrap();
        for t in truths {
            let bands = t.bands.clone().unwrap();
            let opts = MeasureOptions {
                points: true,
                ..MeasureOptions::manual(UmPerPx::new(t.um_per_px).unwrap())
            };
            let r = measure_file(&dir.path().join(&t.file), &opts);
            let Some(m) = r.map.as_ref() else {
                panic!("{}: no map with points asked for", t.file)
            };
            if let Some(why) = &m.reason {
                lines.push(format!("{style:?} {}: no map: {why}", t.file));
                continue;
            }
            assert_eq!(m.cells.len(), m.columns * m.rows);
            let w_um = t.spec.width as f64 * t.um_per_px;
            let h_um = t.spec.height as f64 * t.um_per_px;
            assert!((m.columns as f64 - 1.0) * m.step_um < w_um);
            assert!(m.columns as f64 * m.step_um >= w_um - 1e-9);
            assert!(m.rows as f64 * m.step_um >= h_um - 1e-9);
            for c in &m.cells {
                cells += 1;
                match (c.value, c.ci95) {
                    (Some(v), Some([lo, hi])) => {
                        valued += 1;
                        // The bands the cell's disc reaches.
                        let reached: Vec<f64> = bands
                            .iter()
                            .filter(|b| {
                                let (x0, x1) =
                                    (b.x0_px as f64 * t.um_per_px, b.x1_px as f64 * t.um_per_px);
                                c.x_um + m.radius_um > x0 && c.x_um - m.radius_um < x1
                            })
                            .map(|b| b.sdas_um)
                            .collect();
                        let (min, max) = reached
                            .iter()
                            .fold((f64::INFINITY, 0.0f64), |(a, b), &s| (a.min(s), b.max(s)));
                        let inside = v.0 >= 0.9 * min && v.0 <= 1.1 * max;
                        let covers = reached.iter().any(|&s| lo.0 <= s && s <= hi.0);
                        lines.push(format!(
                            "{style:?} {} cell ({:.0}, {:.0}): {:.2} um ({:.2}..{:.2}), bands {reached:.2?}",
                            t.file, c.x_um, c.y_um, v.0, lo.0, hi.0
                        ));
                        assert!(
                            inside || covers,
                            "{style:?} {} cell ({:.0}, {:.0}): {v:?} outside the bands {reached:?} it reaches",
                            t.file,
                            c.x_um,
                            c.y_um
                        );
                    }
                    _ => assert!(c.reason.is_some(), "{} ({}, {})", t.file, c.x_um, c.y_um),
                }
            }
            // The point table holds every local measurement of the image.
            let n: usize = r.methods.iter().map(|o| o.local.len()).sum();
            assert_eq!(r.locals.len(), n);
            let csv = armspace::report::points_csv(std::slice::from_ref(&r), 6.0).unwrap();
            let mut rd = csv::Reader::from_reader(csv.as_bytes());
            assert_eq!(
                rd.headers().unwrap().iter().collect::<Vec<_>>(),
                armspace::report::POINT_COLUMNS.to_vec()
            );
            let rows: Vec<csv::StringRecord> = rd.records().map(|r| r.unwrap()).collect();
            assert_eq!(rows.len(), n);
            for row in &rows {
                // A row has a local value with both bounds, or a reason.
                let has = !row[6].is_empty();
                assert_eq!(has, !row[7].is_empty() && !row[8].is_empty());
                assert_eq!(has, row[12].is_empty(), "{row:?}");
            }
        }
    }
    eprintln!(
        "{}\n{valued} of {cells} cells with a value",
        lines.join("\n")
    );
    assert!(valued > 0, "no cell has a value");
}

/// `measure --along --map --points --correlation` end to end on the demo
/// image (fixtures/demo: a 200 um bar 160 px long, 1.25 um/px): the
/// pictures are written where stderr says, decode, are marked as the
/// tool's own (a later run over the folder skips them), the report's map
/// has a grid of the stated size with nulls where no value, the profile
/// names its plot; the point table has the stated columns; and no output
/// may replace an input.
#[test]
fn maps_plots_and_points_are_written_where_said() {
    let out = tempfile::tempdir().unwrap();
    let img = path_str(&repo_file("fixtures/demo/plate-CVF-SP4-step06mm.png"));
    let maps = out.path().join("maps");
    let points = out.path().join("points.csv");
    let run = armspace(&[
        "measure",
        &img,
        "--scale-bar",
        "200um",
        "--along",
        "20,200:600,200",
        "--map",
        &path_str(&maps),
        "--points",
        &path_str(&points),
        "--correlation",
        "al-4.5cu-time-flemings-1974",
        "--composition",
        "Cu=4.5",
    ]);
    assert!(!run.stderr.contains("panicked"), "{}", run.stderr);
    let rep: serde_json::Value = serde_json::from_str(&run.stdout).unwrap();
    let im = &rep["images"][0];
    let m = &im["map"];
    let (cols, rows) = (m["columns"].as_u64().unwrap(), m["rows"].as_u64().unwrap());
    let grid = m["sdas_um"].as_array().unwrap();
    assert_eq!(grid.len() as u64, rows);
    let mut valued = 0;
    for (r, row) in grid.iter().enumerate() {
        let row = row.as_array().unwrap();
        assert_eq!(row.len() as u64, cols);
        for (c, v) in row.iter().enumerate() {
            let lo = &m["ci95_low_um"][r][c];
            let tf = &m["solidification_time_s"][r][c];
            assert_eq!(v.is_null(), lo.is_null());
            if v.is_null() {
                assert!(tf.is_null());
            } else {
                valued += 1;
            }
        }
    }
    assert_eq!(m["cells_with_value"].as_u64().unwrap(), valued);
    let mut pictures = vec![
        m["picture_sdas"].as_str().unwrap().to_string(),
        m["picture_solidification_time"]
            .as_str()
            .unwrap()
            .to_string(),
    ];
    pictures.push(im["profile"][0]["plot"].as_str().unwrap().to_string());
    for p in &pictures {
        assert!(
            run.stderr.contains(&format!("picture: {p}")),
            "{p}: {}",
            run.stderr
        );
        let pic = image::open(p).unwrap().to_rgb8();
        assert!(pic.width() > 400 && pic.height() > 300);
        // Not blank: many levels.
        let mut seen = std::collections::BTreeSet::new();
        seen.extend(pic.pixels().map(|p| p.0));
        assert!(seen.len() > 50, "{p}: {} colours", seen.len());
        assert!(std::path::Path::new(p).starts_with(&maps));
    }
    // A later run over the folder skips the tool's own pictures.
    let again = armspace(&["measure", &path_str(&maps), "--um-per-px", "1"]);
    let again: serde_json::Value = serde_json::from_str(&again.stdout).unwrap_or_default();
    assert_eq!(again["images"].as_array().map_or(0, |a| a.len()), 0);
    // The point table: its header, a row per local measurement.
    let text = std::fs::read_to_string(&points).unwrap();
    let header = text.lines().next().unwrap();
    assert!(header.starts_with("file,method,x_um,y_um,measured_um"));
    assert!(header.contains("solidification_time_s") && header.contains("cooling_rate_K_per_s"));
    assert!(text.lines().count() > 10);
    assert!(run.stderr.contains("point table written to"));
    // No output may replace an input.
    let copy = out.path().join("in.png");
    std::fs::copy(&img, &copy).unwrap();
    let refused = armspace(&["measure", &path_str(&copy), "--points", &path_str(&copy)]);
    assert_eq!(refused.code, 2, "{}", refused.stderr);
    assert!(refused.stderr.contains("point table"), "{}", refused.stderr);
    assert_eq!(
        std::fs::read(&copy).unwrap(),
        std::fs::read(&img).unwrap(),
        "the input was changed"
    );
}
