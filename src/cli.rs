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
    /// List a capture's datasets, shapes, types, value ranges and problems.
    Inspect {
        capture: PathBuf,
        /// Pipeline file whose [input] section names the datasets.
        #[arg(long, short)]
        pipeline: Option<PathBuf>,
    },
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
