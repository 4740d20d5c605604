//! The pipeline file: every stage's settings, read from TOML.
//!
//! Every key has a default, unknown keys are errors, and out-of-range values
//! are rejected with the key's line. The struct serialises back (as JSON in
//! the processing log) with every default filled in, so a log alone says how
//! an image was made. See docs/pipeline-reference.md for the keys.

use serde::{Deserialize, Deserializer, Serialize};
use std::path::Path;

use crate::settings::{self as toml_file, de_finite, de_non_negative, de_positive, de_unit_interval, de_usize_in, ConfigError};
use crate::stages::k_linearization::Interpolation;
use crate::stages::log_compression::GreyMapping;
use crate::stages::window::WindowKind;

mod contrast;
mod layers;
mod output;
pub use contrast::*;
pub use layers::*;
pub use output::*;

/// A named axis of the fringe dataset.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum AxisName {
    Frame,
    Aline,
    Pixel,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct InputConfig {
    /// Path of the fringe dataset inside the capture.
    pub fringes: String,
    /// Path of the per-pixel wavelength map (nm).
    pub wavelength: String,
    /// Path of the blocked-sample-arm background spectra (optional in the file).
    pub background: String,
    /// Order of the fringe dataset's axes; default by rank:
    /// ["frame", "aline", "pixel"] or ["aline", "pixel"].
    pub axes: Option<Vec<AxisName>>,
    /// Wavelength map as a polynomial in the pixel index p (nm):
    /// λ(p) = c0 + c1·p + c2·p² + …; used instead of the dataset when given.
    pub wavelength_poly_nm: Option<Vec<f64>>,
    /// Wavelength calibration file (JSON written by `fringeflow calibrate
    /// wavelength`); used instead of the dataset when given. A relative path
    /// is taken from the pipeline file's directory.
    pub calibration: Option<String>,
    /// Lateral step between A-lines, µm, for captures that do not record it
    /// (their `aline_spacing_um` attribute); used for the images' pixel size.
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub aline_spacing_um: Option<f64>,
    /// The capture's file format: "hdf5", "npy", "npz", "raw" or "tiff"; by the file's
    /// signature when omitted (a headerless raw file needs "raw").
    #[serde(skip_serializing_if = "Option::is_none")]
    pub format: Option<CaptureFormat>,
    /// Raw binary: sample type (u8, i8, u16, i16, u32, i32, u64, i64, f32, f64).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sample_type: Option<String>,
    /// Raw binary: "little" (default) or "big" byte order.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub byte_order: Option<ByteOrder>,
    /// Raw binary: samples per spectrum.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub pixels: Option<usize>,
    /// Raw binary: A-lines per frame.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub alines_per_frame: Option<usize>,
    /// Raw binary: number of frames; omitted: as many as the file holds.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub frames: Option<usize>,
    /// Raw binary: bytes to skip at the start of the file.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub file_header_bytes: Option<u64>,
    /// Raw binary: bytes before every frame.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub frame_header_bytes: Option<u64>,
    /// Raw binary: bytes before every A-line.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub aline_header_bytes: Option<u64>,
    /// Wavelength map from a file: `.npy`, or text (one value per line, or
    /// pixel and wavelength columns separated by a comma, tab or spaces).
    /// A relative path is taken from the pipeline file's directory.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub wavelength_file: Option<String>,
    /// Unit of the wavelength map in the capture or `wavelength_file`:
    /// "nm" (default), "um" or "m".
    #[serde(skip_serializing_if = "Option::is_none")]
    pub wavelength_unit: Option<WavelengthUnit>,
    /// Background spectra from a file (`.npy` or text: one spectrum, or one
    /// per row), averaged per pixel; instead of the capture's dataset.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub background_file: Option<String>,
    /// Time from one A-line to the next, µs (overrides the capture's).
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub aline_period_us: Option<f64>,
    /// Time from one B-scan to the next, µs (overrides the capture's).
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub frame_period_us: Option<f64>,
    /// Step between slow-axis positions, µm (overrides the capture's).
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub frame_spacing_um: Option<f64>,
    /// B-scans recorded at each slow-axis position (overrides the capture's).
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub repeats_per_position: Option<f64>,
    /// The detector's full scale in counts (overrides the capture's
    /// attribute and the sample type's largest value).
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub full_scale: Option<f64>,
}

