//! Captures in the formats labs write: one simulated capture written by
//! NumPy (C and Fortran order, big-endian, a MATLAB-like pixel-fastest
//! Fortran array), as raw binary (plain `tofile`, and with file, frame and
//! A-line headers), as multi-page TIFF by tifffile (plain, deflate, pages
//! transposed) and as MATLAB v7.3 writes HDF5, each reconstructed and compared with the HDF5
//! original's volume by h5py (an independent reader): the same bytes.
//! Wavelength maps from text files (one value per line; pixel and value
//! columns in µm). Bad descriptions fail with one line naming the problem.

mod common;
use common::*;
use std::path::Path;
use std::process::Command;

const WRITE: &str = r#"
import sys, h5py, numpy as np
src, d = sys.argv[1], sys.argv[2]
with h5py.File(src, "r") as f:
    a = f["/fringes"][...]
    wl = f["/wavelength_nm"][...]
    bg = f["/background"][...]
np.save(d + "/background.npy", bg)
np.savez(d + "/archive.npz", fringes=a, wavelength_nm=wl, background=bg)
np.savez_compressed(d + "/packed.npz", fringes=a, wavelength_nm=wl)
np.savetxt(d + "/background.txt", bg, fmt="%.17g")
assert a.dtype == np.uint16 and a.ndim == 3
np.save(d + "/c.npy", a)
np.save(d + "/fortran.npy", np.asfortranarray(a))
np.save(d + "/big.npy", a.astype(">u2"))
# Pixel fastest, frame slowest, stored column-major: (pixels, alines, frames).
np.save(d + "/pixel-first.npy", np.asfortranarray(a.transpose(2, 1, 0)))
a.tofile(d + "/plain.bin")
import tifffile
tifffile.imwrite(d + "/pages.tif", a, photometric="minisblack")
tifffile.imwrite(d + "/pages-deflate.tif", a, photometric="minisblack", compression="zlib")
tifffile.imwrite(d + "/pages-transposed.tif", np.ascontiguousarray(a.transpose(0, 2, 1)), photometric="minisblack")
rng = np.random.default_rng(7)
with open(d + "/headers.bin", "wb") as f:
    f.write(rng.integers(0, 256, 100, dtype=np.uint8).tobytes())
    for frame in a:
        f.write(rng.integers(0, 256, 16, dtype=np.uint8).tobytes())
        for line in frame:
            f.write(rng.integers(0, 256, 8, dtype=np.uint8).tobytes())
            f.write(line.astype("<u2").tobytes())
np.savetxt(d + "/wavelength.txt", wl, fmt="%.17g")
# The map kept as an attribute of the fringes, in µm.
with h5py.File(d + "/attr.h5", "w") as f:
    s = f.create_dataset("spectra", data=a)
    s.attrs["lambda_um"] = wl / 1000.0
    # The background as an attribute, one spectrum per column.
    s.attrs["dark"] = np.ascontiguousarray(bg.T)
# As MATLAB v7.3 saves `fringes` of size [alines, pixels, frames] and a
# 1-by-N `wavelength_nm`: HDF5 after a 512-byte user block, dimensions
# reversed, MATLAB_class attributes, the text header in the user block.
with h5py.File(d + "/export.mat", "w", userblock_size=512) as f:
    ds = f.create_dataset("fringes", data=np.ascontiguousarray(a.transpose(0, 2, 1)))
    ds.attrs["MATLAB_class"] = np.bytes_("uint16")
    w = f.create_dataset("wavelength_nm", data=wl.reshape(-1, 1))
    w.attrs["MATLAB_class"] = np.bytes_("double")
    # MATLAB's [spectra, pixels] background, stored reversed.
    b = f.create_dataset("background", data=np.ascontiguousarray(bg.T))
    b.attrs["MATLAB_class"] = np.bytes_("double")
with open(d + "/export.mat", "r+b") as f:
    f.write(b"MATLAB 7.3 MAT-file, Platform: GLNXA64, Created on: Sat Dec  5 00:00:00 2026 HDF5 schema 1.00 .".ljust(116) + b"\x00" * 8 + b"\x00\x02IM")
