//! Every kind of image fringeflow writes, decoded by an independent reader
//! (Pillow, via tests/decode_images.py) and compared with the numbers it
//! was made from: 8- and 16-bit B-scans and en face projections against
//! volume.h5 (read with h5py) under the grey levels log.json records; the
//! dispersion sweep's contact sheet against sweep.json; the plots decoded.
//! PNG itself stores 16-bit samples big-endian (PNG specification, W3C
//! 2003, §7.1); a byte-swapped writer fails here with differences of
//! thousands of grey levels.

mod common;
use common::*;
use std::process::Command;

const SCENE: &str = r#"
seed = 21
frames = 3
alines = 48
background_lines = 8
[spectrometer]
pixels = 512
start_nm = 790.0
stop_nm = 890.0
nonlinearity_nm = [2.0, 0.5]
[detector]
dtype = "u16"
[sample]
surface_um = 150.0
sag_um = 40.0
[[sample.layers]]
thickness_um = 120.0
group_index = 1.4
top_reflectivity = 1e-4
scatterers = 20
scatterer_reflectivity = 1e-6
"#;

#[test]
fn bscans_and_en_face_decode_to_the_volume_at_8_and_16_bits() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "layers", SCENE);
    // The 8-bit run states the lateral step (so its PNGs carry pHYs and
    // volume.h5 a lateral scale); the others leave it unknown.
    for (bits, volume_type, input, scaled) in [(8, "float32", "[input]\naline_spacing_um = 3.5\n", true), (16, "float32", "", false), (16, "uint16", "", false)] {
        let out = dir.path().join(format!("out{bits}-{volume_type}"));
        let pipeline = format!(
            "{input}[log_compression]\nbit_depth = {bits}\n[volume]\nen_face = true\n[output]\nvolume_type = \"{volume_type}\"\nome_tiff = true\nscaled_png = {scaled}\n"
        );
        run_ok(dir.path(), &[&capture], &pipeline, &out);
        decode(&["bscans".as_ref(), out.join("layers").as_os_str()]);
        decode(&["axes".as_ref(), out.join("layers").as_os_str()]);
        decode(&["ome".as_ref(), out.join("layers").as_os_str()]);
        if scaled {
            decode(&["scaled".as_ref(), out.join("layers").as_os_str()]);
        }
    }
}

/// A scanned capture (lateral and slow-axis steps recorded): the OME-TIFF
/// carries PhysicalSizeX and PhysicalSizeZ equal to the scene's steps, as
/// tifffile reads them.
#[test]
fn ome_tiff_of_a_scanned_capture_has_every_physical_size() {
    let dir = tempfile::tempdir().unwrap();
    let scene = r#"
seed = 17
frames = 4
alines = 48
background_lines = 8
[spectrometer]
pixels = 512
start_nm = 790.0
stop_nm = 890.0
[detector]
dtype = "u16"
[scan]
aline_spacing_um = 2.5
position_spacing_um = 7.5
beam_radius_um = 6.0
[sample]
surface_um = 150.0
[[sample.layers]]
thickness_um = 100.0
group_index = 1.4
top_reflectivity = 1e-4
scatterers = 20
scatterer_reflectivity = 1e-6
"#;
    let (capture, _) = simulate_scene(dir.path(), "scanned", scene);
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "[output]\nome_tiff = true\n", &out);
    decode(&["ome".as_ref(), out.join("scanned").as_os_str(), "X=2.5".as_ref(), "Z=7.5".as_ref()]);
}

#[test]
fn contact_sheet_and_plots_decode() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "layers", SCENE);
    let sweep = dir.path().join("sweep");
    let o = Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(["dispersion", "sweep"])
        .arg(&capture)
        .args(["--a2", "-20:20:20", "--out"])
        .arg(&sweep)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    decode(&["sheet".as_ref(), sweep.as_os_str()]);

    let (mirror, _) = simulate_scene(dir.path(), "mirror", &mirror_scene(400.0, ""));
    let psf_plot = dir.path().join("psf.png");
    let o = Command::new(bin()).env("HDF5_USE_FILE_LOCKING", "FALSE").args(["measure", "psf"]).arg(&mirror).arg("--plot").arg(&psf_plot).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    decode(&["plot".as_ref(), psf_plot.as_os_str(), sweep.join("metric.png").as_os_str()]);
}

#[test]
fn doppler_and_angiography_images_decode() {
    let dir = tempfile::tempdir().unwrap();
    let scene = format!(
        "{SCENE}\n[scan]\naline_spacing_um = 2.0\naline_period_us = 20.0\nbeam_radius_um = 6.0\n[[vessel]]\nlateral_um = 48.0\ndepth_um = 220.0\nradius_um = 20.0\n\
         peak_velocity_mm_s = 8.0\nangle_deg = 60.0\nscatterer_density_per_um3 = 0.01\nscatterer_reflectivity = 4e-6\n"
    )
    .replace("frames = 3", "frames = 4\nrepeats = 2")
    .replace("alines = 48", "alines = 96");
    let (capture, _) = simulate_scene(dir.path(), "flow", &scene);
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "[volume]\naverage = 2\n[doppler]\nenabled = true\n[angiography]\nmethods = [\"decorrelation\"]\n", &out);
    decode(&["doppler".as_ref(), out.join("flow").as_os_str()]);
    decode(&["angiography".as_ref(), out.join("flow").as_os_str()]);
    decode(&["axes".as_ref(), out.join("flow").as_os_str()]);
}

/// `[output] png_compression`: `none` (stored) and `small` write the same
/// pixels as the default `fast`, as Pillow decodes them; stored files are
/// the biggest and `small` ones the smallest.
#[test]
fn png_compression_changes_size_not_pixels() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "layers", SCENE);
    let mut sizes = Vec::new();
    for effort in ["fast", "none", "small"] {
        let out = dir.path().join(effort);
        run_ok(dir.path(), &[&capture], &format!("[output]\npng_compression = \"{effort}\"\n"), &out);
        sizes.push(std::fs::metadata(out.join("layers/bscan-0000.png")).unwrap().len());
    }
    let code = "import sys, numpy as np\nfrom PIL import Image\na, b = (np.asarray(Image.open(p)) for p in sys.argv[1:3])\nassert a.shape == b.shape and (a == b).all(), 'pixels differ'\nprint('same')";
    for effort in ["none", "small"] {
        let o = std::process::Command::new("python3")
            .arg("-c")
            .arg(code)
            .arg(dir.path().join("fast/layers/bscan-0000.png"))
            .arg(dir.path().join(format!("{effort}/layers/bscan-0000.png")))
            .output()
            .unwrap();
        assert!(o.status.success(), "{effort}: {}", String::from_utf8_lossy(&o.stderr));
    }
    eprintln!("bscan-0000.png bytes: fast {}, none {}, small {}", sizes[0], sizes[1], sizes[2]);
    assert!(sizes[1] > sizes[0] && sizes[2] < sizes[0], "{sizes:?}");
}
