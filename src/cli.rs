//! Command-line arguments (clap derive). Parsing only; `main.rs` wires the
//! commands to the library.

use clap::{Parser, Subcommand};
use std::path::PathBuf;

#[derive(Debug, Parser)]
#[command(name = "fringeflow", version, about = "Spectral-domain OCT reconstruction: raw HDF5 spectra to B-scans, volumes and processing logs")]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Reconstruct captures into DIR/<capture-stem>/: PNG per frame, volume.h5, log.json; batch.json summarises.
    Run {
        /// Capture files, directories of captures, or quoted glob patterns.
        #[arg(required_unless_present = "list")]
        captures: Vec<PathBuf>,
        /// A file listing captures, one per line (# starts a comment).
        #[arg(long)]
        list: Option<PathBuf>,
        /// Pipeline file (TOML); built-in defaults when omitted.
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
        /// Output directory.
        #[arg(long, short)]
        out: PathBuf,
        /// Skip captures whose outputs are complete and were made from the
        /// same input (SHA-256) with the same pipeline.
        #[arg(long)]
        resume: bool,
        /// Process only slice I of N (0 <= I < N) of the sorted inputs; by
        /// default taken from SLURM_ARRAY_TASK_ID/COUNT when set.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
        /// No progress bars, per-capture lines or summary table.
        #[arg(long, short)]
        quiet: bool,
        /// `fused`: the f32 fast path; `reference`: the plain f64 stage chain
        /// (slower; the fast path is tested against it).
        #[arg(long, value_enum, default_value_t = Engine::Fused)]
        engine: Engine,
    },
    /// Reproduce an output from its log.json alone (input checked by SHA-256).
    Rerun {
        log: PathBuf,
        /// Output directory for the reproduction.
        #[arg(long, short)]
        out: PathBuf,
    },
    /// Merge the batch summaries in DIR (one per shard) into DIR/summary.json.
    Summarize { dir: PathBuf },
    /// Print an sbatch job-array script that reconstructs a list of captures (creates the output directory for the task logs).
    SlurmScript {
        /// File listing the captures, one per line.
        #[arg(long)]
        list: PathBuf,
        #[arg(long, short)]
        pipeline: PathBuf,
        #[arg(long, short)]
        out: PathBuf,
        /// Array tasks (each takes one balanced slice of the list).
        #[arg(long, default_value_t = 4)]
        tasks: usize,
        #[arg(long, default_value_t = 2)]
        cpus_per_task: usize,
        #[arg(long, default_value = "2G")]
        mem: String,
        #[arg(long, default_value = "04:00:00")]
        time: String,
        #[arg(long)]
        partition: Option<String>,
        #[arg(long, default_value = "fringeflow")]
        job_name: String,
    },
    /// Simulate a capture from a scene file, with its ground truth beside it.
    Simulate {
        /// Scene file (TOML).
        scene: PathBuf,
        /// Capture to write (HDF5); <stem>.truth.json is written beside it.
        #[arg(long, short)]
        out: PathBuf,
    },
    /// Measure the system from mirror captures.
    #[command(subcommand)]
    Measure(MeasureCommand),
    /// Design calculator: resolution, depth range and roll-off from source and spectrometer.
    Design {
        /// Source centre wavelength, nm.
        #[arg(long)]
        centre_nm: f64,
        /// Source FWHM, nm.
        #[arg(long)]
        fwhm_nm: f64,
        /// Spectrometer span, nm (or give --pixel-width-nm).
        #[arg(long, required_unless_present = "pixel_width_nm", conflicts_with = "pixel_width_nm")]
        span_nm: Option<f64>,
        /// Spectral width of one pixel, nm.
        #[arg(long)]
        pixel_width_nm: Option<f64>,
        /// Camera pixels.
        #[arg(long)]
        pixels: usize,
        /// Group index of the sample.
        #[arg(long, default_value_t = 1.38)]
        group_index: f64,
        /// Spectral response FWHM of one pixel, nm (default: one pixel width).
        #[arg(long)]
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
    Bench {
        /// Capture to time (default: simulate benches/throughput-scene.toml into the work directory).
        #[arg(long)]
        capture: Option<PathBuf>,
        /// Working directory (bench capture, end-to-end outputs).
        #[arg(long, default_value = "out/bench")]
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
        /// Also write the report as JSON here.
        #[arg(long)]
        json: Option<PathBuf>,
    },
    /// List a capture's datasets, shapes, types, value ranges and problems.
    Inspect {
        capture: PathBuf,
        /// Pipeline file whose [input] section names the datasets.
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
    },
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Engine {
    Fused,
    Reference,
}

#[derive(Debug, Subcommand)]
pub enum MeasureCommand {
    /// Axial PSF of a mirror capture: FWHM against the coherence-length limit, side lobes, SNR.
    Psf {
        mirror: PathBuf,
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
        /// Frame to measure.
        #[arg(long, default_value_t = 0)]
        frame: usize,
        /// Group index for the FWHM in a medium.
        #[arg(long, default_value_t = 1.38)]
        group_index: f64,
        /// Where to write the PSF plot (PNG).
        #[arg(long, default_value = "psf.png")]
        plot: PathBuf,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
    /// Roll-off from mirror captures at three or more depths; sensitivity with --attenuation-db.
    Rolloff {
        #[arg(required = true)]
        mirrors: Vec<PathBuf>,
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
        /// Single-pass attenuation placed in the sample arm (dB of power); counted twice.
        #[arg(long)]
        attenuation_db: Option<f64>,
        /// Where to write the roll-off plot (PNG).
        #[arg(long, default_value = "rolloff.png")]
        plot: PathBuf,
        #[arg(long)]
        json: bool,
    },
}

#[derive(Debug, Subcommand)]
pub enum CalibrateCommand {
    /// Per-pixel wavelength map from the fringe phase of mirror captures at two or more depths (or one at a known depth).
    Wavelength {
        #[arg(required = true)]
        mirrors: Vec<PathBuf>,
        /// Calibration file to write (JSON).
        #[arg(long, short)]
        out: PathBuf,
        /// Wavelength at the middle pixel, nm.
        #[arg(long)]
        centre_nm: Option<f64>,
        /// Wavelength span from the first to the last pixel, nm.
        #[arg(long)]
        span_nm: Option<f64>,
        /// Mirror depths in µm (single pass, in air), one per capture, comma-separated.
        #[arg(long, value_delimiter = ',')]
        depths_um: Option<Vec<f64>>,
        /// The wavelength decreases with pixel index (default: increases).
        #[arg(long)]
        decreasing: bool,
        /// Degree of the polynomial fitted to the map.
        #[arg(long, default_value_t = 3)]
        degree: usize,
        /// Pipeline file whose [input] section names the datasets.
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
        /// Frame whose A-lines are averaged.
        #[arg(long, default_value_t = 0)]
        frame: usize,
        /// Print the calibration as JSON instead of a summary.
        #[arg(long)]
        json: bool,
    },
}

#[derive(Debug, Subcommand)]
pub enum DispersionCommand {
    /// Find the a2/a3 that minimise image entropy (what `method = "auto"` does).
    Estimate {
        capture: PathBuf,
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
        /// Frame to estimate from (default: the pipeline's, else the middle frame).
        #[arg(long)]
        frame: Option<usize>,
        #[arg(long)]
        json: bool,
    },
    /// Reconstruct one frame for each a2/a3 on a grid: contact sheet, CSV/JSON table, metric plot.
    Sweep {
        capture: PathBuf,
        /// a2 values, START:STOP:STEP (rad) or one value.
        #[arg(long, allow_hyphen_values = true)]
        a2: String,
        /// a3 values, START:STOP:STEP (rad) or one value.
        #[arg(long, allow_hyphen_values = true, default_value = "0")]
        a3: String,
        #[arg(long, default_value_t = 0)]
        frame: usize,
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
        /// Output directory.
        #[arg(long, short)]
        out: PathBuf,
    },
}
