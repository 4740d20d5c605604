//! Complex output, Doppler flow, registration and angiography, driven
//! through the binary on simulated scenes with known ground truth and
//! checked by tests/contrast_checks.py (h5py + NumPy/SciPy, independent of
//! the crate that wrote the files). Outside references, beside each check:
//! - phase noise: for a phasor A plus circular Gaussian noise of variance
//!   σ² per quadrature, the phase error is ≈ σ/|A| to first order, so the
//!   difference of two independent samples has √2/√SNR with SNR = |A|²/σ²
//!   (derived here; Choma et al. 2005, Opt. Lett. 30:1162, treat the
//!   shot-noise-limited phase sensitivity of spectral-domain OCT, from memory);
//! - Doppler: Kasai et al. 1985 (IEEE Trans. Sonics Ultrason. 32:458), the
//!   Poiseuille profile v = v_max(1 − r²/R²) of the simulator;
//! - registration: Guizar-Sicairos, Thurman & Fienup 2008 (Opt. Lett.
//!   33:156); averaging N independent noise samples lowers the noise
//!   standard deviation by 10·log10 N dB (common practice);
//! - angiography: Jia et al. 2012 (Opt. Express 20:4710), Mariampillai et
//!   al. 2008 (Opt. Lett. 33:1530), recomputed with NumPy.

mod common;
use common::*;
use std::path::Path;
use std::process::Command;

fn check(args: &[&str]) -> String {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/contrast_checks.py");
    let o = Command::new("python3").arg(&script).args(args).output().expect("python3 with numpy, scipy and h5py (make test installs them)");
    let text = String::from_utf8_lossy(&o.stdout).into_owned();
    eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.status.success(), "{} failed: {text}", args[0]);
    assert!(text.contains("measured:"), "{text}");
    text
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// Tissue with a vessel (flow away from the probe at `angle_deg` < 90),
/// 4 repeats per position, the peak axial velocity at half the aliasing
/// limit (λ0/(4nT) = 7.58 mm/s here, so 3.79 mm/s = 11.08·cos 70°).
fn vessel_scene(positions: usize, motion: &str) -> String {
    format!(
        r#"
seed = 8
frames = {frames}
repeats = 4
alines = 128
background_lines = 16
[spectrometer]
pixels = 1024
start_nm = 790.0
stop_nm = 890.0
nonlinearity_nm = [2.0, -0.5]
[detector]
dtype = "u16"
[scan]
aline_spacing_um = 2.0
position_spacing_um = 6.0
aline_period_us = 20.0
frame_gap_us = 200.0
beam_radius_um = 6.0
{motion}
[sample]
surface_um = 150.0
[[sample.layers]]
thickness_um = 350.0
group_index = 1.38
top_reflectivity = 1e-4
scatterers = 40
scatterer_reflectivity = 2e-6
[[vessel]]
lateral_um = 120.0
depth_um = 350.0
radius_um = 40.0
peak_velocity_mm_s = 11.08
angle_deg = 70.0
azimuth_deg = 20.0
scatterer_density_per_um3 = 0.01
scatterer_reflectivity = 4e-6
diffusion_um2_per_s = 20.0
"#,
        frames = 4 * positions
    )
}

#[test]
fn complex_output_is_complex64_with_the_documented_phase_convention() {
    let dir = tempfile::tempdir().unwrap();
    let scene = |z: f64| mirror_scene(z, "").replace("alines = 4", "alines = 8");
    let (far, _) = simulate_scene(dir.path(), "far", &scene(600.0));
    let (near, _) = simulate_scene(dir.path(), "near", &scene(599.95));
    let p = "[output]\ncomplex = true\n[window]\nkind = \"hann\"\n";
    run_ok(dir.path(), &[&far, &near], p, &dir.path().join("out"));
    check(&["phase-convention", s(&dir.path().join("out/near")), s(&dir.path().join("out/far")), "600.0", "0.05"]);
}

#[test]
fn phase_noise_of_a_static_mirror_follows_snr() {
    let dir = tempfile::tempdir().unwrap();
    let mut outs = Vec::new();
    for r in ["1e-5", "3e-5", "1e-4", "1e-3", "1e-2"] {
        let scene = format!(
            "seed = 5\nframes = 1\nalines = 400\nbackground_lines = 16\n[spectrometer]\npixels = 1024\nstart_nm = 790.0\nstop_nm = 890.0\n\
             [detector]\ndtype = \"u16\"\n[scan]\naline_spacing_um = 1.0\naline_period_us = 20.0\nbeam_radius_um = 5.0\n\
             [[reflector]]\ndepth_um = 500.0\nreflectivity = {r}\n"
        );
        let (c, _) = simulate_scene(dir.path(), &format!("mirror{r}"), &scene);
        run_ok(dir.path(), &[&c], "[output]\ncomplex = true\n", &dir.path().join("out"));
        outs.push(dir.path().join(format!("out/mirror{r}")).display().to_string());
    }
    let mut args = vec!["phase-noise", "500.0"];
    args.extend(outs.iter().map(|s| s.as_str()));
    check(&args);
}

