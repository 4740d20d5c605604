//! System characterisation: `measure psf`, `measure rolloff`, spectral
//! shaping and `design`, against published formulas and simulator truth.

mod common;
use common::*;
use std::path::Path;
use std::process::{Command, Output};

fn fringeflow(args: &[&str], dir: &Path) -> Output {
    Command::new(bin()).current_dir(dir).env("HDF5_USE_FILE_LOCKING", "FALSE").args(args).output().unwrap()
}

fn json(o: &Output) -> serde_json::Value {
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).expect("JSON on stdout")
}

/// The PNG exists, has the plot's size, and is not blank (pixel variance > 0).
/// A plot decodes with Pillow (independent of the writer), is RGB, not
/// blank, and carries its provenance chunks (tests/decode_images.py).
fn assert_plot(path: &Path) {
    decode(&["plot".as_ref(), path.as_os_str()]);
}

const NO_WINDOW: &str = "[window]\nkind = \"none\"\n";

/// measure psf on a simulated 840 nm / 50 nm Gaussian mirror: FWHM within 5 %
/// of l_c = (2 ln2/π)·λ0²/Δλ ≈ 6.2 µm (formula per FIELD-NOTES; citation from memory: Swanson et al. 1992, Opt.
/// Lett. 17:151), ratio measured/limit within 0.95–1.05.
#[test]
fn psf_of_a_gaussian_mirror_meets_the_coherence_length_limit() {
    let dir = tempfile::tempdir().unwrap();
    // Realistic detector: 12-bit, shot and read noise, fixed pattern.
    let scene = mirror_scene(450.0, "").replace("dtype = \"f64\"\nelectrons_per_count = 0.0\nread_noise_counts = 0.0\nfixed_pattern_counts = 0.0", "dtype = \"u16\"").replace("alines = 4", "alines = 32");
    let (capture, _) = simulate_scene(dir.path(), "mirror", &scene);
    std::fs::write(dir.path().join("p.toml"), NO_WINDOW).unwrap();
    let o = fringeflow(&["measure", "psf", capture.to_str().unwrap(), "--pipeline", "p.toml", "--json", "--plot", "psf.png"], dir.path());
    let m = json(&o);
    let fwhm = m["fwhm_um_air"].as_f64().unwrap();
    let ratio = m["fwhm_over_limit"].as_f64().unwrap();
    let limit = m["source"]["coherence_length_um"].as_f64().unwrap();
    eprintln!("FWHM {fwhm:.3} µm, limit from measured spectrum {limit:.3} µm, ratio {ratio:.3}, SNR {:.1} dB", m["peak_over_noise_sd_db"].as_f64().unwrap());
    assert!((fwhm - 6.23).abs() / 6.23 < 0.05, "{fwhm}");
    assert!((0.95..=1.05).contains(&ratio), "{ratio}");
    assert!((m["source"]["fwhm_nm"].as_f64().unwrap() - 50.0).abs() < 1.0);
    assert!((m["peak_depth_um"].as_f64().unwrap() - 450.0).abs() < 1.0);
    assert!((m["fwhm_um_medium"].as_f64().unwrap() - fwhm / 1.38).abs() < 1e-9);
    assert_eq!(m["side_lobe_above_noise"], false, "a Gaussian source has no side lobes");
    assert_plot(&dir.path().join("psf.png"));
}

