//! Command-line arguments (clap derive). Parsing only; `main.rs` wires the
//! commands to the library. The same definitions generate the shell
//! completions (`fringeflow completions`) and the man page (`fringeflow man`).

use clap::{ArgAction, Parser, Subcommand};
use std::path::PathBuf;

/// Top-level help: commands grouped by task (a test checks that every
/// subcommand appears here).
const TOP_HELP: &str = "\
{before-help}{about-with-newline}
{usage-heading} {usage}

Reconstruct:
  run           Reconstruct captures into B-scans, volume.h5 and log.json
  rerun         Reproduce an output from its log.json alone
  inspect       List a capture's datasets, shapes, value ranges and problems
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
    Run {
        /// Capture files (HDF5), directories of captures, or quoted glob patterns.
        #[arg(required_unless_present = "list", value_name = "CAPTURE")]
        captures: Vec<PathBuf>,
        /// A file listing captures, one per line (# starts a comment).
        #[arg(long, value_name = "FILE")]
        list: Option<PathBuf>,
        /// Pipeline file (TOML); optional: the built-in defaults when omitted.
        #[arg(long, short, value_name = "FILE")]
        pipeline: Option<PathBuf>,
        /// Override one pipeline setting (repeatable), e.g. --set window.kind=hamming.
        #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
        overrides: Vec<String>,
        /// Output directory (created when missing).
        #[arg(long, short, value_name = "DIR")]
        out: PathBuf,
        /// Skip captures whose outputs are complete and were made from the
        /// same input (by its hash) with the same pipeline.
        #[arg(long)]
        resume: bool,
        /// Replace outputs in DIR that a different pipeline made (refused otherwise).
        #[arg(long)]
        overwrite: bool,
        /// Process only slice I of N (0 <= I < N) of the sorted inputs; by
        /// default taken from SLURM_ARRAY_TASK_ID/COUNT when set.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
        /// List the inputs (after globbing and sharding), whether each would be
        /// skipped or refused, and the output paths; write nothing.
        #[arg(long)]
        dry_run: bool,
        /// One JSON object per capture on stdout as it finishes, then one for the batch.
        #[arg(long)]
        json: bool,
        /// JSON-lines progress events on stderr (start, capture_start, frame,
        /// capture_end, end) for orchestration; replaces bars and status lines.
        #[arg(long)]
        progress_json: bool,
        /// `fused`: the f32 fast path; `reference`: the plain f64 stage chain
        /// (slower; the fast path is tested against it).
        #[arg(long, value_enum, default_value_t = Engine::Fused)]
        engine: Engine,
    },
    /// Reproduce an output from its log.json alone (input checked by the hash the log names).
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow rerun out/sample/layered-phantom/log.json --out out/again\n\n",
        "EXIT STATUS:\n",
        "  0 reproduced; 1 the input is missing or changed, or processing failed; 2 the log is unreadable or edited"
    ))]
    Rerun {
        /// A log.json written by `run`.
        #[arg(value_name = "LOG")]
        log: PathBuf,
        /// Output directory for the reproduction.
        #[arg(long, short, value_name = "DIR")]
        out: PathBuf,
        /// Print the outcome as JSON on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Merge the batch summaries in DIR (one per shard) into DIR/summary.json.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow summarize out/all\n",
        "  fringeflow summarize out/all --json | python3 -m json.tool\n\n",
        "EXIT STATUS:\n",
        "  0 every capture done or skipped; 1 failures, captures not run, or inconsistent summaries; 2 DIR is not a folder"
    ))]
    Summarize {
        /// An output folder of `run` (holding batch.json or batch-I-of-N.json).
        #[arg(value_name = "DIR")]
        dir: PathBuf,
        /// Print the merged summary as JSON instead of a table.
        #[arg(long)]
        json: bool,
    },
    /// Print an sbatch job-array script that reconstructs a list of captures (creates the output directory for the task logs).
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow slurm-script --list captures.txt -p pipelines/default.toml --out out/cluster > job.sh\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    SlurmScript {
        /// File listing the captures, one per line.
        #[arg(long, value_name = "FILE")]
        list: PathBuf,
        /// Pipeline file (TOML) every task uses.
        #[arg(long, short, value_name = "FILE")]
        pipeline: PathBuf,
        /// Output directory of the batch (and of the task logs).
        #[arg(long, short, value_name = "DIR")]
        out: PathBuf,
        /// Array tasks (each takes one balanced slice of the list).
        #[arg(long, default_value_t = 4)]
        tasks: usize,
        /// CPUs per array task (its thread count).
        #[arg(long, default_value_t = 2)]
        cpus_per_task: usize,
        /// Memory per task, in Slurm's syntax.
        #[arg(long, default_value = "2G")]
        mem: String,
        /// Time limit per task, in Slurm's syntax.
        #[arg(long, default_value = "04:00:00")]
        time: String,
        /// Slurm partition (the cluster's default when omitted).
        #[arg(long)]
        partition: Option<String>,
        /// Job name shown by squeue.
        #[arg(long, default_value = "fringeflow")]
        job_name: String,
    },
    /// Simulate a capture from a scene file, with its ground truth beside it.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow simulate sample-data/layered-phantom.toml --out out/phantom.h5\n\n",
        "The scene keys are described in docs/scene-reference.md.\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Simulate {
        /// Scene file (TOML).
        #[arg(value_name = "SCENE")]
        scene: PathBuf,
        /// Capture to write (HDF5); <stem>.truth.json is written beside it.
        #[arg(long, short, value_name = "FILE")]
        out: PathBuf,
        /// Print what was written (paths, shape, seconds) as JSON on stdout.
        #[arg(long)]
        json: bool,
    },
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
    Design {
        /// Source centre wavelength, nm.
        #[arg(long, value_name = "NM")]
        centre_nm: f64,
        /// Source FWHM, nm.
        #[arg(long, value_name = "NM")]
        fwhm_nm: f64,
        /// Spectrometer span from the first to the last pixel, nm (give one of --span-nm, --pixel-width-nm).
        #[arg(long, value_name = "NM")]
        span_nm: Option<f64>,
        /// Spectral width of one pixel, nm (give one of --span-nm, --pixel-width-nm).
        #[arg(long, value_name = "NM")]
        pixel_width_nm: Option<f64>,
        /// Camera pixels.
        #[arg(long)]
        pixels: usize,
        /// Group index of the sample.
        #[arg(long, default_value_t = 1.38)]
        group_index: f64,
        /// Spectral response FWHM of one pixel, nm (default: one pixel width).
        #[arg(long, value_name = "NM")]
        resolution_nm: Option<f64>,
        /// Print JSON instead of a table.
        #[arg(long)]
        json: bool,
    },
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
    Bench {
        /// Capture to time (default: simulate benches/throughput-scene.toml into the work directory).
        #[arg(long, value_name = "FILE")]
        capture: Option<PathBuf>,
        /// Working directory (bench capture, end-to-end outputs).
        #[arg(long, default_value = "out/bench", value_name = "DIR")]
        work_dir: PathBuf,
        /// A-lines per timed run.
        #[arg(long, default_value_t = 100_000)]
        alines: usize,
        /// Timed runs per figure (the median is reported).
        #[arg(long, default_value_t = 5)]
        repeats: usize,
        /// Skip the 10k/100k/1M A-line scaling runs.
        #[arg(long)]
        no_scaling: bool,
        /// Skip timing `run` end to end.
        #[arg(long)]
        no_end_to_end: bool,
        /// Skip timing the simulator against its scalar reference.
        #[arg(long)]
        no_simulator: bool,
        /// Skip the camera-size table (1024, 2048, 4096 and 2000 pixels, every variant).
        #[arg(long)]
        no_sizes: bool,
        /// Kernel variant for the main figures: avx512, avx2 or scalar (as
        /// FRINGEFLOW_KERNEL; default: the one measured fastest on the plan).
        /// Every variant is also timed on its own line.
        #[arg(long, value_name = "VARIANT")]
        kernel: Option<String>,
        /// Also write the report as JSON to this file.
        #[arg(long, value_name = "FILE")]
        report: Option<PathBuf>,
        /// Print the report as JSON on stdout instead of the table.
        #[arg(long)]
        json: bool,
    },
    /// List a capture's datasets, shapes, types, value ranges and problems.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow inspect sample-data/layered-phantom.h5\n",
        "  fringeflow inspect capture.h5 -p pipelines/default.toml --json\n\n",
        "EXIT STATUS:\n",
        "  0 no problems; 1 problems found or the file cannot be read; 2 usage or pipeline error"
    ))]
    Inspect {
        /// Capture file (HDF5).
        #[arg(value_name = "CAPTURE")]
        capture: PathBuf,
        /// Pipeline file whose [input] section names the datasets.
        #[arg(long, short, value_name = "FILE")]
        pipeline: Option<PathBuf>,
        /// Print datasets and problems as JSON.
        #[arg(long)]
        json: bool,
    },
    /// Pipeline files: print the commented defaults, check one, show its resolved form.
    #[command(subcommand)]
    Pipeline(PipelineCommand),
    /// Compare two outputs of one capture on one page: side by side, blink, difference, settings and sharpness.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow compare out/linear/layered-phantom out/cubic/layered-phantom --out out/linear-vs-cubic.html\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Compare {
        /// Output folder A (log.json and volume.h5 made by `run`).
        #[arg(value_name = "DIR_A")]
        a: PathBuf,
        /// Output folder B, from the same capture.
        #[arg(value_name = "DIR_B")]
        b: PathBuf,
        /// The page to write (HTML).
        #[arg(long, short, value_name = "FILE")]
        out: PathBuf,
    },
    /// Write report.html, a self-contained page to browse and share, for output folders made by `run`.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow report out/sample/layered-phantom\n",
        "  fringeflow report out/all/* --frame-step 10\n\n",
        "The page needs no network: open it from the folder or send it as one file.\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Report {
        /// Output folders (each holding log.json and volume.h5).
        #[arg(required = true, value_name = "DIR")]
        dirs: Vec<PathBuf>,
        /// Embed every N-th stored frame (default: the [output] report_frame_step of
        /// the folder's pipeline; 0 chooses N so the page stays near 32 M pixels).
        #[arg(long, value_name = "N")]
        frame_step: Option<usize>,
        /// Print what was written as JSON.
        #[arg(long)]
        json: bool,
    },
    /// Print a shell completion script on stdout.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow completions bash > ~/.local/share/bash-completion/completions/fringeflow\n",
        "  fringeflow completions zsh > ~/.zfunc/_fringeflow"
    ))]
    Completions {
        /// The shell.
        #[arg(value_enum)]
        shell: clap_complete::Shell,
    },
    /// Print the man page (roff) on stdout, or write one page per command into a folder.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow man | man -l -\n",
        "  fringeflow man --out-dir target/man"
    ))]
    Man {
        /// Write fringeflow.1 and fringeflow-<command>.1 here instead.
        #[arg(long, value_name = "DIR")]
        out_dir: Option<PathBuf>,
    },
}

