//! Dispersion + window: the one complex factor per k sample that the fused
//! path multiplies into the resampled spectrum (exp(−iφ_c) of the dispersion
//! correction × spectral shaping × window), and the per-depth factor that
//! refers the complex depth profile's phase to the band's centre.
//!
//! Must match `stages::dispersion` (the same `correction_phase` on the same
//! normalised coordinate) and `stages::shaping` + `stages::window` (the
//! plan's spectral gain, taken from those stages), which
//! the reference chain applies one after the other.

use rustfft::num_complex::{Complex32, Complex64};

use crate::stages::dispersion::{correction_phase, normalised_coordinate};

/// exp(−iφ_c(j))·gain[j] per k sample j, φ_c the correction phase with the
/// plan's second- and third-order coefficients `[a2, a3]`.
pub fn spectral_factors([a2, a3]: [f64; 2], gain: &[f64]) -> Vec<Complex32> {
    let n = gain.len();
    (0..n)
        .map(|j| {
            let phi = correction_phase(a2, a3, normalised_coordinate(j, n));
            let c = Complex64::from_polar(gain[j], -phi);
            Complex32::new(c.re as f32, c.im as f32)
        })
        .collect()
}

/// Per kept depth bin m = first_bin + d: scale·e^{+2πi·c·m/M} with
/// c = (N−1)/2 for N wavenumber samples and an M-point FFT. The FFT sums
/// over the sample index j from 0; this factor moves the origin to the
/// band's centre sample, so that a reflector at optical depth z (fringe
/// cos(2kz)) has phase 2·k_c·z at every bin of its PSF (k_c the centre of
/// the uniform grid) for a symmetric window: the phase grows with depth,
/// and motion towards the probe lowers it. The reference engine uses the
/// same factors.
pub fn complex_depth_factors(scale: f64, k_samples: usize, fft_length: usize, first_bin: usize, depth: usize) -> Vec<Complex64> {
    let c = 0.5 * (k_samples as f64 - 1.0);
    (first_bin..first_bin + depth)
        .map(|m| Complex64::from_polar(scale, 2.0 * std::f64::consts::PI * c * m as f64 / fft_length as f64))
        .collect()
}
