//! Layer surfaces and thickness against the simulator's ground truth: a
//! layered scene with a wavy top (slope about one depth pixel per A-line),
//! a thin layer whose two interfaces are six depth pixels apart (both
//! tilted on their own), and a flat bottom under them. volume.h5 is read with h5py (an
//! independent reader) and compared with truth.json in NumPy.
//!
//! Targets (from the issue): per surface, mean absolute error ≤ 1 depth
//! pixel and 95th percentile ≤ 2 pixels; thickness within 2 µm (mean) of
//! the truth in tissue.

mod common;
use common::*;
use std::process::Command;

const SCENE: &str = r#"
seed = 31
frames = 2
alines = 128
background_lines = 8
[source]
centre_nm = 840.0
fwhm_nm = 50.0
[spectrometer]
pixels = 1024
start_nm = 790.0
stop_nm = 890.0
nonlinearity_nm = [2.0, -0.5]
[detector]
dtype = "u16"
[sample]
surface_um = 200.0
tilt_um = 30.0
bottom_reflectivity = 2e-5
[[sample.layers]]
thickness_um = 80.0
group_index = 1.4
top_reflectivity = 4e-5
scatterers = 40
scatterer_reflectivity = 1e-6
wave_um = 36.0
wave_cycles = 2.0
[[sample.layers]]
thickness_um = 15.0
group_index = 1.4
top_reflectivity = 2e-5
scatterers = 6
scatterer_reflectivity = 1e-6
tilt_um = -20.0
[[sample.layers]]
thickness_um = 70.0
group_index = 1.4
top_reflectivity = 2e-5
scatterers = 40
scatterer_reflectivity = 5e-7
tilt_um = -20.0
"#;

const PIPELINE: &str = r#"
[layers]
group_index = 1.4
[[layers.surface]]
label = "top"
[[layers.surface]]
min_separation_um = 40
max_separation_um = 200
[[layers.surface]]
min_separation_um = 10
max_separation_um = 40
[[layers.surface]]
label = "bottom"
min_separation_um = 40
max_separation_um = 150
"#;

/// Per surface: MAE and 95th percentile in pixels and NaN count; per layer:
/// mean |thickness error| in µm; the largest slope of the wavy surface.
const CHECK: &str = r#"
import sys, json, h5py, numpy as np
vol, truth_path, log_path = sys.argv[1:4]
t = json.load(open(truth_path))["layers"]
log = json.load(open(log_path))
px = log["derived"]["depth_spacing_um"]
with h5py.File(vol, "r") as f:
    s = f["/surfaces_um"][...]
    th = f["/thickness_um"][...]
    assert f["/surfaces_um"].attrs["axes"] in ("position,surface,aline", b"position,surface,aline")
truth = np.transpose(np.array(t["surfaces_um"]), (1, 0, 2))
assert s.shape == truth.shape, (s.shape, truth.shape)
for i in range(s.shape[1]):
    e = np.abs(s[:, i, :] - truth[:, i, :]) / px
    ok = e[np.isfinite(e)]
    print("surface %d mae_px %.4f p95_px %.4f missing %d" % (i, ok.mean(), np.percentile(ok, 95), np.isnan(e).sum()))
tt = np.transpose(np.array(t["thickness_um"]), (1, 0, 2))
for j in range(th.shape[1]):
    d = np.abs(th[:, j, :] - tt[:, j, :])
    print("layer %d mean_abs_um %.4f" % (j, np.nanmean(d)))
slope = np.max(np.abs(np.diff(truth[0, 0, :]))) / px
print("top slope_px_per_aline %.3f" % slope)
if truth.shape[1] > 2:
    gap = np.min(truth[:, 2, :] - truth[:, 1, :]) / px
    print("thin gap_px %.3f" % gap)
"#;

