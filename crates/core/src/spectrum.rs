//! Estimating the source spectrum from a capture: its centre and FWHM (as an
//! equivalent wavelength width about the centre), from the blocked-sample-arm
//! background or the mean spectrum of a frame.
//!
//! The dark level is removed first: the 1st percentile of the spectrum is
//! taken as the baseline (common practice: the band edges of an SD-OCT
//! spectrometer sit near the dark level). Half-maximum crossings are found
//! by linear interpolation between pixels and converted to wavenumbers, so a
//! spectrum Gaussian in k gives exactly its FWHM back:
//! Δλ = λ0²·Δk/(2π), λ0 = 2π/k0, k0 the centre of the crossings.

use anyhow::{bail, Result};
use serde::Serialize;

use crate::physics::{self, wavenumber_per_um};

#[derive(Debug, Clone, Serialize)]
pub struct SourceSpectrum {
    pub centre_nm: f64,
    pub fwhm_nm: f64,
    pub baseline_counts: f64,
    pub peak_counts: f64,
    /// Coherence-length limit (2 ln2/π)·λ0²/Δλ of this spectrum, µm in air.
    pub coherence_length_um: f64,
}

/// Spectrum minus its baseline (1st percentile).
pub fn remove_baseline(counts: &[f64]) -> (Vec<f64>, f64) {
    let mut sorted = counts.to_vec();
    sorted.sort_by(f64::total_cmp);
    let baseline = sorted[(sorted.len() - 1) / 100];
    (counts.iter().map(|c| c - baseline).collect(), baseline)
}

/// Centre and FWHM of a spectrum given per pixel with its wavelength map.
pub fn estimate(wavelength_nm: &[f64], counts: &[f64]) -> Result<SourceSpectrum> {
    let (s, baseline) = remove_baseline(counts);
    let (peak_i, peak) = s.iter().enumerate().fold((0, f64::NEG_INFINITY), |b, (i, &v)| if v > b.1 { (i, v) } else { b });
    // NaN-safe: a spectrum without any positive value has no light.
    if peak.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
        bail!("source spectrum is flat: no light above the dark level");
    }
    let half = peak / 2.0;
    let crossing = |range: &mut dyn Iterator<Item = usize>, step: isize| -> Option<f64> {
        for i in range {
            if s[i] <= half {
                let j = (i as isize - step) as usize; // the neighbour towards the peak
                let t = (half - s[i]) / (s[j] - s[i]);
                return Some(i as f64 + t * (j as f64 - i as f64));
            }
        }
        None
    };
    let left = crossing(&mut (0..peak_i).rev(), -1);
    let right = crossing(&mut (peak_i + 1..s.len()), 1);
    let (Some(l), Some(r)) = (left, right) else {
        bail!("source spectrum does not fall to half maximum within the camera's band: cannot measure its FWHM");
    };
    let wl_at = |x: f64| {
        let i = (x.floor() as usize).min(wavelength_nm.len() - 2);
        let t = x - i as f64;
        wavelength_nm[i] * (1.0 - t) + wavelength_nm[i + 1] * t
    };
    let (k1, k2) = (wavenumber_per_um(wl_at(l)), wavenumber_per_um(wl_at(r)));
    let k0 = 0.5 * (k1 + k2);
    let centre_nm = physics::wavelength_nm(k0);
    let fwhm_nm = (centre_nm * 1e-3).powi(2) * (k1 - k2).abs() / (2.0 * std::f64::consts::PI) * 1e3;
    Ok(SourceSpectrum {
        centre_nm,
        fwhm_nm,
        baseline_counts: baseline,
        peak_counts: peak,
        coherence_length_um: physics::coherence_length_um(centre_nm, fwhm_nm),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gaussian_in_k_gives_its_fwhm_back() {
        let wl: Vec<f64> = (0..2048).map(|p| 765.0 + 150.0 * p as f64 / 2047.0).collect();
        let k0 = wavenumber_per_um(840.0);
        let dk = 2.0 * std::f64::consts::PI * 0.050 / 0.840f64.powi(2);
        let counts: Vec<f64> = wl
            .iter()
            .map(|&l| 100.0 + 2000.0 * (-4.0 * 2f64.ln() * ((wavenumber_per_um(l) - k0) / dk).powi(2)).exp())
            .collect();
        let s = estimate(&wl, &counts).unwrap();
        assert!((s.centre_nm - 840.0).abs() < 0.05, "{s:?}");
        assert!((s.fwhm_nm - 50.0).abs() < 0.05, "{s:?}");
        // The 1st percentile sits on the Gaussian's tail near the band edge,
        // a few counts above the dark level of 100.
        assert!(s.baseline_counts >= 100.0 && s.baseline_counts < 110.0, "{}", s.baseline_counts);
    }
}
