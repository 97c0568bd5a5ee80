//! Runs the stages over one image and over a batch:
//! load -> calibrate -> preprocess -> measure -> statistics.
//!
//! Each image is measured independently, so a batch can run in parallel and
//! still give results identical to a serial run, in input order.

use crate::calibrate::scale_bar::{self, ScaleBar};
use crate::calibrate::{self as cal, Calibration, CalibrationRequest};
use crate::interpret::acceptance::{self, Evidence};
use crate::load::{self, Input, LoadOptions};
use crate::methods::fft::{self, FftOutcome, FftParams};
use crate::methods::intercept::{self, InterceptOutcome, InterceptParams};
use crate::preprocess::{self, PreprocessParams};
use crate::units::{Micrometres, Pixels, UmPerPx};
use rayon::prelude::*;
use std::path::PathBuf;

/// A measurement method.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Method {
    Fft,
    Intercept,
}

impl Method {
    pub fn name(self) -> &'static str {
        match self {
            Method::Fft => "fft",
            Method::Intercept => "intercept",
        }
    }
}

/// Relative difference between the two methods above which the image
/// carries a warning: 10 %, the agreement expected of two sound estimates of
/// the same spacing (each typically within a few per cent).
pub const METHOD_DISAGREEMENT: f64 = 0.10;

/// Everything that determines a measurement, so that it can be repeated.
#[derive(Clone, Debug)]
pub struct MeasureOptions {
    pub calibration: CalibrationRequest,
    pub load: LoadOptions,
    pub preprocess: PreprocessParams,
    pub fft: FftParams,
    pub intercept: InterceptParams,
    /// Target percent relative accuracy, for the number of lines it needs.
    pub target_rel_accuracy_pct: f64,
    pub methods: Vec<Method>,
    /// Folder for a picture per image of what was measured.
    pub overlay_dir: Option<PathBuf>,
    /// Correlation and alloy for cooling rate and solidification time.
    pub interpret: Option<crate::interpret::Settings>,
    /// SDAS limits and the decision rule.
    pub spec: Option<crate::interpret::acceptance::Spec>,
}

impl MeasureOptions {
    /// Every parameter at its default, both methods, a manual calibration.
    pub fn manual(um_per_px: UmPerPx) -> Self {
        Self {
            calibration: CalibrationRequest {
                manual: Some(um_per_px),
                ..Default::default()
            },
            load: LoadOptions::default(),
            preprocess: PreprocessParams::default(),
            fft: FftParams::default(),
            intercept: InterceptParams::default(),
            target_rel_accuracy_pct: 10.0,
            methods: vec![Method::Fft, Method::Intercept],
            overlay_dir: None,
            interpret: None,
            spec: None,
        }
    }
}

/// File facts known once the image is decoded.
#[derive(Clone, Debug, PartialEq)]
pub struct ImageInfo {
    pub sha256: String,
    pub width: u32,
    pub height: u32,
    pub bit_depth: u8,
}

/// The image's combined SDAS estimate.
#[derive(Clone, Debug, PartialEq)]
pub struct Estimate {
    pub value: Option<Micrometres>,
    pub ci95: Option<[Micrometres; 2]>,
    /// Number of independent measurements behind the value (tiles, lines).
    pub n: usize,
    pub methods: Vec<Method>,
    pub reason: Option<String>,
}

/// Everything measured on one image, or why it could not be.
#[derive(Clone, Debug)]
pub struct ImageResult {
    pub file: PathBuf,
    pub info: Option<ImageInfo>,
    pub calibration: Option<Calibration>,
    /// Scale bar found in the image (used for calibration or not); its
    /// region is excluded from measurement.
    pub bar: Option<ScaleBar>,
    /// Rectangles excluded from measurement, [x0, y0, x1, y1] inclusive px.
    pub excluded: Vec<[u32; 4]>,
    pub fft: Option<FftOutcome>,
    pub intercept: Option<InterceptOutcome>,
    pub sdas: Estimate,
    pub warnings: Vec<String>,
    pub error: Option<String>,
    /// The picture of what was measured, when one was written.
    pub overlay: Option<PathBuf>,
    /// Cooling rate and solidification time, when a correlation was given.
    pub interpretation: Option<Result<crate::interpret::Interpretation, String>>,
    /// The decision against the spec's limit, when a spec was given.
    pub acceptance: Option<crate::interpret::acceptance::Acceptance>,
}

