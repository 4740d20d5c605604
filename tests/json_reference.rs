//! docs/json-reference.md against real output: every command's JSON is
//! produced here, and its top-level keys and `format_version` must be what
//! the page lists (keys marked *optional* may be absent). Also the messages
//! of the last wave's misleading hints, each with its exit code.

mod common;
use common::*;
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;
use std::process::Command;

/// Per section heading: (format_version, required keys, optional keys).
fn reference() -> BTreeMap<String, (u64, BTreeSet<String>, BTreeSet<String>)> {
    let page = std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join("docs/json-reference.md")).unwrap();
    let mut out = BTreeMap::new();
    for section in page.split("\n## ").skip(1) {
        let heading = section.lines().next().unwrap();
        let Some(v) = heading.split("(format_version ").nth(1) else { continue };
        let version: u64 = v.trim_end_matches(')').parse().unwrap();
        let name = heading.split(" (format_version").next().unwrap().to_string();
        let (mut required, mut optional) = (BTreeSet::new(), BTreeSet::new());
        // The first table of the section: its rows' first cells.
        for row in section.lines().skip_while(|l| !l.starts_with("| key")).skip(2).take_while(|l| l.starts_with('|')) {
            let cells: Vec<&str> = row.split('|').collect();
            let key = cells[1].trim().trim_matches('`').to_string();
            if cells[2].contains("*optional*") {
                optional.insert(key);
            } else {
                required.insert(key);
            }
        }
        out.insert(name, (version, required, optional));
    }
    out
}

fn json_of(args: &[&str], dir: &Path) -> serde_json::Value {
    let o = Command::new(bin()).args(args).current_dir(dir).output().unwrap();
    assert!(o.status.success(), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
    serde_json::from_slice(&o.stdout).unwrap_or_else(|e| panic!("{args:?}: {e}: {}", String::from_utf8_lossy(&o.stdout)))
}

fn holds(reference: &BTreeMap<String, (u64, BTreeSet<String>, BTreeSet<String>)>, section: &str, doc: &serde_json::Value) {
    let (version, required, optional) = reference.get(section).unwrap_or_else(|| panic!("no section '{section}' in docs/json-reference.md"));
    assert!(!required.is_empty(), "{section}: no keys listed");
    assert_eq!(doc["format_version"].as_u64(), Some(*version), "{section}: format_version");
    let keys: BTreeSet<String> = doc.as_object().unwrap().keys().cloned().collect();
    let undocumented: Vec<&String> = keys.iter().filter(|k| !required.contains(*k) && !optional.contains(*k)).collect();
    let missing: Vec<&String> = required.iter().filter(|k| !keys.contains(*k)).collect();
    assert!(undocumented.is_empty() && missing.is_empty(), "{section}: undocumented {undocumented:?}, missing {missing:?}");
}

#[test]
fn every_json_document_is_versioned_and_documented() {
    let reference = reference();
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let sample = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/layered-phantom.h5");
    let sample = sample.to_str().unwrap();
    for (name, z) in [("m300", 300.0), ("m600", 600.0), ("m900", 900.0)] {
        simulate_scene(d, name, &mirror_scene(z, ""));
    }
    holds(&reference, "design --json", &json_of(&["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "150", "--pixels", "2048", "--json"], d));
    holds(&reference, "inspect --json", &json_of(&["inspect", sample, "--json"], d));
    holds(&reference, "pipeline show --json", &json_of(&["pipeline", "show", "--json"], d));
    holds(&reference, "measure psf --json", &json_of(&["measure", "psf", "m300.h5", "--json"], d));
    let rolloff = json_of(&["measure", "rolloff", "m300.h5", "m600.h5", "m900.h5", "--json"], d);
    holds(&reference, "measure rolloff --json", &rolloff);
    // The previous name carries the same value as the current one.
    assert_eq!(rolloff["points"][1]["snr_db"], rolloff["points"][1]["peak_over_noise_sd_db"]);
    let design = json_of(&["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "150", "--pixels", "2048", "--json"], d);
    assert_eq!(design["axial_resolution_air_um"], design["axial_resolution_um_air"]);
    let cal = json_of(&["calibrate", "wavelength", "m300.h5", "m600.h5", "--centre-nm", "840", "--span-nm", "150", "--out", "cal.json", "--json"], d);
    holds(&reference, "calibrate wavelength: the calibration file and --json", &cal);
    let file: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("cal.json")).unwrap()).unwrap();
    holds(&reference, "calibrate wavelength: the calibration file and --json", &file);
    holds(&reference, "dispersion estimate --json", &json_of(&["dispersion", "estimate", sample, "--json"], d));
    holds(&reference, "dispersion sweep --json and sweep.json", &json_of(&["dispersion", "sweep", sample, "--a2", "0:4:4", "--out", "sweep", "--json"], d));
    let simulated = json_of(&["simulate", Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/layered-phantom.toml").to_str().unwrap(), "--out", "s.h5", "--json"], d);
    holds(&reference, "simulate --json", &simulated);
    // run --json lines.
    let o = Command::new(bin()).args(["run", "s.h5", "--out", "out", "--json", "--quiet"]).current_dir(d).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let lines: Vec<serde_json::Value> = String::from_utf8_lossy(&o.stdout).lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    assert!(lines.len() == 2 && lines.iter().all(|l| l["format_version"] == 1), "{lines:?}");
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("out/batch.json")).unwrap()).unwrap();
    holds(&reference, "batch.json", &batch);
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("out/s/log.json")).unwrap()).unwrap();
    holds(&reference, "log.json", &log);
    holds(&reference, "rerun --json", &json_of(&["rerun", "out/s/log.json", "--out", "again", "--json"], d));
    let summary = json_of(&["summarize", "out", "--json"], d);
    holds(&reference, "summarize --json and summary.json", &summary);
    let summary_file: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("out/summary.json")).unwrap()).unwrap();
    holds(&reference, "summarize --json and summary.json", &summary_file);
    holds(&reference, "report --json", &json_of(&["report", "out/s", "--json"], d));
}