with open(d + "/wavelength-um.csv", "w") as f:
    f.write("pixel,wavelength_um\n")
    for p, v in enumerate(wl):
        f.write("%d,%.17g\n" % (p, v / 1000.0))
"#;

const COMPARE: &str = r#"
import sys, h5py, numpy as np
ref = h5py.File(sys.argv[1], "r")["/volume_db"][...]
for p in sys.argv[2:]:
    v = h5py.File(p, "r")["/volume_db"][...]
    same = v.dtype == ref.dtype and v.shape == ref.shape and v.tobytes() == ref.tobytes()
    print(p, "same" if same else "differs: max |d| = %g" % np.max(np.abs(v.astype(float) - ref)))
"#;

/// The pipeline of the comparison: the frame median as background (the
/// array formats carry no recorded background), everything else default.
const BASE: &str = "[background]\nmethod = \"median\"\n";

#[test]
fn every_format_gives_the_hdf5_volume_byte_for_byte() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "sample", &small_scene(400.0, 3, 64, 1024));
    python(WRITE, &[&h5, d]);
    run_ok(d, &[&h5], BASE, &d.join("out-h5"));
    let wl = d.join("wavelength.txt");
    let wl_um = d.join("wavelength-um.csv");
    let map = format!("[input]\nwavelength_file = \"{}\"\n", wl.display());
    let raw = |extra: &str| format!("[input]\nwavelength_file = \"{}\"\nformat = \"raw\"\nsample_type = \"u16\"\npixels = 1024\nalines_per_frame = 64\n{extra}", wl.display());
    let cases: Vec<(&str, String)> = vec![
        ("c.npy", map.clone()),
        ("fortran.npy", map.clone()),
        ("big.npy", map.clone()),
        ("pixel-first.npy", format!("{map}axes = [\"pixel\", \"aline\", \"frame\"]\n")),
        ("plain.bin", raw("")),
        ("headers.bin", raw("file_header_bytes = 100\nframe_header_bytes = 16\naline_header_bytes = 8\nframes = 3\n")),
        ("c.npy", format!("[input]\nwavelength_file = \"{}\"\nwavelength_unit = \"um\"\n", wl_um.display())),
        ("pages.tif", map.clone()),
        ("pages-deflate.tif", map.clone()),
        ("pages-transposed.tif", format!("{map}axes = [\"frame\", \"pixel\", \"aline\"]\n")),
        // axes in the order MATLAB shows the array.
        ("export.mat", "[input]\nfringes = \"/fringes\"\naxes = [\"aline\", \"pixel\", \"frame\"]\n".to_string()),
    ];
    let mut volumes = Vec::new();
    for (i, (file, input)) in cases.iter().enumerate() {
        let out = d.join(format!("out-{i}"));
        let o = run(d, &[&d.join(file)], &format!("{BASE}{input}"), &out);
        assert!(o.status.success(), "{file}: {}", String::from_utf8_lossy(&o.stderr));
        let stem = Path::new(file).file_stem().unwrap().to_string_lossy().into_owned();
        let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join(&stem).join("log.json")).unwrap()).unwrap();
        // The log names the format and where the map came from.
        let format = log["input"]["format"].as_str().unwrap_or_default().to_string();
        let expected = match Path::new(file).extension().and_then(|e| e.to_str()) {
            Some("npy") => "NumPy .npy",
            Some("mat") => "MATLAB v7.3",
            Some("tif") => "multi-page TIFF",
            _ => "raw binary",
        };
        assert!(format.starts_with(expected), "{file}: {format}");
        if !file.ends_with(".mat") {
            assert_eq!(log["input"]["wavelength_map"]["kind"], "file", "{file}");
            assert!(log["input"]["wavelength_map"]["file_hash"].as_str().unwrap().starts_with("sha256:"));
        }
        assert_eq!(log["input"]["frames"], 3);
        // The same log apart from the source description (and timing).
        let strip = |mut v: serde_json::Value| {
            let o = v.as_object_mut().unwrap();
            // The source description: the input, its digest, the pipeline's
            // [input] keys and so the pipeline's hash.
            for k in ["input", "input_hash", "timing", "kernel_choice", "pipeline_sha256"] {
                o.remove(k);
            }
            o["pipeline"].as_object_mut().unwrap().remove("input");
            v
        };
        let ours = strip(log_without_timing(&out.join(&stem).join("log.json")));
        let original = strip(log_without_timing(&d.join("out-h5/sample/log.json")));
        for (k, v) in original.as_object().unwrap() {
            if k == "outputs" || k == "frames" {
                continue; // compared below without the frames' saturation counts
            }
            assert_eq!(&ours[k], v, "{file}: log.{k} differs");
        }
        let levels = |l: &serde_json::Value| l["frames"].as_array().unwrap().iter().map(|f| (f["noise_floor_db"].clone(), f["peak_db"].clone(), f["black_db"].clone(), f["white_db"].clone())).collect::<Vec<_>>();
        assert_eq!(levels(&ours), levels(&original), "{file}: frame records differ");
        volumes.push(out.join(stem).join("volume.h5"));
    }
    let mut args: Vec<&Path> = vec![];
    let reference = d.join("out-h5/sample/volume.h5");
    args.push(&reference);
    args.extend(volumes.iter().map(|p| p.as_path()));
    let report = python(COMPARE, &args);
    assert_eq!(report.lines().filter(|l| l.ends_with(" same")).count(), cases.len(), "{report}");
}