/// Which implementation reconstructs the A-lines.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Engine {
    Fused,
    Reference,
}

#[derive(Debug, Subcommand)]
pub enum MeasureCommand {
    /// Axial PSF of a mirror capture: FWHM against the coherence-length limit, side lobes, SNR.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow measure psf mirror.h5 -p pipelines/psf.toml --plot out/psf.png\n",
        "  fringeflow measure psf mirror.h5 --json\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Psf {
        /// Mirror capture (HDF5).
        #[arg(value_name = "MIRROR")]
        mirror: PathBuf,
        /// Pipeline file (TOML); built-in defaults when omitted.
        #[arg(long, short, value_name = "FILE")]
        pipeline: Option<PathBuf>,
        /// Override one pipeline setting (repeatable).
        #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
        overrides: Vec<String>,
        /// Frame to measure.
        #[arg(long, default_value_t = 0)]
        frame: usize,
        /// Group index for the FWHM in a medium.
        #[arg(long, default_value_t = 1.38)]
        group_index: f64,
        /// Write the PSF plot here (PNG, or SVG when the name ends in .svg); no plot when omitted.
        #[arg(long, value_name = "FILE")]
        plot: Option<PathBuf>,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
    /// Roll-off from mirror captures at three or more depths; sensitivity with --attenuation-db.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow measure rolloff m1.h5 m2.h5 m3.h5 m4.h5 --attenuation-db 25 --plot out/rolloff.png\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Rolloff {
        /// Mirror captures, one per depth.
        #[arg(required = true, value_name = "MIRROR")]
        mirrors: Vec<PathBuf>,
        /// Pipeline file (TOML); built-in defaults when omitted.
        #[arg(long, short, value_name = "FILE")]
        pipeline: Option<PathBuf>,
        /// Override one pipeline setting (repeatable).
        #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
        overrides: Vec<String>,
        /// Single-pass attenuation placed in the sample arm (dB of power); counted twice.
        #[arg(long, value_name = "DB")]
        attenuation_db: Option<f64>,
        /// Write the roll-off plot here (PNG, or SVG when the name ends in .svg); no plot when omitted.
        #[arg(long, value_name = "FILE")]
        plot: Option<PathBuf>,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
}

