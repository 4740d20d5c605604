//! Layered sample: every ground-truth interface of a curved, layered scene is
//! found within ±1 depth pixel, found by a peak detector that does not know
//! where the interfaces are.

mod common;
use common::*;
use fringeflow::analysis::peak_position;

/// Local maxima more than `threshold_db` above the profile's median, each the
/// largest within ±`guard` samples.
fn detect_peaks(profile_db: &[f64], threshold_db: f64, guard: usize) -> Vec<f64> {
    let mut sorted = profile_db.to_vec();
    sorted.sort_by(f64::total_cmp);
    let floor = sorted[sorted.len() / 2];
    let amplitude: Vec<f64> = profile_db.iter().map(|&d| fringeflow::analysis::amplitude_from_db(d)).collect();
    (guard..profile_db.len() - guard)
        .filter(|&i| {
            profile_db[i] > floor + threshold_db
                && (i - guard..=i + guard).all(|j| j == i || profile_db[j] < profile_db[i])
        })
        .map(|i| peak_position(&amplitude, i))
        .collect()
}

#[test]
fn every_interface_found_within_one_depth_pixel() {
    let dir = tempfile::tempdir().unwrap();
    // Five interfaces under a curved, tilted surface; realistic detector noise
    // and fixed pattern; non-linear map; roll-off.
    let scene = r#"
seed = 5
frames = 1
alines = 64
background_lines = 32
[spectrometer]
pixels = 2048
start_nm = 765.0
stop_nm = 915.0
nonlinearity_nm = [4.0, -1.5]
resolution_nm = 0.05
pixel_integration = true
[detector]
dtype = "u16"
[sample]
surface_um = 250.0
sag_um = 80.0
tilt_um = 30.0
bottom_reflectivity = 3e-5
[[sample.layers]]
thickness_um = 120.0
group_index = 1.38
top_reflectivity = 2e-4
[[sample.layers]]
thickness_um = 200.0
group_index = 1.42
top_reflectivity = 5e-5
[[sample.layers]]
thickness_um = 90.0
group_index = 1.36
top_reflectivity = 2e-5
[[sample.layers]]
thickness_um = 300.0
group_index = 1.40
top_reflectivity = 4e-5
"#;
    let (capture, truth) = simulate_scene(dir.path(), "layers", scene);
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "", &out);
    let v = read_volume(&out.join("layers/volume.h5"));
    assert_eq!(truth.interfaces.len(), 5);
    let mut worst: f64 = 0.0;
    for a in 0..64 {
        let db: Vec<f64> = v.db.slice(ndarray::s![0, .., a]).iter().map(|&x| x as f64).collect();
        let peaks_um: Vec<f64> = detect_peaks(&db, 15.0, 3).iter().map(|p| v.depth_um[0] + p * v.spacing_um).collect();
        for (n, interface) in truth.interfaces.iter().enumerate() {
            let z = interface.depth_um_frame0[a];
            let miss = peaks_um.iter().map(|p| (p - z).abs()).fold(f64::INFINITY, f64::min);
            worst = worst.max(miss);
            assert!(miss <= v.spacing_um, "A-line {a} interface {n} at {z:.1} µm: nearest peak {miss:.2} µm away; peaks {peaks_um:?}");
        }
    }
    eprintln!("worst interface error {worst:.2} µm (one pixel = {:.2} µm)", v.spacing_um);
}
