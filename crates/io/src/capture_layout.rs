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
    /// The file format; None: by the file's signature.
    pub format: Option<FileFormat>,
    /// How a headerless raw file is laid out.
    pub raw: RawLayout,
    /// Nanometres per unit of the wavelength map in the capture or a map
    /// file (1 for nm, 1000 for µm, 1e9 for m).
    pub wavelength_unit_nm: f64,
    /// Set when opening a MATLAB v7.3 file: `axes` and the layout hints
    /// speak the order MATLAB shows the array in (the stored order reversed).
    pub matlab_order: bool,
}

/// A capture's file format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum FileFormat {
    Hdf5,
    Npy,
    Raw,
    Tiff,
    Npz,
}

/// A headerless raw file: sample type and byte order, the frame's shape,
/// the number of frames (None: as many as the file holds) and the bytes of
/// header before the data, before every frame and before every A-line.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct RawLayout {
    pub sample_type: Option<String>,
    pub big_endian: bool,
    pub pixels: Option<usize>,
    pub alines_per_frame: Option<usize>,
    pub frames: Option<usize>,
    pub file_header_bytes: u64,
    pub frame_header_bytes: u64,
    pub aline_header_bytes: u64,
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
    /// A map file read here: `.npy`, or text with one value per line or
    /// pixel and wavelength columns (in the layout's wavelength unit).
    File { path: String },
    /// Values read by the opener from an array inside the capture that is
    /// not HDF5 (a `.npz` member), with that array's name.
    Inside { wavelength_nm: Vec<f64>, path: String },
}

impl Default for CaptureLayout {
    fn default() -> Self {
        CaptureLayout {
            fringes: "/fringes".into(),
            wavelength: "/wavelength_nm".into(),
            background: "/background".into(),
            axes: None,
            given_map: None,
            format: None,
            raw: RawLayout::default(),
            wavelength_unit_nm: 1.0,
            matlab_order: false,
        }
    }
}
