//! Physical formulas fringeflow relies on: coherence length, depth scale,
//! the fused-silica Sellmeier equation and group-delay dispersion.
//!
//! Every function names its units. Wavelengths are in nm unless the name says
//! µm; wavenumbers are angular, k = 2π/λ, in rad/µm. Not for: anything that
//! touches data (see `stages/` and `simulate/`).

use std::f64::consts::PI;

/// Speed of light in vacuum, µm per fs.
pub const SPEED_OF_LIGHT_UM_PER_FS: f64 = 0.299_792_458;

/// Angular wavenumber in rad/µm of a wavelength in nm.
pub fn wavenumber_per_um(wavelength_nm: f64) -> f64 {
    2.0 * PI / (wavelength_nm * 1e-3)
}

/// Wavelength in nm of an angular wavenumber in rad/µm.
pub fn wavelength_nm(wavenumber_per_um: f64) -> f64 {
    2.0 * PI / wavenumber_per_um * 1e3
}

/// Axial resolution (FWHM of the amplitude PSF) in µm in air for a source
/// that is Gaussian in wavenumber: l_c = (2 ln2 / π) · λ0² / Δλ.
/// Standard result for Gaussian-spectrum low-coherence interferometry
/// (FIELD-NOTES; the papers usually cited for it, from memory: Swanson et
/// al. 1992, Opt. Lett. 17:151; Fercher et al. 2003, Rep. Prog. Phys. 66:239).
///
/// ```
/// // An 840 nm source with 50 nm FWHM resolves about 6.2 µm in air.
/// let lc = fringeflow_core::physics::coherence_length_um(840.0, 50.0);
/// assert!((lc - 6.23).abs() < 0.01);
/// ```
pub fn coherence_length_um(centre_nm: f64, fwhm_nm: f64) -> f64 {
    2.0 * std::f64::consts::LN_2 / PI * centre_nm * centre_nm / fwhm_nm * 1e-3
}

/// Depth (single pass, in air) of FFT bin spacing for `k_samples` samples
/// spaced evenly over `k_span_per_um` (first to last sample) and an FFT of
/// `fft_length` points: π·(N−1)/(M·K), in µm.
pub fn depth_spacing_um(k_span_per_um: f64, k_samples: usize, fft_length: usize) -> f64 {
    PI * (k_samples as f64 - 1.0) / (fft_length as f64 * k_span_per_um)
}

/// Maximum (Nyquist) imaging depth λ0²/(4·n·δλ) in µm, δλ the spectral
/// width of one camera pixel in nm, n the group index of the medium.
pub fn max_depth_um(centre_nm: f64, pixel_width_nm: f64, group_index: f64) -> f64 {
    centre_nm * centre_nm / (4.0 * group_index * pixel_width_nm) * 1e-3
}

/// Refractive index of fused silica at a wavelength in µm, Sellmeier
/// equation with the coefficients of Malitson 1965, JOSA 55:1205.
///
/// ```
/// let n = fringeflow_core::physics::fused_silica_index(0.6328); // HeNe line
/// assert!((n - 1.4570).abs() < 1e-4);
/// ```
pub fn fused_silica_index(wavelength_um: f64) -> f64 {
    const B: [f64; 3] = [0.696_166_3, 0.407_942_6, 0.897_479_4];
    const C: [f64; 3] = [0.068_404_3, 0.116_241_4, 9.896_161];
    let l2 = wavelength_um * wavelength_um;
    let sum: f64 = B.iter().zip(C.iter()).map(|(b, c)| b * l2 / (l2 - c * c)).sum();
    (1.0 + sum).sqrt()
}

/// Optical phase per unit length, n(k)·k, of fused silica at wavenumber k
/// (rad/µm), in rad/µm.
pub fn fused_silica_phase_per_um(k_per_um: f64) -> f64 {
    fused_silica_index(2.0 * PI / k_per_um) * k_per_um
}

/// Group index of fused silica, d(n·k)/dk, by a central difference.
pub fn fused_silica_group_index(wavelength_um: f64) -> f64 {
    let k = 2.0 * PI / wavelength_um;
    let h = k * 1e-5;
    (fused_silica_phase_per_um(k + h) - fused_silica_phase_per_um(k - h)) / (2.0 * h)
}

/// Group-velocity dispersion of fused silica in fs²/mm:
/// GVD = λ³/(2π c²) · d²n/dλ² (single pass, per mm of glass).
pub fn fused_silica_gvd_fs2_per_mm(wavelength_um: f64) -> f64 {
    let h = 1e-3 * wavelength_um;
    let d2n = (fused_silica_index(wavelength_um + h) - 2.0 * fused_silica_index(wavelength_um)
        + fused_silica_index(wavelength_um - h))
        / (h * h); // per µm²
    let c = SPEED_OF_LIGHT_UM_PER_FS;
    // λ³/(2π c²) · d²n/dλ² is in fs²/µm; ×1000 → fs²/mm.
    wavelength_um.powi(3) / (2.0 * PI * c * c) * d2n * 1e3
}

/// Round-trip phase of `thickness_um` of fused silica at wavenumber k, with its
/// constant and linear (group-delay) parts about `k0` removed, so only the
/// chirp that broadens the PSF is left. Positive thickness means glass in the
/// sample arm, negative in the reference arm.
pub fn fused_silica_chirp_rad(thickness_um: f64, k_per_um: f64, k0_per_um: f64) -> f64 {
    let h = k0_per_um * 1e-5;
    let slope = (fused_silica_phase_per_um(k0_per_um + h) - fused_silica_phase_per_um(k0_per_um - h)) / (2.0 * h);
    let beta = fused_silica_phase_per_um(k_per_um)
        - fused_silica_phase_per_um(k0_per_um)
        - slope * (k_per_um - k0_per_um);
    2.0 * thickness_um * beta
}

