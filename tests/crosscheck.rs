//! Independent cross-check: tests/crosscheck.py re-implements every stage
//! with NumPy (numpy.fft, numpy.interp) and SciPy (scipy.interpolate
//! .CubicSpline, scipy.signal.windows), reading the capture with h5py and
//! the settings from log.json, and compares with volume.h5: max difference
//! ≤ 1e-3 of the peak in linear amplitude, for both interpolation methods.
//! Needs python3 with numpy, scipy and h5py (`make test` installs them).

mod common;
use common::*;
use std::process::Command;

#[test]
fn numpy_scipy_reimplementation_agrees_for_linear_and_cubic() {
    let dir = tempfile::tempdir().unwrap();
    let scene = r#"
seed = 9
frames = 2
alines = 24
background_lines = 16
[spectrometer]
pixels = 1024
start_nm = 790.0
stop_nm = 890.0
nonlinearity_nm = [5.0, 2.0]
resolution_nm = 0.05
[detector]
dtype = "u16"
[dispersion]
fused_silica_mm = 3.0
[sample]
surface_um = 200.0
sag_um = 50.0
[[sample.layers]]
thickness_um = 150.0
group_index = 1.4
top_reflectivity = 1e-4
scatterers = 30
scatterer_reflectivity = 1e-6
"#;
    let (capture, _) = simulate_scene(dir.path(), "mixed", scene);
    let script = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/crosscheck.py");
    let pipelines = [
        "[k_linearization]\nmethod = \"linear\"\n[background]\nmethod = \"median\"\n[dispersion]\na2 = 12.5\na3 = -3.0\n[window]\nkind = \"tukey\"\ntukey_alpha = 0.3\n[fft]\nzero_padding = 2\ncrop_um = [100.0, 900.0]\n",
        "[k_linearization]\nmethod = \"cubic\"\n[background]\nmethod = \"recorded\"\n[dispersion]\na2 = 12.5\n[window]\nkind = \"hann\"\n",
        "[k_linearization]\nmethod = \"cubic\"\nsamples = 1500\n[background]\nmethod = \"mean\"\n[window]\nkind = \"gaussian\"\ngaussian_fwhm_fraction = 0.4\n[fft]\ncrop_px = [10, 400]\n",
    ];
    for (i, p) in pipelines.iter().enumerate() {
        let out = dir.path().join(format!("out{i}"));
        run_ok(dir.path(), &[&capture], p, &out);
        let o = Command::new("python3")
            .arg(&script)
            .arg(&capture)
            .arg(out.join("mixed"))
            .output()
            .expect("python3 must be installed for the cross-check (make test installs numpy/scipy/h5py)");
        let text = String::from_utf8_lossy(&o.stdout);
        eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
        assert!(o.status.success(), "cross-check failed for pipeline {i}: {text}");
        assert!(text.contains("max |dA|/peak"));
    }
}
