//! The contrast sections of the pipeline file: `[registration]` of
//! repeated B-scans, `[doppler]` flow and `[angiography]` motion contrast.
//! Each is off by default and left out of the serialised pipeline (and its
//! hash) when at its defaults.

use serde::{Deserialize, Deserializer, Serialize};

use super::{de_optional_positive, Projection};
use crate::settings::{de_finite, de_positive, de_unit_interval, de_usize_in};

fn de_upsampling<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 1, 1000)
}
fn de_kernel<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 1, 64)
}
fn de_bands<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    de_usize_in(d, 2, 16)
}
fn de_pool<'de, D: Deserializer<'de>>(d: D) -> Result<usize, D::Error> {
    use serde::de::Error;
    let v = de_usize_in(d, 1, 255)?;
    if v % 2 == 0 {
        return Err(D::Error::custom(format!("value {v} out of range: must be an odd number from 1 to 255")));
    }
    Ok(v)
}

/// Rigid sub-pixel registration of repeated B-scans (upsampled phase
/// correlation), before averaging and angiography.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct RegistrationConfig {
    /// Register each repeat of a position to the position's first B-scan.
    pub repeats: bool,
    /// Register each position to the one before it (shifts accumulate).
    pub positions: bool,
    /// Shifts are resolved to 1/upsampling of a pixel.
    #[serde(deserialize_with = "de_upsampling")]
    pub upsampling: usize,
    /// Phase-correlation peak (0–1) below which a registration counts as
    /// failed: its shift is not applied and a warning names the frame.
    #[serde(deserialize_with = "de_unit_interval")]
    pub min_peak: f64,
}

impl Default for RegistrationConfig {
    fn default() -> Self {
        RegistrationConfig { repeats: false, positions: false, upsampling: 100, min_peak: 0.05 }
    }
}

impl RegistrationConfig {
    pub fn enabled(&self) -> bool {
        self.repeats || self.positions
    }
}

/// Which samples the Doppler phase step is taken between.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum DopplerPairs {
    /// Neighbouring A-lines of one B-scan (time step: the A-line period).
    Alines,
    /// The same A-line of consecutive repeated B-scans (time step: the
    /// B-scan period): slower flow, needs repeats.
    Repeats,
}

/// Phase-resolved Doppler flow by the Kasai autocorrelation estimator.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct DopplerConfig {
    pub enabled: bool,
    pub between: DopplerPairs,
    /// Kasai sum over this many depth pixels …
    #[serde(deserialize_with = "de_kernel")]
    pub kernel_depth_px: usize,
    /// … and this many A-line pairs (or A-lines, between repeats).
    #[serde(deserialize_with = "de_kernel")]
    pub kernel_alines: usize,
    /// A-line period, µs; none: the capture's `aline_period_us` attribute.
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub aline_period_us: Option<f64>,
    /// B-scan period for `between = "repeats"`, µs; none: the capture's
    /// `frame_period_us` attribute.
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub frame_period_us: Option<f64>,
    /// Group index n in v = λ0·Δφ/(4π·n·T).
    #[serde(deserialize_with = "de_positive")]
    pub group_index: f64,
    /// Pixels whose kernel-mean power is below the frame's noise floor +
    /// this (dB) have no velocity (NaN).
    #[serde(deserialize_with = "de_finite")]
    pub threshold_db: f64,
    /// Remove the bulk-motion phase of each pair (intensity-weighted phase
    /// step of the static tissue) before the flow is computed.
    pub bulk_correction: bool,
    /// Neighbouring pairs pooled for each pair's bulk estimate (odd).
    #[serde(deserialize_with = "de_pool")]
    pub bulk_pool_pairs: usize,
    /// Colour-bar range ±this, mm/s; none: the aliasing limit λ0/(4nT).
    #[serde(deserialize_with = "de_optional_positive", skip_serializing_if = "Option::is_none")]
    pub velocity_range_mm_s: Option<f64>,
}

impl Default for DopplerConfig {
    fn default() -> Self {
        DopplerConfig {
            enabled: false,
            between: DopplerPairs::Alines,
            kernel_depth_px: 3,
            kernel_alines: 4,
            aline_period_us: None,
            frame_period_us: None,
            group_index: 1.38,
            threshold_db: 10.0,
            bulk_correction: true,
            bulk_pool_pairs: 17,
            velocity_range_mm_s: None,
        }
    }
}

/// A motion-contrast method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum AngiographyMethod {
    /// Amplitude decorrelation between consecutive repeats.
    Decorrelation,
    /// The same averaged over spectral sub-bands (split-spectrum).
    SplitSpectrum,
    /// Variance over the repeats of the intensity in dB (or linear).
    SpeckleVariance,
    /// Normalised complex difference after the bulk phase is removed.
    ComplexDifference,
}

impl AngiographyMethod {
    pub fn name(self) -> &'static str {
        match self {
            AngiographyMethod::Decorrelation => "decorrelation",
            AngiographyMethod::SplitSpectrum => "split_spectrum",
            AngiographyMethod::SpeckleVariance => "speckle_variance",
            AngiographyMethod::ComplexDifference => "complex_difference",
        }
    }
}

/// Intensity scale of the speckle variance.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum IntensityScale {
    /// dB (10·log10 of |A|²).
    Db,
    /// |A|², normalised by the mean intensity over the repeats squared.
    Linear,
}

/// Motion contrast from repeated B-scans at each position.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct AngiographyConfig {
    /// Methods to compute (none: off).
    pub methods: Vec<AngiographyMethod>,
    /// Noise-bias threshold: pixels whose mean amplitude over the repeats
    /// is below the structure image's noise floor + this (dB) are masked.
    #[serde(deserialize_with = "de_finite")]
    pub threshold_db: f64,
    /// Split-spectrum: number of Gaussian sub-bands …
    #[serde(deserialize_with = "de_bands")]
    pub split_bands: usize,
    /// … each of this FWHM as a fraction of the band's wavenumber span.
    #[serde(deserialize_with = "de_positive")]
    pub split_band_fwhm: f64,
    pub speckle_variance_scale: IntensityScale,
    /// Complex difference: neighbouring A-lines pooled for each A-line's
    /// bulk phase between repeats (odd).
    #[serde(deserialize_with = "de_pool")]
    pub bulk_pool_alines: usize,
    /// Depth slab of the en face angiogram, µm in air; none: every depth.
    pub en_face_depth_um: Option<[f64; 2]>,
    /// Measure the slab from the first strong interface of each A-line
    /// (the surface) instead of from zero delay.
    pub en_face_from_surface: bool,
    /// The surface is the first pixel this far above the noise floor (dB).
    #[serde(deserialize_with = "de_positive")]
    pub surface_threshold_db: f64,
    pub en_face_projection: Projection,
}

impl Default for AngiographyConfig {
    fn default() -> Self {
        AngiographyConfig {
            methods: Vec::new(),
            threshold_db: 10.0,
            split_bands: 4,
            split_band_fwhm: 0.4,
            speckle_variance_scale: IntensityScale::Db,
            bulk_pool_alines: 17,
            en_face_depth_um: None,
            en_face_from_surface: false,
            surface_threshold_db: 20.0,
            en_face_projection: Projection::Mean,
        }
    }
}

impl AngiographyConfig {
    pub fn enabled(&self) -> bool {
        !self.methods.is_empty()
    }
}
