//! report.html in a real browser: Debian's chromium driven by Selenium
//! (tests/report_browser.py) checks the frame browser, the window/level
//! formula, the scale bar and the depth profile against volume.h5 (h5py),
//! with networking off. Also: the page is one file with no external URL,
//! it is listed in log.json, `fringeflow report` rewrites it, it stays
//! under twice the size of the PNGs for the sample capture, and no report
//! is written without the volume.

mod common;
use common::*;
use std::path::Path;
use std::process::Command;

fn browser_check(outdir: &Path, shots: &Path) {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/report_browser.py");
    let o = Command::new("python3")
        .arg(&script)
        .arg(outdir)
        .arg(shots)
        .output()
        .expect("python3 with selenium and h5py, and /usr/bin/chromium with chromium-driver (make test installs them)");
    let text = String::from_utf8_lossy(&o.stdout);
    eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.status.success(), "browser check failed: {text}");
    assert!(text.contains("ok profile") && text.contains("ok console"), "checks missing: {text}");
}

/// Three frames with a known lateral step (true aspect drawn), uint16 volume.
const SCENE: &str = r#"
seed = 5
frames = 3
alines = 96
background_lines = 8
[spectrometer]
pixels = 1024
start_nm = 790.0
stop_nm = 890.0
nonlinearity_nm = [2.0, 0.5]
[detector]
dtype = "u16"
[sample]
surface_um = 200.0
sag_um = 60.0
[[sample.layers]]
thickness_um = 150.0
group_index = 1.4
top_reflectivity = 1e-4
scatterers = 30
scatterer_reflectivity = 1e-6
"#;

#[test]
fn report_shows_the_volume_in_a_browser() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "layers", SCENE);
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "[input]\naline_spacing_um = 4.0\n[output]\nvolume_type = \"uint16\"\n", &out);
    let folder = out.join("layers");
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("log.json")).unwrap()).unwrap();
    assert!(log["outputs"].as_array().unwrap().iter().any(|o| o == "report.html"), "{}", log["outputs"]);
    let html = std::fs::read_to_string(folder.join("report.html")).unwrap();
    assert!(html.contains("True aspect"), "the lateral step should give the true aspect");
    browser_check(&folder, dir.path());
    // The run embeds its frames while writing them; `fringeflow report`
    // embeds them from volume.h5: the same page but for its timing line.
    let from_run = report_without_timing(&folder.join("report.html"));
    let o = Command::new(bin()).arg("report").arg(&folder).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(report_without_timing(&folder.join("report.html")) == from_run, "report.html from the run and from `fringeflow report` differ");
    // `fringeflow report` rewrites it from the folder alone, embedding
    // every other frame when asked, and says so on the page.
    std::fs::remove_file(folder.join("report.html")).unwrap();
    let o = Command::new(bin()).arg("report").arg(&folder).args(["--frame-step", "2", "--json"]).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let r: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!((r["reports"][0]["frames_embedded"].as_u64(), r["reports"][0]["frames_total"].as_u64()), (Some(2), Some(3)));
    browser_check(&folder, dir.path());
    // Not an output folder: a usage error naming it.
    let o = Command::new(bin()).arg("report").arg(dir.path()).output().unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stderr).contains("no log.json"));
}

#[test]
fn sample_report_is_small_and_needs_the_volume() {
    let dir = tempfile::tempdir().unwrap();
    let capture = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/layered-phantom.h5");
    let out = dir.path().join("out");
    run_ok(dir.path(), &[&capture], "", &out);
    let folder = out.join("layered-phantom");
    let size = |n: &str| std::fs::metadata(folder.join(n)).unwrap().len();
    let pngs = size("bscan-0000.png") + size("bscan-0001.png");
    let report = size("report.html");
    eprintln!("report.html {report} bytes, PNGs {pngs} bytes ({:.2}x)", report as f64 / pngs as f64);
    // Budget: under twice the PNGs of the sample capture.
    assert!(report < 2 * pngs, "report {report} bytes against {pngs} bytes of PNGs");
    browser_check(&folder, dir.path());
    let from_run = report_without_timing(&folder.join("report.html"));
    let o = Command::new(bin()).arg("report").arg(&folder).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(report_without_timing(&folder.join("report.html")) == from_run, "float32 volume: report.html from the run and from `fringeflow report` differ");
    let out2 = dir.path().join("png-only");
    run_ok(dir.path(), &[&capture], "[output]\nvolume = false\n", &out2);
    assert!(!out2.join("layered-phantom/report.html").exists(), "a report without volume.h5");
}