#[test]
fn bad_descriptions_fail_with_one_line_naming_the_problem() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "sample", &small_scene(400.0, 2, 32, 512));
    python(WRITE, &[&h5, d]);
    let wl = d.join("wavelength.txt");
    std::fs::write(d.join("bad.txt"), "800.0\n801.0\nabc\n").unwrap();
    std::fs::write(d.join("short.txt"), "800.0\n801.0\n802.0\n").unwrap();
    let zigzag: String = (0..512).map(|p| format!("{}\n", 800.0 + p as f64 * 0.2 - if p == 300 { 5.0 } else { 0.0 })).collect();
    std::fs::write(d.join("zigzag.txt"), zigzag).unwrap();
    let cases = [
        // Shape × sample size does not fit the file: by how much, what would.
        (format!("[input]\nwavelength_file = \"{}\"\nsample_type = \"u16\"\npixels = 512\nalines_per_frame = 32\nframes = 3\n", wl.display()), "plain.bin", "short by 32768 bytes"),
        (format!("[input]\nwavelength_file = \"{}\"\nsample_type = \"u16\"\npixels = 500\nalines_per_frame = 32\n", wl.display()), "plain.bin", "bytes over"),
        (format!("[input]\nwavelength_file = \"{}\"\nsample_type = \"u16\"\npixels = 512\nalines_per_frame = 32\nfile_header_bytes = 99999999\n", wl.display()), "plain.bin", "file_header_bytes = 99999999 but the file has only"),
        (format!("[input]\nwavelength_file = \"{}\"\n", d.join("bad.txt").display()), "c.npy", "line 3: \"abc\" is not a number"),
        (format!("[input]\nwavelength_file = \"{}\"\nwavelength_unit = \"um\"\n", wl.display()), "c.npy", "(declared in um)"),
        (format!("[input]\nwavelength_file = \"{}\"\n", d.join("short.txt").display()), "c.npy", "3 values, but the fringes have 512 pixels"),
        (format!("[input]\nwavelength_file = \"{}\"\n", d.join("zigzag.txt").display()), "c.npy", "is not monotonic"),
        ("[input]\n".to_string(), "c.npy", "give input.wavelength_file"),
    ];
    for (i, (pipeline, file, needle)) in cases.iter().enumerate() {
        let out = d.join(format!("bad-{i}"));
        let o = run(d, &[&d.join(file)], pipeline, &out);
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(!o.status.success(), "case {i} succeeded");
        assert!(err.contains(needle), "case {i}: expected {needle:?} in {err}");
        assert!(!out.join(Path::new(file).file_stem().unwrap()).join("volume.h5").exists(), "case {i}: an output was written");
    }
    // A MATLAB file whose axes are not given: the hint speaks MATLAB's order.
    let o = run(d, &[&d.join("export.mat")], "", &d.join("bad-mat"));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("set `axes = [\"aline\", \"pixel\", \"frame\"]` (in MATLAB's order)"), "{err}");
    // A raw description missing a key is a settings error (exit 2).
    let o = run(d, &[&d.join("plain.bin")], "[input]\nformat = \"raw\"\nsample_type = \"u16\"\npixels = 512\n", &d.join("bad-raw"));
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("input.format: a raw capture also needs alines_per_frame"), "{}", String::from_utf8_lossy(&o.stderr));
    // A missing wavelength map: the file's candidates and every way to give one.
    let o = run(d, &[&h5], "[input]\nwavelength = \"/lambda\"\n", &d.join("bad-map"));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("the capture's datasets of 512 values: /wavelength_nm [512]") && err.contains("input.wavelength_file") && err.contains("input.calibration"), "{err}");
    // A description that makes B-scans a few A-lines wide warns.
    let out = d.join("narrow");
    run_ok(d, &[&d.join("plain.bin")], &format!("[input]\nwavelength_file = \"{}\"\nsample_type = \"u16\"\npixels = 512\nalines_per_frame = 4\n", wl.display()), &out);
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("plain/log.json")).unwrap()).unwrap();
    assert!(log["warnings"].as_array().unwrap().iter().any(|w| w.as_str().unwrap().contains("reads as 16 B-scans only 4 A-lines wide")), "{}", log["warnings"]);
    // fringeflow's own output given as a capture says so.
    run_ok(d, &[&h5], "", &d.join("good"));
    let o = run(d, &[&d.join("good/sample/volume.h5")], "", &d.join("bad-own"));
    assert!(String::from_utf8_lossy(&o.stderr).contains("this is fringeflow's own output"), "{}", String::from_utf8_lossy(&o.stderr));
    // An unknown sample type is a settings error (exit 2).
    let o = run(d, &[&d.join("plain.bin")], "[input]\nsample_type = \"u12\"\npixels = 512\nalines_per_frame = 32\n", &d.join("bad-type"));
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("input.sample_type: \"u12\" is not a sample type"));
}

