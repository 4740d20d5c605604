//! Measuring a mirror capture: the reconstructed axial PSF and its numbers.
//!
//! The chosen frame is reconstructed with the given pipeline, zero-padded to
//! at least 8× so the FWHM is read on a fine grid, and its A-lines' linear
//! amplitudes are averaged. Reported: peak depth and dB, FWHM in air and in a
//! medium of given group index, the coherence-length limit of the measured
//! source spectrum and the ratio measured/limit, the highest side lobe, and
//! the peak SNR: peak amplitude over the standard deviation of the noise
//! floor, 20·log10, median over A-lines (Leitgeb et al. 2003, Opt. Express
//! 11:889; Choma et al. 2003, Opt. Express 11:2183).

use anyhow::{bail, Result};
use ndarray::Array2;
use serde::Serialize;
use std::path::Path;

use super::spectrum::{self, SourceSpectrum};
use crate::analysis;
use crate::pipeline::config::PipelineConfig;
use crate::pipeline::plan::{CaptureGeometry, Plan};

/// Minimum zero-padding used for measurements.
pub const MEASURE_ZERO_PADDING: usize = 8;
/// A peak must stand this far (dB) above the noise to count as a mirror.
pub const MIN_PEAK_SNR_DB: f64 = 10.0;

#[derive(Debug, Clone, Serialize)]
pub struct MirrorMeasurement {
    pub capture: String,
    pub frame: usize,
    pub peak_depth_um: f64,
    pub peak_db: f64,
    pub fwhm_um_air: f64,
    pub group_index: f64,
    pub fwhm_um_medium: f64,
    pub source: SourceSpectrum,
    pub fwhm_over_limit: f64,
    /// Highest side lobe within ±20 FWHM of the peak, dB below the peak
    /// (the noise floor when no lobe rises above it).
    pub side_lobe_db: Option<f64>,
    /// Whether that lobe stands at least 6 dB above the mean noise floor
    /// (otherwise it is the noise, and the PSF has no visible side lobes).
    pub side_lobe_above_noise: bool,
    pub noise_floor_db: f64,
    pub peak_over_noise_sd_db: f64,
    pub saturated_samples: u64,
    pub zero_padding: usize,
    pub depth_spacing_um: f64,
    /// Mean width of one camera pixel in wavenumber, rad/µm (for roll-off models).
    pub pixel_dk_per_um: f64,
    pub warnings: Vec<String>,
    /// The averaged amplitude profile and its depth axis (µm), for plots.
    #[serde(skip)]
    pub profile: Vec<f64>,
    #[serde(skip)]
    pub depth_um: Vec<f64>,
    /// The source spectrum the limit was measured on (counts, baseline
    /// removed) and its wavelengths (nm), for plots.
    #[serde(skip)]
    pub spectrum_counts: Vec<f64>,
    #[serde(skip)]
    pub spectrum_wavelength_nm: Vec<f64>,
}

/// Mean spectrum over a frame's A-lines.
fn mean_spectrum(frame: &Array2<f64>) -> Vec<f64> {
    crate::stages::background::mean_spectrum(frame.view())
}