#[test]
fn doppler_recovers_a_parabolic_vessel_and_removes_bulk_motion() {
    let dir = tempfile::tempdir().unwrap();
    let (still, _) = simulate_scene(dir.path(), "still", &vessel_scene(4, ""));
    let (moving, _) = simulate_scene(dir.path(), "moving", &vessel_scene(4, "[motion]\naxial_velocity_mm_s = 1.5\n"));
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&still, &moving], "[volume]\naverage = 4\n[doppler]\nenabled = true\n", &out);
    let truth = |n: &str| dir.path().join(format!("{n}.truth.h5")).display().to_string();
    check(&["doppler-vessel", s(&out.join("still")), &truth("still"), s(&dir.path().join("still.truth.json"))]);
    check(&["doppler-bulk", s(&out.join("moving")), &truth("moving")]);
    // The velocity image is an RGB picture with its colour bar, beside the B-scan.
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("still/log.json")).unwrap()).unwrap();
    assert!(log["outputs"].as_array().unwrap().iter().any(|o| o == "doppler-0000.png"));
    let scale = &log["contrast"]["doppler"]["scale"];
    let (limit, lambda0) = (scale["aliasing_limit_mm_s"].as_f64().unwrap(), scale["wavelength_nm"].as_f64().unwrap());
    // λ0/(4·n·T) with n = 1.38, T = 20 µs; the band's middle (837.02 nm) is logged beside λ0.
    assert!((limit - lambda0 / (4.0 * 1.38 * 20.0)).abs() < 1e-6, "{limit}");
    assert!((scale["band_centre_wavelength_nm"].as_f64().unwrap() - 837.0238).abs() < 1e-3, "{scale}");
}

#[test]
fn registration_recovers_subpixel_shifts_and_sharpens_the_average() {
    let dir = tempfile::tempdir().unwrap();
    let scene = r#"
seed = 11
frames = 12
repeats = 4
alines = 160
background_lines = 16
[spectrometer]
pixels = 1024
start_nm = 790.0
stop_nm = 890.0
nonlinearity_nm = [2.0, -0.5]
[detector]
dtype = "u16"
[scan]
aline_spacing_um = 2.0
position_spacing_um = 5.0
aline_period_us = 20.0
beam_radius_um = 6.0
[motion]
repeat_axial_jitter_um = 30.0
repeat_lateral_jitter_um = 18.0
[sample]
surface_um = 200.0
sag_um = 40.0
[[sample.layers]]
thickness_um = 200.0
group_index = 1.38
top_reflectivity = 1e-4
scatterers = 40
scatterer_reflectivity = 3e-6
[[sample.layers]]
thickness_um = 250.0
group_index = 1.4
top_reflectivity = 2e-5
scatterers = 40
scatterer_reflectivity = 1e-6
"#;
    let (c, _) = simulate_scene(dir.path(), "jitter", scene);
    run_ok(dir.path(), &[&c], "[volume]\naverage = 4\n[registration]\nrepeats = true\n", &dir.path().join("reg"));
    run_ok(dir.path(), &[&c], "[volume]\naverage = 4\n", &dir.path().join("raw"));
    check(&["registration", s(&dir.path().join("reg/jitter")), s(&dir.path().join("jitter.truth.json")), "0.1"]);
    check(&["averaging", s(&dir.path().join("reg/jitter")), s(&dir.path().join("raw/jitter"))]);
}

#[test]
fn angiography_separates_the_vessel_and_agrees_with_numpy() {
    let dir = tempfile::tempdir().unwrap();
    let (c, _) = simulate_scene(dir.path(), "vessel", &vessel_scene(6, ""));
    let p = "[volume]\naverage = 4\n[angiography]\nmethods = [\"decorrelation\", \"speckle_variance\", \"split_spectrum\", \"complex_difference\"]\nen_face_depth_um = [290.0, 410.0]\n[output]\ncomplex = true\n";
    run_ok(dir.path(), &[&c], p, &dir.path().join("out"));
    check(&["angiography", s(&dir.path().join("out/vessel")), s(&dir.path().join("vessel.truth.h5")), s(&dir.path().join("vessel.truth.json"))]);
    // Every method's images and datasets are there.
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(dir.path().join("out/vessel/log.json")).unwrap()).unwrap();
    let outputs: Vec<&str> = log["outputs"].as_array().unwrap().iter().map(|o| o.as_str().unwrap()).collect();
    for m in ["decorrelation", "speckle_variance", "split_spectrum", "complex_difference"] {
        assert!(outputs.contains(&format!("angiography-{m}-0005.png").as_str()), "{outputs:?}");
        assert!(outputs.contains(&format!("angiography-{m}-en-face.png").as_str()));
    }
}