/// The background from a file (`.npy` rows, text rows) gives what the
/// capture's own background dataset gives; scan facts given in `[input]`
/// are used and the log names them.
#[test]
fn background_file_and_scan_facts_from_the_pipeline() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "sample", &small_scene(400.0, 2, 64, 1024));
    python(WRITE, &[&h5, d]);
    let recorded = "[background]\nmethod = \"recorded\"\n";
    run_ok(d, &[&h5], recorded, &d.join("out-h5"));
    let mut volumes = Vec::new();
    for (i, bg) in ["background.npy", "background.txt"].iter().enumerate() {
        let pipeline = format!(
            "{recorded}[input]\nwavelength_file = \"{}\"\nbackground_file = \"{}\"\naline_period_us = 12.5\nframe_spacing_um = 3.0\nfull_scale = 4095\n",
            d.join("wavelength.txt").display(),
            d.join(bg).display()
        );
        let out = d.join(format!("out-{i}"));
        run_ok(d, &[&d.join("c.npy")], &pipeline, &out);
        let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("c/log.json")).unwrap()).unwrap();
        assert!(log["input"]["background_file"]["file_hash"].as_str().unwrap().starts_with("sha256:"));
        assert!(log["input"]["has_background"].as_bool().unwrap());
        assert_eq!(log["input"]["scan"]["aline_period_us"], 12.5);
        assert_eq!(log["input"]["scan"]["frame_spacing_um"], 3.0);
        assert_eq!(log["input"]["full_scale"], 4095.0);
        assert_eq!(log["input"]["given_by_pipeline"], serde_json::json!(["aline_period_us", "frame_spacing_um", "full_scale"]));
        volumes.push(out.join("c/volume.h5"));
    }
    // An uncompressed .npz with the fringes, map and background inside:
    // nothing to declare.
    run_ok(d, &[&d.join("archive.npz")], recorded, &d.join("out-npz"));
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("out-npz/archive/log.json")).unwrap()).unwrap();
    assert!(log["input"]["format"].as_str().unwrap().starts_with("NumPy .npz array 'fringes'"), "{}", log["input"]["format"]);
    assert_eq!(log["input"]["wavelength_map"]["path"], "wavelength_nm (in the archive)");
    volumes.push(d.join("out-npz/archive/volume.h5"));
    // The background as an attribute (spectra along columns), and as a
    // MATLAB export stores an n×pixels matrix (reversed).
    let attr = format!("{recorded}[input]\nfringes = \"/spectra\"\nwavelength = \"/spectra@lambda_um\"\nwavelength_unit = \"um\"\nbackground = \"/spectra@dark\"\n");
    run_ok(d, &[&d.join("attr.h5")], &attr, &d.join("out-attr"));
    volumes.push(d.join("out-attr/attr/volume.h5"));
    run_ok(d, &[&d.join("export.mat")], &format!("{recorded}[input]\naxes = [\"aline\", \"pixel\", \"frame\"]\n"), &d.join("out-mat"));
    volumes.push(d.join("out-mat/export/volume.h5"));
    let reference = d.join("out-h5/sample/volume.h5");
    let report = python(COMPARE, &[&reference, &volumes[0], &volumes[1], &volumes[2], &volumes[3], &volumes[4]]);
    assert_eq!(report.lines().filter(|l| l.ends_with(" same")).count(), 5, "{report}");
    // A named attribute that is not there is an error naming it.
    let o = run(d, &[&d.join("attr.h5")], &attr.replace("@dark", "@missing"), &d.join("out-no-attr"));
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("input.background = \"/spectra@missing\": no attribute 'missing'"), "{}", String::from_utf8_lossy(&o.stderr));
    // A compressed archive is refused with the way forward.
    let o = run(d, &[&d.join("packed.npz")], "", &d.join("out-packed"));
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("is compressed (numpy.savez_compressed)"), "{}", String::from_utf8_lossy(&o.stderr));
}

