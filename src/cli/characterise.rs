//! Arguments of the calibration and characterisation commands: calibrate,
//! dispersion, measure and design.

use clap::{Args, Subcommand};
use std::path::PathBuf;

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

#[derive(Debug, Args)]
pub struct DesignArgs {
    /// Source centre wavelength, nm.
    #[arg(long, value_name = "NM")]
    pub centre_nm: f64,
    /// Source FWHM, nm.
    #[arg(long, value_name = "NM")]
    pub fwhm_nm: f64,
    /// Spectrometer span from the first to the last pixel, nm (give one of --span-nm, --pixel-width-nm).
    #[arg(long, value_name = "NM")]
    pub span_nm: Option<f64>,
    /// Spectral width of one pixel, nm (give one of --span-nm, --pixel-width-nm).
    #[arg(long, value_name = "NM")]
    pub pixel_width_nm: Option<f64>,
    /// Camera pixels.
    #[arg(long)]
    pub pixels: usize,
    /// Group index of the sample.
    #[arg(long, default_value_t = 1.38)]
    pub group_index: f64,
    /// Spectral response FWHM of one pixel, nm (default: one pixel width).
    #[arg(long, value_name = "NM")]
    pub resolution_nm: Option<f64>,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}