#[derive(Debug, Subcommand)]
pub enum CalibrateCommand {
    /// Per-pixel wavelength map from the fringe phase of mirror captures at two or more depths (or one at a known depth).
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow calibrate wavelength m1.h5 m2.h5 --centre-nm 840 --span-nm 150 --out cal.json\n",
        "  fringeflow calibrate wavelength m.h5 --depths-um 400 --centre-nm 840 --out cal.json --plot cal.png\n\n",
        "Give exactly two of --centre-nm, --span-nm and --depths-um.\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Wavelength {
        /// Mirror captures (HDF5).
        #[arg(required = true, value_name = "MIRROR")]
        mirrors: Vec<PathBuf>,
        /// Calibration file to write (JSON).
        #[arg(long, short, value_name = "FILE")]
        out: PathBuf,
        /// Wavelength at the middle pixel, nm.
        #[arg(long, value_name = "NM")]
        centre_nm: Option<f64>,
        /// Wavelength span from the first to the last pixel, nm.
        #[arg(long, value_name = "NM")]
        span_nm: Option<f64>,
        /// Mirror depths in µm (single pass, in air), one per capture, comma-separated.
        #[arg(long, value_delimiter = ',', value_name = "UM,UM")]
        depths_um: Option<Vec<f64>>,
        /// The wavelength decreases with pixel index (default: increases).
        #[arg(long)]
        decreasing: bool,
        /// Degree of the polynomial fitted to the map (1–9).
        #[arg(long, default_value_t = 3)]
        degree: usize,
        /// Pipeline file whose [input] section names the datasets.
        #[arg(long, short, value_name = "FILE")]
        pipeline: Option<PathBuf>,
        /// Frame whose A-lines are averaged.
        #[arg(long, default_value_t = 0)]
        frame: usize,
        /// Also draw the calibrated map against the nominal one and the fit residual (PNG, or SVG when the name ends in .svg).
        #[arg(long, value_name = "FILE")]
        plot: Option<PathBuf>,
        /// Print the calibration as JSON instead of a summary.
        #[arg(long)]
        json: bool,
    },
}

