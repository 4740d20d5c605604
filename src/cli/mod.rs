//! Command-line arguments (clap derive). Parsing only; `commands/` does the
//! work and `main.rs` dispatches. This file holds the top level (global
//! options, the grouped help, one variant per command); each command
//! family's arguments live beside it: `reconstruct.rs`, `batch.rs`,
//! `characterise.rs`, `tools.rs`. The same definitions generate the shell
//! completions (`fringeflow completions`) and the man page (`fringeflow man`).

use clap::{ArgAction, Parser, Subcommand};

/// Top-level help: commands grouped by task (a test checks that every
/// subcommand appears here).
const TOP_HELP: &str = "\
{before-help}{about-with-newline}
{usage-heading} {usage}

Reconstruct:
  run           Reconstruct captures into B-scans, volume.h5 and log.json
  rerun         Reproduce an output from its log.json alone
  inspect       List a capture's datasets, shapes, value ranges and problems
  import        Write a capture in any readable format as a fringeflow HDF5 capture
  pipeline      Print the commented defaults, check a pipeline, show its resolved form
  report        Write (or rewrite) report.html for an output folder
  compare       Page comparing two outputs of one capture (side by side, blink, difference)

Batches and clusters:
  summarize     Merge the batch summaries of an output folder
  slurm-script  Print an sbatch job-array script for a list of captures

Calibrate and characterise:
  calibrate     Wavelength map from mirror captures
  dispersion    Estimate dispersion coefficients, or sweep them on a frame
  measure       Axial PSF and roll-off from mirror captures
  design        Resolution, depth range and roll-off from source and spectrometer

Simulate and time:
  simulate      Make a capture and its ground truth from a scene file
  bench         Throughput report: bare FFT against the full pipeline

Shell:
  completions   Shell completion script (bash, zsh, fish, elvish, powershell)
  man           The man page (roff)
  help          Print this message or the help of the given command

Options:
{options}{after-help}";

const TOP_AFTER: &str = "\
EXAMPLES:
  fringeflow simulate sample-data/layered-phantom.toml --out out/phantom.h5
  fringeflow run sample-data/layered-phantom.h5 --out out/sample
  fringeflow run 'captures/*.h5' -p pipelines/cubic-hamming-2x-16bit.toml --out out/all --resume

EXIT STATUS:
  0  success
  1  a capture or measurement could not be processed (the message says why)
  2  usage or settings error: bad option, pipeline file, or output folder
  128+n  stopped by signal n (130 for SIGINT, 143 for SIGTERM)

fringeflow is a research tool, not a diagnostic device.";

/// The EXIT STATUS section shared by every command's help (a macro so that it
/// can sit inside `concat!`).
macro_rules! EXIT_STATUS_USAGE {
    () => {
        "EXIT STATUS:\n  0 success; 1 the input could not be processed; 2 usage or settings error; 128+n stopped by signal n"
    };
}

mod batch;
mod characterise;
mod reconstruct;
mod tools;

pub use batch::{SlurmScriptArgs, SummarizeArgs};
pub use characterise::{CalibrateCommand, DesignArgs, DispersionCommand, MeasureCommand};
pub use reconstruct::{CompareArgs, Engine, ImportArgs, InspectArgs, PipelineCommand, RerunArgs, ReportArgs, RunArgs};
pub use tools::{BenchArgs, CompletionsArgs, ManArgs, SimulateArgs};