/// A capture's file format.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum CaptureFormat {
    Hdf5,
    Npy,
    Raw,
    Tiff,
    Npz,
}

/// Byte order of raw samples.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum ByteOrder {
    Little,
    Big,
}

/// Unit of a wavelength map.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum WavelengthUnit {
    Nm,
    Um,
    M,
}

impl Default for InputConfig {
    fn default() -> Self {
        InputConfig {
            fringes: "/fringes".into(),
            wavelength: "/wavelength_nm".into(),
            background: "/background".into(),
            axes: None,
            wavelength_poly_nm: None,
            calibration: None,
            aline_spacing_um: None,
            format: None,
            sample_type: None,
            byte_order: None,
            pixels: None,
            alines_per_frame: None,
            frames: None,
            file_header_bytes: None,
            frame_header_bytes: None,
            aline_header_bytes: None,
            wavelength_file: None,
            wavelength_unit: None,
            background_file: None,
            aline_period_us: None,
            frame_period_us: None,
            frame_spacing_um: None,
            repeats_per_position: None,
            full_scale: None,
        }
    }
}

/// Where the background (reference) spectrum comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum BackgroundMethod {
    /// The capture's background dataset when present, else the frame median.
    Auto,
    /// Mean of the capture's recorded blocked-sample-arm spectra (its
    /// background dataset; error when missing). Old name: `capture`.
    #[serde(alias = "capture")]
    Recorded,
    /// Mean over the frame's A-lines.
    Mean,
    /// Median over the frame's A-lines.
    Median,
    /// No subtraction.
    None,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct BackgroundConfig {
    pub method: BackgroundMethod,
}

impl Default for BackgroundConfig {
    fn default() -> Self {
        BackgroundConfig { method: BackgroundMethod::Auto }
    }
}

fn de_samples<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 0, 1 << 20)
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct KLinearizationConfig {
    pub method: Interpolation,
    /// Samples of the uniform wavenumber grid; 0 means as many as pixels.
    #[serde(deserialize_with = "de_samples")]
    pub samples: usize,
}

impl Default for KLinearizationConfig {
    fn default() -> Self {
        KLinearizationConfig { method: Interpolation::Cubic, samples: 0 }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct DispersionConfig {
    /// `fixed`: use a2 and a3 as given; `auto`: estimate them per capture
    /// by minimising the image entropy.
    pub method: DispersionMethod,
    /// Quadratic phase coefficient, rad (0: off).
    #[serde(deserialize_with = "de_finite")]
    pub a2: f64,
    /// Cubic phase coefficient, rad (0: off).
    #[serde(deserialize_with = "de_finite")]
    pub a3: f64,
    /// auto: range searched for a2, rad.
    pub a2_range: [f64; 2],
    /// auto: range searched for a3, rad.
    pub a3_range: [f64; 2],
    /// auto: number of brightest A-lines the metric is computed on.
    #[serde(deserialize_with = "de_search_alines")]
    pub search_alines: usize,
    /// auto: frame to estimate from (default: the middle frame).
    pub search_frame: Option<usize>,
}

fn de_search_alines<'de, D: serde::Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    toml_file::de_usize_in(d, 1, 100_000)
}

/// How the dispersion coefficients are chosen.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DispersionMethod {
    Fixed,
    Auto,
}

