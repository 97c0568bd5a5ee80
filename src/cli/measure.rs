//! `armspace measure`: images and folders in, the JSON report (and CSV and
//! pictures) out.

use super::interpret::AlloyArgs;
use super::{
    create_overlay_dir, parse_percent, parse_positive, ConventionArg, EXIT_FATAL,
    EXIT_INDETERMINATE, EXIT_LIMIT_FAILED, EXIT_NOT_MEASURED, EXIT_OK, EXIT_USAGE,
};
use armspace::calibrate::{
    self, parse_scale_bar, parse_um_per_px, BarLength, CalibrationRequest, ScaleBarLength,
};
use armspace::load::{collect_inputs, LoadOptions, DEFAULT_MAX_MEGAPIXELS};
use armspace::methods::fft::FftParams;
use armspace::methods::intercept::InterceptParams;
use armspace::pipeline::{MeasureOptions, Method};
use armspace::preprocess::PreprocessParams;
use armspace::report;
use clap::ValueEnum;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};

#[derive(clap::Args)]
pub(super) struct MeasureArgs {
    /// Image files or folders (walked recursively, sorted, hidden entries ignored).
    #[arg(required = true)]
    paths: Vec<PathBuf>,
    #[command(flatten)]
    calibration: CalibrationArgs,
    /// Write the JSON report here (atomically); without it the report goes to stdout.
    /// While the run goes, each finished image is kept in a journal beside
    /// it (REPORT.journal), removed once the report is written whole.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Take over the images an interrupted run with the same arguments
    /// finished (from the journal beside --out) and measure only the rest.
    #[arg(long, requires = "out")]
    resume: bool,
    /// Measurement method(s).
    #[arg(long, value_enum, default_value = "all")]
    method: MethodArg,
    /// Refuse images with more megapixels than this (checked before decoding).
    #[arg(long, default_value_t = DEFAULT_MAX_MEGAPIXELS, value_parser = parse_positive, allow_negative_numbers = true)]
    max_megapixels: f64,
    /// Memory the run may use (4G, 1500MB, 2.5GiB). Each image's peak is
    /// estimated from its header before decoding: an image whose estimate
    /// is over the budget is refused, and images are measured side by side
    /// only while their estimates fit in it together. Default: three
    /// quarters of the memory available when the run starts.
    #[arg(long, value_parser = armspace::memory::parse_size)]
    memory_budget: Option<u64>,
    /// Measure files whose header claims more pixels per byte than a real
    /// micrograph compresses to (refused by default as a damaged or forged
    /// header).
    #[arg(long)]
    allow_high_compression: bool,
    /// How an intercept line's spacing is computed from its arm count.
    #[arg(long, value_enum, default_value = "centre-to-centre")]
    convention: ConventionArg,
    /// Target percent relative accuracy of the intercept lines (reports how many lines reach it).
    #[arg(long, default_value_t = 10.0, value_parser = parse_percent)]
    target_ra_pct: f64,
    /// Write a picture per image of what was measured into this folder.
    #[arg(long)]
    overlay: Option<PathBuf>,
    /// Largest width of a picture, px: wider ones are scaled down to it
    /// (the panel under it is set for that width), for a report's page.
    #[arg(long, value_parser = clap::value_parser!(u32).range(200..=20000), requires = "overlay")]
    overlay_max_width: Option<u32>,
    /// File format of the pictures: png (lossless) or jpeg (smaller, for a
    /// report; quality 90). Either is marked as armspace's own, so that a
    /// later run over the folder does not measure it.
    #[arg(long, value_enum, default_value = "png", requires = "overlay")]
    overlay_format: PictureFormatArg,
    /// Worker threads (default: one per core).
    #[arg(long, value_parser = clap::value_parser!(u16).range(1..))]
    jobs: Option<u16>,
    /// Correlation id (see `armspace correlations`) for cooling rate and
    /// solidification time (`--alloy` is the old name, still accepted).
    #[arg(long = "correlation", visible_alias = "alloy", value_name = "ID")]
    correlation: Option<String>,
    #[command(flatten)]
    alloy: AlloyArgs,
    /// SDAS acceptance spec (JSON: limit, zones by file-name pattern, statistic, decision rule).
    #[arg(long)]
    spec: Option<PathBuf>,
    /// Also write a CSV summary, a row per image (atomically).
    #[arg(long)]
    csv: Option<PathBuf>,
    /// Also write one self-contained HTML page of the batch (pictures
    /// embedded, readable offline, printable to A4), atomically.
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
    /// The SDAS at a point (for example a crack origin), X,Y from the
    /// image's top-left corner (y down), in um, or in pixels with a px
    /// suffix (400,300px). Repeatable. From the local measurements within
    /// the radius R (400,300:50px), or by default within the smallest
    /// radius that gives a value (reported). In the report (images[].at)
    /// and on the terminal.
    #[arg(long, value_name = "X,Y[:R]", value_parser = armspace::spatial::parse_at, allow_hyphen_values = true)]
    at: Vec<armspace::spatial::AtSpec>,
    /// SDAS against distance along the line from X0,Y0 to X1,Y1 (units as
    /// for --at), in bins of length BIN (default a tenth of the line),
    /// each bin the square of that side on the line. Repeatable. In the
    /// report (images[].profile).
    #[arg(long, value_name = "X0,Y0:X1,Y1[:BIN]", value_parser = armspace::spatial::parse_along, allow_hyphen_values = true)]
    along: Vec<armspace::spatial::AlongSpec>,
    /// Write per image a map of the local SDAS over the micrograph (PNG,
    /// and with --correlation a map of the local solidification time) into
    /// this folder. Each cell's value comes from the local measurements
    /// around its centre by the rules of --at; cells without support are
    /// left uncoloured. The grid is in the report (images[].map).
    #[arg(long, value_name = "DIR")]
    map: Option<PathBuf>,
    /// Folder for the plot of each --along profile (PNG); by default the
    /// folder of --map, else of --overlay.
    #[arg(long, value_name = "DIR", requires = "along")]
    plots: Option<PathBuf>,
    /// Also write every local measurement of every image to this CSV
    /// (position, its own reading, the local SDAS of its map cell with the
    /// interval, and with --correlation the local solidification time and
    /// cooling rate), atomically.
    #[arg(long, value_name = "FILE.csv", conflicts_with = "resume")]
    points: Option<PathBuf>,
    /// Measure only part K of N of the batch (1 <= K <= N): of the images
    /// in input order, the K-th of every N. Run the N parts as separate
    /// jobs (on one machine or several), each with its own --out, then
    /// join their reports with `armspace merge`.
    #[arg(long, value_name = "K/N", value_parser = parse_shard)]
    shard: Option<(usize, usize)>,
}