#[derive(Debug, Parser)]
#[command(
    name = "fringeflow",
    version,
    about = "Spectral-domain OCT reconstruction: raw HDF5 spectra to B-scans, volumes and processing logs",
    help_template = TOP_HELP,
    after_help = TOP_AFTER,
    disable_help_subcommand = false
)]
pub struct Cli {
    /// More detail on stderr: the resolved pipeline, the background method
    /// chosen, per-capture timing (-vv: per-stage timing).
    #[arg(short, long, global = true, action = ArgAction::Count)]
    pub verbose: u8,
    /// Only errors and warnings on stderr: no progress bars or status lines.
    #[arg(short, long, global = true, conflicts_with = "verbose")]
    pub quiet: bool,
    /// Worker threads (default: all cores, or RAYON_NUM_THREADS).
    #[arg(short = 'j', long, global = true, value_name = "N")]
    pub threads: Option<usize>,
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Reconstruct captures into DIR/<capture-stem>/: PNG per B-scan, volume.h5, log.json; batch.json summarises.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow run sample-data/layered-phantom.h5 --out out/sample\n",
        "  fringeflow run 'captures/*.h5' -p pipelines/cubic-hamming-2x-16bit.toml --out out/all --resume\n",
        "  fringeflow run sample-data/layered-phantom.h5 --out out/w --set window.kind=hamming --set fft.zero_padding=2\n",
        "  fringeflow run --list captures.txt --out out/all --dry-run\n\n",
        "EXIT STATUS:\n",
        "  0 every capture done or skipped; 1 at least one failed; 2 usage or settings error,\n",
        "  or DIR holds outputs of a different pipeline (see --overwrite); 128+n stopped by signal n"
    ))]
    Run(RunArgs),
    /// Reproduce an output from its log.json alone (input checked by the hash the log names).
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow rerun out/sample/layered-phantom/log.json --out out/again\n\n",
        "EXIT STATUS:\n",
        "  0 reproduced; 1 the input is missing or changed, or processing failed; 2 the log is unreadable or edited"
    ))]
    Rerun(RerunArgs),
    /// Merge the batch summaries in DIR (one per shard) into DIR/summary.json.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow summarize out/all\n",
        "  fringeflow summarize out/all --json | python3 -m json.tool\n\n",
        "EXIT STATUS:\n",
        "  0 every capture done or skipped; 1 failures, captures not run, or inconsistent summaries; 2 DIR is not a folder"
    ))]
    Summarize(SummarizeArgs),
    /// Print an sbatch job-array script that reconstructs a list of captures (creates the output directory for the task logs).
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow slurm-script --list captures.txt -p pipelines/default.toml --out out/cluster > job.sh\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    SlurmScript(SlurmScriptArgs),
    /// Simulate a capture from a scene file, with its ground truth beside it.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow simulate sample-data/layered-phantom.toml --out out/phantom.h5\n\n",
        "The scene keys are described in docs/scene-reference.md.\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Simulate(SimulateArgs),
    /// Measure the system from mirror captures: axial PSF, roll-off and sensitivity.
    #[command(subcommand)]
    Measure(MeasureCommand),
    /// Design calculator: resolution, depth range and roll-off from source and spectrometer.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow design --centre-nm 840 --fwhm-nm 50 --span-nm 150 --pixels 2048\n",
        "  fringeflow design --centre-nm 1310 --fwhm-nm 100 --pixel-width-nm 0.1 --pixels 2048 --json\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Design(DesignArgs),
    /// Calibrate the spectrometer from mirror captures.
    #[command(subcommand)]
    Calibrate(CalibrateCommand),
    /// Estimate dispersion coefficients or compare settings on a frame.
    #[command(subcommand)]
    Dispersion(DispersionCommand),
    /// Throughput report: bare FFT against the full pipeline, in one process and one run.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow bench --alines 20000 --repeats 3 --no-scaling --report out/bench.json\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Bench(BenchArgs),
    /// List a capture's datasets, shapes, types, value ranges and problems.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow inspect sample-data/layered-phantom.h5\n",
        "  fringeflow inspect capture.h5 -p pipelines/default.toml --json\n\n",
        "EXIT STATUS:\n",
        "  0 no problems; 1 problems found or the file cannot be read; 2 usage or pipeline error"
    ))]
    Inspect(InspectArgs),
    /// Write any readable capture (npy, npz, raw, TIFF, MATLAB, HDF5) as a fringeflow HDF5 capture.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow import scan.npy -p lab.toml --out archive/scan.h5 --deflate 4\n",
        "  fringeflow import dump.bin --set input.sample_type=u16 --set input.pixels=2048 --set input.alines_per_frame=512 --set input.wavelength_file=map.txt --out dump.h5\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Import(ImportArgs),
    /// Pipeline files: print the commented defaults, check one, show its resolved form.
    #[command(subcommand)]
    Pipeline(PipelineCommand),
    /// Compare two outputs of one capture on one page: side by side, blink, difference, settings and sharpness.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow compare out/linear/layered-phantom out/cubic/layered-phantom --out out/linear-vs-cubic.html\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Compare(CompareArgs),
    /// Write report.html, a self-contained page to browse and share, for output folders made by `run`.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow report out/sample/layered-phantom\n",
        "  fringeflow report out/all/* --frame-step 10\n\n",
        "The page needs no network: open it from the folder or send it as one file.\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Report(ReportArgs),
    /// Print a shell completion script on stdout.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow completions bash > ~/.local/share/bash-completion/completions/fringeflow\n",
        "  fringeflow completions zsh > ~/.zfunc/_fringeflow"
    ))]
    Completions(CompletionsArgs),
    /// Print the man page (roff) on stdout, or write one page per command into a folder.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow man | man -l -\n",
        "  fringeflow man --out-dir target/man"
    ))]
    Man(ManArgs),
}






/// The full version text: version, commit, build profile, SIMD path.
pub fn long_version() -> String {
    format!(
        "{}\ncommit {}\nprofile {}\nSIMD path {}\nkernel variants {} (each plan runs the fastest by measurement; see FRINGEFLOW_KERNEL, FRINGEFLOW_TUNING)",
        env!("CARGO_PKG_VERSION"),
        env!("FRINGEFLOW_COMMIT"),
        if cfg!(debug_assertions) { "debug" } else { "release" },
        fringeflow::pipeline::fused::simd_path(),
        fringeflow::pipeline::kernel::supported().iter().rev().map(|v| v.name()).collect::<Vec<_>>().join(", ")
    )
}

/// The clap command with the runtime parts (long version) filled in.
pub fn command() -> clap::Command {
    use clap::CommandFactory;
    let v = long_version();
    Cli::command().long_version(v.clone()).version(v.lines().next().unwrap_or("").to_string() + &format!(" ({})", env!("FRINGEFLOW_COMMIT")))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_subcommand_is_in_the_grouped_help() {
        let cmd = command();
        for sub in cmd.get_subcommands() {
            let needle = format!("\n  {}", sub.get_name());
            assert!(TOP_HELP.contains(&needle), "{} is missing from the top-level help", sub.get_name());
        }
    }

    #[test]
    fn every_argument_has_a_description() {
        fn walk(cmd: &clap::Command, path: &str) {
            for a in cmd.get_arguments() {
                let id = a.get_id().as_str();
                if matches!(id, "help" | "version") {
                    continue;
                }
                assert!(a.get_help().is_some(), "{path} {id} has no description");
            }
            for s in cmd.get_subcommands() {
                assert!(s.get_about().is_some(), "{path} {} has no description", s.get_name());
                walk(s, &format!("{path} {}", s.get_name()));
            }
        }
        let mut cmd = command();
        cmd.build();
        walk(&cmd, "fringeflow");
    }

    #[test]
    fn definitions_are_consistent() {
        command().debug_assert();
    }
}