impl Default for DispersionConfig {
    fn default() -> Self {
        DispersionConfig {
            method: DispersionMethod::Fixed,
            a2: 0.0,
            a3: 0.0,
            a2_range: [-300.0, 300.0],
            a3_range: [-150.0, 150.0],
            search_alines: 64,
            search_frame: None,
        }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct ShapingConfig {
    /// Reshape the source spectrum towards a Gaussian (off by default).
    pub enabled: bool,
    /// Target centre, nm; 0 means the measured source centre.
    #[serde(deserialize_with = "de_non_negative")]
    pub centre_nm: f64,
    /// Target FWHM, nm; 0 means the measured source FWHM.
    #[serde(deserialize_with = "de_non_negative")]
    pub fwhm_nm: f64,
    /// Envelope level (fraction of its peak) below which the gain is zero.
    /// Old name: `floor`.
    #[serde(alias = "floor", deserialize_with = "de_unit_interval")]
    pub envelope_floor: f64,
}

impl Default for ShapingConfig {
    fn default() -> Self {
        ShapingConfig { enabled: false, centre_nm: 0.0, fwhm_nm: 0.0, envelope_floor: 0.01 }
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct WindowConfig {
    pub kind: WindowKind,
    /// Gaussian window FWHM as a fraction of the band. Old name: `gaussian_fwhm`.
    #[serde(alias = "gaussian_fwhm", deserialize_with = "de_positive")]
    pub gaussian_fwhm_fraction: f64,
    /// Tukey taper fraction, 0 (rectangular) to 1 (Hann).
    #[serde(deserialize_with = "de_unit_interval")]
    pub tukey_alpha: f64,
}

impl Default for WindowConfig {
    fn default() -> Self {
        WindowConfig { kind: WindowKind::Hann, gaussian_fwhm_fraction: 0.5, tukey_alpha: 0.5 }
    }
}

fn de_zero_padding<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 1, 64)
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct FftConfig {
    /// FFT length as a multiple of the wavenumber samples (1 = none).
    #[serde(deserialize_with = "de_zero_padding")]
    pub zero_padding: usize,
    /// Keep only depths in [start, end) µm (in air).
    pub crop_um: Option<[f64; 2]>,
    /// Keep only depth pixels in [start, end).
    pub crop_px: Option<[usize; 2]>,
}

impl Default for FftConfig {
    fn default() -> Self {
        FftConfig { zero_padding: 1, crop_um: None, crop_px: None }
    }
}

fn de_percentile<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
    use serde::de::Error;
    let v = f64::deserialize(d)?;
    if v.is_finite() && v > 0.0 && v <= 100.0 {
        Ok(v)
    } else {
        Err(D::Error::custom(format!("value {v} out of range: a percentile above 0 and at most 100")))
    }
}

fn de_bit_depth<'de, D: Deserializer<'de>>(d: D) -> Result<u8, D::Error> {
    use serde::de::Error;
    let v = i64::deserialize(d)?;
    match v {
        8 | 16 => Ok(v as u8),
        _ => Err(D::Error::custom(format!("value {v} out of range: must be 8 or 16"))),
    }
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct LogCompressionConfig {
    pub mapping: GreyMapping,
    /// Fixed mapping: dB shown black. Old name: `db_min`.
    #[serde(alias = "db_min", deserialize_with = "de_finite")]
    pub black_db: f64,
    /// Fixed mapping: dB shown white. Old name: `db_max`.
    #[serde(alias = "db_max", deserialize_with = "de_finite")]
    pub white_db: f64,
    /// Auto mapping: black sits this far above the estimated noise floor.
    #[serde(deserialize_with = "de_finite")]
    pub floor_offset_db: f64,
    /// Auto mapping: white is at most this far above black (dB).
    #[serde(deserialize_with = "de_positive")]
    pub dynamic_range_db: f64,
    /// Auto mapping: white sits at this percentile of the frame's dB values
    /// (or black + dynamic_range_db, whichever is lower).
    #[serde(deserialize_with = "de_percentile")]
    pub white_percentile: f64,
    /// Draw bright structure dark on white (for print).
    pub invert: bool,
    /// Grey levels of the images: 8 or 16 bits.
    #[serde(deserialize_with = "de_bit_depth")]
    pub bit_depth: u8,
}

impl Default for LogCompressionConfig {
    fn default() -> Self {
        LogCompressionConfig {
            mapping: GreyMapping::Auto,
            black_db: 0.0,
            white_db: 60.0,
            floor_offset_db: 3.0,
            dynamic_range_db: 45.0,
            white_percentile: 99.9,
            invert: false,
            bit_depth: 8,
        }
    }
}

/// An optional positive number (a key given is a value, left out is none).
pub(super) fn de_optional_positive<'de, D: Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
    de_positive(d).map(Some)
}

/// A whole pipeline.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct PipelineConfig {
    /// Old key and value names the text used (accepted for one release),
    /// as one-line notices for the caller to print. Not part of the settings.
    #[serde(skip)]
    pub deprecations: Vec<String>,
    pub input: InputConfig,
    pub background: BackgroundConfig,
    pub k_linearization: KLinearizationConfig,
    pub dispersion: DispersionConfig,
    pub shaping: ShapingConfig,
    pub window: WindowConfig,
    pub fft: FftConfig,
    pub log_compression: LogCompressionConfig,
    pub volume: VolumeConfig,
    /// Contrast beyond intensity (left out of the serialised pipeline, and
    /// of its hash, when at their defaults).
    #[serde(skip_serializing_if = "is_default")]
    pub registration: RegistrationConfig,
    #[serde(skip_serializing_if = "is_default")]
    pub doppler: DopplerConfig,
    #[serde(skip_serializing_if = "is_default")]
    pub angiography: AngiographyConfig,
    #[serde(skip_serializing_if = "is_default")]
    pub layers: LayersConfig,
    pub output: OutputConfig,
}

/// Keys and values renamed in this release: (section, old key, new key,
/// old value → new value when only a value was renamed).
pub const PIPELINE_RENAMES: &[toml_file::Rename] = &[
    toml_file::Rename::Key("window", "gaussian_fwhm", "gaussian_fwhm_fraction"),
    toml_file::Rename::Key("shaping", "floor", "envelope_floor"),
    toml_file::Rename::Key("log_compression", "db_min", "black_db"),
    toml_file::Rename::Key("log_compression", "db_max", "white_db"),
    toml_file::Rename::Value("background", "method", "capture", "recorded"),
];

fn is_default<T: Default + PartialEq>(v: &T) -> bool {
    *v == T::default()
}

impl PipelineConfig {
    /// Whether any stage needs the complex depth profile (registration
    /// shifts it; Doppler and the complex difference use its phase).
    pub fn needs_complex(&self) -> bool {
        self.output.complex
            || self.registration.enabled()
            || self.doppler.enabled
            || self.angiography.methods.contains(&AngiographyMethod::ComplexDifference)
            || self.layers.flatten.is_some()
    }

