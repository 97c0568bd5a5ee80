//! Runs the stages over one image and over a batch:
//! load -> calibrate -> preprocess -> measure -> statistics.
//!
//! Each image is measured independently, so a batch can run in parallel and
//! still give results identical to a serial run, in input order.

use crate::annotations::{self, Annotation};
use crate::calibrate::scale_bar::{self, ScaleBar};
use crate::calibrate::{self as cal, Calibration, CalibrationRequest};
use crate::combine::{self, Estimate};
use crate::error::Warning;
use crate::interpret::acceptance;
use crate::load::{self, Input, LoadOptions};
use crate::methods::fft::FftParams;
use crate::methods::intercept::InterceptParams;
use crate::methods::{self, Inputs, Outcome};
use crate::preprocess::{self, PreprocessParams};
use crate::units::UmPerPx;
use std::path::{Path, PathBuf};

pub use crate::methods::Method;

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
    /// Largest width of a picture, px (wider ones are scaled down).
    pub overlay_max_width: Option<u32>,
    /// The pictures' file format.
    pub overlay_format: crate::overlay::PictureFormat,
    /// Width, px, of a small copy of each picture kept in memory for the
    /// HTML page (`--html`); the picture is then drawn even without
    /// `overlay_dir`.
    pub thumbnail_width: Option<u32>,
    /// Files no output may replace (the run's inputs, resolved).
    pub protected: crate::files::Protected,
    /// Correlation and alloy for cooling rate and solidification time.
    pub interpret: Option<crate::interpret::Settings>,
    /// SDAS limits and the decision rule.
    pub spec: Option<crate::interpret::acceptance::Spec>,
    /// Points where the local SDAS is asked for (`--at`), in input order.
    pub at: Vec<crate::spatial::AtSpec>,
    /// Lines along which a profile of the SDAS is asked for (`--along`).
    pub along: Vec<crate::spatial::AlongSpec>,
    /// Folder for the maps of each image (`--map`).
    pub map_dir: Option<PathBuf>,
    /// Folder for the plot of each profile (`--along`; `--plots`, else
    /// the folder of `--map` or `--overlay`).
    pub plot_dir: Option<PathBuf>,
    /// Whether the point table is asked for (`--points`): the map is then
    /// read even without `--map`, for each local measurement's local value.
    pub points: bool,
}

