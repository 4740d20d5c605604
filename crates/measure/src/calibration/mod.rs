//! Calibration from the data itself: the spectrometer's wavelength map from
//! mirror fringes, the dispersion coefficients from image sharpness, and
//! sweeps that compare dispersion settings side by side.

pub mod dispersion;
pub mod sweep;
pub mod wavelength;

use anyhow::{Context, Result};

use crate::io::capture::Capture;
use crate::pipeline::config::{DispersionMethod, PipelineConfig};
use dispersion::DispersionEstimate;

/// The pipeline with its dispersion coefficients fixed: as given, or
/// estimated from the capture when `dispersion.method = "auto"`.
pub fn resolve_dispersion(capture: &Capture, config: &PipelineConfig, source_spectrum: Option<&[f64]>) -> Result<(PipelineConfig, Option<DispersionEstimate>)> {
    if config.dispersion.method == DispersionMethod::Fixed {
        return Ok((config.clone(), None));
    }
    let frame = dispersion::search_frame(config, capture.frames)?;
    let estimate = dispersion::estimate(capture, config, frame, source_spectrum).context("dispersion = auto")?;
    let mut resolved = config.clone();
    resolved.dispersion.method = DispersionMethod::Fixed;
    resolved.dispersion.a2 = estimate.a2_rad;
    resolved.dispersion.a3 = estimate.a3_rad;
    Ok((resolved, Some(estimate)))
}