    /// Whether a stage needs the linear amplitude of each B-scan (the
    /// amplitude-based angiography methods, layers on averaged repeats).
    pub fn needs_amplitude(&self) -> bool {
        // Layers on averaged repeats: the structure from the amplitudes
        // (the fast log), not from the dB images.
        self.angiography.enabled() || (self.layers.enabled() && self.volume.average > 1)
    }

    /// Whether any contrast stage (or the complex output) runs.
    pub fn has_contrast(&self) -> bool {
        self.needs_complex() || self.needs_amplitude()
    }
}

impl PipelineConfig {
    /// Parses the text `original` of the pipeline file at `path` (read by
    /// the caller: see `run::open::read_pipeline`) with `section.key=value`
    /// overrides applied before parsing (the command line's `--set`), and
    /// checks the settings that involve several keys. A relative
    /// calibration path is taken from the file's directory.
    pub fn from_file_text(path: &Path, original: &str, overrides: &[String]) -> Result<Self, ConfigError> {
        let file = path.display().to_string();
        let text = toml_file::apply_overrides(&file, original, overrides)?;
        let mut config: PipelineConfig = toml_file::parse(&file, &text)?;
        config.check(&path.display().to_string(), &text)?;
        config.deprecations = toml_file::deprecated_names(&path.display().to_string(), &text, PIPELINE_RENAMES);
        config.note_deprecated_settings(&path.display().to_string());
        // Preset files kept under an old name say so on their first line.
        if let Some(first) = original.lines().next().filter(|l| l.starts_with("# Deprecated name:")) {
            let rest: String = original.lines().take(2).map(|l| l.trim_start_matches('#').trim()).collect::<Vec<_>>().join(" ");
            let _ = first;
            config.deprecations.push(format!("{}: {rest}", path.display()));
        }
        // A relative calibration path is relative to the pipeline file; store
        // it absolute so the log alone is enough to rerun.
        let dir = path.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or(Path::new(".")).to_path_buf();
        for named in [&mut config.input.calibration, &mut config.input.wavelength_file, &mut config.input.background_file] {
            if let Some(c) = named.as_ref().filter(|c| Path::new(c).is_relative()) {
                let joined = dir.join(c);
                let absolute = std::path::absolute(&joined).unwrap_or(joined);
                *named = Some(absolute.display().to_string());
            }
        }
        config.check_files(&path.display().to_string(), &text)?;
        Ok(config)
    }

