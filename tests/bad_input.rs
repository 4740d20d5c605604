//! Bad input: each case exits non-zero with a one-line error naming the
//! problem, and leaves no output file behind; the input is never modified.

mod common;
use common::*;
use std::path::{Path, PathBuf};
use std::process::Command;

/// Writes an HDF5 capture with the given fringe and wavelength datasets.
fn write_capture(path: &Path, fringes: Option<ndarray::ArrayD<f32>>, wavelength: Option<Vec<f64>>) {
    let f = fringeflow::io::h5::create_file(path).unwrap();
    if let Some(a) = fringes {
        f.new_dataset_builder().with_data(&a).create("fringes").unwrap();
    } else {
        f.new_dataset_builder().with_data(&[1.0f32, 2.0]).create("spectra_elsewhere").unwrap();
    }
    if let Some(w) = wavelength {
        fringeflow::io::h5::write_1d(&f, "wavelength_nm", &w).unwrap();
    }
}

fn fringes(shape: &[usize]) -> ndarray::ArrayD<f32> {
    ndarray::ArrayD::from_shape_fn(shape, |i| 1000.0 + (i[shape.len() - 1] % 7) as f32)
}

fn map(n: usize) -> Vec<f64> {
    (0..n).map(|p| 800.0 + 0.1 * p as f64).collect()
}

/// Runs the binary and checks: non-zero exit, exactly one stderr line that
/// contains `expect`, no files left under `out`, input unchanged.
fn assert_fails(dir: &Path, capture: &Path, pipeline: Option<&str>, expect: &str, code: i32) {
    let out = dir.join(format!("out-{}", capture.file_stem().unwrap().to_string_lossy()));
    let before = std::fs::read(capture).ok();
    let mut cmd = Command::new(bin());
    cmd.env("HDF5_USE_FILE_LOCKING", "FALSE").arg("run").arg(capture).arg("--out").arg(&out);
    if let Some(p) = pipeline {
        let pp = dir.join("bad-pipeline.toml");
        std::fs::write(&pp, p).unwrap();
        cmd.arg("--pipeline").arg(pp);
    }
    let o = cmd.output().unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(code), "{}: {err}", capture.display());
    assert_eq!(err.trim_end().lines().count(), 1, "not one line: {err}");
    assert!(err.contains(expect), "expected '{expect}' in: {err}");
    // Only the batch summary and the batch's page (each written whole,
    // atomically) may be there, and the summary must record the failure.
    let leftovers: Vec<PathBuf> = walk(&out).into_iter().filter(|p| !p.ends_with("batch.json") && !p.ends_with("index.html")).collect();
    assert!(leftovers.is_empty(), "files left behind: {leftovers:?}");
    if code == 1 {
        let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
        assert_eq!(batch["counts"]["failed"], 1);
        assert!(batch["captures"][0]["reason"].as_str().unwrap().contains(expect));
    }
    assert_eq!(std::fs::read(capture).ok(), before, "input was modified");
}

fn walk(p: &Path) -> Vec<PathBuf> {
    let Ok(rd) = std::fs::read_dir(p) else { return Vec::new() };
    rd.flat_map(|e| {
        let path = e.unwrap().path();
        if path.is_dir() {
            walk(&path)
        } else {
            vec![path]
        }
    })
    .collect()
}

#[test]
fn missing_file() {
    let d = tempfile::tempdir().unwrap();
    assert_fails(d.path(), &d.path().join("nowhere.h5"), None, "no such file", 1);
}

#[test]
fn not_an_hdf5_file() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("notes.h5");
    std::fs::write(&p, "these are lab notes, not spectra\n").unwrap();
    assert_fails(d.path(), &p, None, "not an HDF5 file", 1);
}

#[test]
fn truncated_hdf5_file() {
    let d = tempfile::tempdir().unwrap();
    let (full, _) = simulate_scene(d.path(), "whole", &mirror_scene(300.0, ""));
    let bytes = std::fs::read(full).unwrap();
    let p = d.path().join("cut.h5");
    std::fs::write(&p, &bytes[..bytes.len() / 3]).unwrap();
    assert_fails(d.path(), &p, None, "truncated HDF5 file", 1);
}

#[test]
fn missing_dataset() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("nofringes.h5");
    write_capture(&p, None, Some(map(64)));
    assert_fails(d.path(), &p, None, "dataset '/fringes' not found", 1);
}

#[test]
fn wrong_rank() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("rank4.h5");
    write_capture(&p, Some(fringes(&[2, 2, 4, 64])), Some(map(64)));
    assert_fails(d.path(), &p, None, "has rank 4, expected 2", 1);
    let p = d.path().join("rank1.h5");
    write_capture(&p, Some(fringes(&[64])), Some(map(64)));
    assert_fails(d.path(), &p, None, "has rank 1, expected 2", 1);
}

#[test]
fn wavelength_map_length_differs_from_pixels() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("shortmap.h5");
    write_capture(&p, Some(fringes(&[1, 8, 64])), Some(map(60)));
    assert_fails(d.path(), &p, None, "has 60 values but the fringes have 64 pixels", 1);
}

#[test]
fn non_monotonic_wavelength_map() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("foldedmap.h5");
    let mut m = map(64);
    m[40] = m[38];
    write_capture(&p, Some(fringes(&[1, 8, 64])), Some(m));
    assert_fails(d.path(), &p, None, "is not monotonic (at pixel 40)", 1);
}

#[test]
fn nan_in_float_data() {
    let d = tempfile::tempdir().unwrap();
    let p = d.path().join("nan.h5");
    let mut a = fringes(&[3, 8, 64]);
    a[[2, 5, 17]] = f32::NAN; // in the last frame: earlier frames were already processed
    write_capture(&p, Some(a), Some(map(64)));
    assert_fails(d.path(), &p, None, "NaN or infinite value in '/fringes' frame 2 (A-line 5, pixel 17)", 1);
}

#[test]
fn unknown_pipeline_key_names_key_and_line() {
    let d = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(d.path(), "fine", &mirror_scene(300.0, ""));
    assert_fails(d.path(), &capture, Some("[window]\nkind = \"hann\"\n\n[fft]\nzero_pading = 2\n"), "line 5: unknown key \"zero_pading\"", 2);
    assert_fails(d.path(), &capture, Some("[window]\nkind = \"triangle\"\n"), "line 2: window.kind: unknown value \"triangle\"", 2);
    assert_fails(d.path(), &capture, Some("[window]\nkind = \"tukey\"\ntukey_alpha = 2.0\n"), "line 3: window.tukey_alpha: value 2 out of range", 2);
}
