//! Layer-bounded en face slabs and flattening against the simulator's
//! truth: three layers under a curved top, a vessel in the second layer
//! and another in the third (their layers and A-lines from truth.json),
//! four repeats per position, every angiography method. volume.h5 is read
//! with h5py (an independent reader) and compared with truth.json in NumPy.
//!
//! Targets (from the issue): a slab between the surfaces around one
//! layer's vessels shows them and not the neighbouring layer's (mean
//! angiography contrast between the two ≥ 5×); flattening leaves the chosen
//! surface within 0.2 px of straight; a slab naming a surface that does not
//! exist, or whose bottom is above its top everywhere, is a one-line
//! settings error with nothing written.

mod common;
use common::*;

const SCENE: &str = r#"
seed = 77
frames = 24
repeats = 4
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
[scan]
aline_spacing_um = 2.0
position_spacing_um = 8.0
aline_period_us = 20.0
frame_gap_us = 300.0
beam_radius_um = 6.0
[sample]
surface_um = 150.0
sag_um = 20.0
bottom_reflectivity = 2e-5
[[sample.layers]]
thickness_um = 120.0
group_index = 1.38
top_reflectivity = 1e-4
scatterers = 40
scatterer_reflectivity = 2e-6
[[sample.layers]]
thickness_um = 150.0
group_index = 1.38
top_reflectivity = 3e-5
scatterers = 40
scatterer_reflectivity = 6e-7
[[sample.layers]]
thickness_um = 150.0
group_index = 1.38
top_reflectivity = 3e-5
scatterers = 40
scatterer_reflectivity = 2e-6
[[vessel]]
lateral_um = 70.0
depth_um = 430.0
radius_um = 22.0
peak_velocity_mm_s = 3.0
angle_deg = 90.0
scatterer_density_per_um3 = 0.01
scatterer_reflectivity = 4e-6
diffusion_um2_per_s = 20.0
[[vessel]]
lateral_um = 180.0
depth_um = 640.0
radius_um = 22.0
peak_velocity_mm_s = 3.0
angle_deg = 90.0
scatterer_density_per_um3 = 0.01
scatterer_reflectivity = 4e-6
diffusion_um2_per_s = 20.0
"#;

const PIPELINE: &str = r#"
[volume]
average = 4
[angiography]
methods = ["decorrelation", "speckle_variance", "complex_difference", "split_spectrum"]
[layers]
flatten = "top"
[[layers.surface]]
label = "top"
[[layers.surface]]
label = "upper"
polarity = "bright_to_dark"
min_separation_um = 60
max_separation_um = 300
[[layers.surface]]
label = "lower"
polarity = "bright_to_dark"
min_separation_um = 100
max_separation_um = 300
[[layers.slab]]
name = "middle"
top = "upper"
top_offset_um = 10
bottom = "lower"
bottom_offset_um = -10
[[layers.slab]]
name = "deep"
top = "lower"
top_offset_um = 10
bottom_depth_um = 800
projection = "max"
"#;

/// Per method and slab: mean en face value over each vessel's A-lines
/// (within half its radius of the axis, per position); the flattened top's
/// deviation from straight (truth + the logged shift, in pixels); the
/// full-depth en face ratio for comparison.
const CHECK: &str = r#"
import sys, json, h5py, numpy as np
vol, truth_path = sys.argv[1:3]
t = json.load(open(truth_path))
f = h5py.File(vol, "r")
spacing = t["scan"]["aline_spacing_um"]
alines = f["aline_index"].shape[0]
masks = {}
for v in t["scan"]["vessels"]:
    m = np.zeros((len(v["centre_per_position"]), alines), bool)
    r = 22.0 * 0.5 / spacing
    for c in v["centre_per_position"]:
        m[c["position"], np.abs(np.arange(alines) - c["aline"]) <= r] = True
    masks[v["layer"]] = m
print("layers of the vessels", sorted(masks))
for method in ["decorrelation", "speckle_variance", "complex_difference", "split_spectrum"]:
    for slab, inside, outside in [("middle", 1, 2), ("deep", 2, 1)]:
        e = f["slab_%s_angiography_%s" % (slab, method)][...]
        a, b = np.nanmean(e[masks[inside]]), np.nanmean(e[masks[outside]])
        print("slab %s %s inside %.5f outside %.5f ratio %.3f" % (slab, method, a, b, a / b))
    full = f["angiography_%s_en_face" % method][...]
    print("full %s ratio %.3f" % (method, np.nanmean(full[masks[1]]) / np.nanmean(full[masks[2]])))
depth = f["depth_um"][...]
px = depth[1] - depth[0]
shift = f["flattening_shift_px"][...]
top = np.array(t["layers"]["surfaces_um"][0])
flat = (top - depth[0]) / px + shift
dev = np.abs(flat - np.median(flat))
raw = np.abs(top - np.median(top)) / px
print("flat mean_dev_px %.4f p95_dev_px %.4f max_raw_px %.3f" % (dev.mean(), np.percentile(dev, 95), raw.max()))
print("flattened attr", "flattened" in f.attrs, f["flattening_shift_px"].attrs["surface"])
"#;