    /// The built-in defaults with `section.key=value` overrides (`--set`
    /// without a pipeline file); a relative calibration path is taken from
    /// the current directory.
    pub fn from_overrides(overrides: &[String]) -> Result<Self, ConfigError> {
        let name = "--set";
        let text = toml_file::apply_overrides(name, "", overrides)?;
        let mut config = Self::from_str(name, &text)?;
        if let Some(c) = &config.input.calibration {
            let p = Path::new(c);
            config.input.calibration = Some(std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf()).display().to_string());
        }
        config.check_files(name, &text)?;
        Ok(config)
    }

    /// Files the pipeline names must exist (an error for every capture
    /// otherwise, so it is reported once, up front).
    fn check_files(&self, file: &str, text: &str) -> Result<(), ConfigError> {
        if let Some(c) = &self.input.calibration {
            if !Path::new(c).is_file() {
                return Err(ConfigError {
                    file: file.to_string(),
                    line: toml_file::line_of_key(text, "input", "calibration"),
                    message: format!("input.calibration: no calibration file {c}"),
                });
            }
        }
        Ok(())
    }

    /// Parses pipeline text (`name` is used in messages).
    pub fn from_str(name: &str, text: &str) -> Result<Self, ConfigError> {
        let mut config: PipelineConfig = toml_file::parse(name, text)?;
        config.check(name, text)?;
        config.deprecations = toml_file::deprecated_names(name, text, PIPELINE_RENAMES);
        config.note_deprecated_settings(name);
        Ok(config)
    }

    /// Settings still accepted that a newer key replaces.
    fn note_deprecated_settings(&mut self, file: &str) {
        if self.angiography.en_face_from_surface {
            self.deprecations.push(format!(
                "{file}: angiography.en_face_from_surface is deprecated (still honoured): a [[layers.slab]] with top and bottom at a [[layers.surface]] and µm offsets gives the same slab, for structure and every angiography method (docs/pipeline-reference.md, [layers])"
            ));
        }
    }

    /// The checks that involve several keys, for a pipeline that did not
    /// come from a file (e.g. read back from a log).
    pub fn validate(&self, name: &str) -> Result<(), ConfigError> {
        self.check(name, "")?;
        self.check_files(name, "")
    }

