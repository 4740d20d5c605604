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
    // The overlay is its own image, read by Pillow (an independent
    // decoder): the first surface's colour at its row on A-line 64, grey
    // elsewhere, and the plain B-scan still grey there.
    let overlay = r#"
import sys, h5py, numpy as np
from PIL import Image
folder = sys.argv[1]
with h5py.File(folder + "/volume.h5", "r") as f:
    s = f["/surfaces_um"][0, 0, 64]
    depth = f["/depth_um"][...]
row = int(round((s - depth[0]) / (depth[1] - depth[0])))
o = np.asarray(Image.open(folder + "/surfaces-0000.png").convert("RGB"))
b = np.asarray(Image.open(folder + "/bscan-0000.png"))
print("overlay", tuple(int(v) for v in o[row, 64]), "above", tuple(int(v) for v in o[row - 10, 64]), "plain_grey", b.ndim == 2, o.shape[:2] == b.shape[:2])
"#;
    let seen = python(overlay, &[&folder]);
    assert!(seen.contains("overlay (255, 64, 48)"), "{seen}");
    let above: Vec<i64> = seen.split("above (").nth(1).unwrap().split(')').next().unwrap().split(", ").map(|v| v.parse().unwrap()).collect();
    assert!(above[0] == above[1] && above[1] == above[2], "{seen}");
    assert!(seen.trim_end().ends_with("plain_grey True True"), "{seen}");
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

/// Three layers of attenuation 2, 5 and 10 mm⁻¹ over one that spends the
/// rest of the light (backscatter in proportion to attenuation, as the
/// single-scattering model assumes), dense scatterers, thin reflecting
/// interfaces, no spectrometer roll-off; 2048 pixels, so the layers lie in
/// the upper part of the range, where the k-resampling's interpolation
/// loss (not corrected yet) is small.
const ATTENUATING: &str = r#"
seed = 12
frames = 1
alines = 256
background_lines = 8
[source]
centre_nm = 840.0
fwhm_nm = 50.0
[spectrometer]
pixels = 2048
start_nm = 790.0
stop_nm = 890.0
[detector]
dtype = "f32"
full_scale = 1e9
reference_counts = 2000.0
electrons_per_count = 0.0
read_noise_counts = 0.02
dark_counts = 0.0
fixed_pattern_counts = 0.0
[sample]
surface_um = 150.0
bottom_reflectivity = 2e-4
[[sample.layers]]
thickness_um = 250.0
group_index = 1.4
top_reflectivity = 2.4e-6
scatterers = 300
scatterer_reflectivity = 2e-7
attenuation_per_mm = 2.0
[[sample.layers]]
thickness_um = 200.0
group_index = 1.4
top_reflectivity = 6e-6
scatterers = 240
scatterer_reflectivity = 5e-7
attenuation_per_mm = 5.0
[[sample.layers]]
thickness_um = 150.0
group_index = 1.4
top_reflectivity = 1.2e-5
scatterers = 180
scatterer_reflectivity = 1e-6
attenuation_per_mm = 10.0
# The sample goes on below: a last layer that spends the light, as the
# estimate assumes (its own median is not checked).
[[sample.layers]]
thickness_um = 300.0
group_index = 1.4
top_reflectivity = 6e-5
scatterers = 360
scatterer_reflectivity = 1e-6
attenuation_per_mm = 10.0
"#;

/// The published formula (Vermeer et al. 2014, Biomed. Opt. Express 5:322)
/// recomputed in NumPy from volume.h5 (h5py) on the same linear data:
/// noise floor power removed, the same A-lines averaged, the interfaces
/// bridged, the sum below with each layer's pixel size.
const ATTENUATION_CHECK: &str = r#"
import sys, json, h5py, numpy as np
vol, log_path = sys.argv[1:3]
log = json.load(open(log_path))
L = log["pipeline"]["layers"]
with h5py.File(vol, "r") as f:
    db = f["/volume_db"][0].astype(np.float64)
    s = f["/surfaces_um"][0].astype(np.float64)
    mu = f["/attenuation_per_mm"][0]
    depth = f["/depth_um"][...]
    f_gain = f["/attenuation_depth_gain"][...].astype(np.float64)