/// `K/N` with 1 <= K <= N.
fn parse_shard(s: &str) -> Result<(usize, usize), String> {
    let parsed = s.split_once('/').and_then(|(k, n)| {
        Some((
            k.trim().parse::<usize>().ok()?,
            n.trim().parse::<usize>().ok()?,
        ))
    });
    match parsed {
        Some((k, n)) if k >= 1 && k <= n => Ok((k, n)),
        _ => Err(format!(
            "'{s}' is not a part K/N of a batch with 1 <= K <= N (for example 2/8)"
        )),
    }
}

/// Width, px, of the pictures embedded in the HTML page: a page of A4 with
/// 12 mm margins is 186 mm wide, 703 px at the 96 px per inch browsers lay
/// out at; 720 fills it.
const PAGE_PICTURE_WIDTH: u32 = 720;

/// Calibration sources. Precedence: --um-per-px, then --profile, then the
/// scale bar, then TIFF resolution tags.
#[derive(clap::Args)]
struct CalibrationArgs {
    /// Calibration: micrometres per pixel (takes precedence over every other source).
    #[arg(long, value_parser = parse_um_per_px, allow_negative_numbers = true)]
    um_per_px: Option<armspace::units::UmPerPx>,
    /// Stated relative standard uncertainty of --um-per-px, in percent (for
    /// example from a stage micrometer's calibration); it widens every
    /// interval and enters the acceptance. Without it the value is taken as
    /// exact.
    #[arg(long, value_parser = parse_percent, requires = "um_per_px")]
    um_per_px_uncertainty_pct: Option<f64>,
    /// Physical length of the scale bar burned into the images, with its
    /// unit (100um, 0.1mm, 500nm), or `auto` to read it from the label
    /// printed beside each bar (an image whose label is not read with
    /// confidence is not measured). With a length given, a label that
    /// reads otherwise is warned about.
    #[arg(long, value_parser = parse_scale_bar, allow_hyphen_values = true)]
    scale_bar: Option<ScaleBarLength>,
    /// Stated relative uncertainty of the scale bar itself, in percent.
    #[arg(long, value_parser = parse_percent, requires = "scale_bar")]
    scale_bar_uncertainty_pct: Option<f64>,
    /// Calibration profile file (JSON, named profiles per objective or camera).
    #[arg(long, requires = "profile")]
    profiles: Option<PathBuf>,
    /// Name of the profile to use from --profiles.
    #[arg(long, requires = "profiles")]
    profile: Option<String>,
    /// The calibration to trust when the given ones conflict beyond their
    /// uncertainties (otherwise such an image is not decided).
    #[arg(long, value_enum)]
    trust_calibration: Option<TrustArg>,
}