    fn check(&self, file: &str, text: &str) -> Result<(), ConfigError> {
        let fail = |section: &str, key: &str, message: String| ConfigError {
            file: file.to_string(),
            line: toml_file::line_of_key(text, section, key),
            message: format!("{section}.{key}: {message}"),
        };
        if let Some([a, b]) = self.fft.crop_um {
            if !(a.is_finite() && b.is_finite() && a >= 0.0 && b > a) {
                return Err(fail("fft", "crop_um", format!("needs 0 <= start < end, found [{a}, {b}]")));
            }
        }
        if (1..16).contains(&self.k_linearization.samples) {
            return Err(fail("k_linearization", "samples", format!("{} is too few: 0 (as many as pixels) or at least 16", self.k_linearization.samples)));
        }
        if let Some([a, b]) = self.fft.crop_px {
            if b <= a {
                return Err(fail("fft", "crop_px", format!("needs start < end, found [{a}, {b}]")));
            }
        }
        if self.fft.crop_um.is_some() && self.fft.crop_px.is_some() {
            return Err(fail("fft", "crop_px", "give crop_um or crop_px, not both".into()));
        }
        if let Err((key, message)) = self.layers.check() {
            return Err(fail("layers", key, message));
        }
        if let Some([a, b]) = self.volume.en_face_depth_um {
            if !(a.is_finite() && b.is_finite() && a >= 0.0 && b > a) {
                return Err(fail("volume", "en_face_depth_um", format!("needs 0 <= start < end, found [{a}, {b}]")));
            }
        }
        if self.log_compression.white_db <= self.log_compression.black_db {
            return Err(fail(
                "log_compression",
                "white_db",
                format!("must exceed black_db ({} <= {})", self.log_compression.white_db, self.log_compression.black_db),
            ));
        }
        for (key, [a, b]) in [("a2_range", self.dispersion.a2_range), ("a3_range", self.dispersion.a3_range)] {
            if !(a.is_finite() && b.is_finite() && a <= b) {
                return Err(fail("dispersion", key, format!("needs finite start <= end, found [{a}, {b}]")));
            }
        }
        if let Some(s) = &self.input.sample_type {
            const TYPES: [&str; 10] = ["u8", "i8", "u16", "i16", "u32", "i32", "u64", "i64", "f32", "f64"];
            if !TYPES.contains(&s.as_str()) {
                return Err(fail("input", "sample_type", format!("\"{s}\" is not a sample type; give one of {}", TYPES.join(", "))));
            }
        }
        if self.input.format == Some(CaptureFormat::Raw) || self.input.sample_type.is_some() {
            let i = &self.input;
            let missing: Vec<&str> = [("sample_type", i.sample_type.is_none()), ("pixels", i.pixels.is_none()), ("alines_per_frame", i.alines_per_frame.is_none())].iter().filter(|(_, m)| *m).map(|(k, _)| *k).collect();
            if !missing.is_empty() {
                return Err(fail("input", if i.format.is_some() { "format" } else { "sample_type" }, format!("a raw capture also needs {}", missing.join(", "))));
            }
            if i.pixels.is_some_and(|p| p < 16) || i.alines_per_frame == Some(0) || i.frames == Some(0) {
                return Err(fail("input", "pixels", "a raw capture needs at least 16 pixels, 1 A-line per frame and 1 frame".into()));
            }
        }
        if self.input.wavelength_file.is_some() && (self.input.calibration.is_some() || self.input.wavelength_poly_nm.is_some()) {
            return Err(fail("input", "wavelength_file", "give one wavelength map: calibration, wavelength_poly_nm or wavelength_file".into()));
        }
        if self.input.calibration.is_some() && self.input.wavelength_poly_nm.is_some() {
            return Err(fail("input", "calibration", "give calibration or wavelength_poly_nm, not both".into()));
        }
        if let Some(axes) = &self.input.axes {
            let ok = matches!(axes.len(), 2 | 3)
                && axes.contains(&AxisName::Aline)
                && axes.contains(&AxisName::Pixel)
                && (axes.len() == 2 || axes.contains(&AxisName::Frame));
            if !ok {
                return Err(fail(
                    "input",
                    "axes",
                    "must name each of \"aline\" and \"pixel\" once, plus \"frame\" for 3-D data".into(),
                ));
            }
        }
        if let Some(c) = &self.input.wavelength_poly_nm {
            if c.is_empty() || c.iter().any(|v| !v.is_finite()) {
                return Err(fail("input", "wavelength_poly_nm", "needs at least one finite coefficient".into()));
            }
        }
        if let Some([a, b]) = self.angiography.en_face_depth_um {
            if !(a.is_finite() && b.is_finite() && a >= 0.0 && b > a) {
                return Err(fail("angiography", "en_face_depth_um", format!("needs 0 <= start < end, found [{a}, {b}]")));
            }
        }
        let mut seen = std::collections::BTreeSet::new();
        for m in &self.angiography.methods {
            if !seen.insert(*m) {
                return Err(fail("angiography", "methods", format!("\"{}\" is listed twice", m.name())));
            }
        }
        if self.angiography.enabled() && self.volume.average < 2 {
            return Err(fail(
                "angiography",
                "methods",
                "angiography needs N ≥ 2 repeated B-scans per position: set volume.average to the repeats per position".into(),
            ));
        }
        if self.doppler.enabled && self.doppler.between == DopplerPairs::Repeats && self.volume.average < 2 {
            return Err(fail("doppler", "between", "\"repeats\" needs repeated B-scans per position: set volume.average (now 1)".into()));
        }
        if self.registration.repeats && self.volume.average < 2 {
            return Err(fail("registration", "repeats", "registering repeats needs volume.average ≥ 2 (the repeats per position)".into()));
        }
        if !(self.output.png || self.output.volume) {
            return Err(fail("output", "png", "png and volume are both off: the run would write nothing".into()));
        }
        if self.output.ome_tiff && !self.output.volume {
            return Err(fail("output", "ome_tiff", "volume.ome.tif is written from volume.h5: set output.volume = true".into()));
        }
        if self.output.complex && !self.output.volume {
            return Err(fail("output", "complex", "the complex depth profile is written into volume.h5: set output.volume = true".into()));
        }
        if !(self.input.fringes.starts_with('/') && self.input.wavelength.starts_with('/') && self.input.background.starts_with('/')) {
            return Err(fail("input", "fringes", "dataset paths must start with '/'".into()));
        }
        Ok(())
    }

