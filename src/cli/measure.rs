//! `armspace measure`: images and folders in, the JSON report (and CSV and
//! pictures) out.

use super::interpret::AlloyArgs;
use super::{
    create_overlay_dir, parse_percent, parse_positive, ConventionArg, EXIT_FATAL,
    EXIT_INDETERMINATE, EXIT_LIMIT_FAILED, EXIT_NOT_MEASURED, EXIT_OK, EXIT_USAGE,
};
use armspace::calibrate::{self, parse_length, parse_um_per_px, BarLength, CalibrationRequest};
use armspace::load::{collect_inputs, LoadOptions, DEFAULT_MAX_MEGAPIXELS};
use armspace::methods::fft::FftParams;
use armspace::methods::intercept::InterceptParams;
use armspace::pipeline::{measure_batch, MeasureOptions, Method};
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
    #[arg(long)]
    out: Option<PathBuf>,
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
}

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
    /// Physical length of the scale bar burned into the images, with its unit (100um, 0.1mm, 500nm).
    #[arg(long, value_parser = parse_length, allow_hyphen_values = true)]
    scale_bar: Option<armspace::units::Micrometres>,
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
            scale_bar: self.scale_bar.map(|length| BarLength {
                length,
                rel_uncertainty: self.scale_bar_uncertainty_pct.unwrap_or(0.0) / 100.0,
            }),
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

pub(super) fn run(args: MeasureArgs) -> ExitCode {
    let methods = match args.method {
        MethodArg::Fft => vec![Method::Fft],
        MethodArg::Intercept => vec![Method::Intercept],
        MethodArg::Centres => vec![Method::Centres],
        MethodArg::All => Method::ALL.to_vec(),
    };
    let calibration = match args.calibration.request() {
        Ok(c) => c,
        Err(e) => {
            eprintln!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    let interpret = match args.alloy.settings(args.correlation.as_deref()) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    if let (Some(csv), Some(out)) = (&args.csv, &args.out) {
        if csv == out {
            eprintln!(
                "armspace: --csv and --out name the same file ({}); give each its own",
                csv.display()
            );
            return ExitCode::from(EXIT_USAGE);
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
            eprintln!("armspace: {e}");
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
        protected: Default::default(),
        interpret,
        spec,
    };
    let inputs = collect_inputs(&args.paths);
    if !inputs
        .iter()
        .any(|i| !matches!(i, armspace::load::Input::Skipped { .. }))
    {
        eprintln!("armspace: no image files found in the given paths");
        return ExitCode::from(EXIT_NOT_MEASURED);
    }
    // Every output is checked before the first image is measured: none may
    // replace an input (after resolving links), and each must be writable.
    let mut protected = armspace::files::Protected::new(inputs.iter().filter_map(|i| match i {
        armspace::load::Input::Image(p) => Some(p.as_path()),
        _ => None,
    }));
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
    for (path, role) in [(&args.out, "report"), (&args.csv, "CSV summary")] {
        if let Some(path) = path {
            if let Err(e) = protected.check_output(path, role) {
                eprintln!("armspace: {e}");
                return ExitCode::from(EXIT_USAGE);
            }
        }
    }
    if let Err(code) = create_overlay_dir(args.overlay.as_deref()) {
        return code;
    }
    let opts = MeasureOptions { protected, ..opts };
    let pool = match rayon::ThreadPoolBuilder::new()
        .num_threads(args.jobs.map_or(0, usize::from))
        .build()
    {
        Ok(p) => p,
        Err(e) => {
            eprintln!("armspace: cannot start worker threads: {e}");
            return ExitCode::from(EXIT_FATAL);
        }
    };
    // The progress counts images only: skipped entries are listed at the end.
    let images = inputs
        .iter()
        .filter(|i| !matches!(i, armspace::load::Input::Skipped { .. }))
        .count();
    let progress = progress_bar(images);
    // Each image's lines as soon as it is measured (the report keeps input
    // order); printed above the progress bar.
    let on_done = |r: &armspace::pipeline::ImageResult| {
        let img = report::image_report(r, &opts);
        progress.suspend(|| {
            for line in armspace::console::image_lines(&img) {
                eprintln!("{line}");
            }
        });
        progress.inc(1);
    };
    let stop = interrupt_flag();
    let (results, skipped) = pool.install(|| measure_batch(&inputs, &opts, &on_done, stop));
    progress.finish_and_clear();
    let given: Vec<String> = args.paths.iter().map(|p| p.display().to_string()).collect();
    let rep = report::build(&given, &opts, &results, &skipped, report::now_utc());
    let json = report::to_json(&rep);
    for s in &rep.skipped {
        eprintln!("skipped  {}: {}", s.file, s.reason);
    }
    // The report first, then the CSV; one failing never costs the other.
    let mut write_failed = false;
    match &args.out {
        Some(path) => match armspace::files::write_output(path, json.as_bytes()) {
            Ok(()) => eprintln!("report written to {}", path.display()),
            Err(e) => {
                eprintln!("armspace: {e}");
                write_failed = true;
            }
        },
        None => {
            if let Err(e) = armspace::files::write_stdout(&json) {
                eprintln!("armspace: cannot write the report to standard output: {e}");
                write_failed = true;
            }
        }
    }
    if let Some(path) = &args.csv {
        let written = report::csv_summary(&rep)
            .map_err(|e| format!("{}: {e}", path.display()))
            .and_then(|text| {
                armspace::files::write_output(path, text.as_bytes()).map_err(|e| e.to_string())
            });
        match written {
            Ok(()) => eprintln!("CSV summary written to {}", path.display()),
            Err(e) => {
                eprintln!("armspace: {e}");
                write_failed = true;
            }
        }
    }
    for line in armspace::console::batch_lines(&rep) {
        eprintln!("{line}");
    }
    if write_failed {
        return ExitCode::from(EXIT_FATAL);
    }
    ExitCode::from(match report::outcome(&rep) {
        report::Outcome::Ok => EXIT_OK,
        report::Outcome::LimitFailed => EXIT_LIMIT_FAILED,
        report::Outcome::NotMeasured => EXIT_NOT_MEASURED,
        report::Outcome::Indeterminate => EXIT_INDETERMINATE,
    })
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
        eprintln!(
            "armspace: interrupted: finishing the images in progress, then writing a partial report (Ctrl-C again stops at once and writes nothing)"
        );
    });
    if let Err(e) = installed {
        // Without the handler an interrupt ends the run as it always did.
        eprintln!("armspace: note: Ctrl-C will not leave a partial report: {e}");
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