/// `import` writes a capture of another format as fringeflow HDF5: the
/// same samples (h5py), one frame per chunk, deflated when asked, the
/// source's digest and settings on the root; reconstructing it gives the
/// original's volume. `inspect` describes the array formats too.
#[test]
fn import_and_inspect_other_formats() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "sample", &small_scene(400.0, 2, 64, 1024));
    python(WRITE, &[&h5, d]);
    let pipeline = d.join("raw.toml");
    std::fs::write(&pipeline, format!("[input]\nsample_type = \"u16\"\npixels = 1024\nalines_per_frame = 64\nwavelength_file = \"{}\"\n", d.join("wavelength.txt").display())).unwrap();
    let imported = d.join("imported.h5");
    let o = Command::new(bin()).arg("import").arg(d.join("plain.bin")).arg("-p").arg(&pipeline).arg("--out").arg(&imported).arg("--deflate").arg("4").output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let check = r#"
import sys, h5py, numpy as np
src, imp = sys.argv[1], sys.argv[2]
a, b = h5py.File(src, "r"), h5py.File(imp, "r")
assert np.array_equal(a["/fringes"][...], b["/fringes"][...]) and b["/fringes"].dtype == np.uint16
assert b["/fringes"].chunks == (1, 64, 1024), b["/fringes"].chunks
assert b["/fringes"].compression == "gzip" and b["/fringes"].shuffle
assert np.array_equal(a["/wavelength_nm"][...], b["/wavelength_nm"][...])
assert b.attrs["source_digest"].startswith("blake3:")
assert "raw binary, u16" in b.attrs["source_format"]
assert b["/fringes"].attrs["full_scale"] == 65535
print("imported ok")
"#;
    assert!(python(check, &[&h5, &imported]).contains("imported ok"));
    // The imported capture reconstructs as the original.
    let base = "[background]\nmethod = \"median\"\n";
    run_ok(d, &[&h5], base, &d.join("out-h5"));
    run_ok(d, &[&imported], base, &d.join("out-imported"));
    let report = python(COMPARE, &[&d.join("out-h5/sample/volume.h5"), &d.join("out-imported/imported/volume.h5")]);
    assert!(report.trim_end().ends_with(" same"), "{report}");
    // An existing --out is refused (exit 2), the file untouched.
    let o = Command::new(bin()).arg("import").arg(d.join("plain.bin")).arg("-p").arg(&pipeline).arg("--out").arg(&imported).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    // A map kept as an attribute, in µm.
    run_ok(d, &[&d.join("attr.h5")], &format!("{base}[input]\nfringes = \"/spectra\"\nwavelength = \"/spectra@lambda_um\"\nwavelength_unit = \"um\"\n"), &d.join("out-attr"));
    let report = python(COMPARE, &[&d.join("out-h5/sample/volume.h5"), &d.join("out-attr/attr/volume.h5")]);
    assert!(report.trim_end().ends_with(" same"), "{report}");
    // inspect on a .npy: the format, the frames' range, the map's range in nm.
    let p2 = d.join("npy.toml");
    std::fs::write(&p2, format!("[input]\nwavelength_file = \"{}\"\n", d.join("wavelength.txt").display())).unwrap();
    let o = Command::new(bin()).arg("inspect").arg(d.join("fortran.npy")).arg("-p").arg(&p2).output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(text.contains("NumPy .npy, u16 little-endian, Fortran order, shape [2, 64, 1024]"), "{text}");
    assert!(text.contains("wavelength map (nm) from"), "{text}");
    assert!(text.contains("as run reads it: NumPy .npy") && text.contains(" nm (from ") && text.contains("full scale 65535 counts"), "{text}");
    assert!(text.contains("problems: none"), "{text}");
}