/// Measures the PSF of the mirror in `frame` of `path`.
pub fn measure(path: &Path, config: &PipelineConfig, frame: usize, group_index: f64) -> Result<MirrorMeasurement> {
    let capture = crate::open::open_capture(path, &config.input)?;
    if frame >= capture.frames {
        bail!("frame {frame} requested but the capture has {} frames", capture.frames);
    }
    let mut spectra = Array2::<f64>::zeros(capture.frame_shape());
    let saturated = capture.read_frame(frame, &mut spectra)?;
    let frame_mean = mean_spectrum(&spectra);
    let source_counts = capture.background.clone().unwrap_or_else(|| frame_mean.clone());

    let (mut cfg, _) = crate::calibration::resolve_dispersion(&capture, config, Some(&source_counts))?;
    cfg.fft.zero_padding = cfg.fft.zero_padding.max(MEASURE_ZERO_PADDING);
    cfg.fft.crop_um = None;
    cfg.fft.crop_px = None;
    let plan = Plan::new(
        &cfg,
        CaptureGeometry {
            wavelength_nm: &capture.wavelength_nm,
            background: capture.background.as_deref(),
            source_spectrum: Some(&source_counts),
        },
    )?;
    let depth = plan.summary.depth_pixels;
    let mut db = Array2::<f32>::zeros((capture.alines, depth));
    plan.process_frame(spectra.view(), &mut db, &plan.new_timer());
    let amplitude = db.mapv(|d| analysis::amplitude_from_db(d as f64));
    let profile: Vec<f64> = amplitude.mean_axis(ndarray::Axis(0)).unwrap().to_vec();
    let pad = cfg.fft.zero_padding;

    // Skip the zero-delay region (first 4 unpadded pixels).
    let skip = 4 * pad;
    let (i, peak) = analysis::peak(&profile, skip, depth);
    let fwhm_px = analysis::fwhm(&profile, i);
    // Exclude ±20 FWHM around the peak from the noise, at most an eighth of the depth.
    let guard = ((fwhm_px.unwrap_or(pad as f64) * 20.0) as usize + pad).min(depth / 8);
    let noise_index: Vec<usize> = (skip..depth).filter(|&j| j + guard < i || j > i + guard).collect();
    if noise_index.len() < 16 {
        bail!("no room for a noise estimate: the peak fills the depth range");
    }
    let mut snrs: Vec<f64> = amplitude
        .outer_iter()
        .map(|line| {
            let noise: Vec<f64> = noise_index.iter().map(|&j| line[j]).collect();
            let mean = noise.iter().sum::<f64>() / noise.len() as f64;
            let sd = (noise.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (noise.len() - 1) as f64).sqrt();
            20.0 * (line[i] / sd.max(f64::MIN_POSITIVE)).log10()
        })
        .collect();
    let peak_over_noise_sd_db = crate::stages::background::median_in_place(&mut snrs);
    let noise_mean = noise_index.iter().map(|&j| profile[j]).sum::<f64>() / noise_index.len() as f64;
    if peak_over_noise_sd_db < MIN_PEAK_SNR_DB {
        bail!(
            "no clear peak: the brightest point stands {peak_over_noise_sd_db:.1} dB above the noise (need {MIN_PEAK_SNR_DB} dB); is this a mirror capture?"
        );
    }
    let Some(fwhm_px) = fwhm_px else {
        bail!("the peak at {:.1} µm does not fall to half maximum on both sides", plan.depth_um(i));
    };
    let spacing = plan.summary.depth_spacing_um;
    let fwhm_um = fwhm_px * spacing;
    let source = spectrum::estimate(&capture.wavelength_nm, &source_counts)?;
    let side_lobe_db = analysis::highest_side_lobe_db(&profile, i, (20.0 * fwhm_px) as usize);

    let mut warnings = Vec::new();
    if saturated > 0 {
        warnings.push(format!(
            "{saturated} samples at or above full scale: the fringes are clipped, so the PSF and SNR are distorted (attenuate the sample arm)"
        ));
    }
    if capture.background.is_none() {
        warnings.push("no background dataset: source spectrum taken as the frame's mean spectrum".into());
    }
    Ok(MirrorMeasurement {
        capture: path.display().to_string(),
        frame,
        peak_depth_um: plan.depth_um(0) + analysis::peak_position(&profile, i) * spacing,
        peak_db: 20.0 * peak.log10(),
        fwhm_um_air: fwhm_um,
        group_index,
        fwhm_um_medium: fwhm_um / group_index,
        fwhm_over_limit: fwhm_um / source.coherence_length_um,
        source,
        side_lobe_above_noise: side_lobe_db.is_some_and(|s| s > 20.0 * (noise_mean / peak).log10() + 6.0),
        side_lobe_db,
        noise_floor_db: 20.0 * noise_mean.log10(),
        peak_over_noise_sd_db,
        saturated_samples: saturated,
        zero_padding: pad,
        depth_spacing_um: spacing,
        pixel_dk_per_um: (plan.summary.k_max_per_um - plan.summary.k_min_per_um) / (capture.pixels - 1) as f64,
        warnings,
        depth_um: (0..depth).map(|j| plan.depth_um(j)).collect(),
        profile,
        spectrum_counts: spectrum::remove_baseline(&source_counts).0,
        spectrum_wavelength_nm: capture.wavelength_nm.clone(),
    })
}
