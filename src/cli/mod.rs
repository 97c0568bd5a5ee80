//! The command line, one file per subcommand: arguments, calls into the
//! library, and what is printed. No measuring logic lives here.

/// A line to stderr that never stops the run: when stderr is closed (piped
/// into `head`, a terminal gone) the line is lost, but the images are still
/// measured and the report still written. `eprintln!` would panic there.
macro_rules! say {
    ($($arg:tt)*) => {{
        use std::io::Write as _;
        let _ = writeln!(std::io::stderr(), $($arg)*);
    }};
}

mod calibrate;
mod interpret;
mod measure;
mod merge;
mod stats;
mod supervise;
#[cfg(feature = "synth")]
mod synth;

use clap::{Parser, Subcommand, ValueEnum};
use std::process::ExitCode;

use calibrate::CalibrateArgs;
use interpret::{CorrelationsArgs, InterpretArgs};
use measure::MeasureArgs;
use stats::StatsArgs;

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
    #[cfg(feature = "synth")]
    Synth(synth::SynthArgs),
    /// (Not in this build: the generator of synthetic fields is compiled in
    /// with `--features synth`.)
    #[cfg(not(feature = "synth"))]
    #[command(hide = true)]
    Synth {
        #[arg(trailing_var_arg = true, allow_hyphen_values = true)]
        rest: Vec<String>,
    },
    /// Join the reports of the parts of a batch (measure --shard K/N) into
    /// the batch's report, CSV and HTML page, as one run would have written
    /// them.
    Merge(merge::MergeArgs),
    /// List the SDAS correlations (built-in and from --correlations) with source, status and validity.
    Correlations(CorrelationsArgs),
    /// Cooling rate and solidification time from one SDAS value, as JSON.
    Interpret(InterpretArgs),
}

/// Parses the command line and runs the subcommand.
pub fn run() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return ExitCode::from(if e.use_stderr() { EXIT_USAGE } else { EXIT_OK });
        }
    };
    match cli.command {
        Command::Measure(args) => measure::run(*args),
        Command::Calibrate(args) => calibrate::run(args),
        Command::Stats(args) => stats::run(args),
        #[cfg(feature = "synth")]
        Command::Synth(args) => synth::run(args),
        #[cfg(not(feature = "synth"))]
        Command::Synth { .. } => {
            say!(
                "armspace: this build has no generator of synthetic fields; build it with \
                 `cargo build --release --features synth`"
            );
            ExitCode::from(EXIT_USAGE)
        }
        Command::Merge(args) => merge::run(args),
        Command::Correlations(args) => interpret::run_correlations(args),
        Command::Interpret(args) => interpret::run_interpret(args),
    }
}

/// A percentage from 0 (inclusive) to 100 (exclusive), with or without `%`.
fn parse_percent(s: &str) -> armspace::Result<f64> {
    match s.trim().trim_end_matches('%').parse::<f64>() {
        Ok(v) if v.is_finite() && (0.0..100.0).contains(&v) => Ok(v),
        _ => Err(armspace::Error::Value {
            reason: format!("'{s}' is not a percentage from 0 to 100"),
        }),
    }
}

/// A finite number above zero.
fn parse_positive(s: &str) -> armspace::Result<f64> {
    match s.trim().parse::<f64>() {
        Ok(v) if v.is_finite() && v > 0.0 => Ok(v),
        _ => Err(armspace::Error::Value {
            reason: format!("'{s}' is not a positive number"),
        }),
    }
}

#[derive(Clone, Copy, ValueEnum)]
enum ConventionArg {
    /// Distance between the first and last arm centres / (arms - 1).
    CentreToCentre,
    /// Line length / arms crossed.
    LengthOverCount,
}

/// Creates the overlay folder when one is asked for, or says why it cannot.
pub(super) fn create_overlay_dir(dir: Option<&std::path::Path>) -> Result<(), ExitCode> {
    match dir.map(std::fs::create_dir_all) {
        Some(Err(e)) => {
            let dir = dir.map(|d| d.display().to_string()).unwrap_or_default();
            say!("armspace: {dir}: cannot create the overlay folder: {e}");
            Err(ExitCode::from(EXIT_FATAL))
        }
        _ => Ok(()),
    }
}

/// Prints a value as pretty JSON on stdout; a value that cannot be
/// serialised is a failed run.
fn print_json(value: &impl serde::Serialize) -> Result<(), ExitCode> {
    match serde_json::to_string_pretty(value) {
        Ok(j) => armspace::files::write_stdout(&format!("{j}\n")).map_err(|e| {
            say!("armspace: cannot write to standard output: {e}");
            ExitCode::from(EXIT_FATAL)
        }),
        Err(e) => {
            say!("armspace: {e}");
            Err(ExitCode::from(EXIT_FATAL))
        }
    }
}

impl ConventionArg {
    fn convention(self) -> armspace::methods::intercept::Convention {
        use armspace::methods::intercept::Convention;
        match self {
            ConventionArg::CentreToCentre => Convention::CentreToCentre,
            ConventionArg::LengthOverCount => Convention::LengthOverCount,
        }
    }
}