impl MeasureOptions {
    /// Every parameter at its default, every method, a manual calibration.
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
            methods: Method::ALL.to_vec(),
            overlay_dir: None,
            overlay_max_width: None,
            overlay_format: Default::default(),
            thumbnail_width: None,
            protected: crate::files::Protected::default(),
            interpret: None,
            spec: None,
            at: vec![],
            along: vec![],
            map_dir: None,
            plot_dir: None,
            points: false,
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

/// Everything measured on one image, or why it could not be.
#[derive(Debug)]
pub struct ImageResult {
    pub file: PathBuf,
    pub info: Option<ImageInfo>,
    pub calibration: Option<Calibration>,
    /// Scale bar found in the image (used for calibration or not); its
    /// region is excluded from measurement.
    pub bar: Option<ScaleBar>,
    /// Rectangles excluded from measurement, [x0, y0, x1, y1] inclusive px.
    pub excluded: Vec<[u32; 4]>,
    /// Annotations found and left out (their rectangles are in `excluded`).
    pub annotations: Vec<Annotation>,
    /// Each method's outcome, in registry order.
    pub methods: Vec<Outcome>,
    pub sdas: Estimate,
    pub warnings: Vec<Warning>,
    pub error: Option<String>,
    /// The picture of what was measured, when one was written.
    pub overlay: Option<PathBuf>,
    /// A small copy of the picture, JPEG bytes, for the HTML page (with
    /// [`MeasureOptions::thumbnail_width`]).
    pub thumbnail: Option<Vec<u8>>,
    /// Cooling rate and solidification time, when a correlation was given.
    pub interpretation: Option<crate::Result<crate::interpret::Interpretation>>,
    /// The decision against the spec's limit, when a spec was given.
    pub acceptance: Option<crate::interpret::acceptance::Acceptance>,
    /// Not measured because the run was interrupted before this image.
    pub interrupted: bool,
    /// The local SDAS at each point asked for (`--at`), in the order given.
    pub at: Vec<crate::spatial::AtResult>,
    /// The profile along each line asked for (`--along`), in the order given.
    pub profiles: Vec<crate::spatial::Profile>,
    /// With a correlation, the cooling rate and solidification time of each
    /// profile's bins (none for a bin without a value).
    pub profile_times: Vec<Vec<Option<crate::interpret::LocalTimes>>>,
    /// The plot of each profile, when it was written (or why not).
    pub profile_plots: Vec<Result<PathBuf, String>>,
    /// The map of local SDAS (with `--map` or `--points`).
    pub map: Option<crate::spatial::map::Map>,
    /// With a correlation, each map cell's cooling rate and solidification
    /// time (none for a cell without a value).
    pub map_times: Vec<Option<crate::interpret::LocalTimes>>,
    /// The map pictures written: (what, path), or why one was not.
    pub map_pictures: Vec<(&'static str, Result<PathBuf, String>)>,
    /// Every local measurement of the image, for the point table.
    pub locals: Vec<crate::spatial::Entry>,
    /// Columnar, equiaxed or mixed, from the arms' directions.
    pub morphology: Option<crate::spatial::morphology::Morphology>,
}

/// The error of an image the run did not reach (see [`measure_batch`]).
pub const INTERRUPTED: &str = "not measured: the run was interrupted before this image";

impl ImageResult {
    /// An image the run was interrupted before: not measured, undecided.
    fn interrupted(file: PathBuf, opts: &MeasureOptions) -> Self {
        let mut r = Self::failed(file, INTERRUPTED.to_string(), opts);
        if let Some(a) = r.acceptance.as_mut() {
            if a.decision.is_some() {
                a.reason =
                    "the image was not measured (the run was interrupted): it cannot be compared with the limit"
                        .into();
            }
        }
        r.interrupted = true;
        r
    }

    /// A file that could not be measured. With a spec it is still in its
    /// zone, undecided: it cannot be compared with the limit.
    fn failed(file: PathBuf, error: String, opts: &MeasureOptions) -> Self {
        let acceptance = opts.spec.as_ref().map(|spec| {
            let mut a = acceptance::assess(spec, &file, Default::default(), Default::default());
            if a.decision.is_some() {
                a.reason =
                    "the file could not be read: it cannot be compared with the limit".into();
            }
            a
        });
        Self {
            file,
            info: None,
            calibration: None,
            bar: None,
            excluded: vec![],
            annotations: vec![],
            methods: vec![],
            sdas: Estimate::none("the image could not be measured"),
            warnings: vec![],
            error: Some(error),
            overlay: None,
            thumbnail: None,
            interpretation: None,
            acceptance,
            interrupted: false,
            at: vec![],
            profiles: vec![],
            profile_times: vec![],
            profile_plots: vec![],
            map: None,
            map_times: vec![],
            map_pictures: vec![],
            locals: vec![],
            morphology: None,
        }
    }