/// A calibration file of version 1 (mirrors' digest under `sha256`) still loads.
#[test]
fn a_version_1_calibration_file_still_loads() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (c, _) = simulate_scene(d, "m", &mirror_scene(400.0, ""));
    let cap = c.to_str().unwrap();
    let o = Command::new(bin()).args(["calibrate", "wavelength", cap, "--depths-um", "400", "--centre-nm", "840", "--out", "cal.json"]).current_dir(d).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let text = std::fs::read_to_string(d.join("cal.json")).unwrap();
    let mut v: serde_json::Value = serde_json::from_str(&text).unwrap();
    let obj = v.as_object_mut().unwrap();
    obj.remove("format_version");
    obj.insert("version".into(), 1.into());
    for input in obj["inputs"].as_array_mut().unwrap() {
        let h = input.as_object_mut().unwrap().remove("input_hash").unwrap();
        input["sha256"] = h;
    }
    std::fs::write(d.join("old.json"), serde_json::to_vec_pretty(&v).unwrap()).unwrap();
    std::fs::write(d.join("p.toml"), "[input]\ncalibration = \"old.json\"\n").unwrap();
    let o = Command::new(bin()).args(["pipeline", "check", "p.toml"]).current_dir(d).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
}

/// The hints of the last wave that led somewhere wrong, each now a clear
/// one-line message with its exit code.
#[test]
fn hints_lead_somewhere_right() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (c, _) = simulate_scene(d, "m", &mirror_scene(400.0, ""));
    let cap = c.to_str().unwrap();
    let run_cmd = |args: &[&str]| Command::new(bin()).args(args).current_dir(d).output().unwrap();
    let one_error = |o: &std::process::Output, code: i32, expect: &str| {
        let err = String::from_utf8_lossy(&o.stderr);
        assert_eq!(o.status.code(), Some(code), "{err}");
        assert!(err.contains(expect), "{err}");
        assert_eq!(err.lines().filter(|l| l.contains("error")).count(), 1, "{err}");
    };
    // Wavelengths in µm given as nm: refused, nothing written.
    let o = run_cmd(&["calibrate", "wavelength", cap, cap, "--centre-nm", "0.838", "--span-nm", "0.150", "--out", "cal.json"]);
    one_error(&o, 2, "outside the plausible 200–20000 nm");
    assert!(String::from_utf8_lossy(&o.stderr).contains("micrometres"));
    assert!(!d.join("cal.json").exists());
    // A named calibration file is loaded and checked by `pipeline check` and by `run` up front.
    std::fs::write(d.join("bad.json"), "{\"format\": \"something else\"}").unwrap();
    std::fs::write(d.join("p.toml"), "[input]\ncalibration = \"bad.json\"\n").unwrap();
    one_error(&run_cmd(&["pipeline", "check", "p.toml"]), 2, "bad.json");
    let o = run_cmd(&["run", cap, "-p", "p.toml", "--out", "out"]);
    one_error(&o, 2, "input.calibration");
    assert!(!d.join("out/m").exists());
    // `report out/*` passes over the batch files beside the folders.
    assert!(run_cmd(&["run", cap, "--out", "all", "--quiet"]).status.success());
    let o = Command::new("sh").arg("-c").arg(format!("{} report all/*", bin())).current_dir(d).output().unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{err}");
    assert!(err.contains("skipping all/batch.json") && err.contains("skipping all/index.html"), "{err}");
    assert!(d.join("all/m/report.html").is_file());
    // Resume names the digest it used (BLAKE3 by default).
    let o = run_cmd(&["run", cap, "--out", "all", "--resume", "--json"]);
    assert!(o.status.success());
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("same input BLAKE3 digest"), "{text}");
}

