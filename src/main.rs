//! The `armspace` command: a thin shell over the library (the command line
//! itself is in `cli/`, one file per subcommand).

mod cli;

fn main() -> std::process::ExitCode {
    cli::run()
}