    /// The outcome of a method, when it was run.
    pub fn method(&self, m: Method) -> Option<&Outcome> {
        self.methods.iter().find(|o| o.method == m)
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
        Err(e) => return ImageResult::failed(path.to_path_buf(), e.to_string(), opts),
    };
    let info = ImageInfo {
        sha256: loaded.sha256.clone(),
        width: loaded.image.width as u32,
        height: loaded.image.height as u32,
        bit_depth: loaded.bit_depth,
    };
    let mut warnings: Vec<Warning> = loaded
        .warnings
        .into_iter()
        .map(|m| Warning::new("load.note", m))
        .collect();
    if crate::files::path_is_not_utf8(path) {
        warnings.push(Warning::new(
            "load.name-not-unicode",
            format!(
                "the file's name is not valid UTF-8: it is shown as {}, each byte that is not UTF-8 written as \\xNN",
                crate::files::path_text(path)
            ),
        ));
    }
    let detected = scale_bar::detect(&loaded.image);
    // Resolution tags that cannot calibrate (no unit, absurd values) matter
    // only when no other source does: they are then named in the image's
    // error, and otherwise not raised (they bear on no number reported).
    let mut metadata_unused = None;
    let metadata =
        loaded
            .resolution
            .and_then(|(x, y, unit)| match cal::from_resolution(x, y, unit) {
                Ok((v, notes)) => {
                    warnings.extend(
                        notes
                            .into_iter()
                            .map(|m| Warning::new("calibration.metadata", m)),
                    );
                    Some(v)
                }
                Err(note) => {
                    metadata_unused = Some(note);
                    None
                }
            });
    // The bar's label is read when its length is to come from it
    // (`--scale-bar auto`) or is given (to be checked against it).
    let label = (opts.calibration.read_label || opts.calibration.scale_bar.is_some())
        .then(|| detected.as_ref().ok())
        .flatten()
        .map(|b| cal::label::read(&loaded.image, b));
    let calibration =
        match cal::resolve_with_label(&opts.calibration, Some(&detected), label.as_ref(), metadata)
        {
            Ok((c, w)) => {
                warnings.extend(w);
                c
            }
            Err(e) => {
                let e = match metadata_unused {
                    Some(note) => format!("{e}: {note}"),
                    None => e.to_string(),
                };
                let mut r = ImageResult::failed(
                    path.to_path_buf(),
                    format!("{}: {e}", path.display()),
                    opts,
                );
                r.info = Some(info);
                r.bar = detected.ok();
                r.warnings = warnings;
                return r;
            }
        };
    let bar = detected.ok();
    let (mut mask, mut excluded) = match &bar {
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
    // Annotation text is left out like the bar (its letter pitch is no arm
    // spacing).
    let mut found = annotations::find_text(&loaded.image, mask.as_deref());
    if !found.is_empty() {
        let (w, h) = (loaded.image.width, loaded.image.height);
        let m = mask.get_or_insert_with(|| vec![false; w * h]);
        annotations::add_to_mask(&found, m, w);
        excluded.extend(found.iter().map(|a| a.rect));
    }
    // So are data bars, caption bands and the outside of a round field of
    // view (flat, and their edges are no structure), found around the text
    // already left out.
    let frame = annotations::find_frame(&loaded.image, mask.as_deref(), &found);
    if !frame.is_empty() {
        let (w, h) = (loaded.image.width, loaded.image.height);
        let m = mask.get_or_insert_with(|| vec![false; w * h]);
        annotations::add_to_mask(&frame, m, w);
        // The outside of a round field is no rectangle: its ellipse is in
        // its annotation.
        excluded.extend(
            frame
                .iter()
                .filter(|a| a.field_px.is_none())
                .map(|a| a.rect),
        );
        found.extend(frame);
    }
    // What the overlay needs of the micrograph (a byte a pixel); the
    // micrograph's floats then become the prepared image's, so that no
    // second float image is held while the methods run.
    let overlay_base =
        (opts.overlay_dir.is_some() || opts.thumbnail_width.is_some() || opts.map_dir.is_some())
            .then(|| crate::overlay::grey_levels(&loaded.image));
    let image_width = loaded.image.width as u32;
    let prepared = preprocess::prepare_owned(loaded.image, mask, &opts.preprocess);
    let um_per_px = calibration.um_per_px;

    let params = methods::Params {
        fft: opts.fft,
        intercept: opts.intercept,
        centres: Default::default(),
    };
    let inputs = Inputs {
        prepared: &prepared,
    };
    let outcomes: Vec<Outcome> = Method::ALL
        .into_iter()
        .filter(|m| opts.methods.contains(m))
        .map(|m| {
            let mut o = methods::run(m, &inputs, &params);
            o.set_target(opts.target_rel_accuracy_pct);
            o
        })
        .collect();
    for o in &outcomes {
        warnings.extend(o.warnings.iter().cloned());
    }
    let sdas = combine::combine(&outcomes, um_per_px, calibration.rel_uncertainty);
    // The arms' directions for the morphology, from the prepared image at
    // the arm spacing: the image's value, else the median local
    // measurement of the methods with a value, else of any method.
    let arm_spacing = sdas.value.map(|v| um_per_px.to_px(v)).or_else(|| {
        let of = |valued: bool| {
            let v: Vec<f64> = outcomes
                .iter()
                .filter(|o| !valued || o.value.is_some())
                .flat_map(|o| o.local.iter().map(|l| l.spacing.0))
                .filter(|v| v.is_finite() && *v > 0.0)
                .collect();
            crate::stats::median(&v).map(crate::units::Pixels)
        };
        of(true).or_else(|| of(false))
    });
    let dir_samples = arm_spacing
        .map(|s| crate::spatial::morphology::direction_samples(&prepared, s, um_per_px, &opts.fft))
        .unwrap_or_default();
    drop(prepared);
    warnings.extend(combine::disagreements(&outcomes, um_per_px));
    warnings.extend(sdas.warnings.iter().cloned());
    // The local SDAS at the points asked for, from the same outcomes and
    // the same combination as the image's value.
    let wants_map = opts.map_dir.is_some() || opts.points;
    let index = crate::spatial::Index::new(&outcomes, um_per_px);
    let dims = (info.width, info.height);
    let morphology = Some(crate::spatial::morphology::morphology(
        &dir_samples,
        arm_spacing,
        um_per_px,
        dims,
    ));
    let profiles: Vec<crate::spatial::Profile> = opts
        .along
        .iter()
        .map(|spec| {
            crate::spatial::along(
                &index,
                spec,
                &outcomes,
                um_per_px,
                calibration.rel_uncertainty,
                dims,
                opts.fft.min_quality,
            )
        })
        .collect();
    let at: Vec<crate::spatial::AtResult> = opts
        .at
        .iter()
        .map(|spec| {
            crate::spatial::at(
                &index,
                spec,
                &outcomes,
                um_per_px,
                calibration.rel_uncertainty,
                dims,
                opts.fft.min_quality,
            )
        })
        .collect();
    let map = wants_map.then(|| {
        crate::spatial::map::map(
            &index,
            &outcomes,
            um_per_px,
            calibration.rel_uncertainty,
            dims,
            opts.fft.min_quality,
        )
    });
    // Local cooling rates and solidification times, from the chosen law.
    let local_times = |e: &Estimate| {
        let settings = opts.interpret.as_ref()?;
        e.value?;
        settings.local(e.value, e.ci95).ok()
    };
    let profile_times: Vec<Vec<Option<crate::interpret::LocalTimes>>> = profiles
        .iter()
        .map(|p| p.bins.iter().map(|b| local_times(&b.estimate)).collect())
        .collect();
    let map_times: Vec<Option<crate::interpret::LocalTimes>> = match (&map, &opts.interpret) {
        (Some(m), Some(_)) => m
            .cells
            .iter()
            .map(|c| {
                local_times(&Estimate {
                    value: c.value,
                    ci95: c.ci95,
                    ..Estimate::none("")
                })
            })
            .collect(),
        _ => vec![],
    };
    let stem = overlay_name(path, &info.sha256, "png");
    let stem = stem.trim_end_matches(".png");
    let file_name = path
        .file_name()
        .map(|f| f.to_string_lossy().into_owned())
        .unwrap_or_default();
    let write_picture = |dir: &std::path::Path,
                         name: String,
                         draw: &dyn Fn() -> crate::Result<image::RgbImage>|
     -> Result<PathBuf, String> {
        let target = dir.join(name);
        if opts.protected.is_protected(&target) {
            return Err(format!("{} is an input of this run", target.display()));
        }
        let picture = draw().map_err(|e| e.to_string())?;
        crate::plots::write_png(&target, &picture).map_err(|e| e.to_string())?;
        Ok(target)
    };
    let profile_plots: Vec<Result<PathBuf, String>> = match &opts.plot_dir {
        None => vec![],
        Some(dir) => profiles
            .iter()
            .zip(&profile_times)
            .enumerate()
            .map(|(k, (p, times))| {
                if let Some(r) = &p.reason {
                    return Err(format!("no profile: {r}"));
                }
                let len = (p.to_um[0] - p.from_um[0]).hypot(p.to_um[1] - p.from_um[1]);
                let step = if p.bins.is_empty() {
                    p.bin_um
                } else {
                    len / p.bins.len() as f64
                };
                let sdas: Vec<crate::plots::BinPoint> = p
                    .bins
                    .iter()
                    .map(|b| crate::plots::BinPoint {
                        distance_um: b.distance_um,
                        width_um: step,
                        value: b.estimate.value.map(|v| v.0),
                        ci95: b.estimate.ci95.map(|c| [c[0].0, c[1].0]),
                    })
                    .collect();
                let tf: Vec<crate::plots::BinPoint> = p
                    .bins
                    .iter()
                    .zip(times)
                    .map(|(b, t)| {
                        let q = t.as_ref().map(|t| &t.solidification_time_s);
                        crate::plots::BinPoint {
                            distance_um: b.distance_um,
                            width_um: step,
                            value: q.and_then(|q| q.value),
                            ci95: q.and_then(|q| q.ci95),
                        }
                    })
                    .collect();
                let mut panels = vec![crate::plots::Panel {
                    y_desc: "SDAS (um)",
                    bins: &sdas,
                }];
                if opts.interpret.is_some() {
                    panels.push(crate::plots::Panel {
                        y_desc: "local solidification time (s)",
                        bins: &tf,
                    });
                }
                let title = format!(
                    "{file_name}: SDAS along {} ({} bins)",
                    p.spec.text,
                    p.bins.len()
                );
                write_picture(dir, format!("{stem}-profile{}.png", k + 1), &|| {
                    crate::plots::profile_picture(&title, len, &panels)
                })
            })
            .collect(),
    };
    let map_pictures: Vec<(&'static str, Result<PathBuf, String>)> =
        match (&opts.map_dir, &map, &overlay_base) {
            (Some(dir), Some(m), Some(base)) => {
                let mut out = vec![];
                let sdas: Vec<Option<f64>> = m.cells.iter().map(|c| c.value.map(|v| v.0)).collect();
                let sdas_ci: Vec<Option<[f64; 2]>> = m
                    .cells
                    .iter()
                    .map(|c| c.ci95.map(|[a, b]| [a.0, b.0]))
                    .collect();
                let title = format!(
                    "{file_name}: local SDAS, cells of {:.0} um, {} of {} with a value",
                    m.step_um,
                    m.valued(),
                    m.cells.len()
                );
                out.push((
                    "sdas",
                    match &m.reason {
                        Some(r) => Err(format!("no map: {r}")),
                        None => write_picture(dir, format!("{stem}-map-sdas.png"), &|| {
                            crate::plots::map_picture(
                                base,
                                m,
                                &sdas,
                                &sdas_ci,
                                "local SDAS (um)",
                                &title,
                                um_per_px.get(),
                            )
                        }),
                    },
                ));
                if opts.interpret.is_some() {
                    let tf: Vec<Option<f64>> = map_times
                        .iter()
                        .map(|t| t.as_ref().and_then(|t| t.solidification_time_s.value))
                        .collect();
                    let tf_ci: Vec<Option<[f64; 2]>> = map_times
                        .iter()
                        .map(|t| t.as_ref().and_then(|t| t.solidification_time_s.ci95))
                        .collect();
                    let title = format!(
                        "{file_name}: local solidification time, {} of {} cells with a value",
                        tf.iter().flatten().count(),
                        m.cells.len()
                    );
                    out.push((
                        "solidification_time",
                        match &m.reason {
                            Some(r) => Err(format!("no map: {r}")),
                            None => write_picture(dir, format!("{stem}-map-tf.png"), &|| {
                                crate::plots::map_picture(
                                    base,
                                    m,
                                    &tf,
                                    &tf_ci,
                                    "local solidification time (s)",
                                    &title,
                                    um_per_px.get(),
                                )
                            }),
                        },
                    ));
                }
                out
            }
            _ => vec![],
        };
    for (what, r) in profile_plots
        .iter()
        .map(|r| ("profile plot", r))
        .chain(map_pictures.iter().map(|(_, r)| ("map", r)))
    {
        if let Err(e) = r {
            warnings.push(Warning::new(
                "pictures.not-written",
                format!("{what} not written: {e}"),
            ));
        }
    }
    let locals: Vec<crate::spatial::Entry> = if opts.points {
        index.entries().to_vec()
    } else {
        vec![]
    };
    warnings.extend(crate::interpret::plausibility::field_warning(
        image_width,
        um_per_px.get(),
    ));
    let implausible = sdas
        .value
        .and_then(crate::interpret::plausibility::sdas_warning);
    warnings.extend(implausible.iter().cloned());
    let interpretation = opts
        .interpret
        .as_ref()
        .map(|settings| settings.apply(sdas.value, sdas.ci95));
    match &interpretation {
        Some(Err(e)) => warnings.push(Warning::new(
            "interpretation.none",
            format!("no interpretation: {e}"),
        )),
        // The interpretation's caveats bear on the cooling rate and
        // solidification time quoted beside the SDAS: they go wherever the
        // image's warnings go (stderr, CSV), not only into its block.
        Some(Ok(i)) => warnings.extend(
            i.warnings
                .iter()
                .map(|w| Warning::new("interpretation.caveat", w.clone())),
        ),
        None => {}
    }
    let acceptance = opts.spec.as_ref().map(|spec| {
        let u = calibration.rel_uncertainty.unwrap_or(0.0);
        let mut a = acceptance::assess(
            spec,
            path,
            combine::value_evidence(&sdas, u),
            combine::max_local(&outcomes, &sdas, um_per_px, u),
        );
        // A calibration the given sources contradict decides nothing: the
        // value could be off by the factor between them.
        // Nor does an SDAS no cast metal shows (most likely a unit slip).
        let doubt = calibration
            .conflict
            .clone()
            .or_else(|| implausible.as_ref().map(|w| w.message.clone()));
        if let (Some(doubt), Some(_)) = (doubt, a.decision) {
            if let Some(p) = a.pool_field.as_mut() {
                p.doubt = Some(doubt.clone());
            }
            a.decision = Some(acceptance::Decision::Indeterminate);
            a.reason = format!("not decided: {doubt}");
            a.measurements_to_decide = None;
            a.fields_to_decide = None;
        }
        a
    });
    // From here on the methods are shown, not used: a value that did not
    // enter the image's value is shown as an indicative figure.
    let outcomes = combine::withhold_unused(outcomes, &sdas);
    // The picture is drawn last, so that its panel can state the decision;
    // once for each width it is shown at (its strokes are set for that
    // width), one copy at a time.
    let draw = |shown: Option<u32>| {
        overlay_base.as_ref().map(|base| {
            crate::overlay::measurement(
                base,
                bar.as_ref(),
                &found,
                &outcomes,
                opts.fft.min_quality,
                shown,
            )
        })
    };
    let file = crate::files::path_text(path);
    let caption = crate::overlay::Caption {
        file: &file,
        sdas: &sdas,
        outcomes: &outcomes,
        um_per_px,
        calibration_source: calibration.source.name(),
        morphology: morphology.as_ref(),
        acceptance: acceptance.as_ref(),
    };
    // The page's copy is scaled before its panel is set, so that the panel's
    // text is set for the width the page shows.
    let thumbnail = opts
        .thumbnail_width
        .and_then(|width| Some((width, draw(Some(width))?)))
        .and_then(|(width, picture)| {
            let small = crate::overlay::fit_width(picture, Some(width));
            match crate::overlay::encode_jpeg_within(
                &crate::overlay::with_panel(small, &caption),
                crate::overlay::PAGE_PICTURE_BYTES,
            ) {
                Ok(bytes) => Some(bytes),
                Err(e) => {
                    warnings.push(Warning::new(
                        "overlay.not-written",
                        format!("the page's copy of the picture could not be made: {e}"),
                    ));
                    None
                }
            }
        });
    let overlay = opts
        .overlay_dir
        .as_ref()
        .and_then(|dir| Some((dir, draw(opts.overlay_max_width)?)))
        .and_then(|(dir, picture)| {
            let picture = crate::overlay::fit_width(picture, opts.overlay_max_width);
            let picture = crate::overlay::with_panel(picture, &caption);
            let target = dir.join(overlay_name(
                path,
                &info.sha256,
                opts.overlay_format.extension(),
            ));
            if opts.protected.is_protected(&target) {
                warnings.push(Warning::new(
                    "overlay.not-written",
                    format!(
                        "overlay not written: {} is an input of this run",
                        target.display()
                    ),
                ));
                return None;
            }
            match opts.overlay_format.write(&target, &picture) {
                Ok(()) => Some(target),
                Err(e) => {
                    warnings.push(Warning::new(
                        "overlay.not-written",
                        format!("overlay not written: {e}"),
                    ));
                    None
                }
            }
        });
    ImageResult {
        file: path.to_path_buf(),
        info: Some(info),
        calibration: Some(calibration),
        bar,
        excluded,
        annotations: found,
        methods: outcomes,
        sdas,
        warnings,
        error: None,
        overlay,
        thumbnail,
        interpretation,
        acceptance,
        interrupted: false,
        at,
        profiles,
        profile_times,
        profile_plots,
        map,
        map_times,
        map_pictures,
        locals,
        morphology,
    }
}

/// File name of an image's overlay: its stem and the first eight hex digits
/// of its SHA-256, so that images of the same name in different folders do
/// not overwrite each other's pictures.
pub fn overlay_name(path: &std::path::Path, sha256: &str, extension: &str) -> String {
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "image".into());
    format!("{stem}-{}.{extension}", &sha256[..sha256.len().min(8)])
}

/// Measures a batch in parallel; results come back in input order.
/// `on_done` is called with each image's result as soon as it is finished
/// (in the order they finish: for progress and results as they come);
/// skipped entries are not images and are not passed to it.
///
/// With a memory budget (`opts.load.memory_budget`), images are admitted in
/// input order, each when its estimated peak ([`crate::memory`], from the
/// header, before decoding) fits beside those of the images in progress: a
/// large image waits until the ones before it are done and runs alone, and
/// one over the whole budget is refused by [`measure_file`] with its
/// estimate. Without a budget every image is admitted at once, as the
/// thread pool allows.
pub fn measure_batch(
    inputs: &[Input],
    opts: &MeasureOptions,
    on_done: &(dyn Fn(&ImageResult) + Sync),
    stop: &std::sync::atomic::AtomicBool,
) -> (Vec<ImageResult>, Vec<Skipped>) {
    measure_batch_with(
        inputs,
        opts,
        &BatchControl {
            on_begin: &|_| {},
            on_done,
            stop,
            run_alone: &std::collections::HashSet::new(),
        },
    )
}

/// How a batch is run beside the options that decide each image's result.
pub struct BatchControl<'a> {
    /// Called with an image's path just before it is read and measured
    /// (not for files that fail before that, nor for skipped entries).
    pub on_begin: &'a (dyn Fn(&Path) + Sync),
    /// Called with each image's result as soon as it is finished.
    pub on_done: &'a (dyn Fn(&ImageResult) + Sync),
    /// Once set (an interrupt), images not yet begun are not measured.
    pub stop: &'a std::sync::atomic::AtomicBool,
    /// Images measured with nothing else beside them: each takes the whole
    /// memory budget while it runs. For images suspected of having ended an
    /// earlier run (the command line's supervisor), so that if one ends a
    /// run again, it is the only image in progress and is named alone.
    pub run_alone: &'a std::collections::HashSet<PathBuf>,
}

/// [`measure_batch`] with a begin hook and images run alone.
pub fn measure_batch_with(
    inputs: &[Input],
    opts: &MeasureOptions,
    control: &BatchControl,
) -> (Vec<ImageResult>, Vec<Skipped>) {
    let (on_done, stop) = (control.on_done, control.stop);
    let work = |input: &Input| -> Option<ImageResult> {
        // Once `stop` is set (an interrupt), images not yet begun are
        // not measured; those in progress finish.
        let stopped = stop.load(std::sync::atomic::Ordering::SeqCst);
        let r = match input {
            Input::Image(p) | Input::Missing(p) if stopped => {
                return Some(ImageResult::interrupted(p.clone(), opts));
            }
            Input::Unusable { path, .. } if stopped => {
                return Some(ImageResult::interrupted(path.clone(), opts));
            }
            Input::Image(p) => {
                (control.on_begin)(p);
                Some(measure_file(p, opts))
            }
            Input::Missing(p) => Some(ImageResult::failed(
                p.clone(),
                crate::Error::Missing { path: p.clone() }.to_string(),
                opts,
            )),
            Input::Unusable { path, reason } => Some(ImageResult::failed(
                path.clone(),
                crate::Error::Input {
                    path: path.clone(),
                    reason: reason.clone(),
                }
                .to_string(),
                opts,
            )),
            Input::Skipped { .. } => None,
        };
        if let Some(r) = &r {
            on_done(r);
        }
        r
    };
    let gate = crate::memory::Gate::new(opts.load.memory_budget.unwrap_or(u64::MAX));
    let slots: Vec<std::sync::Mutex<Option<ImageResult>>> =
        inputs.iter().map(|_| std::sync::Mutex::new(None)).collect();
    rayon::in_place_scope(|scope| {
        for (input, slot) in inputs.iter().zip(&slots) {
            // An image's share of the budget: its estimate. A file whose
            // header cannot be read fails at once in `measure_file` and
            // needs only the fixed part; one its header's checks refuse
            // (over the budget, the pixel limit, the file-size rule) is
            // refused there before decoding, so it waits for nothing; so
            // does any image once the run is interrupted (it is not begun).
            let stopped = stop.load(std::sync::atomic::Ordering::SeqCst);
            let need = match input {
                Input::Image(p) if opts.load.memory_budget.is_some() && !stopped => {
                    match load::read_header(p) {
                        Ok(h) if load::check_header(p, &h, &opts.load).is_ok() => {
                            crate::memory::estimate_peak(&h)
                        }
                        Ok(_) => 0,
                        Err(_) => crate::memory::FIXED_BYTES,
                    }
                }
                _ => 0,
            };
            // The whole budget (the gate clamps to it): admitted only when
            // nothing else runs, and nothing else admitted beside it.
            let need = match input {
                Input::Image(p) if control.run_alone.contains(p) => u64::MAX,
                _ => need,
            };
            let reserved = gate.acquire(need);
            let (gate, work) = (&gate, &work);
            scope.spawn(move |_| {
                let r = work(input);
                *slot.lock().unwrap_or_else(|e| e.into_inner()) = r;
                gate.release(reserved);
            });
        }
    });
    let results: Vec<Option<ImageResult>> = slots
        .into_iter()
        .map(|s| s.into_inner().unwrap_or_else(|e| e.into_inner()))
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
