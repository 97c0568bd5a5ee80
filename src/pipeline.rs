//! Runs the stages over one image and over a batch:
//! load -> calibrate -> preprocess -> measure -> statistics.
//!
//! Each image is measured independently, so a batch can run in parallel and
//! still give results identical to a serial run, in input order.

use crate::calibrate::Calibration;
use crate::load::{self, Input, LoadOptions};
use crate::methods::fft::{self, FftOutcome, FftParams};
use crate::preprocess::{self, PreprocessParams};
use crate::units::{Micrometres, UmPerPx};
use rayon::prelude::*;
use std::path::PathBuf;

/// A measurement method.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Method {
    Fft,
}

impl Method {
    pub fn name(self) -> &'static str {
        match self {
            Method::Fft => "fft",
        }
    }
}

/// Everything that determines a measurement, so that it can be repeated.
#[derive(Clone, Debug)]
pub struct MeasureOptions {
    pub um_per_px: UmPerPx,
    pub load: LoadOptions,
    pub preprocess: PreprocessParams,
    pub fft: FftParams,
    pub methods: Vec<Method>,
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
    pub fft: Option<FftOutcome>,
    pub sdas: Estimate,
    pub warnings: Vec<String>,
    pub error: Option<String>,
}

impl ImageResult {
    fn failed(file: PathBuf, error: String) -> Self {
        Self {
            file,
            info: None,
            calibration: None,
            fft: None,
            sdas: Estimate {
                value: None,
                ci95: None,
                n: 0,
                methods: vec![],
                reason: Some("the image could not be measured".into()),
            },
            warnings: vec![],
            error: Some(error),
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
    let calibration = Calibration::manual(opts.um_per_px);
    let mut warnings = loaded.warnings;
    let prepared = preprocess::prepare(&loaded.image, None, &opts.preprocess);
    let cal = calibration.um_per_px;

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

    let sdas = combine(fft.as_ref(), cal);
    ImageResult {
        file: path.to_path_buf(),
        info: Some(info),
        calibration: Some(calibration),
        fft,
        sdas,
        warnings,
        error: None,
    }
}

/// The image's SDAS from the methods that gave a value.
fn combine(fft: Option<&FftOutcome>, cal: UmPerPx) -> Estimate {
    let to_um = |px: f64| cal.to_um(crate::units::Pixels(px));
    match fft {
        Some(f) if f.value_px.is_some() => Estimate {
            value: f.value_px.map(to_um),
            ci95: f.ci95_px.map(|[a, b]| [to_um(a), to_um(b)]),
            n: f.n_tiles_used,
            methods: vec![Method::Fft],
            reason: None,
        },
        Some(f) => Estimate {
            value: None,
            ci95: None,
            n: 0,
            methods: vec![],
            reason: f.reason.clone(),
        },
        None => Estimate {
            value: None,
            ci95: None,
            n: 0,
            methods: vec![],
            reason: Some("no method was run".into()),
        },
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