/// A batch with one bad file: index.html lists every capture with its
/// status, the failure with its reason, links to the reports; filter and
/// sort work in the browser. `summarize` writes the same page for the
/// merged shards.
#[test]
fn batch_index_lists_every_capture_and_the_failure() {
    let dir = tempfile::tempdir().unwrap();
    let (a, _) = simulate_scene(dir.path(), "first", SCENE);
    let (b, _) = simulate_scene(dir.path(), "second", &SCENE.replace("seed = 5", "seed = 6"));
    let bad = dir.path().join("broken.h5");
    std::fs::write(&bad, b"not a capture").unwrap();
    let out = dir.path().join("batch");
    let o = run(dir.path(), &[&a, &b, &bad], "", &out);
    assert_eq!(o.status.code(), Some(1), "one capture fails: {}", String::from_utf8_lossy(&o.stderr));
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/report_browser.py");
    let check = |d: &Path| {
        let o = Command::new("python3").arg(&script).arg("index").arg(d).arg(dir.path()).output().unwrap();
        let text = String::from_utf8_lossy(&o.stdout);
        eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
        assert!(o.status.success() && text.contains("ok index: 3 captures, 1 failed"), "{text}");
    };
    check(&out);
    std::fs::remove_file(out.join("index.html")).unwrap();
    let o = Command::new(bin()).arg("summarize").arg(&out).output().unwrap();
    assert_eq!(o.status.code(), Some(1), "summarize reports the failure");
    assert!(out.join("index.html").exists(), "summarize writes index.html");
    check(&out);
}

/// Two outputs of one capture (linear against cubic resampling) on one
/// comparison page: each side against its volume, blink, the difference;
/// outputs of different captures are refused.
#[test]
fn comparison_page_of_two_settings() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "layers", SCENE);
    let (a, b) = (dir.path().join("linear"), dir.path().join("cubic"));
    run_ok(dir.path(), &[&capture], "[k_linearization]\nmethod = \"linear\"\n", &a);
    run_ok(dir.path(), &[&capture], "", &b);
    let page = dir.path().join("linear-vs-cubic.html");
    let o = Command::new(bin()).arg("compare").arg(a.join("layers")).arg(b.join("layers")).arg("--out").arg(&page).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let html = std::fs::read_to_string(&page).unwrap();
    assert!(html.contains("k_linearization.method"), "the differing setting is named");
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/report_browser.py");
    let o = Command::new("python3").arg(&script).arg("compare").arg(&page).arg(a.join("layers")).arg(b.join("layers")).arg(dir.path()).output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.status.success() && text.contains("ok compare"), "{text}");
    // Another capture: refused with the reason.
    let (other, _) = simulate_scene(dir.path(), "other", &SCENE.replace("seed = 5", "seed = 9"));
    let c = dir.path().join("other-out");
    run_ok(dir.path(), &[&other], "", &c);
    let o = Command::new(bin()).arg("compare").arg(a.join("layers")).arg(c.join("other")).arg("--out").arg(dir.path().join("x.html")).output().unwrap();
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("different captures"), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(!dir.path().join("x.html").exists());
}