/// Doppler's volume.h5 attributes as numbers and its dimensions labelled
/// as its `axes` attribute names them, read with h5py.
#[test]
fn contrast_datasets_have_numeric_attributes_and_position_labels() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let scene = "seed = 3\nframes = 4\nrepeats = 2\nalines = 32\nbackground_lines = 8\n[spectrometer]\npixels = 512\nstart_nm = 790.0\nstop_nm = 890.0\n\
                 [scan]\naline_spacing_um = 2.0\nposition_spacing_um = 5.0\naline_period_us = 20.0\nbeam_radius_um = 6.0\n[sample]\nsurface_um = 150.0\n\
                 [[sample.layers]]\nthickness_um = 200.0\ngroup_index = 1.38\ntop_reflectivity = 1e-4\nscatterers = 20\nscatterer_reflectivity = 2e-6\n";
    let (c, _) = simulate_scene(d, "t", scene);
    run_ok(d, &[&c], "[volume]\naverage = 2\n[doppler]\nenabled = true\n[angiography]\nmethods = [\"speckle_variance\"]\n", &d.join("out"));
    let script = r#"
import sys, h5py, numpy as np
f = h5py.File(sys.argv[1], "r")
ds = f["doppler_velocity_mm_s"]
lim = ds.attrs["aliasing_limit_mm_s"]
assert isinstance(lim, (float, np.floating)), type(lim)
labels = [dim.label for dim in ds.dims]
assert labels == ["position", "depth", "aline"], labels
sv = f["angiography_speckle_variance"]
assert [dim.label for dim in sv.dims] == ["position", "depth", "aline"]
assert "1/N" in sv.attrs["normalisation"]
assert [dim.label for dim in f["volume_db"].dims] == ["frame", "depth", "aline"]
print(f"ok aliasing limit {lim:.4f} mm/s, labels {labels}")
"#;
    let o = Command::new("python3").arg("-c").arg(script).arg(d.join("out/t/volume.h5")).output().unwrap();
    assert!(o.status.success(), "{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr));
}

/// Resume and rerun notice an edited calibration file: the pipeline names
/// only its path, so its digest is part of "up to date".
#[test]
fn resume_and_rerun_notice_an_edited_calibration() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    for (name, z) in [("m1", 300.0), ("m2", 600.0)] {
        simulate_scene(d, name, &mirror_scene(z, ""));
    }
    let ff = |args: &[&str]| Command::new(bin()).args(args).current_dir(d).output().unwrap();
    assert!(ff(&["calibrate", "wavelength", "m1.h5", "m2.h5", "--centre-nm", "840", "--span-nm", "150", "--out", "cal.json"]).status.success());
    std::fs::write(d.join("p.toml"), "[input]\ncalibration = \"cal.json\"\n").unwrap();
    assert!(ff(&["run", "m1.h5", "-p", "p.toml", "--out", "o", "--quiet"]).status.success());
    let text = |o: &std::process::Output| format!("{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr));
    let o = ff(&["run", "m1.h5", "-p", "p.toml", "--out", "o", "--resume"]);
    assert!(text(&o).contains("1 skipped"), "{}", text(&o));
    // Shift the map by 0.5 nm: same path, other content.
    let mut cal: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("cal.json")).unwrap()).unwrap();
    for w in cal["wavelength_nm"].as_array_mut().unwrap() {
        *w = (w.as_f64().unwrap() + 0.5).into();
    }
    let edit = serde_json::to_vec(&cal).unwrap();
    std::fs::write(d.join("cal.json"), &edit).unwrap();
    let o = ff(&["rerun", "o/m1/log.json", "--out", "again"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("the wavelength map changed since the run"), "{}", text(&o));
    let o = ff(&["run", "m1.h5", "-p", "p.toml", "--out", "o", "--resume"]);
    assert!(text(&o).contains("1 done, 0 skipped"), "{}", text(&o));
}