#[test]
fn a_slab_between_surfaces_holds_its_layers_vessels_and_flattening_straightens_the_top() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "slabs", SCENE);
    let out = d.join("out");
    run_ok(d, &[&h5], PIPELINE, &out);
    let folder = out.join("slabs");
    let report = python(CHECK, &[&folder.join("volume.h5"), &d.join("slabs.truth.json")]);
    println!("{report}");
    assert!(report.contains("layers of the vessels [1, 2]"), "{report}");
    for method in ["decorrelation", "speckle_variance", "complex_difference", "split_spectrum"] {
        // The middle slab (second layer) against the third layer's vessel.
        let r = value(&report, &format!("slab middle {method} "), "ratio");
        assert!(r >= 5.0, "{method}: middle slab contrast {r}: {report}");
        // The deep slab (maximum projection) sees its own vessel first.
        let r = value(&report, &format!("slab deep {method} "), "ratio");
        assert!(r >= 1.5, "{method}: deep slab contrast {r}: {report}");
        // Over every depth both vessels show alike: the slab is what separates them.
        let full = value(&report, &format!("full {method} "), "ratio");
        assert!((0.5..2.0).contains(&full), "{method}: {report}");
    }
    assert!(value(&report, "flat ", "max_raw_px") > 3.0, "the top is curved before flattening: {report}");
    assert!(value(&report, "flat ", "mean_dev_px") <= 0.2, "{report}");
    assert!(value(&report, "flat ", "p95_dev_px") <= 0.4, "{report}");
    assert!(report.contains("flattened attr True top"), "{report}");
    // The log lists the slabs and the flattening; the images exist and decode.
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("log.json")).unwrap()).unwrap();
    let layers = &log["layers"];
    assert_eq!(layers["slabs"][0]["name"], "middle");
    assert_eq!(layers["slabs"][0]["edges"], "surface \"upper\" + 10 um to surface \"lower\" - 10 um");
    assert_eq!(layers["slabs"][1]["projection"], "max");
    assert_eq!(layers["flattening"]["surface"], "top");
    let seen = python(
        "import sys\nfrom PIL import Image\nfor n in sys.argv[1:]:\n    im = Image.open(n); print(n.rsplit('/', 1)[1], im.size, im.mode)\n",
        &[&folder.join("slab-middle-angiography-decorrelation.png"), &folder.join("slab-middle-structure.png"), &folder.join("thickness-upper-lower.png")],
    );
    assert!(seen.contains("slab-middle-angiography-decorrelation.png (128, 6) L"), "{seen}");
    assert!(seen.contains("slab-middle-structure.png (128, 6) L"), "{seen}");
    // Thickness map: 6 positions × 11 rows each, colour bar to the right.
    assert!(seen.contains("thickness-upper-lower.png (224, 66) RGB"), "{seen}");
    // Its colours follow /thickness_um: at every A-line of every position
    // the pixel is matplotlib's viridis (an independent table) at the
    // value's place in the range the image states, within 3 levels (the
    // nearest of 256 entries against matplotlib's interpolation); read with
    // Pillow.
    let colours = python(
        r#"
import sys, h5py, numpy as np
from PIL import Image
from matplotlib import colormaps
folder = sys.argv[1]
t = h5py.File(folder + "/volume.h5", "r")["thickness_um"][:, 1, :]
png = Image.open(folder + "/thickness-upper-lower.png")
lo, hi = (float(v) for v in png.info["thickness_range_um"].split(","))
rows = int(png.info["rows_per_position"])
im = np.asarray(png.convert("RGB")).astype(int)
worst = 0
for p in range(t.shape[0]):
    for a in range(t.shape[1]):
        if np.isfinite(t[p, a]):
            want = np.array(colormaps["viridis"](np.clip((t[p, a] - lo) / (hi - lo), 0, 1))[:3]) * 255
            worst = max(worst, np.abs(im[p * rows + rows // 2, a] - want).max())
print("range", lo, hi, "worst_level_error", worst)
"#,
        &[&folder],
    );
    assert!(value(&colours, "range", "worst_level_error") <= 3.0, "{colours}");
}

#[test]
fn bad_slabs_are_refused_before_anything_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "slabs", &SCENE.replace("frames = 24", "frames = 4"));
    let out = d.join("out");
    let surfaces = "[layers]\n[[layers.surface]]\nlabel = \"top\"\n[[layers.surface]]\nlabel = \"upper\"\nmin_separation_um = 60\n";
    for (slab, message) in [
        ("name = \"a\"\ntop = \"top\"\nbottom = \"middle\"\n", "layers.slab: slab \"a\": bottom names surface \"middle\", which does not exist (surfaces: top, upper)"),
        ("name = \"b\"\ntop = \"upper\"\nbottom = \"top\"\nbottom_offset_um = 50\n", "layers.slab: slab \"b\": its bottom is above (or at) its top at every A-line, so it holds nothing"),
        ("name = \"c\"\ntop = \"top\"\ntop_offset_um = 20\nbottom = \"top\"\nbottom_offset_um = 5\n", "slab \"c\": its bottom is above (or at) its top at every A-line"),
        ("name = \"d\"\ntop_depth_um = 300\nbottom_depth_um = 200\n", "slab \"d\": its bottom is above (or at) its top at every A-line"),
    ] {
        let pipeline = format!("{surfaces}[[layers.slab]]\n{slab}");
        let o = run(d, &[&h5], &pipeline, &out);
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(2), "{err}");
        assert!(err.contains(message), "{err}");
        assert_eq!(err.trim_end().lines().count(), 1, "{err}");
        assert!(!out.exists() || tree(&out).is_empty(), "nothing written: {:?}", tree(&out));
    }
    // Flattening to a surface that is not there is refused the same way.
    let o = run(d, &[&h5], &surfaces.replace("[layers]\n", "[layers]\nflatten = \"bottom\"\n"), &out);
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(2), "{err}");
    assert!(err.contains("layers.flatten: names surface \"bottom\", which does not exist (surfaces: top, upper)"), "{err}");
    assert!(!out.exists() || tree(&out).is_empty(), "nothing written: {:?}", tree(&out));
}
