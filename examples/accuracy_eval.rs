//! Accuracy of `armspace measure` on synthetic sets, by style and method.
//! Driven by `scripts/accuracy.sh`, which renders the sets and measures
//! every image with the calibration of its truth record.
//!
//! ```text
//! accuracy_eval list DIR/truth.json      # "file<TAB>um_per_px" per image
//! accuracy_eval summarise DIR...         # DIR/truth.json + DIR/reports/FILE.json
//! ```
//!
//! The report is read as generic JSON: every key under an image's
//! `methods` is a method (whatever methods the report holds), and the
//! combined value is `sdas_um.value`.

use serde_json::Value;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

/// A value in um and its 95 % interval, when the report gives them.
type Valued = (Option<f64>, Option<[f64; 2]>);

fn interval(v: &Value) -> Option<[f64; 2]> {
    Some([v.get(0)?.as_f64()?, v.get(1)?.as_f64()?])
}

/// `(method name, value and interval in um)` for every method of one image
/// report, plus `combined` for the value the user gets.
fn method_values(image: &Value) -> Vec<(String, Valued)> {
    let mut out: Vec<(String, Valued)> = image["methods"]
        .as_object()
        .map(|m| {
            m.iter()
                .map(|(k, v)| (k.clone(), (own_figure(v), interval(&v["ci95"]))))
                .collect()
        })
        .unwrap_or_default();
    let sdas = &image["sdas_um"];
    out.push((
        "combined".into(),
        (sdas["value"].as_f64(), interval(&sdas["ci95"])),
    ));
    out
}

/// A method's own reading: its value, or, when the combination did not
/// use it (uncorroborated, disagreeing or left out; the reason then starts
/// with "not used"), the figure the report keeps as indicative. Figures
/// withheld for want of an interval are not readings.
fn own_figure(method: &Value) -> Option<f64> {
    method["value"].as_f64().or_else(|| {
        method["reason"]
            .as_str()
            .is_some_and(|r| r.starts_with("not used"))
            .then(|| method["indicative"].as_f64())
            .flatten()
    })
}

fn read_json(path: &Path) -> Result<Value, String> {
    let text = std::fs::read_to_string(path)
        .map_err(|e| format!("{}: cannot read: {e}", path.display()))?;
    serde_json::from_str(&text).map_err(|e| format!("{}: not JSON: {e}", path.display()))
}

#[derive(Default)]
struct Tally {
    fields: usize,
    with_value: usize,
    /// Signed relative errors of the values (fields with a truth).
    errors: Vec<f64>,
    /// Values nearer the row spacing than the arm spacing (style cut).
    at_row: usize,
    /// Values with a 95 % interval (fields with a truth), and how many of
    /// those intervals hold the truth.
    with_interval: usize,
    covered: usize,
}

fn quantile(sorted: &[f64], p: f64) -> Option<f64> {
    if sorted.is_empty() {
        return None;
    }
    // nearest rank
    let k = ((p * sorted.len() as f64).ceil() as usize).clamp(1, sorted.len());
    Some(sorted[k - 1])
}

fn pct(v: Option<f64>) -> String {
    v.map_or("-".into(), |x| format!("{:.1}%", 100.0 * x))
}

fn print_tally(label: &str, method: &str, t: &Tally) {
    let mut abs: Vec<f64> = t.errors.iter().map(|e| e.abs()).collect();
    abs.sort_by(f64::total_cmp);
    let mut signed = t.errors.clone();
    signed.sort_by(f64::total_cmp);
    let coverage = if t.with_interval == 0 {
        "-".to_string()
    } else {
        format!("{}/{}", t.covered, t.with_interval)
    };
    println!(
        "{label:<22} {method:<10} {:>3}/{:<3} {:>8} {:>8} {:>8} {:>6} {:>8}",
        t.with_value,
        t.fields,
        pct(quantile(&abs, 0.5)),
        pct(quantile(&abs, 0.9)),
        pct(quantile(&signed, 0.5)),
        t.at_row,
        coverage
    );
}

fn summarise(dirs: &[PathBuf]) -> Result<(), String> {
    // (style, seed) -> method -> tally; also style -> method -> tally
    let mut by_set: BTreeMap<(String, String), BTreeMap<String, Tally>> = BTreeMap::new();
    let mut by_style: BTreeMap<String, BTreeMap<String, Tally>> = BTreeMap::new();
    for dir in dirs {
        let truth = read_json(&dir.join("truth.json"))?;
        let seed = truth["seed"].to_string();
        let images = truth["images"]
            .as_array()
            .ok_or_else(|| format!("{}: no images in truth.json", dir.display()))?;
        for t in images {
            let file = t["file"].as_str().unwrap_or_default();
            let style = t["style"].as_str().unwrap_or("?").to_string();
            let report = read_json(&dir.join("reports").join(format!("{file}.json")))?;
            let Some(image) = report["images"].get(0) else {
                return Err(format!("{}: report without an image", dir.display()));
            };
            let truth_um = t["sdas_um"].as_f64();
            let row_um = t["row_spacing_um"].as_f64();
            for (method, (value, ci)) in method_values(image) {
                for tally in [
                    by_set
                        .entry((style.clone(), seed.clone()))
                        .or_default()
                        .entry(method.clone())
                        .or_default(),
                    by_style
                        .entry(style.clone())
                        .or_default()
                        .entry(method.clone())
                        .or_default(),
                ] {
                    tally.fields += 1;
                    if let Some(v) = value {
                        tally.with_value += 1;
                        if let Some(tr) = truth_um {
                            tally.errors.push(v / tr - 1.0);
                            if let Some([lo, hi]) = ci {
                                tally.with_interval += 1;
                                if lo <= tr && tr <= hi {
                                    tally.covered += 1;
                                }
                            }
                            if let Some(r) = row_um {
                                if (v - r).abs() < (v - tr).abs() {
                                    tally.at_row += 1;
                                }
                            }
                        }
                    }
                }
            }
        }
    }
    println!(
        "{:<22} {:<10} {:>7} {:>8} {:>8} {:>8} {:>6} {:>8}",
        "style (seed)", "method", "valued", "med|e|", "p90|e|", "med e", "at_row", "covered"
    );
    for ((style, seed), methods) in &by_set {
        for (m, t) in methods {
            print_tally(&format!("{style} ({seed})"), m, t);
        }
    }
    println!("-- all seeds --");
    for (style, methods) in &by_style {
        for (m, t) in methods {
            print_tally(style, m, t);
        }
    }
    Ok(())
}

fn list(truth: &Path) -> Result<(), String> {
    let truth = read_json(truth)?;
    for t in truth["images"].as_array().into_iter().flatten() {
        let file = t["file"].as_str().unwrap_or_default();
        let um = t["um_per_px"]
            .as_f64()
            .ok_or_else(|| format!("{file}: no um_per_px in its truth record"))?;
        println!("{file}\t{um}");
    }
    Ok(())
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let result = match args.first().map(String::as_str) {
        Some("list") if args.len() == 2 => list(Path::new(&args[1])),
        Some("summarise") if args.len() >= 2 => {
            summarise(&args[1..].iter().map(PathBuf::from).collect::<Vec<_>>())
        }
        _ => Err("usage: accuracy_eval list TRUTH.json | accuracy_eval summarise DIR...".into()),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("accuracy_eval: {e}");
            ExitCode::FAILURE
        }
    }
}