    /// SHA-256 of the resolved pipeline's canonical JSON: two runs with the
    /// same hash processed with the same settings.
    pub fn sha256(&self) -> String {
        let json = serde_json::to_vec(self).expect("pipeline serialises");
        use sha2::Digest;
        sha2::Sha256::digest(&json).iter().map(|b| format!("{b:02x}")).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn empty_file_gives_defaults() {
        let c = PipelineConfig::from_str("p.toml", "").unwrap();
        assert_eq!(c, PipelineConfig::default());
    }

    #[test]
    fn unknown_key_names_key_and_line() {
        let e = PipelineConfig::from_str("p.toml", "[window]\nkind = \"hann\"\nwidht = 3\n").unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains("line 3") && msg.contains("widht"), "{msg}");
        assert!(!msg.contains('\n'));
    }

    #[test]
    fn out_of_range_names_line() {
        let e = PipelineConfig::from_str("p.toml", "\n[window]\ntukey_alpha = 1.5\n").unwrap_err();
        assert_eq!(e.line, Some(3), "{e}");
        let e = PipelineConfig::from_str("p.toml", "[fft]\nzero_padding = 0\n").unwrap_err();
        assert_eq!(e.line, Some(2), "{e}");
        let e = PipelineConfig::from_str("p.toml", "[log_compression]\nblack_db = 10\nwhite_db = 5\n").unwrap_err();
        assert_eq!(e.line, Some(3), "{e}");
    }
}