floor = 10 ** (log["frames"][0]["noise_floor_db"] / 10)
step = depth[1] - depth[0]
gain = f_gain
I = np.maximum(10 ** (db / 10) - floor, 0) / gain[:, None]
half = L["attenuation_alines"] // 2
D, A = I.shape
avg = np.stack([I[:, max(0, a - half):min(A, a + half + 1)].mean(axis=1) for a in range(A)], axis=1)
n = [x.get("group_index", L["group_index"]) for x in L["surface"]][:-1]
worst = 0.0
count = 0
for a in range(0, A, 7):
    rows = np.round((s[:, a] - depth[0]) / step)
    if not np.all(np.isfinite(rows)):
        continue
    z = np.arange(D)
    layer = np.searchsorted(rows, z, side="right") - 1
    dz = np.where(layer < len(n), np.array(n + [L["group_index"]])[np.clip(layer, 0, len(n))], L["group_index"])
    dz = step * 1e-3 / dz
    col = avg[:, a].copy()
    # The interfaces' own reflections bridged by a straight line across
    # 3 px either side of each surface, as the page describes.
    for r in rows.astype(int):
        lo, hi = r - 4, r + 4
        if lo >= 0 and hi < D:
            t = (np.arange(lo + 1, hi) - lo) / (hi - lo)
            col[lo + 1:hi] = col[lo] + t * (col[hi] - col[lo])
    inside = z >= rows[0]
    w = np.where(inside, col * dz, 0.0)
    below = np.concatenate([np.cumsum(w[::-1])[::-1][1:], [0.0]])
    # Pixels whose signal over the floor is at least 1 % of the floor: the
    # log's floor is rounded to 1e-6 dB (2.3e-7 of its power), which
    # would otherwise dominate the difference where the signal is at the
    # floor.
    ok = inside & (below > 0) & np.isfinite(mu[:, a]) & (col > 0.01 * floor)
    ref = col[ok] / (2 * below[ok])
    worst = max(worst, float(np.max(np.abs(mu[ok, a] - ref) / ref)))
    count += int(ok.sum())
print("numpy_max_rel %.3g over %d pixels" % (worst, count))
"#;

/// The k-resampling's power transfer recomputed with SciPy: a unit fringe
/// cos(2kz) at the capture's pixel wavenumbers, resampled by SciPy's
/// natural cubic spline onto the uniform grid, projected onto the ideal
/// fringe, squared, against volume.h5's /attenuation_depth_gain.
const TRANSFER_CHECK: &str = r#"
import sys, h5py, numpy as np
from scipy.interpolate import CubicSpline
cap, vol = sys.argv[1:3]
with h5py.File(cap, "r") as f:
    wl = f["/wavelength_nm"][...].astype(np.float64)
with h5py.File(vol, "r") as f:
    gain = f["/attenuation_depth_gain"][...]
    depth = f["/depth_um"][...]
k = 2 * np.pi / (wl * 1e-3)
order = np.argsort(k)
ku = np.linspace(k.min(), k.max(), len(k))
worst, deepest = 0.0, 1.0
for i in range(0, len(depth), 37):
    z = depth[i]
    spline = CubicSpline(k[order], np.cos(2 * k[order] * z), bc_type="natural")
    ideal = np.abs(np.sum(np.cos(2 * ku * z) * np.exp(-2j * ku * z)))
    t = (np.abs(np.sum(spline(ku) * np.exp(-2j * ku * z))) / ideal) ** 2
    worst = max(worst, abs(t - gain[i]))
    deepest = min(deepest, t)
print("transfer max_abs_diff %.3g lowest %.4f" % (worst, deepest))
"#;

#[test]
fn attenuation_per_layer_matches_the_simulated_coefficients() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "tissue", ATTENUATING);
    let pipeline = r#"
