//! Axial point-spread function and depth scale on simulated mirrors, against
//! the Gaussian coherence-length formula and the FFT depth scale.

mod common;
use common::*;

/// l_c = (2 ln2/π)·λ0²/Δλ for a Gaussian source (FIELD-NOTES; usually cited
/// to Swanson et al. 1992, Opt. Lett. 17:151, and Fercher et al. 2003, Rep.
/// Prog. Phys. 66:239 — citations from memory):
/// 840 nm / 50 nm → 6.23 µm. Window none, band 3 FWHM wide so truncation
/// does not broaden the PSF.
#[test]
fn mirror_psf_fwhm_matches_coherence_length() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, truth) = simulate_scene(dir.path(), "mirror", &mirror_scene(500.0, ""));
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "[window]\nkind = \"none\"\n[fft]\nzero_padding = 8\n", &out);
    let v = read_volume(&out.join("mirror/volume.h5"));
    let limit = fringeflow::physics::coherence_length_um(840.0, 50.0);
    assert!((limit - 6.23).abs() < 0.01);
    // The simulator's truth comes from its own optics (crates/simulate,
    // independent of the core's physics): the same formula, so equal to
    // rounding, not bit for bit.
    let truth_lc = truth.coherence_length_um.expect("the mirror's truth has a coherence length");
    assert!((truth_lc - limit).abs() < 1e-9 * limit, "truth {truth_lc} vs core {limit}");
    let (fwhm_um, _) = psf(&v.amplitude(0, 0), v.spacing_um, v.depth_um[0]);
    eprintln!("PSF FWHM {fwhm_um:.3} µm, limit {limit:.3} µm");
    assert!((fwhm_um - limit).abs() / limit < 0.05, "FWHM {fwhm_um} vs {limit}");
}

/// Depth scale: bin m sits at z = π·m·(N−1)/(N·K); spacing ≈ λ0²/(2·Δλ_span)
/// (FIELD-NOTES; common practice for SD-OCT, no single source).
/// A mirror at 500 µm must come back at 500 µm ± one depth pixel.
#[test]
fn mirror_depth_and_depth_spacing() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, truth) = simulate_scene(dir.path(), "mirror500", &mirror_scene(500.0, ""));
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "", &out);
    let v = read_volume(&out.join("mirror500/volume.h5"));
    let (_, depth) = psf(&v.amplitude(0, 1), v.spacing_um, v.depth_um[0]);
    eprintln!("mirror at {depth:.2} µm, spacing {:.4} µm", v.spacing_um);
    assert!((depth - 500.0).abs() <= v.spacing_um, "depth {depth}");
    // λ0 the band centre, Δλ_span = 150 nm.
    let from_span = truth.depth_spacing_from_span_um;
    assert!((v.spacing_um - from_span).abs() / from_span < 0.01, "{} vs {}", v.spacing_um, from_span);
    assert!((v.spacing_um - truth.depth_spacing_um).abs() < 1e-9);
}

/// Dispersion: 10 mm of unmatched fused silica (round trip 20 mm) broadens the
/// PSF to ≈ 14.7 µm (reference computation quoted in FIELD-NOTES; scale set by
/// the Malitson 1965 Sellmeier GVD); the dispersion stage with the matching
/// a2/a3 brings it back within 10 % of the 6.23 µm limit, for glass in either arm.
#[test]
fn dispersion_stage_cancels_a_glass_mismatch() {
    let dir = tempfile::tempdir().unwrap();
    let limit = fringeflow::physics::coherence_length_um(840.0, 50.0);
    for (name, mm) in [("glass-sample-arm", 10.0f64), ("glass-reference-arm", -10.0)] {
        let scene = mirror_scene(600.0, &format!("[dispersion]\nfused_silica_mm = {mm}\n"));
        let (capture, truth) = simulate_scene(dir.path(), name, &scene);
        let plain = dir.path().join(format!("{name}-plain"));
        run_ok(dir.path(), &[&capture], "[window]\nkind = \"none\"\n[fft]\nzero_padding = 8\n", &plain);
        let v = read_volume(&plain.join(format!("{name}/volume.h5")));
        let (broad, _) = psf(&v.amplitude(0, 0), v.spacing_um, v.depth_um[0]);
        let fixed = dir.path().join(format!("{name}-fixed"));
        let p = format!(
            "[window]\nkind = \"none\"\n[fft]\nzero_padding = 8\n[dispersion]\na2 = {}\na3 = {}\n",
            truth.dispersion.a2_rad, truth.dispersion.a3_rad
        );
        run_ok(dir.path(), &[&capture], &p, &fixed);
        let v = read_volume(&fixed.join(format!("{name}/volume.h5")));
        let (sharp, _) = psf(&v.amplitude(0, 0), v.spacing_um, v.depth_um[0]);
        eprintln!("{name}: a2 {:.1} rad, uncorrected {broad:.2} µm, corrected {sharp:.2} µm", truth.dispersion.a2_rad);
        assert!(broad > 2.0 * limit, "uncorrected {broad}");
        assert!((broad - 14.7).abs() / 14.7 < 0.10, "uncorrected {broad} vs reference 14.7");
        assert!((sharp - limit).abs() / limit < 0.10, "corrected {sharp}");
        assert_eq!(truth.dispersion.a2_rad.signum(), mm.signum());
    }
}
