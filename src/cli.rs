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
    /// Reconstruct captures into DIR/<capture-stem>/: PNG per frame, volume.h5, log.json.
    Run {
        /// Capture files (HDF5).
        #[arg(required = true)]
        captures: Vec<PathBuf>,
        /// Pipeline file (TOML); built-in defaults when omitted.
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
        /// Output directory.
        #[arg(long, short)]
        out: PathBuf,
        /// No progress bar or per-capture lines.
        #[arg(long, short)]
        quiet: bool,
    },
    /// Simulate a capture from a scene file, with its ground truth beside it.
    Simulate {
        /// Scene file (TOML).
        scene: PathBuf,
        /// Capture to write (HDF5); <stem>.truth.json is written beside it.
        #[arg(long, short)]
        out: PathBuf,
    },
    /// List a capture's datasets, shapes, types, value ranges and problems.
    Inspect {
        capture: PathBuf,
        /// Pipeline file whose [input] section names the datasets.
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
    },
}