impl ImageResult {
    fn failed(file: PathBuf, error: String) -> Self {
        Self {
            file,
            info: None,
            calibration: None,
            bar: None,
            excluded: vec![],
            fft: None,
            intercept: None,
            sdas: Estimate {
                value: None,
                ci95: None,
                n: 0,
                methods: vec![],
                reason: Some("the image could not be measured".into()),
            },
            warnings: vec![],
            error: Some(error),
            overlay: None,
            interpretation: None,
            acceptance: None,
        }
    }

    /// Whether the image produced a value.
    pub fn measured(&self) -> bool {
        self.error.is_none() && self.sdas.value.is_some()
    }
}

/// A path of the batch that was passed over.
#[derive(Clone, Debug, PartialEq)]
pub struct Skipped {
    pub file: PathBuf,
    pub reason: String,
}

/// Loads and measures one file. Never panics on the file's content.
pub fn measure_file(path: &std::path::Path, opts: &MeasureOptions) -> ImageResult {
    let loaded = match load::load(path, &opts.load) {
        Ok(l) => l,
        Err(e) => return ImageResult::failed(path.to_path_buf(), e.to_string()),
    };
    let info = ImageInfo {
        sha256: loaded.sha256.clone(),
        width: loaded.image.width as u32,
        height: loaded.image.height as u32,
        bit_depth: loaded.bit_depth,
    };
    let mut warnings = loaded.warnings;
    let detected = scale_bar::detect(&loaded.image);
    let metadata =
        loaded
            .resolution
            .and_then(|(x, y, unit)| match cal::from_resolution(x, y, unit) {
                Ok((v, notes)) => {
                    warnings.extend(notes);
                    Some(v)
                }
                Err(note) => {
                    warnings.push(format!("TIFF resolution tags not used: {note}"));
                    None
                }
            });
    let calibration = match cal::resolve(&opts.calibration, Some(&detected), metadata) {
        Ok((c, w)) => {
            warnings.extend(w);
            c
        }
        Err(e) => {
            let mut r = ImageResult::failed(path.to_path_buf(), format!("{}: {e}", path.display()));
            r.info = Some(info);
            r.bar = detected.ok();
            r.warnings = warnings;
            return r;
        }
    };
    let bar = detected.ok();
    let (mask, excluded) = match &bar {
        Some(b) => (
            Some(scale_bar::mask_of(
                b,
                loaded.image.width,
                loaded.image.height,
            )),
            vec![b.mask],
        ),
        None => (None, vec![]),
    };
    let prepared = preprocess::prepare(&loaded.image, mask, &opts.preprocess);
    let um_per_px = calibration.um_per_px;

    let fft = opts
        .methods
        .contains(&Method::Fft)
        .then(|| fft::measure(&prepared, &opts.fft));
    if let Some(f) = &fft {
        if let Some(v) = f.value_px {
            let periods = f.window_px as f64 / v;
            if periods < 3.0 {
                warnings.push(format!(
                    "fft: the tiles span only {periods:.1} periods; the image is small for this spacing"
                ));
            }
            if f.n_tiles_used < 4 {
                warnings.push(format!(
                    "fft: only {} reliable tile(s); the value rests on little data",
                    f.n_tiles_used
                ));
            }
        }
    }

    let intercept = opts
        .methods
        .contains(&Method::Intercept)
        .then(|| intercept::measure(&prepared, &opts.intercept));
    if let (Some(a), Some(b)) = (
        fft.as_ref().and_then(|f| f.value_px),
        intercept.as_ref().and_then(|i| i.value_px),
    ) {
        warnings.extend(disagreement(
            um_per_px.to_um(Pixels(a)),
            um_per_px.to_um(Pixels(b)),
        ));
    }
    let sdas = combine(
        fft.as_ref(),
        intercept.as_ref(),
        um_per_px,
        calibration.rel_uncertainty,
    );
    let overlay = opts.overlay_dir.as_ref().and_then(|dir| {
        let picture = crate::overlay::measurement(
            &loaded.image,
            bar.as_ref(),
            fft.as_ref(),
            opts.fft.min_quality,
            intercept.as_ref(),
        );
        let target = dir.join(overlay_name(path, &info.sha256));
        match crate::overlay::write_png(&target, &picture) {
            Ok(()) => Some(target),
            Err(e) => {
                warnings.push(format!("overlay not written: {e}"));
                None
            }
        }
    });
    let interpretation = opts
        .interpret
        .as_ref()
        .map(|settings| settings.apply(sdas.value, sdas.ci95));
    let acceptance = opts.spec.as_ref().map(|spec| {
        let u = calibration.rel_uncertainty.unwrap_or(0.0);
        let value = Evidence {
            value: sdas.value,
            ci95: sdas.ci95,
            n: sdas.n,
            calibration_half_um: sdas.value.map_or(0.0, |v| K95 * u * v.0),
        };
        acceptance::assess(
            spec,
            path,
            value,
            max_local(fft.as_ref(), intercept.as_ref(), um_per_px, u),
        )
    });
    ImageResult {
        file: path.to_path_buf(),
        info: Some(info),
        calibration: Some(calibration),
        bar,
        excluded,
        fft,
        intercept,
        sdas,
        warnings,
        error: None,
        overlay,
        interpretation,
        acceptance,
    }
}

