//! The `armspace` command: parses arguments, calls the library, prints.

use armspace::calibrate::{self, parse_length, parse_um_per_px, BarLength, CalibrationRequest};
use armspace::load::{collect_inputs, LoadOptions, DEFAULT_MAX_MEGAPIXELS};
use armspace::methods::fft::FftParams;
use armspace::methods::intercept::{Convention, InterceptParams};
use armspace::pipeline::{measure_batch, MeasureOptions, Method};
use armspace::preprocess::PreprocessParams;
use armspace::report;
use clap::{Parser, Subcommand, ValueEnum};
use std::path::PathBuf;
use std::process::ExitCode;

/// Exit statuses (also in README.md).
const EXIT_OK: u8 = 0;
const EXIT_FATAL: u8 = 1;
const EXIT_USAGE: u8 = 2;
const EXIT_NOT_MEASURED: u8 = 3;
const EXIT_LIMIT_FAILED: u8 = 4;
const EXIT_INDETERMINATE: u8 = 5;

#[derive(Parser)]
#[command(
    name = "armspace",
    version,
    about = "Secondary dendrite arm spacing (SDAS) from etched micrographs of cast alloys",
    after_help = "Exit status of measure: 0 every image measured (and, with --spec, every one \
passed); 1 the run itself failed (e.g. the report could not be written); 2 usage error; 3 at \
least one image could not be measured (unreadable, or nothing reliable to measure); 4 at least \
one image failed its SDAS limit (the casting failed); 5 a decision is indeterminate (the 95% \
interval contains the limit, or an image matched no limit). When several apply: 4, then 3, \
then 5.\n\nResults support, and never replace, the judgement of \
qualified personnel and the applicable specification and codes."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Measure SDAS in images and folders of images and write a JSON report.
    Measure(Box<MeasureArgs>),
    /// Find the scale bar in images and print the calibration it gives, as JSON.
    Calibrate(CalibrateArgs),
    /// Statistics of lines measured by hand (CSV with columns length_um, arms).
    Stats(StatsArgs),
    /// Write synthetic dendritic micrographs of known SDAS and their truth.json.
    Synth(SynthArgs),
    /// List the SDAS correlations (built-in and from --correlations) with source, status and validity.
    Correlations(CorrelationsArgs),
    /// Cooling rate and solidification time from one SDAS value, as JSON.
    Interpret(InterpretArgs),
}

/// Interpretation of SDAS through a published correlation.
#[derive(clap::Args)]
struct AlloyArgs {
    /// Nominal composition in wt%, e.g. Si=7,Cu=0.2 (composition-dependent correlations need it).
    #[arg(long, value_parser = armspace::interpret::parse_composition)]
    composition: Option<armspace::interpret::Composition>,
    /// Freezing range linking the two forms (t_f = freezing range / cooling rate), e.g. 60K.
    #[arg(long, value_parser = armspace::interpret::parse_kelvin)]
    freezing_range: Option<armspace::units::Kelvin>,
    /// Add the correlations of this JSON file (format in DEVELOPERS.md).
    #[arg(long)]
    correlations: Option<PathBuf>,
    /// Give values more than 3x beyond a correlation's fitted range (marked as extrapolated).
    #[arg(long)]
    extrapolate: bool,
}

impl AlloyArgs {
    /// The interpretation settings for the correlation `id`, checked against
    /// the composition; None without one.
    fn settings(
        &self,
        id: Option<&str>,
    ) -> armspace::Result<Option<armspace::interpret::Settings>> {
        let Some(id) = id else {
            if self.composition.is_some() || self.freezing_range.is_some() || self.extrapolate {
                return Err(armspace::Error::Usage {
                    reason: "--composition, --freezing-range and --extrapolate need --correlation"
                        .into(),
                });
            }
            return Ok(None);
        };
        let lib = load_library(self.correlations.as_deref())?;
        let settings = armspace::interpret::Settings {
            correlation: armspace::interpret::library::find(&lib, id)?.clone(),
            library: lib.clone(),
            composition: self.composition.clone().unwrap_or_default(),
            freezing_range: self.freezing_range,
            extrapolate: self.extrapolate,
        };
        settings.check()?;
        Ok(Some(settings))
    }
}

