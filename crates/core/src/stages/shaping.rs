//! Spectral shaping stage: divides the resampled fringe by the measured
//! source envelope and multiplies by a Gaussian of chosen centre and FWHM,
//! so a non-Gaussian source gives a clean, side-lobe-free PSF at a small
//! cost in resolution (Tripathi et al. 2002, Opt. Lett. 27:406).
//!
//! The gain G(k)/S(k) is computed once per capture from the source envelope
//! (background or mean spectrum, dark level removed, resampled to the same
//! wavenumber grid). Where the envelope is below `floor` of its peak, the
//! gain is zero rather than amplifying noise.

use rustfft::num_complex::Complex64;

use super::k_linearization::KLinearization;
use super::{ALine, FrameContext, Stage};
use crate::physics::wavenumber_per_um;

#[derive(Debug, Clone)]
pub struct Shaping {
    pub gain: Vec<f64>,
}

impl Shaping {
    /// `envelope_counts` per camera pixel (dark level already removed),
    /// resampled with `klin`; target Gaussian in k of `centre_nm`/`fwhm_nm`.
    pub fn new(klin: &KLinearization, envelope_counts: &[f64], centre_nm: f64, fwhm_nm: f64, floor: f64) -> Self {
        let n = klin.samples;
        let mut resampled = vec![Complex64::new(0.0, 0.0); n];
        let mut scratch = (vec![0.0; envelope_counts.len()], vec![0.0; envelope_counts.len()]);
        klin.resample(envelope_counts, &mut scratch.0, &mut scratch.1, &mut resampled);
        let peak = resampled.iter().map(|v| v.re).fold(f64::NEG_INFINITY, f64::max);
        let k0 = wavenumber_per_um(centre_nm);
        let dk = 2.0 * std::f64::consts::PI * (fwhm_nm * 1e-3) / (centre_nm * 1e-3).powi(2);
        let gain = resampled
            .iter()
            .enumerate()
            .map(|(j, e)| {
                let k = klin.k_min_per_um + klin.k_span_per_um() * j as f64 / (n - 1) as f64;
                let target = (-4.0 * std::f64::consts::LN_2 * ((k - k0) / dk).powi(2)).exp();
                let envelope = e.re / peak;
                if envelope > floor {
                    target / envelope
                } else {
                    0.0
                }
            })
            .collect();
        Shaping { gain }
    }
}

impl Stage for Shaping {
    fn name(&self) -> &'static str {
        "shaping"
    }

    fn apply(&self, _ctx: &FrameContext, line: &mut ALine) {
        for (v, g) in line.field.iter_mut().zip(self.gain.iter()) {
            *v *= *g;
        }
    }
}