/// The largest local value of an image: the largest used FFT tile, or
/// without an FFT map the largest intercept line, with a 95 % interval from
/// the local spread (the tiles' robust standard deviation, or the lines'
/// standard deviation, which also holds the real variation across the field
/// and so overstates a single value's uncertainty: a cautious choice) and
/// the calibration's uncertainty in quadrature.
fn max_local(
    fft: Option<&FftOutcome>,
    intercept: Option<&InterceptOutcome>,
    cal: UmPerPx,
    cal_rel_u: f64,
) -> Evidence {
    let from_tiles = fft.filter(|f| f.value_px.is_some()).and_then(|f| {
        let max = f
            .tiles
            .iter()
            .filter(|t| t.used && t.spacing_px.is_finite())
            .map(|t| t.spacing_px)
            .reduce(f64::max)?;
        Some((max, f.spread_px))
    });
    let from_lines = || {
        intercept.filter(|i| i.value_px.is_some()).and_then(|i| {
            let max = i
                .lines
                .iter()
                .map(|l| l.spacing_px)
                .filter(|s| s.is_finite())
                .reduce(f64::max)?;
            Some((max, i.sd_px))
        })
    };
    let Some((max_px, spread_px)) = from_tiles.or_else(from_lines) else {
        return Evidence::default();
    };
    let x = cal.to_um(Pixels(max_px)).0;
    let c = K95 * cal_rel_u * x;
    let ci95 = spread_px.map(|s| {
        let h = (K95 * cal.to_um(Pixels(s)).0).hypot(c);
        [Micrometres(x - h), Micrometres(x + h)]
    });
    Evidence {
        value: Some(Micrometres(x)),
        ci95,
        n: 0,
        calibration_half_um: c,
    }
}

/// File name of an image's overlay: its stem and the first eight hex digits
/// of its SHA-256, so that images of the same name in different folders do
/// not overwrite each other's pictures.
pub fn overlay_name(path: &std::path::Path, sha256: &str) -> String {
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "image".into());
    format!("{stem}-{}.png", &sha256[..sha256.len().min(8)])
}

/// Coverage factor of a 95 % interval under a normal distribution.
const K95: f64 = 1.959_963_984_540_054;

/// The warning for two methods' values more than `METHOD_DISAGREEMENT`
/// apart (relative to the FFT value), or `None`.
pub fn disagreement(fft: Micrometres, intercept: Micrometres) -> Option<String> {
    let diff = intercept.0 / fft.0 - 1.0;
    (diff.abs() > METHOD_DISAGREEMENT).then(|| {
        format!(
            "the methods disagree: intercept {:.2} um against fft {:.2} um ({:+.1} %); look at the overlay before using the value",
            intercept.0,
            fft.0,
            100.0 * diff
        )
    })
}

/// One method's contribution to the image's value, in pixels.
struct Part {
    method: Method,
    value: f64,
    ci: Option<[f64; 2]>,
    n: usize,
}