#[derive(clap::Args)]
struct CorrelationsArgs {
    /// Add the correlations of this JSON file (checked, then listed with the built-in ones).
    #[arg(long)]
    correlations: Option<PathBuf>,
}

#[derive(clap::Args)]
struct InterpretArgs {
    /// The SDAS with its unit, e.g. 40um.
    #[arg(long, value_parser = parse_length)]
    sdas: armspace::units::Micrometres,
    /// Its 95% confidence interval, LOW,HIGH (um unless a unit is written), e.g. 36,44.
    #[arg(long, value_parser = parse_interval)]
    ci: Option<[armspace::units::Micrometres; 2]>,
    /// Correlation id (see `armspace correlations`); `--alloy` is the old
    /// name, still accepted.
    #[arg(long = "correlation", visible_alias = "alloy", value_name = "ID")]
    correlation: String,
    #[command(flatten)]
    alloy: AlloyArgs,
}

/// "36,44" or "36um,44um" as an interval in micrometres, lower bound first.
fn parse_interval(s: &str) -> armspace::Result<[armspace::units::Micrometres; 2]> {
    let unusable = |reason: String| armspace::Error::Value { reason };
    let (a, b) = s
        .split_once(',')
        .ok_or_else(|| unusable(format!("'{s}': write the interval as LOW,HIGH, e.g. 36,44")))?;
    let one = |t: &str| {
        let t = t.trim();
        if t.chars().all(|c| c.is_ascii_digit() || c == '.') {
            parse_length(&format!("{t}um"))
        } else {
            parse_length(t)
        }
    };
    let (a, b) = (one(a)?, one(b)?);
    if a.0 > b.0 {
        return Err(unusable(format!(
            "'{s}': the lower bound is above the upper one"
        )));
    }
    Ok([a, b])
}