/// A two-Gaussian (non-Gaussian) source gives side lobes; reshaping the
/// spectrum to a Gaussian (Tripathi et al. 2002, Opt. Lett. 27:406) lowers
/// the highest one by at least 10 dB.
#[test]
fn shaping_suppresses_side_lobes_of_a_two_gaussian_source() {
    let dir = tempfile::tempdir().unwrap();
    let scene = mirror_scene(500.0, "").replace(
        "[source]\ncentre_nm = 840.0\nfwhm_nm = 50.0",
        "[source]\nshape = \"gaussian_sum\"\ncomponents = [\n  { centre_nm = 815.0, fwhm_nm = 30.0, weight = 1.0 },\n  { centre_nm = 870.0, fwhm_nm = 30.0, weight = 0.8 },\n]",
    );
    let (capture, _) = simulate_scene(dir.path(), "twin", &scene);
    std::fs::write(dir.path().join("plain.toml"), NO_WINDOW).unwrap();
    std::fs::write(dir.path().join("shaped.toml"), format!("{NO_WINDOW}[shaping]\nenabled = true\ncentre_nm = 840.0\nfwhm_nm = 50.0\n")).unwrap();
    let plain = json(&fringeflow(&["measure", "psf", capture.to_str().unwrap(), "-p", "plain.toml", "--json", "--plot", "a.png"], dir.path()));
    let shaped = json(&fringeflow(&["measure", "psf", capture.to_str().unwrap(), "-p", "shaped.toml", "--json", "--plot", "b.png"], dir.path()));
    let (before, after) = (plain["side_lobe_db"].as_f64().unwrap(), shaped["side_lobe_db"].as_f64().unwrap());
    eprintln!(
        "side lobe {before:.1} dB → {after:.1} dB with shaping; FWHM {:.2} → {:.2} µm",
        plain["fwhm_um_air"].as_f64().unwrap(),
        shaped["fwhm_um_air"].as_f64().unwrap()
    );
    assert_eq!(plain["side_lobe_above_noise"], true);
    assert!(before > -20.0, "the two-Gaussian source should show strong side lobes: {before}");
    assert!(after <= before - 10.0, "{before} → {after}");
    // Shaped to 840/50 the PSF approaches that Gaussian's limit.
    assert!((shaped["fwhm_um_air"].as_f64().unwrap() - 6.23).abs() / 6.23 < 0.10);
}

/// Roll-off of simulated mirrors with a known spectrometer resolution: the
/// fitted −6 dB depth is within 10 % of the simulator's truth.
#[test]
fn rolloff_fit_recovers_the_simulated_six_db_depth() {
    let dir = tempfile::tempdir().unwrap();
    let mut captures = Vec::new();
    let mut truth_depth = 0.0;
    for depth in [150.0, 450.0, 750.0, 1050.0, 1350.0] {
        let scene = mirror_scene(depth, "")
            .replace("dtype = \"f64\"\nelectrons_per_count = 0.0\nread_noise_counts = 0.0\nfixed_pattern_counts = 0.0", "dtype = \"u16\"")
            .replace("alines = 4", "alines = 16")
            .replace("nonlinearity_nm = [3.0, -1.0]", "nonlinearity_nm = [3.0, -1.0]\nresolution_nm = 0.1\npixel_integration = true");
        let (c, t) = simulate_scene(dir.path(), &format!("m{depth}"), &scene);
        truth_depth = t.rolloff_6db_depth_um.unwrap();
        captures.push(c.to_str().unwrap().to_string());
    }
    let mut args = vec!["measure", "rolloff"];
    args.extend(captures.iter().map(|s| s.as_str()));
    args.extend(["--json", "--plot", "ro.png", "--attenuation-db", "25"]);
    let r = json(&fringeflow(&args, dir.path()));
    let fitted = r["fit"]["rolloff_6db_depth_um"].as_f64().unwrap();
    eprintln!("−6 dB depth fitted {fitted:.0} µm, truth {truth_depth:.0} µm, RMS {:.2} dB", r["fit"]["rms_residual_db"].as_f64().unwrap());
    assert!((fitted - truth_depth).abs() / truth_depth < 0.10, "{fitted} vs {truth_depth}");
    assert_eq!(r["points"].as_array().unwrap().len(), 5);
    // Sensitivity = SNR of the shallowest mirror + 2 × 25 dB.
    let snr0 = r["points"][0]["peak_over_noise_sd_db"].as_f64().unwrap();
    assert!((r["sensitivity_db"].as_f64().unwrap() - (snr0 + 50.0)).abs() < 1e-9);
    assert_plot(&dir.path().join("ro.png"));
}