[layers]
group_index = 1.4
attenuation = true
[[layers.surface]]
[[layers.surface]]
min_separation_um = 100
max_separation_um = 500
[[layers.surface]]
min_separation_um = 100
max_separation_um = 500
[[layers.surface]]
min_separation_um = 100
max_separation_um = 350
"#;
    let out = d.join("out");
    run_ok(d, &[&h5], pipeline, &out);
    let folder = out.join("tissue");
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("log.json")).unwrap()).unwrap();
    let layers = &log["layers"];
    println!("{}", serde_json::to_string_pretty(layers).unwrap());
    for (j, truth) in [2.0, 5.0, 10.0].iter().enumerate() {
        let m = layers["thickness"][j]["attenuation_median_per_mm"].as_f64().unwrap();
        assert!((m - truth).abs() / truth <= 0.10, "layer {j}: median {m} mm⁻¹, simulated {truth}");
    }
    let report = python(ATTENUATION_CHECK, &[&folder.join("volume.h5"), &folder.join("log.json")]);
    println!("{report}");
    let worst: f64 = report.split_whitespace().nth(1).unwrap().parse().unwrap();
    assert!(worst <= 1e-4, "{report}");
    // The resampling correction the estimate divided out is what SciPy's
    // spline gives, and it matters deep in the range.
    let transfer = python(TRANSFER_CHECK, &[&h5, &folder.join("volume.h5")]);
    println!("{transfer}");
    assert!(value(&transfer, "transfer", "max_abs_diff") <= 1e-4, "{transfer}");
    assert!(value(&transfer, "transfer", "lowest") < 0.97, "{transfer}");
    let applied = layers["attenuation"]["corrections_applied"].as_array().unwrap();
    assert!(applied.iter().any(|c| c.as_str().unwrap().contains("interpolation loss divided out")), "{applied:?}");
}

/// The loss the attenuation estimate divides out is the loss a
/// reconstruction shows: eight equal mirrors from 8 % to 91 % of the
/// range, reconstructed with cubic and with linear resampling; each
/// mirror's power (summed over its peak, mean over the A-lines, relative
/// to the shallowest) against the power transfer SciPy's resampling gives
/// (the same transfer volume.h5's /attenuation_depth_gain holds, checked
/// above). Up to 2/3 of the range within 3 % (cubic, measured 1.8 %) and
/// 6 % (linear, measured 5.2 %: the reconstruction keeps a little more than
/// the unweighted projection says, growing with depth); beyond, it keeps
/// up to a third more (measured, reported, not corrected).
#[test]
fn the_resampling_transfer_is_the_loss_mirrors_show() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let head = &ATTENUATING[..ATTENUATING.find("[sample]").unwrap()];
    let mirrors: String = [300.0, 900.0, 1500.0, 2000.0, 2400.0, 2800.0, 3100.0, 3300.0].iter().map(|z| format!("[[reflector]]\ndepth_um = {z}\nreflectivity = 1e-6\n")).collect();
    let (h5, _) = simulate_scene(d, "mirrors", &(head.replace("alines = 256", "alines = 16") + &mirrors));
    let check = r#"
import sys, h5py, numpy as np
from scipy.interpolate import CubicSpline
cap, folder, method = sys.argv[1:4]
wl = h5py.File(cap, "r")["/wavelength_nm"][...].astype(np.float64)
k = 2 * np.pi / (wl * 1e-3); o = np.argsort(k); ku = np.linspace(k.min(), k.max(), len(k))
with h5py.File(folder + "/volume.h5", "r") as f:
    depth = f["/depth_um"][...]; I = (10 ** (f["/volume_db"][0].astype(float) / 10)).mean(axis=1)
zs = [300, 900, 1500, 2000, 2400, 2800, 3100, 3300]
def transfer(z):
    y = np.cos(2 * k[o] * z)
    r = CubicSpline(k[o], y, bc_type="natural")(ku) if method == "cubic" else np.interp(ku, k[o], y)
    return (np.abs(np.sum(r * np.exp(-2j * ku * z))) / np.abs(np.sum(np.cos(2 * ku * z) * np.exp(-2j * ku * z)))) ** 2
power = np.array([I[np.searchsorted(depth, z) - 6:np.searchsorted(depth, z) + 7].sum() for z in zs])
t = np.array([transfer(z) for z in zs])
ratio = (power / power[0]) / (t / t[0])
print("fraction", " ".join("%.3f" % (z / depth[-1]) for z in zs))
print("ratio", " ".join("%.3f" % r for r in ratio))
print("within_two_thirds max_dev %.4f lowest_transfer %.3f" % (np.max(np.abs(ratio[:5] - 1)), t.min()))
"#;
    for (method, tolerance) in [("cubic", 0.03), ("linear", 0.06)] {
        let out = d.join(format!("out-{method}"));
        run_ok(d, &[&h5], &format!("[k_linearization]\nmethod = \"{method}\"\n"), &out);
        let report = python(check, &[&h5, &out.join("mirrors"), std::path::Path::new(method)]);
        println!("{method}: {report}");
        assert!(value(&report, "within_two_thirds", "max_dev") <= tolerance, "{method}: {report}");
        assert!(value(&report, "within_two_thirds", "lowest_transfer") < 0.5, "{method}: the scene reaches the lossy end: {report}");
    }
}
