//! Arguments of the simulator, the bench and the shell helpers: simulate,
//! bench, completions and man.

use clap::Args;
use std::path::PathBuf;

#[derive(Debug, Args)]
pub struct SimulateArgs {
    /// Scene file (TOML).
    #[arg(value_name = "SCENE")]
    pub scene: PathBuf,
    /// Capture to write (HDF5); <stem>.truth.json is written beside it.
    #[arg(long, short, value_name = "FILE")]
    pub out: PathBuf,
    /// Print what was written (paths, shape, seconds) as JSON on stdout.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct BenchArgs {
    /// Capture to time (default: simulate benches/throughput-scene.toml into the work directory).
    #[arg(long, value_name = "FILE")]
    pub capture: Option<PathBuf>,
    /// Working directory (bench capture, end-to-end outputs).
    #[arg(long, default_value = "out/bench", value_name = "DIR")]
    pub work_dir: PathBuf,
    /// A-lines per timed run.
    #[arg(long, default_value_t = 100_000)]
    pub alines: usize,
    /// Timed runs per figure (the median is reported).
    #[arg(long, default_value_t = 5)]
    pub repeats: usize,
    /// Skip the 10k/100k/1M A-line scaling runs.
    #[arg(long)]
    pub no_scaling: bool,
    /// Skip timing `run` end to end.
    #[arg(long)]
    pub no_end_to_end: bool,
    /// Skip timing the simulator against its scalar reference.
    #[arg(long)]
    pub no_simulator: bool,
    /// Skip the camera-size table (1024, 2048, 4096 and 2000 pixels, every variant).
    #[arg(long)]
    pub no_sizes: bool,
    /// Skip timing the capture readers (npy, raw, TIFF against HDF5) and the 2 GB raw memory figure.
    #[arg(long)]
    pub no_readers: bool,
    /// Kernel variant for the main figures: avx512, avx2 or scalar (as
    /// FRINGEFLOW_KERNEL; default: the one measured fastest on the plan).
    /// Every variant is also timed on its own line.
    #[arg(long, value_name = "VARIANT")]
    pub kernel: Option<String>,
    /// Also write the report as JSON to this file.
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
    /// Print the report as JSON on stdout instead of the table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct CompletionsArgs {
    /// The shell.
    #[arg(value_enum)]
    pub shell: clap_complete::Shell,
}

#[derive(Debug, Args)]
pub struct ManArgs {
    /// Write fringeflow.1 and fringeflow-<command>.1 here instead.
    #[arg(long, value_name = "DIR")]
    pub out_dir: Option<PathBuf>,
}