/// A raw dump described by a sidecar beside it (`dump.bin.toml`, relative
/// paths from its folder): no `[input]` keys needed; the log names the
/// sidecar with its digest, and a rerun after the sidecar changed is refused.
#[test]
fn sidecar_describes_a_raw_dump() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (h5, _) = simulate_scene(d, "sample", &small_scene(400.0, 2, 32, 512));
    python(WRITE, &[&h5, d]);
    let base = "[background]\nmethod = \"median\"\n";
    run_ok(d, &[&h5], base, &d.join("out-h5"));
    let sidecar = d.join("plain.bin.toml");
    std::fs::write(&sidecar, "# written by the acquisition script\nsample_type = \"u16\"\npixels = 512\nalines_per_frame = 32\nwavelength_file = \"wavelength.txt\"\n").unwrap();
    run_ok(d, &[&d.join("plain.bin")], base, &d.join("out-raw"));
    let report = python(COMPARE, &[&d.join("out-h5/sample/volume.h5"), &d.join("out-raw/plain/volume.h5")]);
    assert!(report.trim_end().ends_with(" same"), "{report}");
    let log_path = d.join("out-raw/plain/log.json");
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(&log_path).unwrap()).unwrap();
    assert_eq!(log["input"]["sidecar"]["path"], sidecar.display().to_string());
    assert!(log["input"]["sidecar"]["file_hash"].as_str().unwrap().starts_with("sha256:"));
    // Changed sidecar: the rerun would not reproduce the run.
    std::fs::write(&sidecar, "sample_type = \"u16\"\npixels = 512\nalines_per_frame = 16\nwavelength_file = \"wavelength.txt\"\n").unwrap();
    let o = Command::new(bin()).arg("rerun").arg(&log_path).arg("--out").arg(d.join("again")).output().unwrap();
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("the capture's sidecar changed since the run"), "{}", String::from_utf8_lossy(&o.stderr));
    // An unknown key in a sidecar is named.
    std::fs::write(&sidecar, "sample_type = \"u16\"\npixel_count = 512\n").unwrap();
    let o = run(d, &[&d.join("plain.bin")], base, &d.join("out-bad"));
    assert!(!o.status.success());
    assert!(String::from_utf8_lossy(&o.stderr).contains("pixel_count"), "{}", String::from_utf8_lossy(&o.stderr));
}