/// A dispersion sweep's page: one side per setting, the best as A at
/// first; two settings picked in the page match `run` outputs made at
/// those settings (each side within 1 grey level of that volume.h5, blink,
/// difference).
#[test]
fn sweep_page_matches_runs_at_its_settings() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "layers", &SCENE.replace("frames = 3", "frames = 1"));
    let sweep = dir.path().join("sweep");
    let o = Command::new(bin())
        .args(["dispersion", "sweep"])
        .arg(&capture)
        .args(["--a2", "-40:40:20", "--out"])
        .arg(&sweep)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let report: serde_json::Value = serde_json::from_slice(&std::fs::read(sweep.join("sweep.json")).unwrap()).unwrap();
    let rows = report["rows"].as_array().unwrap();
    let side = |a2: f64| rows.iter().position(|r| r["a2_rad"].as_f64() == Some(a2)).unwrap();
    let html = std::fs::read_to_string(sweep.join("sweep.html")).unwrap();
    assert!(html.contains(&format!("\"pick\":[{},", report["best"])), "the best setting is shown as A at first");
    assert_eq!(html.matches("<tr data-side=").count(), rows.len(), "one table row per setting");
    let (a, b) = (dir.path().join("a2-40"), dir.path().join("a2-0"));
    run_ok(dir.path(), &[&capture], "[dispersion]\nmethod = \"fixed\"\na2 = 40.0\n", &a);
    run_ok(dir.path(), &[&capture], "[dispersion]\nmethod = \"fixed\"\na2 = 0.0\n", &b);
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/report_browser.py");
    let o = Command::new("python3")
        .arg(&script)
        .arg("compare")
        .arg(sweep.join("sweep.html"))
        .arg(a.join("layers"))
        .arg(b.join("layers"))
        .arg(dir.path())
        .arg(side(40.0).to_string())
        .arg(side(0.0).to_string())
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.status.success() && text.contains("ok compare"), "{text}");
}

/// A run with a wavelength calibration: the calibration plot is written as
/// SVG beside the images and drawn inside report.html (checked in the
/// browser, and parsed as XML with the residual cal.json gives); `measure
/// psf --plot X.svg` writes an SVG whose FWHM is the measurement's.
#[test]
fn report_shows_the_calibration_plot() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let (capture, _) = simulate_scene(d, "mirror", &small_scene(300.0, 1, 32, 1024));
    let fringeflow = |args: &[&str]| Command::new(bin()).current_dir(d).env("HDF5_USE_FILE_LOCKING", "FALSE").args(args).output().unwrap();
    let o = fringeflow(&["calibrate", "wavelength", "mirror.h5", "--centre-nm", "840", "--depths-um", "300", "--out", "cal.json"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let out = d.join("out");
    run_ok(d, &[&capture], "[input]\ncalibration = \"cal.json\"\n", &out);
    let folder = out.join("mirror");
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("log.json")).unwrap()).unwrap();
    assert!(log["outputs"].as_array().unwrap().iter().any(|o| o == "wavelength-map.svg"), "{}", log["outputs"]);
    let cal: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("cal.json")).unwrap()).unwrap();
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/report_browser.py");
    let svg_check = |file: &Path, key: &str, value: f64| {
        let o = Command::new("python3").arg(&script).arg("svg").arg(file).arg(key).arg(value.to_string()).output().unwrap();
        let text = String::from_utf8_lossy(&o.stdout);
        assert!(o.status.success() && text.contains("ok svg"), "{text}{}", String::from_utf8_lossy(&o.stderr));
    };
    svg_check(&folder.join("wavelength-map.svg"), "fit_residual_rms_nm", cal["fit_residual_rms_nm"].as_f64().unwrap());
    let o = Command::new("python3").arg(&script).arg(&folder).arg(d).output().unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.status.success() && text.contains("ok plots: 1 SVG"), "{text}");

    let o = fringeflow(&["measure", "psf", "mirror.h5", "--json", "--plot", "psf.svg"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let m: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    svg_check(&d.join("psf.svg"), "fwhm_um_air", (m["fwhm_um_air"].as_f64().unwrap() * 1e4).round() / 1e4);
}
