//! Arguments of the reconstruction commands: run, rerun, inspect, pipeline,
//! report and compare. Definitions only; `commands/` does the work.

use clap::{Args, Subcommand};
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct RunArgs {
    /// Capture files (HDF5), directories of captures, or quoted glob patterns.
    #[arg(required_unless_present = "list", value_name = "CAPTURE")]
    pub captures: Vec<PathBuf>,
    /// A file listing captures, one per line (# starts a comment).
    #[arg(long, value_name = "FILE")]
    pub list: Option<PathBuf>,
    /// Pipeline file (TOML); optional: the built-in defaults when omitted.
    #[arg(long, short, value_name = "FILE")]
    pub pipeline: Option<PathBuf>,
    /// Override one pipeline setting (repeatable), e.g. --set window.kind=hamming.
    #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
    pub overrides: Vec<String>,
    /// Output directory (created when missing).
    #[arg(long, short, value_name = "DIR")]
    pub out: PathBuf,
    /// Skip captures whose outputs are complete and were made from the
    /// same input (by its hash) with the same pipeline.
    #[arg(long)]
    pub resume: bool,
    /// Replace outputs in DIR that a different pipeline made (refused otherwise).
    #[arg(long)]
    pub overwrite: bool,
    /// Process only slice I of N (0 <= I < N) of the sorted inputs; by
    /// default taken from SLURM_ARRAY_TASK_ID/COUNT when set.
    #[arg(long, value_name = "I/N")]
    pub shard: Option<String>,
    /// List the inputs (after globbing and sharding), whether each would be
    /// skipped or refused, and the output paths; write nothing.
    #[arg(long)]
    pub dry_run: bool,
    /// One JSON object per capture on stdout as it finishes, then one for the batch.
    #[arg(long)]
    pub json: bool,
    /// JSON-lines progress events on stderr (start, capture_start, frame,
    /// capture_end, end) for orchestration; replaces bars and status lines.
    #[arg(long)]
    pub progress_json: bool,
    /// `fused`: the f32 fast path; `reference`: the plain f64 stage chain
    /// (slower; the fast path is tested against it).
    #[arg(long, value_enum, default_value_t = Engine::Fused)]
    pub engine: Engine,
}

/// Which implementation reconstructs the A-lines.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Engine {
    Fused,
    Reference,
}

#[derive(Debug, Args)]
pub struct RerunArgs {
    /// A log.json written by `run`.
    #[arg(value_name = "LOG")]
    pub log: PathBuf,
    /// Output directory for the reproduction.
    #[arg(long, short, value_name = "DIR")]
    pub out: PathBuf,
    /// Print the outcome as JSON on stdout.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct InspectArgs {
    /// Capture file (HDF5).
    #[arg(value_name = "CAPTURE")]
    pub capture: PathBuf,
    /// Pipeline file whose [input] section names the datasets.
    #[arg(long, short, value_name = "FILE")]
    pub pipeline: Option<PathBuf>,
    /// Print datasets and problems as JSON.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Subcommand)]
pub enum PipelineCommand {
    /// Print the default pipeline with a comment on every key (a starting point for a file).
    #[command(after_help = "EXAMPLES:\n  fringeflow pipeline defaults > my-pipeline.toml")]
    Defaults,
    /// Check a pipeline file without a capture (exit 0 when it is valid).
    #[command(after_help = "EXAMPLES:\n  fringeflow pipeline check pipelines/flow.toml\n\nEXIT STATUS:\n  0 valid; 2 not valid (the message names the key and line)")]
    Check {
        /// Pipeline file (TOML).
        #[arg(value_name = "FILE")]
        file: PathBuf,
        /// Override one setting (repeatable).
        #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
        overrides: Vec<String>,
    },
    /// Show the resolved pipeline: every key with the value `run` would use.
    #[command(after_help = "EXAMPLES:\n  fringeflow pipeline show pipelines/flow.toml\n  fringeflow pipeline show --set window.kind=hamming --json")]
    Show {
        /// Pipeline file (TOML); the built-in defaults when omitted.
        #[arg(value_name = "FILE")]
        file: Option<PathBuf>,
        /// Override one setting (repeatable).
        #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
        overrides: Vec<String>,
        /// Print JSON (as in log.json) instead of TOML.
        #[arg(long)]
        json: bool,
    },
}

#[derive(Debug, Args)]
pub struct ReportArgs {
    /// Output folders (each holding log.json and volume.h5).
    #[arg(required = true, value_name = "DIR")]
    pub dirs: Vec<PathBuf>,
    /// Embed every N-th stored frame (default: the [output] report_frame_step of
    /// the folder's pipeline; 0 chooses N so the page stays near 32 M pixels).
    #[arg(long, value_name = "N")]
    pub frame_step: Option<usize>,
    /// Print what was written as JSON.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct CompareArgs {
    /// Output folder A (log.json and volume.h5 made by `run`).
    #[arg(value_name = "DIR_A")]
    pub a: PathBuf,
    /// Output folder B, from the same capture.
    #[arg(value_name = "DIR_B")]
    pub b: PathBuf,
    /// The page to write (HTML).
    #[arg(long, short, value_name = "FILE")]
    pub out: PathBuf,
}

#[derive(Debug, Args)]
pub struct ImportArgs {
    /// Capture in any format fringeflow reads (HDF5, .npy, .npz, raw, TIFF, MATLAB v7.3).
    #[arg(value_name = "CAPTURE")]
    pub capture: PathBuf,
    /// HDF5 capture to write (refused if it exists).
    #[arg(long, short, value_name = "FILE")]
    pub out: PathBuf,
    /// Pipeline file whose [input] section describes the capture (raw layout, wavelength map, scan facts).
    #[arg(long, short, value_name = "FILE")]
    pub pipeline: Option<PathBuf>,
    /// Override one [input] setting (repeatable), e.g. --set input.sample_type=u16.
    #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
    pub overrides: Vec<String>,
    /// Deflate level 1–9 (lossless, with the byte shuffle); uncompressed when omitted.
    #[arg(long, value_name = "LEVEL", value_parser = clap::value_parser!(u8).range(1..=9))]
    pub deflate: Option<u8>,
    /// Print what was written as JSON.
    #[arg(long)]
    pub json: bool,
}