#[derive(Clone, Copy, ValueEnum)]
enum TrustArg {
    /// The --um-per-px value.
    Manual,
    /// The --profile value.
    Profile,
    /// The measured scale bar.
    ScaleBar,
}

impl CalibrationArgs {
    fn request(&self) -> armspace::Result<CalibrationRequest> {
        let profile = match (&self.profiles, &self.profile) {
            (Some(file), Some(name)) => Some(calibrate::profile::load(file, name)?),
            _ => None,
        };
        Ok(CalibrationRequest {
            manual: self.um_per_px,
            manual_rel_uncertainty: self.um_per_px_uncertainty_pct.map(|p| p / 100.0),
            profile,
            scale_bar: match self.scale_bar {
                Some(ScaleBarLength::Given(length)) => Some(BarLength {
                    length,
                    rel_uncertainty: self.scale_bar_uncertainty_pct.unwrap_or(0.0) / 100.0,
                }),
                _ => None,
            },
            read_label: self.scale_bar == Some(ScaleBarLength::Read),
            trust: self.trust_calibration.map(|t| match t {
                TrustArg::Manual => calibrate::CalibrationSource::Manual,
                TrustArg::Profile => calibrate::CalibrationSource::Profile,
                TrustArg::ScaleBar => calibrate::CalibrationSource::ScaleBar,
            }),
        })
    }
}

#[derive(Clone, Copy, ValueEnum)]
enum MethodArg {
    Fft,
    Intercept,
    Centres,
    All,
}

/// `--overlay-format`.
#[derive(Clone, Copy, ValueEnum)]
enum PictureFormatArg {
    Png,
    Jpeg,
}

