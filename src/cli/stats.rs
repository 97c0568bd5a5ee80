//! `armspace stats`: statistics of lines measured by hand.

use super::{parse_percent, print_json, ConventionArg, EXIT_NOT_MEASURED, EXIT_OK};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args)]
pub(super) struct StatsArgs {
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

pub(super) fn run(args: StatsArgs) -> ExitCode {
    let convention = args.convention.convention();
    let origin = args.file.display().to_string();
    let result = armspace::files::read_text(&args.file, "file of measured lines")
        .and_then(|text| armspace::manual::parse(&text, &origin, convention))
        .and_then(|lines| {
            armspace::manual::summarise(lines, &origin, args.target_ra_pct, convention)
        });
    match result {
        Ok(s) => {
            say!(
                "{} lines: SDAS {:.2} um (95% CI {:.2} to {:.2}), sd {:.2} um, %RA {:.1}",
                s.n_lines,
                s.mean_um,
                s.ci95_um[0],
                s.ci95_um[1],
                s.sd_um,
                s.rel_accuracy_pct
            );
            if let Some(n) = s.lines_for_target {
                if n > s.n_lines {
                    say!(
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
            say!("armspace: {e}");
            ExitCode::from(EXIT_NOT_MEASURED)
        }
    }
}
