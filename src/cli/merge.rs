//! `armspace merge`: join the reports of the parts of a batch (`measure
//! --shard K/N`) into the batch's report, CSV and page.

use super::measure::{exit_status, write_outputs, Outputs};
use super::{EXIT_FATAL, EXIT_USAGE};
use armspace::report::{self, merge::Part};
use clap::Args;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Args)]
pub(super) struct MergeArgs {
    /// The parts' JSON reports (every part 1/N to N/N once, in any order).
    #[arg(required = true)]
    reports: Vec<PathBuf>,
    /// Write the joined JSON report here (atomically); without it the
    /// report goes to stdout.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Also write the batch's CSV summary (atomically).
    #[arg(long)]
    csv: Option<PathBuf>,
    /// Also write the batch's HTML page (atomically), with the pictures the
    /// parts wrote (--overlay) when they are found.
    #[arg(long, value_name = "FILE")]
    html: Option<PathBuf>,
}

pub(super) fn run(args: MergeArgs) -> ExitCode {
    for (a, b, names) in [
        (&args.csv, &args.out, "--csv and --out"),
        (&args.html, &args.out, "--html and --out"),
        (&args.html, &args.csv, "--html and --csv"),
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
    // No output may replace a part's report.
    let protected = armspace::files::Protected::new(args.reports.iter().map(|p| p.as_path()));
    for (path, role) in [
        (&args.out, "report"),
        (&args.csv, "CSV summary"),
        (&args.html, "HTML page"),
    ] {
        if let Some(path) = path {
            if let Err(e) = protected.check_output(path, role) {
                say!("armspace: {e}");
                return ExitCode::from(EXIT_USAGE);
            }
        }
    }
    let mut parts = Vec::with_capacity(args.reports.len());
    for path in &args.reports {
        let name = path.display().to_string();
        let text = match armspace::files::read_text(path, "report") {
            Ok(t) => t,
            Err(e) => {
                say!("armspace: {e}");
                return ExitCode::from(EXIT_USAGE);
            }
        };
        match Part::parse(&text) {
            Ok(p) => parts.push((name, p)),
            Err(e) => {
                say!("armspace: {name}: {e}");
                return ExitCode::from(EXIT_USAGE);
            }
        }
    }
    let rep = match report::merge::merge(parts, report::now_utc()) {
        Ok(r) => r,
        Err(e) => {
            say!("armspace: cannot join the parts: {e}");
            return ExitCode::from(EXIT_USAGE);
        }
    };
    let outputs = Outputs {
        out: args.out.as_deref(),
        csv: args.csv.as_deref(),
        html: args.html.as_deref(),
    };
    let write_failed = write_outputs(&rep, &outputs, Default::default());
    for line in armspace::console::batch_lines(&rep) {
        say!("{line}");
    }
    if write_failed {
        return ExitCode::from(EXIT_FATAL);
    }
    exit_status(&rep)
}