#[derive(clap::Args)]
struct MeasureArgs {
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

#[derive(clap::Args)]
struct CalibrateArgs {
    /// Image files or folders (walked as `measure` walks them).
    #[arg(required = true)]
    images: Vec<PathBuf>,
    /// Physical length of the scale bar, with its unit (100um, 0.1mm, 500nm).
    #[arg(long, value_parser = parse_length, allow_hyphen_values = true)]
    scale_bar: armspace::units::Micrometres,
    /// Stated relative uncertainty of the scale bar itself, in percent.
    #[arg(long, value_parser = parse_percent)]
    scale_bar_uncertainty_pct: Option<f64>,
    /// Write a PNG per image with the detected bar outlined into this folder.
    #[arg(long)]
    overlay: Option<PathBuf>,
    /// Refuse images with more megapixels than this (checked before decoding).
    #[arg(long, default_value_t = DEFAULT_MAX_MEGAPIXELS, value_parser = parse_positive, allow_negative_numbers = true)]
    max_megapixels: f64,
}

fn parse_percent(s: &str) -> Result<f64, String> {
    match s.trim().trim_end_matches('%').parse::<f64>() {
        Ok(v) if v.is_finite() && (0.0..100.0).contains(&v) => Ok(v),
        _ => Err(format!("'{s}' is not a percentage from 0 to 100")),
    }
}

#[derive(Clone, Copy, ValueEnum)]
enum MethodArg {
    Fft,
    Intercept,
    Centres,
    All,
}

#[derive(Clone, Copy, ValueEnum)]
enum ConventionArg {
    /// Distance between the first and last arm centres / (arms - 1).
    CentreToCentre,
    /// Line length / arms crossed.
    LengthOverCount,
}

#[derive(clap::Args)]
struct StatsArgs {
    /// CSV file: one row per hand-measured line, columns length_um and arms.
    file: PathBuf,
    /// Target percent relative accuracy, for the number of lines it needs.
    #[arg(long, default_value_t = 10.0, value_parser = parse_percent)]
    target_ra_pct: f64,
    /// How a line's spacing follows from its length and arm count, as for
    /// `measure`: centre-to-centre takes length_um as the distance between
    /// the first and last arm centres, L/(n-1); length-over-count, L/n.
    #[arg(long, value_enum, default_value = "centre-to-centre")]
    convention: ConventionArg,
}

#[derive(clap::Args)]
struct SynthArgs {
    /// Output folder (created if needed).
    outdir: PathBuf,
    /// Seed of the random generator; the same seed gives the same images.
    #[arg(long, default_value_t = 1)]
    seed: u64,
    /// Number of images.
    #[arg(long, default_value_t = 8, value_parser = clap::value_parser!(u32).range(1..=10000))]
    count: u32,
    /// Render the fields described in this JSON file instead of random ones
    /// ({"images": [{"file": "a.png", "spec": {...}}]}; see DEVELOPERS.md).
    /// (`--specs` is the old name, still accepted.)
    #[arg(long = "fields", visible_alias = "specs", value_name = "FILE", conflicts_with_all = ["seed", "count", "style"])]
    fields: Option<PathBuf>,
    /// Draw every field in one style (clean: smooth bars with the nuisances
    /// only; etched: the look of an etched section; cut: arms cut across,
    /// rows of spots; dense: packed equiaxed grains; lace: arms with a
    /// eutectic lace between them; binary: one of those thresholded to two
    /// phases; featureless: no dendrites at all); by default clean and
    /// etched alternate. The same seed gives the same fields in any style.
    #[arg(long, value_enum)]
    style: Option<SynthStyle>,
    /// Write into a folder that already holds files (images of the same
    /// names and truth.json are replaced; others stay and are not in the truth).
    #[arg(long)]
    replace: bool,
}

#[derive(Clone, Copy, ValueEnum)]
enum SynthStyle {
    Clean,
    Etched,
    Cut,
    Dense,
    Lace,
    Binary,
    Featureless,
}

fn parse_positive(s: &str) -> Result<f64, String> {
    match s.trim().parse::<f64>() {
        Ok(v) if v.is_finite() && v > 0.0 => Ok(v),
        _ => Err(format!("'{s}' is not a positive number")),
    }
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return ExitCode::from(if e.use_stderr() { EXIT_USAGE } else { EXIT_OK });
        }
    };
    match cli.command {
        Command::Measure(args) => run_measure(*args),
        Command::Calibrate(args) => run_calibrate(args),
        Command::Stats(args) => run_stats(args),
        Command::Synth(args) => run_synth(args),
        Command::Correlations(args) => run_correlations(args),
        Command::Interpret(args) => run_interpret(args),
    }
}

/// Creates the overlay folder when one is asked for, or says why it cannot.
fn create_overlay_dir(dir: Option<&std::path::Path>) -> Result<(), ExitCode> {
    match dir.map(std::fs::create_dir_all) {
        Some(Err(e)) => {
            let dir = dir.map(|d| d.display().to_string()).unwrap_or_default();
            eprintln!("armspace: {dir}: cannot create the overlay folder: {e}");
            Err(ExitCode::from(EXIT_FATAL))
        }
        _ => Ok(()),
    }
}