/// The image's SDAS from the methods that gave a value.
///
/// With two values, each with a 95 % interval, the image's value is their
/// inverse-variance weighted mean (weights 1 / h^2, h the half-width; the
/// methods are independent: one counts arms on lines, the other reads
/// spectra) and its half-width 1 / sqrt(sum of weights) (JCGM 100:2008,
/// 5.1.2 with the sensitivity of a weighted mean). A value without an
/// interval cannot be weighted and is not combined with one that has one.
///
/// The calibration's relative standard uncertainty u is a systematic factor
/// common to every tile and line, so it widens the interval rather than
/// averaging out: the half-width becomes sqrt(h^2 + (k u x)^2) with x the
/// value and k = 1.96 (uncorrelated contributions combined in quadrature,
/// JCGM 100:2008, 5.1.2).
fn combine(
    fft: Option<&FftOutcome>,
    intercept: Option<&InterceptOutcome>,
    cal: UmPerPx,
    cal_rel_u: Option<f64>,
) -> Estimate {
    // Each method's outcome as (method, value, interval, count, reason).
    let outcomes = fft
        .map(|f| {
            (
                Method::Fft,
                f.value_px,
                f.ci95_px,
                f.n_tiles_used,
                &f.reason,
            )
        })
        .into_iter()
        .chain(intercept.map(|i| {
            (
                Method::Intercept,
                i.value_px,
                i.ci95_px,
                i.n_lines,
                &i.reason,
            )
        }));
    let mut parts = Vec::new();
    let mut reasons = Vec::new();
    for (method, value, ci, n, reason) in outcomes {
        match value {
            Some(value) => parts.push(Part {
                method,
                value,
                ci,
                n,
            }),
            None => reasons.push(format!(
                "{}: {}",
                method.name(),
                reason.as_deref().unwrap_or("no value")
            )),
        }
    }
    if parts.is_empty() {
        return Estimate {
            value: None,
            ci95: None,
            n: 0,
            methods: vec![],
            reason: Some(if reasons.is_empty() {
                "no method was run".into()
            } else {
                reasons.join("; ")
            }),
        };
    }
    let with_ci: Vec<&Part> = parts.iter().filter(|p| p.ci.is_some()).collect();
    let (value, half, used): (f64, Option<f64>, Vec<&Part>) = if with_ci.is_empty() {
        let v = parts.iter().map(|p| p.value).sum::<f64>() / parts.len() as f64;
        (v, None, parts.iter().collect())
    } else {
        let mut wsum = 0.0;
        let mut wv = 0.0;
        for p in &with_ci {
            let [lo, hi] = p.ci.unwrap_or([p.value, p.value]);
            let h = (0.5 * (hi - lo)).max(1e-9 * p.value.abs().max(1e-9));
            let w = 1.0 / (h * h);
            wsum += w;
            wv += w * p.value;
        }
        (wv / wsum, Some(1.0 / wsum.sqrt()), with_ci)
    };
    let to_um = |px: f64| cal.to_um(Pixels(px)).0;
    let x = to_um(value);
    let ci95 = half.map(|h| {
        let h = to_um(h);
        let u = cal_rel_u.unwrap_or(0.0) * K95 * x;
        let total = (h * h + u * u).sqrt();
        [Micrometres(x - total), Micrometres(x + total)]
    });
    Estimate {
        value: Some(Micrometres(x)),
        ci95,
        n: used.iter().map(|p| p.n).sum(),
        methods: used.iter().map(|p| p.method).collect(),
        reason: None,
    }
}

/// Measures a batch in parallel; results come back in input order.
/// `on_done` is called once per finished image (for progress display).
pub fn measure_batch(
    inputs: &[Input],
    opts: &MeasureOptions,
    on_done: &(dyn Fn() + Sync),
) -> (Vec<ImageResult>, Vec<Skipped>) {
    let results: Vec<Option<ImageResult>> = inputs
        .par_iter()
        .map(|input| {
            let r = match input {
                Input::Image(p) => Some(measure_file(p, opts)),
                Input::Missing(p) => Some(ImageResult::failed(
                    p.clone(),
                    crate::Error::Missing { path: p.clone() }.to_string(),
                )),
                Input::Skipped { .. } => None,
            };
            on_done();
            r
        })
        .collect();
    let skipped = inputs
        .iter()
        .filter_map(|i| match i {
            Input::Skipped { path, reason } => Some(Skipped {
                file: path.clone(),
                reason: reason.clone(),
            }),
            _ => None,
        })
        .collect();
    (results.into_iter().flatten().collect(), skipped)
}
