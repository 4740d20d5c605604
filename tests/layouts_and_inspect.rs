//! A user's own acquisition layout (other dataset paths, transposed axes,
//! wavelength map as a polynomial) reconstructs exactly as the default
//! layout; `inspect` reports problems; clipped fringes are counted and warned.

mod common;
use common::*;
use std::process::Command;

/// A simulated capture's fringes (frames, A-lines, pixels), background
/// and wavelength map.
fn read_capture(path: &std::path::Path) -> (ndarray::Array3<f64>, ndarray::Array2<f64>, Vec<f64>) {
    let f = hdf5::File::open(path).unwrap();
    let data = f.dataset("fringes").unwrap().read::<f64, ndarray::Ix3>().unwrap();
    let background = f.dataset("background").unwrap().read_2d::<f64>().unwrap();
    let wl = f.dataset("wavelength_nm").unwrap().read_raw::<f64>().unwrap();
    (data, background, wl)
}

#[test]
fn transposed_layout_with_polynomial_map_matches_default_layout() {
    let dir = tempfile::tempdir().unwrap();
    // Linear-in-λ map so that a degree-1 polynomial describes it exactly.
    let scene = mirror_scene(400.0, "").replace("nonlinearity_nm = [3.0, -1.0]", "").replace("alines = 4", "alines = 6");
    let (capture, _) = simulate_scene(dir.path(), "standard", &scene);

    // Same spectra stored as (pixels, alines) under /acq/raw, no map dataset.
    let (data, background, wl) = read_capture(&capture);
    let custom = dir.path().join("custom.h5");
    {
        let g = fringeflow::io::h5::create_file(&custom).unwrap();
        let acq = g.create_group("acq").unwrap();
        let transposed = data.index_axis(ndarray::Axis(0), 0).t().as_standard_layout().into_owned();
        acq.new_dataset_builder().with_data(&transposed).create("raw").unwrap();
        acq.new_dataset_builder().with_data(&background).create("dark").unwrap();
    }
    let slope = (wl[wl.len() - 1] - wl[0]) / (wl.len() - 1) as f64;
    let custom_pipeline = format!(
        "[input]\nfringes = \"/acq/raw\"\nbackground = \"/acq/dark\"\naxes = [\"pixel\", \"aline\"]\nwavelength_poly_nm = [{}, {}]\n",
        wl[0], slope
    );
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    run_ok(dir.path(), &[&capture], "", &a);
    run_ok(dir.path(), &[&custom], &custom_pipeline, &b);
    let va = read_volume(&a.join("standard/volume.h5"));
    let vb = read_volume(&b.join("custom/volume.h5"));
    assert_eq!(va.db.dim(), vb.db.dim());
    let worst = va.db.iter().zip(vb.db.iter()).map(|(x, y)| (x - y).abs()).fold(0f32, f32::max);
    assert!(worst < 1e-3, "layouts differ by {worst} dB");
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(b.join("custom/log.json")).unwrap()).unwrap();
    assert_eq!(log["input"]["wavelength_map"]["kind"], "polynomial");
    assert_eq!(log["input"]["axes"], serde_json::json!(["pixel", "aline"]));
}

#[test]
fn inspect_reports_clean_and_faulty_captures() {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR"));
    let o = Command::new(bin()).arg("inspect").arg(root.join("sample-data/layered-phantom.h5")).output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{text}");
    assert!(text.contains("/fringes") && text.contains("[2, 256, 2048]") && text.contains("u16"), "{text}");
    assert!(text.contains("problems: none"), "{text}");

    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("faulty.h5");
    {
        let f = fringeflow::io::h5::create_file(&p).unwrap();
        let mut a = ndarray::Array3::<f32>::from_elem((1, 4, 32), 100.0);
        a[[0, 1, 3]] = f32::NAN;
        let ds = f.new_dataset_builder().with_data(&a).create("fringes").unwrap();
        fringeflow::io::h5::write_attr(&ds, "full_scale", 100.0f64).unwrap();
        let mut m: Vec<f64> = (0..32).map(|i| 800.0 + i as f64).collect();
        m[10] = 790.0;
        fringeflow::io::h5::write_1d(&f, "wavelength_nm", &m).unwrap();
    }
    let o = Command::new(bin()).arg("inspect").arg(&p).output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(1), "{text}");
    assert!(text.contains("1 NaN or infinite values"), "{text}");
    assert!(text.contains("127 samples at or above full scale 100"), "{text}");
    assert!(text.contains("not monotonic"), "{text}");
}

#[test]
fn clipped_fringes_are_counted_and_warned() {
    let dir = tempfile::tempdir().unwrap();
    // A strong mirror on a 12-bit camera driven close to full scale.
    let scene = mirror_scene(300.0, "")
        .replace("dtype = \"f64\"", "dtype = \"u16\"\nreference_counts = 3000.0")
        .replace("reflectivity = 1e-4", "reflectivity = 0.05");
    let (capture, _) = simulate_scene(dir.path(), "bright", &scene);
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "", &out);
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("bright/log.json")).unwrap()).unwrap();
    let saturated = log["frames"][0]["saturated_samples"].as_u64().unwrap();
    assert!(saturated > 100, "{saturated}");
    let warnings = log["warnings"].as_array().unwrap();
    assert!(warnings.iter().any(|w| w.as_str().unwrap().contains("fringes clipped")), "{warnings:?}");
}