#[derive(Debug, Subcommand)]
pub enum DispersionCommand {
    /// Find the a2/a3 that minimise image entropy (what `method = "auto"` does).
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow dispersion estimate sample-data/layered-phantom.h5\n",
        "  fringeflow dispersion estimate sample-data/layered-phantom.h5 --set dispersion.a2_range=[-200,200] --json\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Estimate {
        /// Capture (HDF5).
        #[arg(value_name = "CAPTURE")]
        capture: PathBuf,
        /// Pipeline file (TOML); built-in defaults when omitted.
        #[arg(long, short, value_name = "FILE")]
        pipeline: Option<PathBuf>,
        /// Override one pipeline setting (repeatable).
        #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
        overrides: Vec<String>,
        /// Frame to estimate from (default: the pipeline's, else the middle frame).
        #[arg(long)]
        frame: Option<usize>,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
    /// Reconstruct one frame for each a2/a3 on a grid: contact sheet, CSV/JSON table, metric plot.
    #[command(after_help = concat!(
        "EXAMPLES:\n",
        "  fringeflow dispersion sweep sample-data/layered-phantom.h5 --a2 -60:60:20 --out out/sweep\n\n",
        EXIT_STATUS_USAGE!()
    ))]
    Sweep {
        /// Capture (HDF5).
        #[arg(value_name = "CAPTURE")]
        capture: PathBuf,
        /// a2 values, START:STOP:STEP (rad) or one value.
        #[arg(long, allow_hyphen_values = true, value_name = "RANGE")]
        a2: String,
        /// a3 values, START:STOP:STEP (rad) or one value.
        #[arg(long, allow_hyphen_values = true, default_value = "0", value_name = "RANGE")]
        a3: String,
        /// Frame to reconstruct.
        #[arg(long, default_value_t = 0)]
        frame: usize,
        /// Pipeline file (TOML); built-in defaults when omitted.
        #[arg(long, short, value_name = "FILE")]
        pipeline: Option<PathBuf>,
        /// Override one pipeline setting (repeatable).
        #[arg(long = "set", value_name = "SECTION.KEY=VALUE")]
        overrides: Vec<String>,
        /// Output directory.
        #[arg(long, short, value_name = "DIR")]
        out: PathBuf,
        /// Print the table as JSON on stdout.
        #[arg(long)]
        json: bool,
    },
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
