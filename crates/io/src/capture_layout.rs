//! How a capture is laid out, as plain data: the dataset paths of the
//! fringes, the wavelength map and the background, the fringes' axis order,
//! and a wavelength map given from outside the file. The pipeline's
//! `[input]` settings become a [`CaptureLayout`] in `run::open`;
//! `capture::Capture::open` reads a file by it.

use serde::Serialize;

/// A named axis of the fringe dataset.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum AxisName {
    Frame,
    Aline,
    Pixel,
}

/// Where a capture keeps what it holds, and a wavelength map given from
/// outside the file: plain data (the pipeline's `[input]` settings become
/// this in `run::open`).
#[derive(Debug, Clone, PartialEq)]
pub struct CaptureLayout {
    /// Dataset path of the fringes.
    pub fringes: String,
    /// Dataset path of the per-pixel wavelength map (nm).
    pub wavelength: String,
    /// Dataset path of the background spectra (optional in the file).
    pub background: String,
    /// Axis order of the fringes; None: by rank (frame, aline, pixel or
    /// aline, pixel).
    pub axes: Option<Vec<AxisName>>,
    /// A wavelength map used instead of the dataset, and where it came from.
    pub given_map: Option<GivenMap>,
}

/// A wavelength map from outside the capture (a polynomial evaluated, or a
/// calibration file read, by the caller).
#[derive(Debug, Clone, PartialEq)]
pub enum GivenMap {
    /// Coefficients c0, c1, … of λ(p) = c0 + c1·p + … (nm), evaluated here
    /// once the pixel count is known.
    Polynomial(Vec<f64>),
    /// Per-pixel wavelengths (nm) from a calibration file, its path and hash.
    Calibration { wavelength_nm: Vec<f64>, path: String, file_hash: String },
}

impl Default for CaptureLayout {
    fn default() -> Self {
        CaptureLayout { fringes: "/fringes".into(), wavelength: "/wavelength_nm".into(), background: "/background".into(), axes: None, given_map: None }
    }
}
