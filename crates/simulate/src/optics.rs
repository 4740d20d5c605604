//! The simulator's own optics: the formulas its captures and ground truth
//! are made with, written here apart from the core's `physics` so that the
//! measurements checked against the truth are not checked against
//! themselves. Where the core takes a finite difference this module takes
//! the analytic derivative, and its least-squares fit solves the normal
//! equations by Cholesky rather than the core's Gauss–Jordan; the tests
//! below hold each formula against published numbers.
//!
//! Sources: fused silica's Sellmeier coefficients from Malitson 1965,
//! J. Opt. Soc. Am. 55:1205; the coherence length of a Gaussian spectrum,
//! l_c = (2 ln 2/π)·λ0²/Δλ (Swanson et al. 1992, Opt. Lett. 17:151, from
//! memory); the Nyquist depth λ0²/(4·δλ) and the FFT depth spacing π/Δk
//! are common practice.

use std::f64::consts::PI;

/// Speed of light, µm per fs (exact, SI definition).
const C_UM_PER_FS: f64 = 0.299_792_458;
/// Malitson 1965: n² − 1 = Σ B·λ²/(λ² − C²), λ and C in µm.
const SELLMEIER_B: [f64; 3] = [0.696_166_3, 0.407_942_6, 0.897_479_4];
const SELLMEIER_C: [f64; 3] = [0.068_404_3, 0.116_241_4, 9.896_161];

/// Angular wavenumber, rad/µm, of a vacuum wavelength in nm.
pub fn wavenumber(wavelength_nm: f64) -> f64 {
    2.0 * PI / (wavelength_nm * 1e-3)
}

/// Vacuum wavelength in nm of an angular wavenumber in rad/µm.
pub fn wavelength(wavenumber_per_um: f64) -> f64 {
    2.0 * PI * 1e3 / wavenumber_per_um
}

/// Refractive index of fused silica and its first two derivatives with
/// respect to the wavelength (per µm, per µm²), at `lambda_um`.
fn silica(lambda_um: f64) -> (f64, f64, f64) {
    let l2 = lambda_um * lambda_um;
    let (mut n2, mut s, mut s3) = (1.0, 0.0, 0.0);
    for (b, c) in SELLMEIER_B.iter().zip(SELLMEIER_C.iter()) {
        let d = l2 - c * c;
        n2 += b * l2 / d;
        s += b * c * c / (d * d);
        s3 += b * c * c / (d * d * d);
    }
    let n = n2.sqrt();
    // d(n²)/dλ = −2λ·S, so dn/dλ = −λ·S/n; S' = −4λ·S3.
    let dn = -lambda_um * s / n;
    let d2n = -(s - 4.0 * l2 * s3) / n + lambda_um * s * dn / (n * n);
    (n, dn, d2n)
}

/// Round-trip phase of `thickness_um` of fused silica at wavenumber `k`
/// (rad/µm) with its value and slope at `k0` removed: the chirp alone.
/// The slope is the group index n_g = n − λ·dn/dλ, analytic.
pub fn silica_chirp_rad(thickness_um: f64, k: f64, k0: f64) -> f64 {
    let phase = |kk: f64| silica(2.0 * PI / kk).0 * kk;
    let (n0, dn0, _) = silica(2.0 * PI / k0);
    let group_index = n0 - (2.0 * PI / k0) * dn0;
    2.0 * thickness_um * (phase(k) - phase(k0) - group_index * (k - k0))
}

/// Group-velocity dispersion of fused silica, fs²/mm, at `lambda_um`:
/// λ³/(2π c²)·d²n/dλ², with the analytic second derivative.
pub fn silica_gvd_fs2_per_mm(lambda_um: f64) -> f64 {
    let (_, _, d2n) = silica(lambda_um);
    lambda_um.powi(3) / (2.0 * PI * C_UM_PER_FS * C_UM_PER_FS) * d2n * 1e3
}

/// Coherence length (FWHM of the amplitude PSF), µm in air, of a source
/// Gaussian in wavenumber with centre and FWHM in nm.
pub fn coherence_length_um(centre_nm: f64, fwhm_nm: f64) -> f64 {
    (2.0 * std::f64::consts::LN_2 / PI) * (centre_nm * 1e-3) * (centre_nm * 1e-3) / (fwhm_nm * 1e-3)
}

/// Nyquist depth, µm in air, for pixels `pixel_width_nm` wide at
/// `centre_nm`: λ0²/(4·δλ).
pub fn nyquist_depth_um(centre_nm: f64, pixel_width_nm: f64) -> f64 {
    (centre_nm * 1e-3) * (centre_nm * 1e-3) / (4.0 * pixel_width_nm * 1e-3)
}

