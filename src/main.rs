//! The `fringeflow` binary: parses the arguments (`cli/`), prepares the
//! process (`commands::prepare`) and hands each command to its file under
//! `commands/`. Errors print as one line on stderr; exit 2 for usage and
//! settings errors, 1 when a capture could not be processed.

/// Output that never panics on a closed pipe or a full device.
macro_rules! outln {
    ($($t:tt)*) => { fringeflow::output::println(&format!($($t)*)) };
}
macro_rules! out {
    ($($t:tt)*) => { fringeflow::output::print(&format!($($t)*)) };
}
macro_rules! errln {
    ($($t:tt)*) => { fringeflow::output::note(&format!($($t)*)) };
}

mod cli;
mod commands;

use clap::FromArgMatches;
use std::process::ExitCode;

use cli::{Cli, Command};

fn main() -> ExitCode {
    let matches = cli::command().get_matches();
    let cli = match Cli::from_arg_matches(&matches) {
        Ok(c) => c,
        Err(e) => e.exit(),
    };
    if let Err(code) = commands::prepare(&cli) {
        return code;
    }
    let (quiet, verbose) = (cli.quiet, cli.verbose);
    match cli.command {
        Command::Run(a) => commands::run::command(a, quiet, verbose),
        Command::Rerun(a) => commands::rerun::command(a),
        Command::Report(a) => commands::report::command(a),
        Command::Compare(a) => commands::compare::command(a),
        Command::Summarize(a) => commands::summarize::command(a),
        Command::SlurmScript(a) => commands::slurm_script::command(a),
        Command::Simulate(a) => commands::simulate::command(a, quiet),
        Command::Measure(c) => commands::measure::command(c),
        Command::Bench(a) => commands::bench::command(a, quiet),
        Command::Calibrate(c) => commands::calibrate::command(c),
        Command::Dispersion(c) => commands::dispersion::command(c),
        Command::Design(a) => commands::design::command(a),
        Command::Inspect(a) => commands::inspect::command(a),
        Command::Import(a) => commands::import::command(a),
        Command::Pipeline(c) => commands::pipeline::command(c),
        Command::Completions(a) => commands::completions::command(a),
        Command::Man(a) => commands::man::command(a, quiet),
    }
}
