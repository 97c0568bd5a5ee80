//! `armspace calibrate`: the scale bar found in each image and the
//! calibration it gives, as JSON.

use super::{
    create_overlay_dir, parse_percent, parse_positive, print_json, EXIT_FATAL, EXIT_NOT_MEASURED,
    EXIT_OK,
};
use armspace::calibrate::{self, parse_scale_bar, BarLength, CalibrationRequest, ScaleBarLength};
use armspace::load::{collect_inputs, DEFAULT_MAX_MEGAPIXELS};
use armspace::report;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args)]
pub(super) struct CalibrateArgs {
    /// Image files or folders (walked as `measure` walks them).
    #[arg(required = true)]
    images: Vec<PathBuf>,
    /// Physical length of the scale bar, with its unit (100um, 0.1mm,
    /// 500nm), or `auto` to read it from the label beside each bar (a folder
    /// of several magnifications then calibrates in one run).
    #[arg(long, value_parser = parse_scale_bar, allow_hyphen_values = true)]
    scale_bar: ScaleBarLength,
    /// Stated relative uncertainty of the scale bar itself, in percent.
    #[arg(long, value_parser = parse_percent)]
    scale_bar_uncertainty_pct: Option<f64>,
    /// Write a PNG per image with the detected bar outlined into this folder.
    #[arg(long)]
    overlay: Option<PathBuf>,
    /// Refuse images with more megapixels than this (checked before decoding).
    #[arg(long, default_value_t = DEFAULT_MAX_MEGAPIXELS, value_parser = parse_positive, allow_negative_numbers = true)]
    max_megapixels: f64,
    /// Read files whose header claims more pixels per byte than a real
    /// micrograph compresses to (refused by default as a damaged or forged
    /// header).
    #[arg(long)]
    allow_high_compression: bool,
}

pub(super) fn run(args: CalibrateArgs) -> ExitCode {
    use armspace::load::{load, LoadOptions};
    let req = CalibrationRequest {
        manual: None,
        manual_rel_uncertainty: None,
        profile: None,
        scale_bar: match args.scale_bar {
            ScaleBarLength::Given(length) => Some(BarLength {
                length,
                rel_uncertainty: args.scale_bar_uncertainty_pct.unwrap_or(0.0) / 100.0,
            }),
            ScaleBarLength::Read => None,
        },
        read_label: args.scale_bar == ScaleBarLength::Read,
        trust: None,
    };
    if let Err(code) = create_overlay_dir(args.overlay.as_deref()) {
        return code;
    }
    let opts = LoadOptions {
        max_megapixels: args.max_megapixels,
        allow_high_compression: args.allow_high_compression,
        ..LoadOptions::default()
    };
    let mut all_ok = true;
    let mut out = Vec::new();
    // Folders are walked as `measure` walks them; what is not an image is
    // named as skipped, a missing or special path is an error entry.
    let inputs = collect_inputs(&args.images);
    let protected = armspace::files::Protected::new(inputs.iter().filter_map(|i| match i {
        armspace::load::Input::Image(p) => Some(p.as_path()),
        _ => None,
    }));
    for input in &inputs {
        let path = match input {
            armspace::load::Input::Image(p) => p,
            armspace::load::Input::Skipped { path, reason } => {
                say!("skipped  {}: {reason}", path.display());
                continue;
            }
            armspace::load::Input::Missing(p) | armspace::load::Input::Unusable { path: p, .. } => {
                p
            }
        };
        let mut entry = serde_json::json!({"file": path.display().to_string()});
        let loaded = match input {
            armspace::load::Input::Missing(p) => Err(armspace::Error::Missing { path: p.clone() }),
            armspace::load::Input::Unusable { path, reason } => Err(armspace::Error::Input {
                path: path.clone(),
                reason: reason.clone(),
            }),
            _ => load(path, &opts),
        };
        match loaded {
            Err(e) => {
                entry["error"] = e.to_string().into();
                all_ok = false;
            }
            Ok(loaded) => {
                let detected = calibrate::scale_bar::detect(&loaded.image);
                let label = detected
                    .as_ref()
                    .ok()
                    .map(|b| calibrate::label::read(&loaded.image, b));
                match calibrate::resolve_with_label(&req, Some(&detected), label.as_ref(), None) {
                    Ok((c, warnings)) => {
                        for w in &warnings {
                            say!("warning  {}: {}", path.display(), w.message);
                        }
                        entry["um_per_px"] = c.um_per_px.get().into();
                        entry["rel_uncertainty"] =
                            c.rel_uncertainty.map(|u| report::round(u, 6)).into();
                        entry["bar"] =
                            serde_json::to_value(c.bar.as_ref().map(report::BarReport::of))
                                .unwrap_or_default();
                        entry["label"] = serde_json::to_value(&c.label).unwrap_or_default();
                        entry["warnings"] = warnings
                            .iter()
                            .map(|w| w.message.clone())
                            .collect::<Vec<_>>()
                            .into();
                        entry["error"] = serde_json::Value::Null;
                    }
                    Err(e) => {
                        entry["error"] = format!("{}: {e}", path.display()).into();
                        all_ok = false;
                    }
                }
                if let Some(dir) = &args.overlay {
                    let stem = path
                        .file_stem()
                        .map(|s| s.to_string_lossy().into_owned())
                        .unwrap_or_else(|| "image".into());
                    let target = dir.join(format!("{stem}.calibration.png"));
                    if protected.is_protected(&target) {
                        say!(
                            "armspace: {}: is an input of this run; its calibration picture is not written",
                            target.display()
                        );
                        all_ok = false;
                        out.push(entry);
                        continue;
                    }
                    let picture =
                        armspace::overlay::calibration(&loaded.image, detected.as_ref().ok());
                    if let Err(e) = armspace::overlay::write_png(&target, &picture) {
                        say!("armspace: {e}");
                        return ExitCode::from(EXIT_FATAL);
                    }
                }
            }
        }
        if let Some(e) = entry["error"].as_str() {
            say!("error    {e}");
        }
        out.push(entry);
    }
    if let Err(code) = print_json(&out) {
        return code;
    }
    ExitCode::from(if all_ok { EXIT_OK } else { EXIT_NOT_MEASURED })
}