#[test]
fn uint16_volume_holds_the_float32_db_to_within_half_a_step() {
    // `[output] volume_type = "uint16"`: half the bytes, dB in 0.01 dB steps
    // unpacked with the CF packing attributes (scale_factor, add_offset).
    let dir = tempfile::tempdir().unwrap();
    let capture = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/layered-phantom.h5");
    let pipeline = std::fs::read_to_string(std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("pipelines/default.toml")).unwrap();
    let packed = pipeline.replace("volume = true", "volume = true\nvolume_type = \"uint16\"");
    assert_ne!(packed, pipeline);
    let (a, b) = (dir.path().join("f32"), dir.path().join("u16"));
    run_ok(dir.path(), &[&capture], &pipeline, &a);
    run_ok(dir.path(), &[&capture], &packed, &b);
    let (va, vb) = (a.join("layered-phantom/volume.h5"), b.join("layered-phantom/volume.h5"));
    let f = hdf5::File::open(&vb).unwrap();
    let ds = f.dataset("volume_db").unwrap();
    assert!(ds.dtype().unwrap().is::<u16>());
    assert_eq!(ds.attr("scale_factor").unwrap().read_scalar::<f64>().unwrap(), 0.01);
    assert_eq!(ds.attr("add_offset").unwrap().read_scalar::<f64>().unwrap(), -240.0);
    let (x, y) = (read_volume(&va), read_volume(&vb));
    assert_eq!(x.db.dim(), y.db.dim());
    let worst = x.db.iter().zip(y.db.iter()).map(|(p, q)| (p - q).abs()).fold(0.0f32, f32::max);
    assert!(worst <= 0.005 + 1e-4, "worst |ΔdB| {worst}");
    assert!(worst > 0.0, "the packed volume should round");
    let (sa, sb) = (std::fs::metadata(&va).unwrap().len(), std::fs::metadata(&vb).unwrap().len());
    assert!((sb as f64) < 0.55 * sa as f64, "uint16 volume {sb} bytes against float32 {sa}");
    // The PNGs' pixels do not depend on how the volume is stored (their
    // tEXt chunks name each pipeline's hash, so the files differ there).
    let pixels = |d: &std::path::Path| image::open(d.join("layered-phantom/bscan-0000.png")).unwrap().into_bytes();
    assert_eq!(pixels(&a), pixels(&b));
}

/// A column-major 3-D dataset, (pixels, A-lines, frames) as MATLAB or
/// Fortran writes it: the error's hint names the full reversal, and
/// following it reconstructs the same volume as the standard layout.
#[test]
fn transposed_3d_hint_names_the_order_that_works() {
    let dir = tempfile::tempdir().unwrap();
    let scene = mirror_scene(400.0, "").replace("frames = 1", "frames = 3").replace("alines = 4", "alines = 24");
    let (capture, _) = simulate_scene(dir.path(), "standard", &scene);
    let (data, background, wl) = read_capture(&capture);
    let reversed = dir.path().join("reversed.h5");
    {
        let g = fringeflow::io::h5::create_file(&reversed).unwrap();
        g.new_dataset_builder().with_data(&data.reversed_axes().as_standard_layout().into_owned()).create("fringes").unwrap();
        g.new_dataset_builder().with_data(&background).create("background").unwrap();
        fringeflow::io::h5::write_1d(&g, "wavelength_nm", &wl).unwrap();
    }
    let o = run(dir.path(), &[&reversed], "", &dir.path().join("plain"));
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    let hint = "axes = [\"pixel\", \"aline\", \"frame\"]";
    assert!(err.contains(hint), "{err}");
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    run_ok(dir.path(), &[&capture], "", &a);
    run_ok(dir.path(), &[&reversed], &format!("[input]\n{hint}\n"), &b);
    let (va, vb) = (read_volume(&a.join("standard/volume.h5")), read_volume(&b.join("reversed/volume.h5")));
    assert_eq!(va.db.dim(), (3, va.db.dim().1, 24));
    assert_eq!(va.db, vb.db, "following the hint must give the standard layout's volume");
}

/// Types in words and an all-zero capture: fringes of a compound type are
/// refused naming the type as "compound of 2 fields" (no Rust debug text),
/// and `inspect` of a capture whose every sample is 0 reports it.
#[test]
fn compound_types_in_words_and_an_all_zero_capture_is_a_problem() {
    #[derive(hdf5::H5Type, Clone, Copy)]
    #[repr(C)]
    struct Pair {
        a: u16,
        b: f32,
    }
    let dir = tempfile::tempdir().unwrap();
    let wl: Vec<f64> = (0..64).map(|i| 800.0 + i as f64).collect();
    let compound = dir.path().join("compound.h5");
    {
        let f = fringeflow::io::h5::create_file(&compound).unwrap();
        let data = ndarray::Array2::from_elem((8, 64), Pair { a: 1, b: 2.0 });
        f.new_dataset_builder().with_data(&data).create("fringes").unwrap();
        fringeflow::io::h5::write_1d(&f, "wavelength_nm", &wl).unwrap();
    }
    let o = run(dir.path(), &[&compound], "", &dir.path().join("out"));
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(err.contains("holds compound of 2 fields") && !err.contains("Compound"), "{err}");
    let zero = dir.path().join("zero.h5");
    {
        let f = fringeflow::io::h5::create_file(&zero).unwrap();
        f.new_dataset_builder().with_data(&ndarray::Array2::<u16>::zeros((8, 64))).create("fringes").unwrap();
        fringeflow::io::h5::write_1d(&f, "wavelength_nm", &wl).unwrap();
    }
    let o = Command::new(bin()).arg("inspect").arg(&zero).output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    assert_ne!(o.status.code(), Some(0), "{text}");
    assert!(text.contains("every sample is 0") && !text.contains("problems: none"), "{text}");
}