/// design at the two bands that are common practice for SD-OCT (about
/// 840 nm in the eye, 1300 nm elsewhere; no source): values from
/// l_c = (2 ln2/π)·λ0²/Δλ and z_max = λ0²/(4δλ).
#[test]
fn design_matches_the_published_formulas() {
    let dir = tempfile::tempdir().unwrap();
    let r = json(&fringeflow(&["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "100", "--pixels", "2048", "--json"], dir.path()));
    assert!((r["axial_resolution_um_air"].as_f64().unwrap() - 6.2).abs() < 0.05);
    assert!((r["max_depth_um_air"].as_f64().unwrap() / 1e3 - 3.6).abs() < 0.05);
    assert!((r["axial_resolution_um_medium"].as_f64().unwrap() - 6.227 / 1.38).abs() < 0.01);
    let r = json(&fringeflow(&["design", "--centre-nm", "1300", "--fwhm-nm", "100", "--pixel-width-nm", "0.1", "--pixels", "2048", "--group-index", "1.4", "--json"], dir.path()));
    assert!((r["axial_resolution_um_air"].as_f64().unwrap() - 7.5).abs() < 0.05);
    assert!((r["input"]["span_nm"].as_f64().unwrap() - 204.8).abs() < 1e-9);
    // The roll-off estimate uses the simulator's visibility model: a scene
    // with the same source and spectrometer (linear map, 0.1 nm response,
    // integrating pixels) has its truth within 2 %.
    let scene = mirror_scene(300.0, "").replace("nonlinearity_nm = [3.0, -1.0]", "resolution_nm = 0.1\npixel_integration = true");
    let (_, truth) = simulate_scene(dir.path(), "design-check", &scene);
    let r = json(&fringeflow(&["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "150", "--pixels", "2048", "--resolution-nm", "0.1", "--json"], dir.path()));
    let (est, sim) = (r["rolloff_6db_depth_um_air"].as_f64().unwrap(), truth.rolloff_6db_depth_um.unwrap());
    eprintln!("design −6 dB depth {est:.0} µm, simulator {sim:.0} µm");
    assert!((est - sim).abs() / sim < 0.02, "{est} vs {sim}");
    let table = fringeflow(&["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "100", "--pixels", "2048"], dir.path());
    let text = String::from_utf8_lossy(&table.stdout);
    assert!(text.contains("axial resolution") && text.contains("6.227"), "{text}");
}

#[test]
fn measurement_bad_input() {
    let dir = tempfile::tempdir().unwrap();
    // No reflector at all: noise only.
    let empty = mirror_scene(300.0, "").replace("[[reflector]]\ndepth_um = 300\nreflectivity = 1e-4", "").replace(
        "dtype = \"f64\"\nelectrons_per_count = 0.0\nread_noise_counts = 0.0\nfixed_pattern_counts = 0.0",
        "dtype = \"u16\"",
    ).replace("alines = 4", "alines = 16");
    assert!(!empty.contains("[[reflector]]"));
    let (noise, _) = simulate_scene(dir.path(), "noise", &empty);
    let o = fringeflow(&["measure", "psf", noise.to_str().unwrap(), "--plot", "n.png"], dir.path());
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(err.contains("no clear peak") && err.trim_end().lines().count() == 1, "{err}");
    assert!(!dir.path().join("n.png").exists());

    // A saturated mirror: measured, but warned about and flagged in the result.
    let bright = mirror_scene(300.0, "")
        .replace("dtype = \"f64\"", "dtype = \"u16\"\nreference_counts = 3000.0")
        .replace("reflectivity = 1e-4", "reflectivity = 0.05");
    let (sat, _) = simulate_scene(dir.path(), "saturated", &bright);
    let o = fringeflow(&["measure", "psf", sat.to_str().unwrap(), "--json", "--plot", "s.png"], dir.path());
    let err = String::from_utf8_lossy(&o.stderr).to_string();
    let m = json(&o);
    assert!(m["saturated_samples"].as_u64().unwrap() > 0);
    assert!(err.contains("clipped"), "{err}");

    // Fewer than three depths for roll-off.
    let o = fringeflow(&["measure", "rolloff", sat.to_str().unwrap(), noise.to_str().unwrap()], dir.path());
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains("three or more depths"), "{err}");
}