/// A quadratic dispersion coefficient a2 (rad, in the correction
/// polynomial's coordinate x = (k − k_c)/(k_max − k_min)) expressed in
/// physical units for the band `k_min..k_max` (rad/µm).
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize)]
pub struct DispersionEquivalent {
    /// Group-delay-dispersion mismatch d²φ/dω² (sample arm minus reference
    /// arm, round trip), fs²: 2·a2/(K²·c²) with K = k_max − k_min.
    pub gdd_fs2: f64,
    /// Thickness of fused silica (mm) whose round-trip chirp over the same
    /// band has the same fitted quadratic coefficient; positive: glass in
    /// the sample arm (Sellmeier, Malitson 1965).
    pub fused_silica_mm: f64,
}

/// Physical equivalents of a2 over a wavenumber band.
///
/// The glass thickness uses the same least-squares cubic fit in x that the
/// simulator's truth and the calibration use, so the two are linear in each
/// other exactly.
pub fn dispersion_equivalent(a2: f64, k_min_per_um: f64, k_max_per_um: f64) -> DispersionEquivalent {
    let span = k_max_per_um - k_min_per_um;
    let c = SPEED_OF_LIGHT_UM_PER_FS;
    let gdd_fs2 = 2.0 * a2 / (span * span * c * c);
    let k0 = 0.5 * (k_min_per_um + k_max_per_um);
    let n = 512;
    let xs: Vec<f64> = (0..n).map(|j| j as f64 / (n - 1) as f64 - 0.5).collect();
    let phase: Vec<f64> = xs.iter().map(|&x| fused_silica_chirp_rad(1000.0, k0 + x * span, k0)).collect();
    let per_mm = crate::analysis::polyfit(&xs, &phase, 3)[2];
    DispersionEquivalent { gdd_fs2, fused_silica_mm: a2 / per_mm }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coherence_length_matches_published_examples() {
        // lc = (2 ln2/π) λ0²/Δλ: 840/50 → 6.23 µm, 1300/100 → 7.46 µm
        // (values worked from the formula; FIELD-NOTES gives the same two examples).
        assert!((coherence_length_um(840.0, 50.0) - 6.23).abs() < 0.01);
        assert!((coherence_length_um(1300.0, 100.0) - 7.46).abs() < 0.01);
    }

    #[test]
    fn fused_silica_index_matches_malitson_table() {
        // Catalogue values for fused silica, from memory: n = 1.4585 at the
        // helium d line (587.6 nm), 1.4570 at 632.8 nm, 1.4533 at 800 nm
        // (Malitson 1965, JOSA 55:1205, and glass makers' data sheets).
        assert!((fused_silica_index(0.5876) - 1.4585).abs() < 1e-4);
        assert!((fused_silica_index(0.6328) - 1.4570).abs() < 1e-4);
        assert!((fused_silica_index(0.8) - 1.4533).abs() < 1e-4);
    }

    #[test]
    fn fused_silica_gvd_near_800nm() {
        // Handbook value, from memory: about 36 fs²/mm at 800 nm; the
        // Malitson coefficients give 36.2 fs²/mm. Within 3 %.
        let gvd = fused_silica_gvd_fs2_per_mm(0.8);
        assert!((gvd - 36.2).abs() / 36.2 < 0.03, "gvd {gvd}");
    }

    #[test]
    fn gdd_of_a2_matches_glass_gvd() {
        // 10 mm of fused silica, round trip, 765–915 nm band: the a2 it
        // produces must convert back to 10 mm and to ≈ 2·10·GVD(840 nm) fs²
        // (GVD from the Malitson Sellmeier equation; the band-averaged
        // curvature differs from the centre value by a few %).
        let (k_min, k_max) = (wavenumber_per_um(915.0), wavenumber_per_um(765.0));
        let span = k_max - k_min;
        let k0 = 0.5 * (k_min + k_max);
        let xs: Vec<f64> = (0..400).map(|j| j as f64 / 399.0 - 0.5).collect();
        let phase: Vec<f64> = xs.iter().map(|&x| fused_silica_chirp_rad(10_000.0, k0 + x * span, k0)).collect();
        let a2 = crate::analysis::polyfit(&xs, &phase, 3)[2];
        let eq = dispersion_equivalent(a2, k_min, k_max);
        assert!((eq.fused_silica_mm - 10.0).abs() < 1e-3, "{eq:?}");
        let expected = 2.0 * 10.0 * fused_silica_gvd_fs2_per_mm(wavelength_nm(k0) * 1e-3);
        assert!((eq.gdd_fs2 - expected).abs() / expected < 0.05, "{eq:?} vs {expected}");
    }

    #[test]
    fn max_depth_for_2048_pixels_over_100nm() {
        // λ0²/(4δλ) with δλ = 100 nm / 2048 at 840 nm ≈ 3.61 mm (formula in FIELD-NOTES).
        let z = max_depth_um(840.0, 100.0 / 2048.0, 1.0);
        assert!((z - 3612.7).abs() < 1.0, "{z}");
    }
}