pub(super) fn run(args: MeasureArgs) -> ExitCode {
    // A failed allocation ends a process; the run goes on in a worker so
    // that it ends only that image (cli/supervise.rs).
    let report_file = args
        .out
        .as_deref()
        .filter(|o| armspace::files::kind(o) != armspace::files::Kind::Special);
    if let Some(code) = super::supervise::supervise(report_file, args.resume, args.points.is_some())
    {
        return code;
    }
    let worker = match super::supervise::Worker::from_env() {
        Ok(w) => w,
        Err(e) => return super::supervise::worker_error(&e),
    };
    let methods = match args.method {
        MethodArg::Fft => vec![Method::Fft],
        MethodArg::Intercept => vec![Method::Intercept],
        MethodArg::Centres => vec![Method::Centres],
        MethodArg::All => Method::ALL.to_vec(),
    };
    let calibration = match args.calibration.request() {
        Ok(c) => c,
        Err(e) => {
            say!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    let interpret = match args.alloy.settings(args.correlation.as_deref()) {
        Ok(s) => s,
        Err(e) => {
            say!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    for (a, b, names) in [
        (&args.csv, &args.out, "--csv and --out"),
        (&args.html, &args.out, "--html and --out"),
        (&args.html, &args.csv, "--html and --csv"),
        (&args.points, &args.out, "--points and --out"),
        (&args.points, &args.csv, "--points and --csv"),
        (&args.points, &args.html, "--points and --html"),
    ] {
        if let (Some(a), Some(b)) = (a, b) {
            if a == b {
                say!(
                    "armspace: {names} name the same file ({}); give each its own",
                    a.display()
                );
                return ExitCode::from(EXIT_USAGE);
            }
        }
    }
    let spec = match args
        .spec
        .as_deref()
        .map(armspace::interpret::acceptance::Spec::load)
    {
        None => None,
        Some(Ok(s)) => Some(s),
        Some(Err(e)) => {
            say!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    let opts = MeasureOptions {
        calibration,
        load: LoadOptions {
            max_megapixels: args.max_megapixels,
            memory_budget: Some(
                args.memory_budget
                    .unwrap_or_else(armspace::memory::default_budget),
            ),
            allow_high_compression: args.allow_high_compression,
        },
        preprocess: PreprocessParams::default(),
        fft: FftParams::default(),
        intercept: InterceptParams {
            convention: args.convention.convention(),
            ..InterceptParams::default()
        },
        target_rel_accuracy_pct: args.target_ra_pct,
        methods,
        overlay_dir: args.overlay.clone(),
        overlay_max_width: args.overlay_max_width,
        overlay_format: match args.overlay_format {
            PictureFormatArg::Png => armspace::overlay::PictureFormat::Png,
            PictureFormatArg::Jpeg => armspace::overlay::PictureFormat::Jpeg,
        },
        thumbnail_width: args.html.as_ref().map(|_| PAGE_PICTURE_WIDTH),
        protected: Default::default(),
        interpret,
        spec,
        at: args.at.clone(),
        along: args.along.clone(),
        map_dir: args.map.clone(),
        plot_dir: if args.along.is_empty() {
            None
        } else {
            args.plots
                .clone()
                .or_else(|| args.map.clone())
                .or_else(|| args.overlay.clone())
        },
        points: args.points.is_some(),
    };
    let inputs = collect_inputs(&args.paths);
    if !inputs
        .iter()
        .any(|i| !matches!(i, armspace::load::Input::Skipped { .. }))
    {
        say!("armspace: no image files found in the given paths");
        return ExitCode::from(EXIT_NOT_MEASURED);
    }
    if let Err(e) = points_in_some_image(&args.at, &inputs, args.calibration.um_per_px) {
        say!("armspace: {e}");
        return ExitCode::from(EXIT_USAGE);
    }
    // One part of the batch: the K-th of every N images in input order; the
    // files passed over are listed by part 1 only, so that the joined
    // report lists each once.
    let batch_images = inputs
        .iter()
        .filter(|i| !matches!(i, armspace::load::Input::Skipped { .. }))
        .count();
    // Every image of the batch is protected from the outputs, also those
    // of the other parts.
    let batch_paths: Vec<PathBuf> = inputs
        .iter()
        .filter_map(|i| match i {
            armspace::load::Input::Image(p) => Some(p.clone()),
            _ => None,
        })
        .collect();
    let inputs: Vec<armspace::load::Input> = match args.shard {
        None => inputs,
        Some((k, n)) => {
            let mut i = 0;
            inputs
                .into_iter()
                .filter(|input| match input {
                    armspace::load::Input::Skipped { .. } => k == 1,
                    _ => {
                        i += 1;
                        report::merge::in_part(i - 1, k, n)
                    }
                })
                .collect()
        }
    };
    // Images that ended an earlier attempt of this run (the supervisor's
    // notes): recorded as not measured, with the reason; and images to be
    // measured alone.
    let (inputs, run_alone) = match &worker {
        None => (inputs, std::collections::HashSet::new()),
        Some(w) => {
            let inputs: Vec<armspace::load::Input> = inputs
                .into_iter()
                .map(|input| match input {
                    armspace::load::Input::Image(p) => {
                        match w.retry.failed.get(&armspace::files::path_text(&p)) {
                            Some(reason) => armspace::load::Input::Unusable {
                                path: p,
                                reason: reason.clone(),
                            },
                            None => armspace::load::Input::Image(p),
                        }
                    }
                    other => other,
                })
                .collect();
            let alone = inputs
                .iter()
                .filter_map(|i| match i {
                    armspace::load::Input::Image(p)
                        if w.retry.alone.contains(&armspace::files::path_text(p)) =>
                    {
                        Some(p.clone())
                    }
                    _ => None,
                })
                .collect();
            (inputs, alone)
        }
    };
    let shard = args.shard.map(|(index, count)| report::ShardParameters {
        index,
        count,
        batch_images,
    });
    // Every output is checked before the first image is measured: none may
    // replace an input (after resolving links), and each must be writable.
    let mut protected = armspace::files::Protected::new(batch_paths.iter().map(|p| p.as_path()));
    for p in [
        args.spec.as_deref(),
        args.calibration.profiles.as_deref(),
        args.alloy.correlations.as_deref(),
    ]
    .into_iter()
    .flatten()
    {
        protected.add(p);
    }
    for (path, role) in [
        (&args.out, "report"),
        (&args.csv, "CSV summary"),
        (&args.html, "HTML page"),
        (&args.points, "point table"),
    ] {
        if let Some(path) = path {
            if let Err(e) = protected.check_output(path, role) {
                say!("armspace: {e}");
                return ExitCode::from(EXIT_USAGE);
            }
        }
    }
    // The journal lies beside a report written to a file (not beside a
    // device named as --out), and is checked as the other outputs are.
    let journal_path = match (&args.out, &worker) {
        (Some(out), _) => Some(out.as_path())
            .filter(|out| armspace::files::kind(out) != armspace::files::Kind::Special)
            .map(armspace::journal::path_for),
        // A worker whose report goes to stdout keeps its journal in the
        // supervisor's notes, for a later attempt (not with --points).
        (None, Some(w)) if args.points.is_none() => Some(w.journal()),
        (None, _) => None,
    };
    // A later attempt of the supervisor takes over the finished images.
    let resume = args.resume || worker.as_ref().is_some_and(|w| w.retry.resume);
    if let Some(journal) = &journal_path {
        let checked = if armspace::files::kind(journal) == armspace::files::Kind::Special {
            Err(armspace::Error::Input {
                path: journal.clone(),
                reason: "is not a regular file (a FIFO, device or socket); the journal of the report needs this name".into(),
            })
        } else if args.csv.as_deref() == Some(journal.as_path())
            || args.html.as_deref() == Some(journal.as_path())
        {
            Err(armspace::Error::Input {
                path: journal.clone(),
                reason: "is the name of the report's journal; give --csv and --html other names"
                    .into(),
            })
        } else {
            protected.check_output(journal, "journal")
        };
        if let Err(e) = checked {
            say!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    } else if args.resume {
        say!("armspace: --resume needs --out to name a file: the journal lies beside the report");
        return ExitCode::from(EXIT_USAGE);
    }
    if let Err(code) = create_overlay_dir(args.overlay.as_deref()) {
        return code;
    }
    for (dir, what) in [(&args.map, "map"), (&opts.plot_dir, "plot")] {
        if let Some(dir) = dir {
            if let Err(e) = std::fs::create_dir_all(dir) {
                say!(
                    "armspace: {}: cannot create the {what} folder: {e}",
                    dir.display()
                );
                return ExitCode::from(EXIT_FATAL);
            }
        }
    }
    let opts = MeasureOptions { protected, ..opts };
    let given: Vec<String> = args.paths.iter().map(|p| p.display().to_string()).collect();
    let pool = match rayon::ThreadPoolBuilder::new()
        .num_threads(args.jobs.map_or(0, usize::from))
        .build()
    {
        Ok(p) => p,
        Err(e) => {
            say!("armspace: cannot start worker threads: {e}");
            return ExitCode::from(EXIT_FATAL);
        }
    };
    // One run per report: a second run given the same --out is refused
    // before it reads or replaces the first one's journal.
    let lock_held = std::env::var_os(super::supervise::LOCK_HELD_ENV).is_some();
    let _lock = match &journal_path {
        Some(_) if !lock_held => match args.out.as_deref().map(armspace::journal::RunLock::acquire)
        {
            Some(Ok(lock)) => Some(lock),
            Some(Err(e)) => {
                say!("armspace: {e}");
                return ExitCode::from(EXIT_USAGE);
            }
            None => None,
        },
        _ => None,
    };
    // A part's journal is its own: the part is in the fingerprint.
    let fingerprint = armspace::journal::fingerprint(
        &given
            .iter()
            .cloned()
            .chain(args.shard.map(|(k, n)| format!("--shard {k}/{n}")))
            .collect::<Vec<_>>(),
        &opts,
    );
    // With --resume, the images the journal holds and that are unchanged are
    // taken over; the rest are measured.
    let taken: Vec<Option<report::ImageReport>> = match (&journal_path, resume) {
        (Some(journal), true) => match armspace::journal::read(journal, &fingerprint) {
            Ok(None) => {
                say!(
                    "armspace: note: no journal {} to resume from: measuring every image",
                    journal.display()
                );
                none_taken(inputs.len())
            }
            Ok(Some(earlier)) => {
                for note in &earlier.notes {
                    say!("armspace: warning: {note}");
                }
                let sorted = pool.install(|| earlier.sort(&inputs));
                for note in &sorted.notes {
                    say!("armspace: note: {note}");
                }
                sorted.taken
            }
            Err(e) => {
                say!("armspace: {e}");
                return ExitCode::from(EXIT_USAGE);
            }
        },
        (Some(journal), false) => {
            if armspace::files::kind(journal) == armspace::files::Kind::Regular {
                say!(
                    "armspace: note: replacing the journal {} of an earlier run (--resume takes over the images it finished)",
                    journal.display()
                );
            }
            none_taken(inputs.len())
        }
        (None, _) => none_taken(inputs.len()),
    };
    let carried: Vec<&report::ImageReport> = taken.iter().flatten().collect();
    let journal = match &journal_path {
        Some(path) => match armspace::journal::Journal::start(path, &fingerprint, &carried) {
            Ok(j) => Some(j),
            Err(e) => {
                say!("armspace: cannot start the journal: {e}");
                return ExitCode::from(EXIT_FATAL);
            }
        },
        None => None,
    };
    if !carried.is_empty() && args.out.is_none() {
        say!(
            "armspace: {} images taken over from the attempt that stopped, measuring the rest",
            carried.len()
        );
    } else if !carried.is_empty() {
        say!(
            "armspace: resuming: {} images taken over from the journal {}, measuring the rest",
            carried.len(),
            journal
                .as_ref()
                .map(|j| j.path().display().to_string())
                .unwrap_or_default()
        );
    }
    let to_measure: Vec<armspace::load::Input> = inputs
        .iter()
        .zip(&taken)
        .filter(|(_, t)| t.is_none())
        .map(|(i, _)| i.clone())
        .collect();
    // The progress counts images only: skipped entries are listed at the end.
    let images = to_measure
        .iter()
        .filter(|i| !matches!(i, armspace::load::Input::Skipped { .. }))
        .count();
    let progress = progress_bar(images);
    // Each image's lines as soon as it is measured (the report keeps input
    // order); printed above the progress bar.
    // Each finished image goes into the journal and is on disk before the
    // next is counted done.
    let on_done = |r: &armspace::pipeline::ImageResult| {
        let img = report::image_report(r, &opts);
        let recorded = journal.as_ref().map(|j| j.record(&img));
        progress.suspend(|| {
            for line in armspace::console::image_lines(&img) {
                say!("{line}");
            }
            if let Some(Err(e)) = recorded {
                say!("armspace: warning: the journal is given up, the run goes on without it: {e}");
            }
        });
        progress.inc(1);
        if let Some(w) = &worker {
            w.end(&r.file);
        }
    };
    let on_begin = |p: &std::path::Path| {
        if let Some(w) = &worker {
            w.begin(p);
        }
    };
    let stop = interrupt_flag();
    let control = armspace::pipeline::BatchControl {
        on_begin: &on_begin,
        on_done: &on_done,
        stop,
        run_alone: &run_alone,
    };
    let (results, skipped) =
        pool.install(|| armspace::pipeline::measure_batch_with(&to_measure, &opts, &control));
    progress.finish_and_clear();
    // Input order: each image taken over, or the next one measured (the
    // results keep the order of `to_measure`, skipped entries aside).
    let mut measured = results.iter();
    let batch: Vec<report::BatchImage> = inputs
        .iter()
        .zip(taken)
        .filter(|(i, _)| !matches!(i, armspace::load::Input::Skipped { .. }))
        .filter_map(|(_, t)| match t {
            Some(earlier) => Some(report::BatchImage::from_journal(earlier)),
            None => measured
                .next()
                .map(|r| report::BatchImage::measured(r, &opts)),
        })
        .collect();
    let mut rep = report::assemble(&given, &opts, batch, &skipped, report::now_utc());
    rep.parameters.shard = shard;
    let pictures: std::collections::BTreeMap<String, Vec<u8>> = results
        .iter()
        .filter_map(|r| Some((armspace::files::path_text(&r.file), r.thumbnail.clone()?)))
        .collect();
    let outputs = Outputs {
        out: args.out.as_deref(),
        csv: args.csv.as_deref(),
        html: args.html.as_deref(),
    };
    let mut write_failed = write_outputs(&rep, &outputs, pictures);
    if let Some(path) = &args.points {
        let written = report::points_csv(&results, opts.fft.min_quality)
            .map_err(|e| format!("{}: {e}", path.display()))
            .and_then(|text| {
                armspace::files::write_output(path, text.as_bytes()).map_err(|e| e.to_string())
            });
        match written {
            Ok(()) => say!("point table written to {}", path.display()),
            Err(e) => {
                say!("armspace: {e}");
                write_failed = true;
            }
        }
    }
    for line in armspace::console::batch_lines(&rep) {
        say!("{line}");
    }
    // The journal goes once the report (and CSV) are written whole; a
    // partial report or a failed write keeps it for --resume.
    if let Some(journal) = journal {
        if args.out.is_none() {
            // The worker's own journal: the supervisor's notes go with it.
        } else if write_failed || rep.summary.partial {
            say!(
                "armspace: the journal {} keeps the images finished; rerun with the same arguments and --resume to measure only the rest",
                journal.path().display()
            );
        } else if let Err(e) = journal.remove() {
            say!(
                "armspace: warning: the report is whole, but its journal could not be removed: {e}"
            );
        }
    }
    if write_failed {
        return ExitCode::from(EXIT_FATAL);
    }
    exit_status(&rep)
}

/// The exit status of a batch's report (see the command's help).
pub(super) fn exit_status(rep: &report::Report) -> ExitCode {
    ExitCode::from(match report::outcome(rep) {
        report::Outcome::Ok => EXIT_OK,
        report::Outcome::LimitFailed => EXIT_LIMIT_FAILED,
        report::Outcome::NotMeasured => EXIT_NOT_MEASURED,
        report::Outcome::Indeterminate => EXIT_INDETERMINATE,
    })
}

/// Where a batch's report, CSV and page go.
pub(super) struct Outputs<'a> {
    pub out: Option<&'a std::path::Path>,
    pub csv: Option<&'a std::path::Path>,
    pub html: Option<&'a std::path::Path>,
}

/// Writes the report (to --out or stdout), the CSV and the page, each
/// atomically, one failing never costing the others; true when one failed.
/// `pictures` holds the page's copies drawn in this run; an image without
/// one gets its written picture scaled for the page, when it is there.
pub(super) fn write_outputs(
    rep: &report::Report,
    outputs: &Outputs,
    mut pictures: std::collections::BTreeMap<String, Vec<u8>>,
) -> bool {
    let json = report::to_json(rep);
    for s in &rep.skipped {
        say!("skipped  {}: {}", s.file, s.reason);
    }
    // The report first, then the CSV; one failing never costs the other.
    let mut write_failed = false;
    match outputs.out {
        Some(path) => match armspace::files::write_output(path, json.as_bytes()) {
            Ok(()) => say!("report written to {}", path.display()),
            Err(e) => {
                say!("armspace: {e}");
                write_failed = true;
            }
        },
        None => {
            if let Err(e) = armspace::files::write_stdout(&json) {
                say!("armspace: cannot write the report to standard output: {e}");
                write_failed = true;
            }
        }
    }
    if let Some(path) = outputs.csv {
        let written = report::csv_summary(rep)
            .map_err(|e| format!("{}: {e}", path.display()))
            .and_then(|text| {
                armspace::files::write_output(path, text.as_bytes()).map_err(|e| e.to_string())
            });
        match written {
            Ok(()) => say!("CSV summary written to {}", path.display()),
            Err(e) => {
                say!("armspace: {e}");
                write_failed = true;
            }
        }
    }
    if let Some(path) = outputs.html {
        // Images not drawn in this run (taken over from a journal, or
        // joined from the parts of a batch): their pictures written then,
        // when still there, are scaled for the page.
        for im in &rep.images {
            if pictures.contains_key(&im.file) {
                continue;
            }
            let Some(full) = im.overlay.as_deref() else {
                continue;
            };
            let small = image::open(full)
                .ok()
                .map(|p| armspace::overlay::fit_width(p.to_rgb8(), Some(PAGE_PICTURE_WIDTH)));
            if let Some(Ok(bytes)) = small.map(|p| {
                armspace::overlay::encode_jpeg_within(&p, armspace::overlay::PAGE_PICTURE_BYTES)
            }) {
                pictures.insert(im.file.clone(), bytes);
            }
        }
        // The maps and profile plots written beside the report, scaled for
        // the page.
        let mut figures = std::collections::BTreeMap::new();
        for im in &rep.images {
            let mut paths: Vec<String> = Vec::new();
            if let Some(m) = &im.map {
                paths.extend(m.picture_sdas.clone());
                paths.extend(m.picture_solidification_time.clone());
            }
            for p in &im.profile {
                paths.extend(p.plot.clone());
            }
            for p in paths {
                let small = image::open(&p).ok().map(|pic| {
                    armspace::overlay::fit_width(pic.to_rgb8(), Some(PAGE_PICTURE_WIDTH))
                });
                if let Some(Ok(bytes)) = small.map(|pic| {
                    armspace::overlay::encode_jpeg_within(
                        &pic,
                        armspace::overlay::PAGE_PICTURE_BYTES,
                    )
                }) {
                    figures.insert(p, bytes);
                }
            }
        }
        let written = report::html::page(rep, &pictures, &figures, path.parent())
            .map_err(|e| format!("{}: {e}", path.display()))
            .and_then(|text| {
                armspace::files::write_output(path, text.as_bytes()).map_err(|e| e.to_string())
            });
        match written {
            Ok(()) => say!("HTML page written to {}", path.display()),
            Err(e) => {
                say!("armspace: {e}");
                write_failed = true;
            }
        }
    }
    write_failed
}

/// A point of `--at` that lies outside every image is a mistake in the
/// command (a unit slip, x and y swapped), caught before anything is
/// measured when the images' sizes are known in the point's unit: pixels,
/// or um with `--um-per-px`. Otherwise (a calibration from the scale bar)
/// each image's entry says that the point lies outside it.
fn points_in_some_image(
    points: &[armspace::spatial::AtSpec],
    inputs: &[armspace::load::Input],
    manual: Option<armspace::units::UmPerPx>,
) -> Result<(), String> {
    use armspace::spatial::LengthUnit;
    if points.is_empty() {
        return Ok(());
    }
    let sizes: Vec<(u32, u32)> = inputs
        .iter()
        .filter_map(|i| match i {
            armspace::load::Input::Image(p) => armspace::load::read_header(p).ok(),
            _ => None,
        })
        .map(|h| (h.width, h.height))
        .collect();
    let Some(&(wmax, hmax)) = sizes
        .iter()
        .max_by_key(|(w, h)| u64::from(*w) * u64::from(*h))
    else {
        return Ok(());
    };
    for p in points {
        let cal = match (p.unit, manual) {
            (LengthUnit::Pixels, _) => armspace::units::UmPerPx::new(1.0).ok(),
            (LengthUnit::Micrometres, m) => m,
        };
        let Some(cal) = cal else { continue };
        if !sizes.iter().any(|&(w, h)| p.inside(w, h, cal)) {
            let (unit, w, h) = match p.unit {
                LengthUnit::Pixels => ("px", f64::from(wmax), f64::from(hmax)),
                LengthUnit::Micrometres => (
                    "um",
                    f64::from(wmax) * cal.get(),
                    f64::from(hmax) * cal.get(),
                ),
            };
            return Err(format!(
                "invalid value '{}' for '--at': the point lies outside every image (the largest is {w:.1} x {h:.1} {unit}; positions are from the top-left corner, x to the right, y down)",
                p.text
            ));
        }
    }
    Ok(())
}

/// No image taken over from a journal.
fn none_taken(n: usize) -> Vec<Option<report::ImageReport>> {
    (0..n).map(|_| None).collect()
}

/// Set by the first Ctrl-C (SIGINT): the images in progress finish,
/// the others are listed as not measured, and the report and CSV are
/// written as a partial report. A second Ctrl-C stops at once (exit 130,
/// 128 + SIGINT, the shell's convention), writing nothing.
fn interrupt_flag() -> &'static AtomicBool {
    static STOP: AtomicBool = AtomicBool::new(false);
    let installed = ctrlc::set_handler(|| {
        if STOP.swap(true, Ordering::SeqCst) {
            std::process::exit(130);
        }
        say!(
            "armspace: interrupted: finishing the images in progress, then writing a partial report (Ctrl-C again stops at once and writes nothing)"
        );
    });
    if let Err(e) = installed {
        // Without the handler an interrupt ends the run as it always did.
        say!("armspace: note: Ctrl-C will not leave a partial report: {e}");
    }
    &STOP
}

/// A progress bar on stderr when stderr is a terminal; hidden otherwise, so
/// that logs and pipes get no control characters.
fn progress_bar(len: usize) -> indicatif::ProgressBar {
    use std::io::IsTerminal;
    if !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(len as u64);
    if let Ok(style) = indicatif::ProgressStyle::with_template(
        "{bar:40} {pos}/{len} images, {elapsed} elapsed, about {eta} left",
    ) {
        bar.set_style(style);
    }
    bar
}