fn run_measure(args: MeasureArgs) -> ExitCode {
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
        },
        preprocess: PreprocessParams::default(),
        fft: FftParams::default(),
        intercept: InterceptParams {
            convention: match args.convention {
                ConventionArg::CentreToCentre => Convention::CentreToCentre,
                ConventionArg::LengthOverCount => Convention::LengthOverCount,
            },
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
        progress.suspend(|| print_image(&img));
        progress.inc(1);
    };
    let (results, skipped) = pool.install(|| measure_batch(&inputs, &opts, &on_done));
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
    let s = &rep.summary;
    eprintln!(
        "{} image(s): {} measured, {} without a value, {} failed, {} skipped",
        s.images, s.measured, s.without_value, s.failed, s.skipped
    );
    if let Some(a) = &s.acceptance {
        for z in &a.zones {
            eprintln!(
                "zone {} (limit {} um): {} image(s), {} pass, {} fail, {} indeterminate: {}",
                z.zone.as_deref().unwrap_or("(general limit)"),
                z.limit_um.map_or("none".into(), |l| l.to_string()),
                z.images,
                z.pass,
                z.fail,
                z.indeterminate,
                z.verdict.map_or("no images", |d| d.name())
            );
        }
        if a.not_assessed > 0 {
            eprintln!(
                "{} image(s) matched no zone and were not assessed",
                a.not_assessed
            );
        }
        eprintln!(
            "batch verdict: {}",
            a.verdict
                .map_or("no images".to_string(), |d| d.name().to_uppercase())
        );
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

/// An image's lines on stderr: its value or why there is none, the decision
/// naming what was compared, the interpretation, and its warnings.
fn print_image(img: &report::ImageReport) {
    match (&img.error, img.sdas_um.value) {
        (Some(e), _) => eprintln!("error    {e}"),
        (None, Some(v)) => {
            // As many decimals as the report keeps (two significant digits
            // of the interval's half-width).
            let d = img
                .sdas_um
                .ci95
                .map_or(2, |[a, b]| report::digits_for_uncertainty(0.5 * (b - a)))
                .clamp(0, 4) as usize;
            let ci = img
                .sdas_um
                .ci95
                .map(|[a, b]| format!(" (95% CI {a:.d$} to {b:.d$})"))
                .unwrap_or_default();
            eprintln!(
                "measured {}: SDAS {v:.d$} um{ci}, n = {} ({:.1} independent)",
                img.file, img.sdas_um.n, img.sdas_um.n_eff
            );
        }
        (None, None) => eprintln!(
            "no value {}: {}",
            img.file,
            img.sdas_um.reason.as_deref().unwrap_or("no reason given")
        ),
    }
    if let Some(a) = &img.acceptance {
        let zone = a
            .zone
            .as_deref()
            .map(|z| format!(" [{z}]"))
            .unwrap_or_default();
        // What was compared, named, with its interval and the limit.
        let statistic = match a.statistic {
            armspace::interpret::acceptance::Statistic::Value => "image value",
            armspace::interpret::acceptance::Statistic::MaxLocal => "largest local value",
        };
        let compared = match (a.compared_um, a.compared_ci95_um, a.limit_um) {
            (Some(v), Some([lo, hi]), Some(l)) => {
                format!(" ({statistic} {v:.2} um, 95% CI {lo:.2} to {hi:.2}; limit {l} um)")
            }
            (Some(v), None, Some(l)) => format!(" ({statistic} {v:.2} um; limit {l} um)"),
            (None, _, Some(l)) => format!(" ({statistic}: none; limit {l} um)"),
            _ => String::new(),
        };
        match a.decision {
            Some(d) => eprintln!(
                "  {}{zone}{compared}: {}",
                d.name().to_uppercase(),
                a.reason
            ),
            None => eprintln!("  NOT ASSESSED{zone}: {}", a.reason),
        }
    }
    if let Some(i) = &img.interpretation {
        let q = |name: &str, unit: &str, v: &armspace::interpret::Quantity| match (v.value, v.ci95)
        {
            (Some(x), Some([a, b])) => format!("{name} {x} {unit} (95% CI {a} to {b})"),
            (Some(x), None) => format!("{name} {x} {unit}"),
            _ => format!("{name}: none"),
        };
        eprintln!(
            "  {}; {} [{}]",
            q("cooling rate", "K/s", &i.cooling_rate_k_per_s),
            q("solidification time", "s", &i.solidification_time_s),
            i.correlation.id
        );
    }
    for w in &img.warnings {
        eprintln!("  warning: {w}");
    }
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

fn run_calibrate(args: CalibrateArgs) -> ExitCode {
    use armspace::load::{load, LoadOptions};
    let req = CalibrationRequest {
        manual: None,
        profile: None,
        scale_bar: Some(BarLength {
            length: args.scale_bar,
            rel_uncertainty: args.scale_bar_uncertainty_pct.unwrap_or(0.0) / 100.0,
        }),
        trust: None,
    };
    if let Err(code) = create_overlay_dir(args.overlay.as_deref()) {
        return code;
    }
    let opts = LoadOptions {
        max_megapixels: args.max_megapixels,
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
                eprintln!("skipped  {}: {reason}", path.display());
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
                match calibrate::resolve(&req, Some(&detected), None) {
                    Ok((c, warnings)) => {
                        entry["um_per_px"] = c.um_per_px.get().into();
                        entry["rel_uncertainty"] =
                            c.rel_uncertainty.map(|u| report::round(u, 6)).into();
                        entry["bar"] =
                            serde_json::to_value(c.bar.as_ref().map(report::BarReport::of))
                                .unwrap_or_default();
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
                        eprintln!(
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
                        eprintln!("armspace: {e}");
                        return ExitCode::from(EXIT_FATAL);
                    }
                }
            }
        }
        if let Some(e) = entry["error"].as_str() {
            eprintln!("error    {e}");
        }
        out.push(entry);
    }
    if let Err(code) = print_json(&out) {
        return code;
    }
    ExitCode::from(if all_ok { EXIT_OK } else { EXIT_NOT_MEASURED })
}

fn run_stats(args: StatsArgs) -> ExitCode {
    let convention = match args.convention {
        ConventionArg::CentreToCentre => Convention::CentreToCentre,
        ConventionArg::LengthOverCount => Convention::LengthOverCount,
    };
    let origin = args.file.display().to_string();
    let result = armspace::files::read_text(&args.file, "file of measured lines")
        .and_then(|text| armspace::manual::parse(&text, &origin, convention))
        .and_then(|lines| {
            armspace::manual::summarise(lines, &origin, args.target_ra_pct, convention)
        });
    match result {
        Ok(s) => {
            eprintln!(
                "{} lines: SDAS {:.2} um (95% CI {:.2} to {:.2}), sd {:.2} um, %RA {:.1}",
                s.n_lines, s.mean_um, s.ci95_um[0], s.ci95_um[1], s.sd_um, s.rel_accuracy_pct
            );
            if let Some(n) = s.lines_for_target {
                if n > s.n_lines {
                    eprintln!(
                        "about {n} lines in all ({} more) would bring %RA to {}",
                        n - s.n_lines,
                        s.target_rel_accuracy_pct
                    );
                }
            }
            if let Err(code) = print_json(&s) {
                return code;
            }
            ExitCode::from(EXIT_OK)
        }
        Err(e) => {
            eprintln!("armspace: {e}");
            ExitCode::from(EXIT_NOT_MEASURED)
        }
    }
}

fn run_synth(args: SynthArgs) -> ExitCode {
    // A set mixed with an older one would carry a truth.json that does not
    // describe every image beside it: refuse unless asked.
    let holds_files = std::fs::read_dir(&args.outdir)
        .map(|mut d| d.next().is_some())
        .unwrap_or(false);
    if holds_files && !args.replace {
        eprintln!(
            "armspace: {}: the folder is not empty; choose an empty or new folder, or give --replace",
            args.outdir.display()
        );
        return ExitCode::from(EXIT_USAGE);
    }
    let result = match &args.fields {
        None => {
            let style = args.style.map(|s| match s {
                SynthStyle::Clean => armspace::synth::Style::Clean,
                SynthStyle::Etched => armspace::synth::Style::Etched,
                SynthStyle::Cut => armspace::synth::Style::Cut,
                SynthStyle::Dense => armspace::synth::Style::Dense,
                SynthStyle::Lace => armspace::synth::Style::Lace,
                SynthStyle::Binary => armspace::synth::Style::Binary,
                SynthStyle::Featureless => armspace::synth::Style::Featureless,
            });
            armspace::synth::write_set_styled(&args.outdir, args.seed, args.count as usize, style)
                .map_err(|e| e.to_string())
        }
        Some(path) => armspace::files::read_text(path, "field-description file")
            .map_err(|e| e.to_string())
            .and_then(|text| {
                serde_json::from_str::<armspace::synth::SpecFile>(&text)
                    .map_err(|e| format!("{}: not a valid spec file: {e}", path.display()))
            })
            .and_then(|file| {
                armspace::synth::write_specs(&args.outdir, &file.images, None)
                    .map_err(|e| format!("{}: {e}", path.display()))
            }),
    };
    match result {
        Ok(truths) => {
            eprintln!(
                "wrote {} image(s) and truth.json to {}",
                truths.len(),
                args.outdir.display()
            );
            ExitCode::from(EXIT_OK)
        }
        Err(e) => {
            eprintln!("armspace: {e}");
            ExitCode::from(EXIT_FATAL)
        }
    }
}

/// Prints a value as pretty JSON on stdout; a value that cannot be
/// serialised is a failed run.
fn print_json(value: &impl serde::Serialize) -> Result<(), ExitCode> {
    match serde_json::to_string_pretty(value) {
        Ok(j) => armspace::files::write_stdout(&format!("{j}\n")).map_err(|e| {
            eprintln!("armspace: cannot write to standard output: {e}");
            ExitCode::from(EXIT_FATAL)
        }),
        Err(e) => {
            eprintln!("armspace: {e}");
            Err(ExitCode::from(EXIT_FATAL))
        }
    }
}

/// The built-in correlations, plus those of a user's file when one is given.
fn load_library(
    file: Option<&std::path::Path>,
) -> armspace::Result<Vec<armspace::interpret::Correlation>> {
    match file {
        Some(path) => armspace::interpret::library::with_file(path),
        None => Ok(armspace::interpret::library::builtin()),
    }
}

fn run_correlations(args: CorrelationsArgs) -> ExitCode {
    match load_library(args.correlations.as_deref()) {
        Ok(lib) => {
            match armspace::files::write_stdout(&armspace::interpret::library::table(&lib)) {
                Ok(()) => ExitCode::from(EXIT_OK),
                Err(e) => {
                    eprintln!("armspace: cannot write to standard output: {e}");
                    ExitCode::from(EXIT_FATAL)
                }
            }
        }
        Err(e) => {
            eprintln!("armspace: {e}");
            ExitCode::from(EXIT_USAGE)
        }
    }
}

fn run_interpret(args: InterpretArgs) -> ExitCode {
    if let Some([lo, hi]) = args.ci {
        if !(lo.0 <= args.sdas.0 && args.sdas.0 <= hi.0) {
            eprintln!("armspace: the interval --ci does not contain the SDAS value");
            return ExitCode::from(EXIT_USAGE);
        }
    }
    let settings = match args.alloy.settings(Some(&args.correlation)) {
        Ok(Some(s)) => s,
        Ok(None) => return ExitCode::from(EXIT_USAGE),
        Err(e) => {
            eprintln!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    match settings
        .apply(Some(args.sdas), args.ci)
        .map(|i| i.rounded())
    {
        Ok(i) => {
            for w in &i.warnings {
                eprintln!("warning: {w}");
            }
            if let Err(code) = print_json(&serde_json::json!({
                "caution": report::CAUTION,
                "interpretation": i,
            })) {
                return code;
            }
            ExitCode::from(EXIT_OK)
        }
        Err(e) => {
            eprintln!("armspace: {e}");
            ExitCode::from(EXIT_USAGE)
        }
    }
}
