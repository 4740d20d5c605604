//! Roll-off: how the mirror signal falls with depth, from captures of a
//! mirror at several depths.
//!
//! Model (common practice for a spectrometer whose pixels have a Gaussian
//! spectral response and integrate over their width; e.g. Yun et al. 2003,
//! Opt. Express 11:3598, from memory): the fringe amplitude at depth z is
//! A(z) = A0 · sinc(z·δk) · exp(−2σ_k²·z²), with sinc(x) = sin(x)/x, δk the
//! pixel width in wavenumber (from the wavelength map) and σ_k the standard
//! deviation of the spectral response in k. Dividing out the sinc, ln A is
//! linear in z², so A0 and σ_k come from a least-squares line; the −6 dB
//! depth solves A(z)/A0 = ½. Sensitivity = peak SNR + round-trip attenuation
//! (Leitgeb et al. 2003, Opt. Express 11:889; Choma et al. 2003, Opt.
//! Express 11:2183).

use anyhow::{bail, Result};
use serde::Serialize;
use std::path::PathBuf;

use super::mirror::{measure, MirrorMeasurement};
use crate::analysis::polyfit;
use crate::pipeline::config::PipelineConfig;

#[derive(Debug, Clone, Serialize)]
pub struct RolloffPoint {
    pub capture: String,
    pub depth_um: f64,
    pub peak_db: f64,
    pub peak_over_noise_sd_db: f64,
    pub fwhm_um: f64,
    pub saturated_samples: u64,
}

#[derive(Debug, Clone, Serialize)]
pub struct RolloffFit {
    /// Fitted amplitude at zero depth, dB.
    pub a0_db: f64,
    /// Standard deviation of the spectral response in k, rad/µm.
    pub sigma_k_per_um: f64,
    /// The same as a FWHM in wavelength at the centre, nm.
    pub resolution_fwhm_nm: f64,
    /// Pixel width in k, rad/µm (fixed from the wavelength map).
    pub pixel_dk_per_um: f64,
    pub rolloff_6db_depth_um: f64,
    /// RMS of the fit residuals, dB.
    pub rms_residual_db: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct RolloffReport {
    pub points: Vec<RolloffPoint>,
    pub fit: RolloffFit,
    /// Single-pass attenuation in the sample arm, dB (counted twice).
    pub attenuation_db: Option<f64>,
    /// Peak SNR of the shallowest mirror plus the round-trip attenuation, dB.
    pub sensitivity_db: Option<f64>,
    pub warnings: Vec<String>,
}

/// Relative amplitude of the model at depth z.
pub fn model(z: f64, pixel_dk: f64, sigma_k: f64) -> f64 {
    let x = z * pixel_dk;
    let sinc = if x == 0.0 { 1.0 } else { x.sin() / x };
    sinc * (-2.0 * sigma_k * sigma_k * z * z).exp()
}

/// Depth where the model falls to one half (−6 dB), by bisection.
pub fn half_depth(pixel_dk: f64, sigma_k: f64) -> f64 {
    let (mut lo, mut hi) = (0.0, 1.0);
    while model(hi, pixel_dk, sigma_k) > 0.5 && hi < 1e7 {
        hi *= 2.0;
    }
    for _ in 0..200 {
        let m = 0.5 * (lo + hi);
        if model(m, pixel_dk, sigma_k) > 0.5 {
            lo = m;
        } else {
            hi = m;
        }
    }
    0.5 * (lo + hi)
}

/// Measures every capture and fits the roll-off model.
pub fn measure_rolloff(captures: &[PathBuf], config: &PipelineConfig, attenuation_db: Option<f64>) -> Result<(RolloffReport, Vec<MirrorMeasurement>)> {
    if captures.len() < 3 {
        bail!("roll-off needs mirror captures at three or more depths, got {}", captures.len());
    }
    let mut found = Vec::new();
    for c in captures {
        found.push(measure(c, config, 0, 1.0).map_err(|e| anyhow::anyhow!("{}: {e:#}", c.display()))?);
    }
    found.sort_by(|a, b| a.peak_depth_um.total_cmp(&b.peak_depth_um));
    let depths: Vec<f64> = found.iter().map(|m| m.peak_depth_um).collect();
    if depths.windows(2).any(|w| w[1] - w[0] < 2.0 * found[0].fwhm_um_air) {
        bail!("two mirror captures sit at the same depth ({:.1} µm apart or less); roll-off needs distinct depths", 2.0 * found[0].fwhm_um_air);
    }

    let pixel_dk = found[0].pixel_dk_per_um;

    // ln(A/sinc) = ln A0 − 2σ²·z²
    let z2: Vec<f64> = depths.iter().map(|z| z * z).collect();
    let y: Vec<f64> = found
        .iter()
        .map(|m| (10f64.powf(m.peak_db / 20.0) / model(m.peak_depth_um, pixel_dk, 0.0)).ln())
        .collect();
    let line = polyfit(&z2, &y, 1);
    let mut warnings = Vec::new();
    let sigma_k = if line[1] < 0.0 {
        (-line[1] / 2.0).sqrt()
    } else {
        warnings.push("no Gaussian decay measured beyond the pixel-width sinc: σ_k set to 0".into());
        0.0
    };
    let a0 = line[0].exp();
    let residuals: Vec<f64> = found
        .iter()
        .map(|m| m.peak_db - 20.0 * (a0 * model(m.peak_depth_um, pixel_dk, sigma_k)).log10())
        .collect();
    let rms = (residuals.iter().map(|r| r * r).sum::<f64>() / residuals.len() as f64).sqrt();
    let centre_nm = found[0].source.centre_nm;
    let fwhm_k = sigma_k * 2.0 * (2.0 * std::f64::consts::LN_2).sqrt();
    for m in &found {
        if m.saturated_samples > 0 {
            warnings.push(format!("{}: clipped fringes ({} samples at full scale)", m.capture, m.saturated_samples));
        }
    }
    let sensitivity_db = attenuation_db.map(|a| found[0].peak_over_noise_sd_db + 2.0 * a);
    let report = RolloffReport {
        points: found
            .iter()
            .map(|m| RolloffPoint {
                capture: m.capture.clone(),
                depth_um: m.peak_depth_um,
                peak_db: m.peak_db,
                peak_over_noise_sd_db: m.peak_over_noise_sd_db,
                fwhm_um: m.fwhm_um_air,
                saturated_samples: m.saturated_samples,
            })
            .collect(),
        fit: RolloffFit {
            a0_db: 20.0 * a0.log10(),
            sigma_k_per_um: sigma_k,
            resolution_fwhm_nm: fwhm_k * (centre_nm * 1e-3).powi(2) / (2.0 * std::f64::consts::PI) * 1e3,
            pixel_dk_per_um: pixel_dk,
            rolloff_6db_depth_um: half_depth(pixel_dk, sigma_k),
            rms_residual_db: rms,
        },
        attenuation_db,
        sensitivity_db,
        warnings,
    };
    Ok((report, found))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn half_depth_of_a_pure_gaussian_response() {
        // exp(−2σ²z²) = ½ at z = sqrt(ln2 / 2)/σ.
        let z = half_depth(0.0, 0.001);
        assert!((z - (std::f64::consts::LN_2 / 2.0).sqrt() / 0.001).abs() < 1e-6);
    }
}
