//! `armspace correlations` and `armspace interpret`: the correlation
//! library, and cooling rate and solidification time from one SDAS value.

use super::{print_json, EXIT_FATAL, EXIT_OK, EXIT_USAGE};
use armspace::calibrate::parse_length;
use armspace::report;
use std::path::PathBuf;
use std::process::ExitCode;

/// Interpretation of SDAS through a published correlation.
#[derive(clap::Args)]
pub(super) struct AlloyArgs {
    /// Nominal composition in wt%, e.g. Si=7,Cu=0.2 (composition-dependent correlations need it).
    #[arg(long, value_parser = armspace::interpret::parse_composition)]
    composition: Option<armspace::interpret::Composition>,
    /// Freezing range linking the two forms (t_f = freezing range / cooling rate), e.g. 60K.
    #[arg(long, value_parser = armspace::interpret::parse_kelvin)]
    freezing_range: Option<armspace::units::Kelvin>,
    /// Add the correlations of this JSON file (format in DEVELOPERS.md).
    #[arg(long)]
    pub(super) correlations: Option<PathBuf>,
    /// Give values more than 3x beyond a correlation's fitted range (marked as extrapolated).
    #[arg(long)]
    extrapolate: bool,
}

impl AlloyArgs {
    /// The interpretation settings for the correlation `id`, checked against
    /// the composition; None without one.
    pub(super) fn settings(
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
pub(super) struct CorrelationsArgs {
    /// Add the correlations of this JSON file (checked, then listed with the built-in ones).
    #[arg(long)]
    pub(super) correlations: Option<PathBuf>,
}

#[derive(clap::Args)]
pub(super) struct InterpretArgs {
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

/// The built-in correlations, plus those of a user's file when one is given.
fn load_library(
    file: Option<&std::path::Path>,
) -> armspace::Result<Vec<armspace::interpret::Correlation>> {
    match file {
        Some(path) => armspace::interpret::library::with_file(path),
        None => Ok(armspace::interpret::library::builtin()),
    }
}

pub(super) fn run_correlations(args: CorrelationsArgs) -> ExitCode {
    match load_library(args.correlations.as_deref()) {
        Ok(lib) => {
            match armspace::files::write_stdout(&armspace::interpret::library::table(&lib)) {
                Ok(()) => ExitCode::from(EXIT_OK),
                Err(e) => {
                    say!("armspace: cannot write to standard output: {e}");
                    ExitCode::from(EXIT_FATAL)
                }
            }
        }
        Err(e) => {
            say!("armspace: {e}");
            ExitCode::from(EXIT_USAGE)
        }
    }
}

pub(super) fn run_interpret(args: InterpretArgs) -> ExitCode {
    if let Some([lo, hi]) = args.ci {
        if !(lo.0 <= args.sdas.0 && args.sdas.0 <= hi.0) {
            say!("armspace: the interval --ci does not contain the SDAS value");
            return ExitCode::from(EXIT_USAGE);
        }
    }
    let settings = match args.alloy.settings(Some(&args.correlation)) {
        Ok(Some(s)) => s,
        Ok(None) => return ExitCode::from(EXIT_USAGE),
        Err(e) => {
            say!("armspace: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    match settings
        .apply(Some(args.sdas), args.ci)
        .map(|i| i.rounded())
    {
        Ok(i) => {
            for w in &i.warnings {
                say!("warning: {w}");
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
            say!("armspace: {e}");
            ExitCode::from(EXIT_USAGE)
        }
    }
}
