//! Window stage: tapers the resampled fringe before the FFT to trade
//! main-lobe width for lower side lobes of the axial PSF.
//!
//! Symmetric windows over the N samples of the wavenumber grid, with the
//! coefficients of Harris 1978 (Proc. IEEE 66:51): Hann, Hamming (0.54/0.46),
//! Blackman (0.42/0.50/0.08); a Gaussian given by its FWHM as a fraction of
//! the band; Tukey (cosine-tapered) with taper fraction alpha, as SciPy's
//! `signal.windows.tukey`.

use serde::{Deserialize, Serialize};
use std::f64::consts::PI;

use super::{ALine, FrameContext, Stage};

/// Window shape names as written in the pipeline file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum WindowKind {
    /// Also accepted as "hanning", the common synonym.
    #[serde(alias = "hanning")]
    Hann,
    Hamming,
    Blackman,
    Gaussian,
    Tukey,
    None,
}

/// Window coefficients for `samples` points.
///
/// ```
/// use fringeflow_core::stages::window::{coefficients, WindowKind};
/// let hann = coefficients(WindowKind::Hann, 5, 0.5, 0.5);
/// assert_eq!(hann.len(), 5);
/// assert!((hann[2] - 1.0).abs() < 1e-12 && hann[0].abs() < 1e-12);
/// ```
pub fn coefficients(kind: WindowKind, samples: usize, gaussian_fwhm: f64, tukey_alpha: f64) -> Vec<f64> {
    let m = (samples - 1) as f64;
    (0..samples)
        .map(|j| {
            let t = j as f64 / m; // 0..1
            match kind {
                WindowKind::Hann => 0.5 - 0.5 * (2.0 * PI * t).cos(),
                WindowKind::Hamming => 0.54 - 0.46 * (2.0 * PI * t).cos(),
                WindowKind::Blackman => 0.42 - 0.5 * (2.0 * PI * t).cos() + 0.08 * (4.0 * PI * t).cos(),
                WindowKind::Gaussian => {
                    let u = (t - 0.5) / gaussian_fwhm;
                    (-4.0 * std::f64::consts::LN_2 * u * u).exp()
                }
                WindowKind::Tukey => tukey(t, tukey_alpha),
                WindowKind::None => 1.0,
            }
        })
        .collect()
}

fn tukey(t: f64, alpha: f64) -> f64 {
    if alpha <= 0.0 {
        return 1.0;
    }
    let edge = alpha / 2.0;
    if t < edge {
        0.5 * (1.0 + (PI * (t / edge - 1.0)).cos())
    } else if t > 1.0 - edge {
        0.5 * (1.0 + (PI * ((1.0 - t) / edge - 1.0)).cos())
    } else {
        1.0
    }
}

#[derive(Debug, Clone)]
pub struct Window {
    pub coefficients: Vec<f64>,
}

impl Stage for Window {
    fn name(&self) -> &'static str {
        "window"
    }

    fn apply(&self, _ctx: &FrameContext, line: &mut ALine) {
        for (v, w) in line.field.iter_mut().zip(self.coefficients.iter()) {
            *v *= *w;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn windows_are_symmetric_and_peak_at_centre() {
        for kind in [WindowKind::Hann, WindowKind::Hamming, WindowKind::Blackman, WindowKind::Gaussian, WindowKind::Tukey] {
            let w = coefficients(kind, 101, 0.5, 0.5);
            for j in 0..101 {
                assert!((w[j] - w[100 - j]).abs() < 1e-12, "{kind:?}");
            }
            assert!((w[50] - 1.0).abs() < 1e-12, "{kind:?}");
        }
        // Endpoints: Hann 0, Hamming 0.08, Blackman 0 (Harris 1978 definitions).
        assert!(coefficients(WindowKind::Hann, 64, 0.5, 0.5)[0].abs() < 1e-12);
        assert!((coefficients(WindowKind::Hamming, 64, 0.5, 0.5)[0] - 0.08).abs() < 1e-12);
        assert!(coefficients(WindowKind::Blackman, 64, 0.5, 0.5)[0].abs() < 1e-12);
        // Gaussian FWHM 0.5 of the band: half height at t = 0.25.
        let g = coefficients(WindowKind::Gaussian, 401, 0.5, 0.5);
        assert!((g[100] - 0.5).abs() < 1e-12);
    }
}