/// Depth step, µm in air, of an FFT of `n` samples spread evenly from the
/// first to the last over `k_span` rad/µm: π/(k_span·n/(n−1)).
pub fn fft_depth_step_um(k_span: f64, n: usize) -> f64 {
    let sample_step = k_span / (n as f64 - 1.0);
    PI / (sample_step * n as f64)
}

/// Least-squares polynomial of `degree` through (x, y), lowest power
/// first: the normal equations solved by Cholesky factorisation.
pub fn fit_polynomial(x: &[f64], y: &[f64], degree: usize) -> Vec<f64> {
    let m = degree + 1;
    let mut gram = vec![0.0; m * m];
    let mut rhs = vec![0.0; m];
    for (&xi, &yi) in x.iter().zip(y.iter()) {
        let mut pr = 1.0;
        for r in 0..m {
            let mut pc = 1.0;
            for c in 0..m {
                gram[r * m + c] += pr * pc;
                pc *= xi;
            }
            rhs[r] += pr * yi;
            pr *= xi;
        }
    }
    // gram = L·Lᵀ, L lower triangular.
    let mut l = vec![0.0; m * m];
    for i in 0..m {
        for j in 0..=i {
            let s: f64 = gram[i * m + j] - (0..j).map(|k| l[i * m + k] * l[j * m + k]).sum::<f64>();
            l[i * m + j] = if i == j { s.max(f64::MIN_POSITIVE).sqrt() } else { s / l[j * m + j] };
        }
    }
    let mut z = vec![0.0; m];
    for i in 0..m {
        z[i] = (rhs[i] - (0..i).map(|k| l[i * m + k] * z[k]).sum::<f64>()) / l[i * m + i];
    }
    let mut coeffs = vec![0.0; m];
    for i in (0..m).rev() {
        coeffs[i] = (z[i] - (i + 1..m).map(|k| l[k * m + i] * coeffs[k]).sum::<f64>()) / l[i * m + i];
    }
    coeffs
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn silica_index_against_malitson_catalogue() {
        // Catalogue values of fused silica (Malitson 1965; glass makers'
        // data sheets, from memory): 1.4585 at 587.6 nm, 1.4533 at 800 nm.
        assert!((silica(0.5876).0 - 1.4585).abs() < 1e-4);
        assert!((silica(0.8).0 - 1.4533).abs() < 1e-4);
    }

    #[test]
    fn silica_group_index_and_gvd_at_800_nm() {
        // Handbook values at 800 nm, from memory: group index 1.467,
        // GVD about 36 fs²/mm.
        let (n, dn, _) = silica(0.8);
        assert!((n - 0.8 * dn - 1.467).abs() < 2e-3, "group index {}", n - 0.8 * dn);
        let gvd = silica_gvd_fs2_per_mm(0.8);
        assert!((gvd - 36.2).abs() < 0.3, "gvd {gvd}");
    }

    #[test]
    fn chirp_is_quadratic_near_the_centre_with_the_gvd_curvature() {
        // φ(k) ≈ ½·φ''·(k−k0)², φ'' = 2L·d²(nk)/dk² = 2L·c²·β2 (β2 in
        // fs²/µm, k in rad/µm, ω = c·k).
        let k0 = wavenumber(840.0);
        let (l, dk) = (1000.0, 1e-3);
        let phi = silica_chirp_rad(l, k0 + dk, k0);
        let beta2 = silica_gvd_fs2_per_mm(0.84) * 1e-3;
        let expected = 0.5 * 2.0 * l * C_UM_PER_FS * C_UM_PER_FS * beta2 * dk * dk;
        assert!((phi - expected).abs() / expected < 1e-3, "{phi} against {expected}");
    }

    #[test]
    fn fit_recovers_a_cubic() {
        let x: Vec<f64> = (0..50).map(|i| i as f64 / 49.0 - 0.5).collect();
        let y: Vec<f64> = x.iter().map(|&v| 1.0 - 2.0 * v + 3.0 * v * v - 4.0 * v * v * v).collect();
        let c = fit_polynomial(&x, &y, 3);
        for (got, want) in c.iter().zip([1.0, -2.0, 3.0, -4.0]) {
            assert!((got - want).abs() < 1e-9, "{c:?}");
        }
    }

    #[test]
    fn coherence_length_of_an_840_nm_50_nm_source() {
        // 6.23 µm in air (the figure usually quoted for such a source).
        assert!((coherence_length_um(840.0, 50.0) - 6.23).abs() < 0.01);
    }
}