/// Each a one-line error, a non-zero exit, and nothing written.
#[test]
fn contrast_refuses_bad_input() {
    let dir = tempfile::tempdir().unwrap();
    // A capture without scan attributes (no A-line period) and 3 frames.
    let (plain, _) = simulate_scene(dir.path(), "plain", &small_scene(300.0, 3, 32, 512));
    let (scanned, _) = simulate_scene(dir.path(), "scanned", &vessel_scene(1, ""));
    let cases: [(&Path, &str, &str, i32); 5] = [
        (&plain, "[angiography]\nmethods = [\"decorrelation\"]\n", "needs N ≥ 2 repeated B-scans", 2),
        (&plain, "[doppler]\nenabled = true\n", "Doppler needs the A-line period", 1),
        (&scanned, "[volume]\naverage = 3\n[angiography]\nmethods = [\"decorrelation\"]\n", "not a multiple of volume.average = 3", 1),
        (&scanned, "[output]\ncomplex = true\nvolume = false\n", "output.complex", 2),
        (&scanned, "[output]\npng = false\nvolume = false\n", "would write nothing", 2),
    ];
    for (i, (capture, pipeline, expect, code)) in cases.iter().enumerate() {
        let out = dir.path().join(format!("out{i}"));
        let o = run(dir.path(), &[capture], pipeline, &out);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(*code), "case {i}: {err}");
        assert!(err.contains(expect), "case {i}: {err}");
        assert_eq!(err.trim().lines().filter(|l| l.contains("error")).count(), 1, "case {i}: {err}");
        let name = capture.file_stem().unwrap().to_str().unwrap();
        assert!(!out.join(name).exists(), "case {i}: output written");
        assert!(tree(&out).iter().all(|f| f.starts_with("batch") || f == "index.html"), "case {i}: {:?}", tree(&out));
    }
}

/// A registration below `min_peak` is a warning naming the frame and is
/// not applied; registration between positions records a shift per frame.
#[test]
fn failed_registration_warns_and_positions_register() {
    let dir = tempfile::tempdir().unwrap();
    let (c, _) = simulate_scene(dir.path(), "v", &vessel_scene(2, "[motion]\nrepeat_axial_jitter_um = 6.0\n"));
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&c], "[volume]\naverage = 4\n[registration]\nrepeats = true\npositions = true\nmin_peak = 0.99\n", &out);
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("v/log.json")).unwrap()).unwrap();
    let warnings: Vec<&str> = log["warnings"].as_array().unwrap().iter().map(|w| w.as_str().unwrap()).collect();
    // Every repeat after the first of each position (frames 1-3, 5-7) and
    // position 1 against position 0 (frame 4) fail against 0.99.
    for f in [1, 2, 3, 5, 6, 7] {
        assert!(warnings.iter().any(|w| w.starts_with(&format!("frame {f}: registration to frame")) && w.contains("not shifted")), "frame {f}: {warnings:?}");
    }
    assert!(warnings.iter().any(|w| w.starts_with("frame 4: registration to the previous position failed")), "{warnings:?}");
    let shifts = log["contrast"]["registration"].as_array().unwrap();
    assert_eq!(shifts.len(), 8);
    assert!(shifts.iter().all(|s| s["axial_px"] == 0.0 && s["lateral_px"] == 0.0), "failed registrations must not shift");
    assert!(shifts[4]["position_peak"].as_f64().unwrap() < 0.99 && shifts[1]["registered"] == false);
}

/// Doppler between repeated B-scans (T = the B-scan period) sees slow
/// flow with the right sign: a vessel at 0.4 of that aliasing limit.
#[test]
fn doppler_between_repeats_sees_slow_flow() {
    let dir = tempfile::tempdir().unwrap();
    // B-scan period 128·20 + 200 µs = 2760 µs: limit 837/(4·1.38·2760) = 0.0549 mm/s.
    let scene = vessel_scene(2, "").replace("peak_velocity_mm_s = 11.08", "peak_velocity_mm_s = 0.0642").replace("diffusion_um2_per_s = 20.0", "diffusion_um2_per_s = 0.0");
    let (c, _) = simulate_scene(dir.path(), "slow", &scene);
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&c], "[volume]\naverage = 4\n[doppler]\nenabled = true\nbetween = \"repeats\"\nkernel_alines = 3\n", &out);
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("slow/log.json")).unwrap()).unwrap();
    let d = &log["contrast"]["doppler"];
    assert_eq!(d["scale"]["period_us"], 2760.0, "{d}");
    check(&["doppler-vessel", s(&out.join("slow")), s(&dir.path().join("slow.truth.h5")), s(&dir.path().join("slow.truth.json"))]);
}

