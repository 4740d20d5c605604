//! `fringeflow design`: planning an SD-OCT system on paper from its source
//! and spectrometer.
//!
//! Formulas (FIELD-NOTES; common practice for SD-OCT design):
//! axial resolution l_c = (2 ln2/π)·λ0²/Δλ in air, l_c/n in the sample;
//! depth pixel spacing λ0²/(2·Δλ_span) in air; maximum (Nyquist) depth
//! λ0²/(4·n·δλ), δλ = span/pixels; −6 dB roll-off depth where the fringe
//! visibility sinc(z·δk)·exp(−2σ_k²z²) falls to ½ (the model of
//! `measure rolloff`: pixels of width δk that integrate, with a Gaussian
//! spectral response of FWHM δλ_r; σ_k and δk taken at λ0). Without the
//! pixel term this is z = (ln2/π)·λ0²/δλ_r, half the coherence length of a
//! source as wide as the response.

use serde::Serialize;

use crate::physics;

#[derive(Debug, Clone, Serialize)]
pub struct DesignInput {
    pub centre_nm: f64,
    pub source_fwhm_nm: f64,
    pub span_nm: f64,
    pub pixels: usize,
    pub group_index: f64,
    /// Spectral response FWHM of one pixel, nm (defaults to the pixel width).
    pub resolution_nm: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct DesignReport {
    pub input: DesignInput,
    pub pixel_width_nm: f64,
    pub axial_resolution_um_air: f64,
    pub axial_resolution_um_medium: f64,
    pub depth_spacing_um_air: f64,
    pub depth_spacing_um_medium: f64,
    pub max_depth_um_air: f64,
    pub max_depth_um_medium: f64,
    pub rolloff_6db_depth_um_air: f64,
    pub rolloff_6db_depth_um_medium: f64,
    pub band_over_source_fwhm: f64,
    pub warnings: Vec<String>,
}

pub fn design(input: DesignInput) -> DesignReport {
    let l0 = input.centre_nm;
    let n = input.group_index;
    let pixel_width_nm = input.span_nm / input.pixels as f64;
    let axial = physics::coherence_length_um(l0, input.source_fwhm_nm);
    let spacing = l0 * l0 / (2.0 * input.span_nm) * 1e-3;
    let max_depth = physics::max_depth_um(l0, pixel_width_nm, 1.0);
    let to_k = |width_nm: f64| 2.0 * std::f64::consts::PI * width_nm * 1e-3 / (l0 * 1e-3).powi(2);
    let sigma_k = to_k(input.resolution_nm) / (2.0 * (2.0 * std::f64::consts::LN_2).sqrt());
    let rolloff = crate::measure::rolloff::half_depth(to_k(pixel_width_nm), sigma_k);
    let ratio = input.span_nm / input.source_fwhm_nm;
    let mut warnings = Vec::new();
    if ratio < 3.0 {
        warnings.push(format!(
            "the spectrometer band is only {ratio:.1}× the source FWHM: the spectrum is truncated and the PSF is wider than l_c (keep ≥ 3× for the Gaussian limit)"
        ));
    }
    if rolloff < max_depth / 2.0 {
        warnings.push("the signal falls by 6 dB before half the maximum depth: a finer spectrometer resolution would help".into());
    }
    DesignReport {
        pixel_width_nm,
        axial_resolution_um_air: axial,
        axial_resolution_um_medium: axial / n,
        depth_spacing_um_air: spacing,
        depth_spacing_um_medium: spacing / n,
        max_depth_um_air: max_depth,
        max_depth_um_medium: max_depth / n,
        rolloff_6db_depth_um_air: rolloff,
        rolloff_6db_depth_um_medium: rolloff / n,
        band_over_source_fwhm: ratio,
        warnings,
        input,
    }
}

impl DesignReport {
    pub fn render(&self) -> String {
        let i = &self.input;
        let mut s = format!(
            "source {:.1} nm centre, {:.1} nm FWHM; spectrometer {:.1} nm over {} pixels ({:.4} nm/pixel, response {:.4} nm); sample group index {:.3}\n",
            i.centre_nm, i.source_fwhm_nm, i.span_nm, i.pixels, self.pixel_width_nm, i.resolution_nm, i.group_index
        );
        s += &format!("{:<34}{:>14}{:>14}\n", "", "in air", "in sample");
        let rows = [
            ("axial resolution (FWHM, µm)", self.axial_resolution_um_air, self.axial_resolution_um_medium),
            ("depth pixel spacing (µm)", self.depth_spacing_um_air, self.depth_spacing_um_medium),
            ("maximum depth (mm)", self.max_depth_um_air / 1e3, self.max_depth_um_medium / 1e3),
            ("-6 dB roll-off depth (mm)", self.rolloff_6db_depth_um_air / 1e3, self.rolloff_6db_depth_um_medium / 1e3),
        ];
        for (name, air, sample) in rows {
            s += &format!("{name:<34}{air:>14.3}{sample:>14.3}\n");
        }
        for w in &self.warnings {
            s += &format!("warning: {w}\n");
        }
        s
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn input(centre: f64, fwhm: f64, span: f64, pixels: usize) -> DesignInput {
        DesignInput { centre_nm: centre, source_fwhm_nm: fwhm, span_nm: span, pixels, group_index: 1.0, resolution_nm: span / pixels as f64 }
    }

    #[test]
    fn published_formula_values() {
        // lc = (2 ln2/π)·λ0²/Δλ (FIELD-NOTES): 840/50 → 6.23 µm, 1300/100 → 7.46 µm;
        // max depth λ0²/(4δλ), 2048 px over 100 nm at 840 nm → 3.61 mm.
        // The two bands are common practice for SD-OCT (eye, other tissue).
        let r = design(input(840.0, 50.0, 100.0, 2048));
        assert!((r.axial_resolution_um_air - 6.23).abs() < 0.01);
        assert!((r.max_depth_um_air / 1e3 - 3.61).abs() < 0.01);
        let r = design(input(1300.0, 100.0, 200.0, 1024));
        assert!((r.axial_resolution_um_air - 7.46).abs() < 0.01);
    }

    #[test]
    fn gaussian_response_alone_gives_half_the_coherence_length() {
        // exp(−2σ_k²z²) = ½ ⇔ z = (ln2/π)·λ0²/δλ_r = l_c(δλ_r)/2.
        let sigma_k = 2.0 * std::f64::consts::PI * 0.1e-3 / 0.84f64.powi(2) / (2.0 * (2.0 * std::f64::consts::LN_2).sqrt());
        let z = crate::measure::rolloff::half_depth(0.0, sigma_k);
        assert!((z - physics::coherence_length_um(840.0, 0.1) / 2.0).abs() < 1e-6, "{z}");
    }

    #[test]
    fn pixel_integration_shortens_the_rolloff() {
        let r = design(DesignInput { resolution_nm: 0.1, ..input(840.0, 50.0, 150.0, 2048) });
        let gaussian_only = physics::coherence_length_um(840.0, 0.1) / 2.0;
        assert!(r.rolloff_6db_depth_um_air < gaussian_only && r.rolloff_6db_depth_um_air > 0.8 * gaussian_only);
    }
}