fn python(code: &str, args: &[&std::path::Path]) -> String {
    let o = Command::new("python3").arg("-c").arg(code).args(args).output().expect("python3 with numpy and h5py (make test installs them)");
    assert!(o.status.success(), "python failed: {}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stdout).into_owned()
}

fn value(report: &str, line_start: &str, key: &str) -> f64 {
    let line = report.lines().find(|l| l.starts_with(line_start)).unwrap_or_else(|| panic!("no '{line_start}' in {report}"));
    let words: Vec<&str> = line.split_whitespace().collect();
    let at = words.iter().position(|w| *w == key).unwrap_or_else(|| panic!("no {key} in {line}"));
    words[at + 1].parse().unwrap()
}

#[test]
fn surfaces_and_thickness_match_the_simulated_truth() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "layers", SCENE);
    let out = d.join("out");
    run_ok(d, &[&h5], PIPELINE, &out);
    let folder = out.join("layers");
    let report = python(CHECK, &[&folder.join("volume.h5"), &d.join("layers.truth.json"), &folder.join("log.json")]);
    println!("{report}");
    // The scene is what the checks ask for: a slope of about one pixel per
    // A-line, two interfaces six pixels apart.
    assert!(value(&report, "top slope", "slope_px_per_aline") > 0.9, "{report}");
    assert!((value(&report, "thin gap", "gap_px") - 6.0).abs() < 0.5, "{report}");
    for i in 0..4 {
        let line = format!("surface {i} ");
        assert!(value(&report, &line, "mae_px") <= 1.0, "surface {i}: {report}");
        assert!(value(&report, &line, "p95_px") <= 2.0, "surface {i}: {report}");
        assert!(value(&report, &line, "missing") <= 2.0, "surface {i}: {report}");
    }
    for j in 0..3 {
        assert!(value(&report, &format!("layer {j} "), "mean_abs_um") <= 2.0, "layer {j}: {report}");
    }
    // The log names each surface, in order, with its missing A-lines per
    // frame; each layer's median thickness is near the truth's.
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("log.json")).unwrap()).unwrap();
    let layers = &log["layers"];
    let labels: Vec<&str> = layers["surfaces"].as_array().unwrap().iter().map(|s| s["label"].as_str().unwrap()).collect();
    assert_eq!(labels, ["top", "2", "3", "bottom"]);
    assert_eq!(layers["surfaces"][0]["missing_alines_per_frame"].as_array().unwrap().len(), 2);
    assert_eq!(layers["thickness"][1]["layer"], "2-3");
    let thin = layers["thickness"][1]["median_um"].as_f64().unwrap();
    assert!((thin - 15.0).abs() < 2.0, "thin layer median {thin} µm, truth 15 µm");
    // The overlay is its own image; the plain B-scan is still there.
    assert!(folder.join("surfaces-0000.png").is_file() && folder.join("bscan-0000.png").is_file());
}

/// The demo's layered phantom (a curved top, thin interfaces over darker
/// layers found by their bright-to-dark edge, three group indices) with the
/// provided pipelines/layers.toml, against its truth in sample-data.
#[test]
fn the_provided_layers_pipeline_finds_the_phantoms_interfaces() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let pipeline = std::fs::read_to_string(root.join("pipelines/layers.toml")).unwrap();
    let out = d.join("out");
    run_ok(d, &[&root.join("sample-data/layered-phantom.h5")], &pipeline, &out);
    let folder = out.join("layered-phantom");
    let report = python(CHECK, &[&folder.join("volume.h5"), &root.join("sample-data/layered-phantom.truth.json"), &folder.join("log.json")]);
    println!("{report}");
    for i in 0..4 {
        let line = format!("surface {i} ");
        assert!(value(&report, &line, "mae_px") <= 1.0, "surface {i}: {report}");
        assert!(value(&report, &line, "p95_px") <= 2.0, "surface {i}: {report}");
    }
    for j in 0..3 {
        assert!(value(&report, &format!("layer {j} "), "mean_abs_um") <= 2.0, "layer {j}: {report}");
    }
}

#[test]
fn surfaces_that_cannot_fit_are_refused_before_anything_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "layers", SCENE);
    let out = d.join("out");
    let pipeline = "[layers]\n[[layers.surface]]\n[[layers.surface]]\nmin_separation_um = 1500\n[[layers.surface]]\nmin_separation_um = 1500\n";
    let o = run(d, &[&h5], pipeline, &out);
    assert!(!o.status.success());
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("3 surfaces need at least 3020.0 µm of depth"), "{err}");
    assert_eq!(err.trim_end().lines().filter(|l| l.contains("error")).count(), 1, "{err}");
    assert!(!out.join("layers").exists(), "nothing written: {:?}", tree(&out));
    // A separation range upside down is a settings error (exit 2).
    let o = run(d, &[&h5], "[layers]\n[[layers.surface]]\n[[layers.surface]]\nmin_separation_um = 50\nmax_separation_um = 20\n", &out);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("surface 2: max_separation_um (20) must exceed min_separation_um (50)"));
}