/// The velocity on A-line a belongs to a window centred on a: fringeflow's
/// Doppler (bulk correction off) against a NumPy Kasai (Kasai et al. 1985)
/// of the run's own complex64 output with the documented window, within
/// 1e-5 of the aliasing limit on every unmasked pixel, for an even and an
/// odd kernel; the same window one A-line later must not agree.
#[test]
fn doppler_agrees_with_a_numpy_kasai_on_the_right_aline() {
    let dir = tempfile::tempdir().unwrap();
    let (c, _) = simulate_scene(dir.path(), "vessel", &vessel_scene(2, ""));
    for (name, kernel) in [("even", 4), ("odd", 3)] {
        let out = dir.path().join(name);
        let p = format!("[volume]\naverage = 4\n[doppler]\nenabled = true\nbulk_correction = false\nkernel_alines = {kernel}\n[output]\ncomplex = true\n");
        run_ok(dir.path(), &[&c], &p, &out);
        check(&["doppler-numpy", s(&out.join("vessel"))]);
    }
}

/// Bulk correction leaves flow out of its vote: on captures without bulk
/// motion whose truth says which pixels are static, the vessel's recovered
/// peak with fringeflow's correction is within 0.75 % of the truth peak of
/// the one a static-tissue-only vote gives (recomputed with NumPy, same
/// pool and threshold), for flow away from the probe (70°) and towards it
/// (120°); with bulk motion, static tissue reads < 0.05 rad.
#[test]
fn bulk_correction_votes_with_static_tissue_only() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let mut captures = Vec::new();
    for (name, angle) in [("away", "70.0"), ("towards", "120.0")] {
        let scene = vessel_scene(4, "").replace("angle_deg = 70.0", &format!("angle_deg = {angle}"));
        captures.push(simulate_scene(dir.path(), name, &scene).0);
    }
    captures.push(simulate_scene(dir.path(), "moving", &vessel_scene(4, "[motion]\naxial_velocity_mm_s = 1.5\n")).0);
    let refs: Vec<&Path> = captures.iter().map(|p| p.as_path()).collect();
    run_ok(dir.path(), &refs, "[volume]\naverage = 4\n[doppler]\nenabled = true\n[output]\ncomplex = true\n", &out);
    for name in ["away", "towards"] {
        let truth = |ext: &str| dir.path().join(format!("{name}.truth.{ext}")).display().to_string();
        check(&["bulk-static", s(&out.join(name)), &truth("h5"), &truth("json"), "0.0075"]);
    }
    check(&["doppler-bulk", s(&out.join("moving")), s(&dir.path().join("moving.truth.h5"))]);
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("away/log.json")).unwrap()).unwrap();
    let vote = &log["contrast"]["doppler"]["bulk_vote"];
    let (bright, flow) = (vote["bright_pixels"].as_u64().unwrap(), vote["flow_pixels_left_out"].as_u64().unwrap());
    assert!(flow > 0 && flow < bright / 2, "{vote}");
}

/// λ0 of v = λ0·Δφ/(4π·n·T) is 2π over the power-weighted mean wavenumber
/// of what reaches the FFT: a source centred 8 nm off the band's middle
/// (841.3 nm in a 765-915 nm band whose middle in k is 833.3 nm). Checked
/// against the centroid of the simulated source × Hann window (NumPy,
/// within 0.1 %) and against the phase change a 0.1 µm mirror step makes,
/// summed over the point-spread function (within 0.1 %).
#[test]
fn doppler_wavelength_is_the_power_weighted_centroid() {
    let dir = tempfile::tempdir().unwrap();
    let scene = |z: &str| mirror_scene(600.0, "").replace("centre_nm = 840.0", "centre_nm = 841.3").replace("alines = 4", "alines = 8").replace("depth_um = 600", &format!("depth_um = {z}"));
    let (far, _) = simulate_scene(dir.path(), "far", &scene("600"));
    let (near, _) = simulate_scene(dir.path(), "near", &scene("599.9"));
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&far, &near], "[doppler]\nenabled = true\naline_period_us = 20.0\n[output]\ncomplex = true\n", &out);
    check(&["doppler-wavelength", s(&out.join("far")), "841.3", "50.0"]);
    check(&["phase-slope", s(&out.join("near")), s(&out.join("far")), "0.1"]);
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("far/log.json")).unwrap()).unwrap();
    assert!(log["contrast"]["doppler"]["scale"]["wavelength_source"].as_str().unwrap().contains("background"), "{log}");
}
