//! Phase 2 of a run, plan: the dispersion resolved (given, or estimated
//! from the capture), the stage plan with its tables, the split-spectrum
//! sub-band plans, the Doppler scale, the depth axis and the en face slab,
//! and the warnings planning raises.

use anyhow::{bail, Result};

use ndarray::Array2;

use super::open::Opened;
use super::memory_estimate;
use crate::memory::available_bytes as available_memory_bytes;
use crate::contrast::doppler::DopplerScale;
use crate::pipeline::config::{BackgroundMethod, DopplerPairs, PipelineConfig};
use crate::pipeline::fused::FusedPlan;
use crate::pipeline::plan::{CaptureGeometry, DepthGeometry, Plan};

/// Phase 2: the plan and everything derived from it.
pub(super) struct Planned {
    pub(super) plan: Plan,
    pub(super) dispersion_estimate: Option<crate::calibration::dispersion::DispersionEstimate>,
    pub(super) depth_um: Vec<f64>,
    pub(super) en_face_range: (usize, usize),
    /// The sub-band plans of split-spectrum angiography.
    pub(super) sub_bands: Vec<FusedPlan>,
    pub(super) doppler: Option<(DopplerScale, String)>,
    pub(super) warnings: Vec<String>,
}

pub(super) fn plan(opened: &Opened, config: &PipelineConfig) -> Result<Planned> {
    let capture = &opened.capture;
    // Memory first, from sizes alone: nothing is allocated for a plan that
    // cannot fit.
    let geometry = DepthGeometry::of(config, &capture.wavelength_nm)?;
    check_memory(capture, config, &geometry)?;
    // Shaping and Doppler's λ0 measure the source envelope: the background,
    // else frame 0's mean spectrum.
    let source_spectrum = match (&capture.background, config.shaping.enabled || config.doppler.enabled) {
        (Some(b), _) => Some(b.clone()),
        (None, true) => {
            let mut first = Array2::<f64>::zeros(capture.frame_shape());
            capture.read_frame(0, &mut first)?;
            Some(crate::stages::background::mean_spectrum(first.view()))
        }
        (None, false) => None,
    };
    let (resolved, dispersion_estimate) = crate::calibration::resolve_dispersion(capture, config, source_spectrum.as_deref())?;
    let plan = Plan::new(
        &resolved,
        CaptureGeometry { wavelength_nm: &capture.wavelength_nm, background: capture.background.as_deref(), source_spectrum: source_spectrum.as_deref() },
    )?;
    let depth = plan.summary.depth_pixels;
    let depth_um: Vec<f64> = (0..depth).map(|i| plan.depth_um(i)).collect();
    let en_face_range = match config.volume.en_face_depth_um {
        Some([a, b]) => {
            let r = (depth_um.iter().position(|&z| z >= a).unwrap_or(depth), depth_um.iter().position(|&z| z >= b).unwrap_or(depth));
            if r.0 >= r.1 {
                bail!("volume.en_face_depth_um [{a}, {b}] holds no depth pixel of this capture ({:.1}–{:.1} µm)", depth_um[0], depth_um[depth - 1]);
            }
            r
        }
        None => (0, depth),
    };
    if let Some([a, b]) = config.angiography.en_face_depth_um {
        if !config.angiography.en_face_from_surface && !depth_um.iter().any(|&z| z >= a && z < b) {
            bail!("angiography.en_face_depth_um [{a}, {b}] holds no depth pixel of this capture ({:.1}–{:.1} µm)", depth_um[0], depth_um[depth - 1]);
        }
    }
    if let Err(e) = config.layers.check_fits(depth_um[depth - 1] - depth_um[0]) {
        bail!("{e}");
    }
    let mut warnings = Vec::new();
    // A B-scan a few A-lines wide, and more of them than A-lines: the frame
    // and A-line axes are likely swapped (a column-major file read row-major).
    if capture.alines < 16 && capture.frames > capture.alines {
        warnings.push(format!(
            "the capture reads as {} B-scans only {} A-lines wide (stored shape {:?}, axes {:?}): if the frame and A-line axes are swapped, set input.axes",
            capture.frames,
            capture.alines,
            capture.shape,
            capture.axes
        ));
    }
    if config.background.method == BackgroundMethod::Auto && capture.background.is_none() {
        warnings.push(format!("capture has no '{}' dataset: background estimated as the median over each frame's A-lines", config.input.background));
    }
    let sub_bands = if config.angiography.methods.contains(&crate::pipeline::config::AngiographyMethod::SplitSpectrum) {
        let shaping = plan.shaping_gain();
        crate::contrast::angiography::sub_band_windows(plan.summary.k_samples, config.angiography.split_bands, config.angiography.split_band_fwhm)
            .into_iter()
            .map(|w| {
                let gain: Vec<f64> = w.iter().zip(&shaping).map(|(a, b)| a * b).collect();
                let scale = 2.0 / w.iter().sum::<f64>();
                FusedPlan::with_spectral_gain(&plan, &gain, scale)
            })
            .collect()
    } else {
        Vec::new()
    };
    let doppler = if config.doppler.enabled {
        let d = &config.doppler;
        let (period, source) = match d.between {
            DopplerPairs::Alines => match (d.aline_period_us, capture.scan.aline_period_us) {
                (Some(t), _) => (t, "pipeline key doppler.aline_period_us".to_string()),
                (None, Some(t)) => (t, "capture attribute aline_period_us".to_string()),
                (None, None) => bail!(
                    "Doppler needs the A-line period: the fringes '{}' have no aline_period_us attribute; set doppler.aline_period_us (µs) in the pipeline",
                    capture.fringes_path
                ),
            },
            DopplerPairs::Repeats => match (d.frame_period_us, capture.scan.frame_period_us) {
                (Some(t), _) => (t, "pipeline key doppler.frame_period_us".to_string()),
                (None, Some(t)) => (t, "capture attribute frame_period_us".to_string()),
                (None, None) => bail!(
                    "Doppler between repeats needs the B-scan period: the fringes '{}' have no frame_period_us attribute; set doppler.frame_period_us (µs) in the pipeline",
                    capture.fringes_path
                ),
            },
        };
        let centre = plan.summary.band_centre_wavelength_nm;
        let (wavelength, wavelength_source) = DopplerScale::wavelength_for(&plan, source_spectrum.as_deref(), capture.background.is_some());
        if wavelength == centre {
            warnings.push("Doppler: the source spectrum has no light above its dark level; λ0 is the band's centre".to_string());
        }
        Some((DopplerScale::new(wavelength, d.group_index, period, centre, wavelength_source), source))
    } else {
        None
    };
    Ok(Planned { plan, dispersion_estimate, depth_um, en_face_range, sub_bands, doppler, warnings })
}


/// Refuses a capture and pipeline whose reconstruction needs more memory
/// than the machine has available: the frames and images in flight
/// ([`memory_estimate`]) and the plan's tables, one set per split-spectrum
/// band besides the main one.
fn check_memory(capture: &crate::io::capture::Capture, config: &PipelineConfig, geometry: &DepthGeometry) -> Result<()> {
    let depth = geometry.depth_pixels;
    let bands = if config.angiography.methods.contains(&crate::pipeline::config::AngiographyMethod::SplitSpectrum) { config.angiography.split_bands as u64 } else { 0 };
    let need = memory_estimate(capture, config, depth).saturating_add(geometry.table_bytes(capture.pixels).saturating_mul(1 + bands));
    if let Some(available) = available_memory_bytes() {
        if need > available {
            bail!(
                "this capture and pipeline need about {:.1} GB of memory ({} A-lines × {depth} depth pixels per B-scan, FFT of {}, {} held per position), {:.1} GB of memory is available to this process: lower volume.average, fft.zero_padding or crop the depth (fft.crop_um)",
                need as f64 / 1e9,
                capture.alines,
                geometry.fft_length,
                config.volume.average,
                available as f64 / 1e9
            );
        }
    }
    Ok(())
}
