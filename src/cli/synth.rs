//! `armspace synth` (built with `--features synth`): synthetic micrographs
//! of known SDAS and their truth.json.

use super::{EXIT_FATAL, EXIT_OK, EXIT_USAGE};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(clap::Args)]
pub(super) struct SynthArgs {
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
    style: Option<armspace::synth::Style>,
    /// Give every field a spacing that steps across it from the left edge
    /// (as from a chilled wall inwards): F0:F1[:N] draws N bands (8 when
    /// not given) whose spacing steps evenly from F0 to F1 times the
    /// field's; 1:1.5:2 is two parts. Each band and the slope are in
    /// truth.json (bands, gradient_um_per_mm).
    #[arg(long, value_name = "F0:F1[:N]", value_parser = armspace::synth::Gradient::parse, conflicts_with = "fields")]
    gradient: Option<armspace::synth::Gradient>,
    /// Write into a folder that already holds files (images of the same
    /// names and truth.json are replaced; others stay and are not in the truth).
    #[arg(long)]
    replace: bool,
}

pub(super) fn run(args: SynthArgs) -> ExitCode {
    // A set mixed with an older one would carry a truth.json that does not
    // describe every image beside it: refuse unless asked.
    let holds_files = std::fs::read_dir(&args.outdir)
        .map(|mut d| d.next().is_some())
        .unwrap_or(false);
    if holds_files && !args.replace {
        say!(
            "armspace: {}: the folder is not empty; choose an empty or new folder, or give --replace",
            args.outdir.display()
        );
        return ExitCode::from(EXIT_USAGE);
    }
    let result = match &args.fields {
        None => armspace::synth::write_set_graded(
            &args.outdir,
            args.seed,
            args.count as usize,
            args.style,
            args.gradient,
        )
        .map_err(|e| e.to_string()),
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
            say!(
                "wrote {} image(s) and truth.json to {}",
                truths.len(),
                args.outdir.display()
            );
            ExitCode::from(EXIT_OK)
        }
        Err(e) => {
            say!("armspace: {e}");
            ExitCode::from(EXIT_FATAL)
        }
    }
}
