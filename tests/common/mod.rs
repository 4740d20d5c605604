//! Helpers shared by the integration tests: simulate a scene, run the real
//! binary, read volume.h5 back.
#![allow(dead_code)]

use fringeflow::simulate::{scene::Scene, simulate, Truth};
use ndarray::Array3;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

pub fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_fringeflow")
}

/// A noise-free mirror scene: f64 samples, no fixed pattern, 840/50 nm
/// Gaussian on a 765–915 nm band (3 FWHM wide), non-linear map.
pub fn mirror_scene(depth_um: f64, extra: &str) -> String {
    format!(
        r#"
seed = 11
frames = 1
alines = 4
background_lines = 8
[source]
centre_nm = 840.0
fwhm_nm = 50.0
[spectrometer]
pixels = 2048
start_nm = 765.0
stop_nm = 915.0
nonlinearity_nm = [3.0, -1.0]
[detector]
dtype = "f64"
electrons_per_count = 0.0
read_noise_counts = 0.0
fixed_pattern_counts = 0.0
[[reflector]]
depth_um = {depth_um}
reflectivity = 1e-4
{extra}
"#
    )
}

/// Simulates `scene` text into `dir/name.h5`.
pub fn simulate_scene(dir: &Path, name: &str, scene: &str) -> (PathBuf, Truth) {
    let scene = Scene::from_str(name, scene).expect("scene parses");
    let path = dir.join(format!("{name}.h5"));
    let truth = simulate(&scene, &path).expect("simulation succeeds");
    (path, truth)
}

/// Runs `fringeflow run` on `captures` with pipeline text, into `out`.
pub fn run(dir: &Path, captures: &[&Path], pipeline: &str, out: &Path) -> Output {
    let p = dir.join(format!("pipeline-{}.toml", sha(pipeline)));
    std::fs::write(&p, pipeline).unwrap();
    Command::new(bin())
        // See .cargo/config.toml: tests run without HDF5 file locking.
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .arg("run")
        .args(captures)
        .arg("--pipeline")
        .arg(&p)
        .arg("--out")
        .arg(out)
        .arg("--quiet")
        .output()
        .expect("binary runs")
}

fn sha(s: &str) -> String {
    fringeflow::io::hash::sha256_hex(s.as_bytes())[..12].to_string()
}

/// Runs and asserts success.
pub fn run_ok(dir: &Path, captures: &[&Path], pipeline: &str, out: &Path) {
    let o = run(dir, captures, pipeline, out);
    assert!(o.status.success(), "run failed: {}", String::from_utf8_lossy(&o.stderr));
}

pub struct Volume {
    /// dB, (frames, depth, A-lines).
    pub db: Array3<f32>,
    pub depth_um: Vec<f64>,
    pub spacing_um: f64,
}

impl Volume {
    /// Linear amplitude profile of one A-line.
    pub fn amplitude(&self, frame: usize, aline: usize) -> Vec<f64> {
        self.db
            .slice(ndarray::s![frame, .., aline])
            .iter()
            .map(|&d| fringeflow::analysis::amplitude_from_db(d as f64))
            .collect()
    }
}

pub fn read_volume(path: &Path) -> Volume {
    let f = hdf5::File::open(path).expect("volume opens");
    let ds = f.dataset("volume_db").unwrap();
    // uint16 volumes are packed dB: dB = stored·scale_factor + add_offset
    // (CF conventions §8.1, packed data).
    let db = if ds.dtype().unwrap().is::<u16>() {
        let scale = ds.attr("scale_factor").unwrap().read_scalar::<f64>().unwrap();
        let offset = ds.attr("add_offset").unwrap().read_scalar::<f64>().unwrap();
        ds.read::<u16, ndarray::Ix3>().unwrap().mapv(|v| (v as f64 * scale + offset) as f32)
    } else {
        ds.read::<f32, ndarray::Ix3>().unwrap()
    };
    Volume {
        db,
        depth_um: f.dataset("depth_um").unwrap().read_raw::<f64>().unwrap(),
        spacing_um: ds.attr("depth_spacing_um").unwrap().read_scalar::<f64>().unwrap(),
    }
}

/// FWHM in µm and sub-pixel peak depth in µm of the brightest peak of a profile.
pub fn psf(profile: &[f64], spacing_um: f64, first_depth_um: f64) -> (f64, f64) {
    use fringeflow::analysis::{fwhm, peak, peak_position};
    let (i, _) = peak(profile, 4, profile.len());
    let w = fwhm(profile, i).expect("peak has a half-maximum on both sides");
    (w * spacing_um, first_depth_um + peak_position(profile, i) * spacing_um)
}

/// A small realistic capture scene (12-bit, noise) with a mirror at `depth_um`.
pub fn small_scene(depth_um: f64, frames: usize, alines: usize, pixels: usize) -> String {
    format!(
        r#"
seed = {seed}
frames = {frames}
alines = {alines}
background_lines = 8
[spectrometer]
pixels = {pixels}
start_nm = 790.0
stop_nm = 890.0
nonlinearity_nm = [2.0, 0.5]
[detector]
dtype = "u16"
[[reflector]]
depth_um = {depth_um}
reflectivity = 1e-4
"#,
        seed = depth_um as u64
    )
}

/// Every file below `dir`, relative, sorted.
pub fn tree(dir: &Path) -> Vec<String> {
    fn walk(root: &Path, p: &Path, out: &mut Vec<String>) {
        let Ok(rd) = std::fs::read_dir(p) else { return };
        for e in rd.flatten() {
            let path = e.path();
            if path.is_dir() {
                walk(root, &path, out);
            } else {
                out.push(path.strip_prefix(root).unwrap().display().to_string());
            }
        }
    }
    let mut out = Vec::new();
    walk(dir, dir, &mut out);
    out.sort();
    out
}

/// A log.json without its timing section.
pub fn log_without_timing(path: &Path) -> serde_json::Value {
    let mut v: serde_json::Value = serde_json::from_slice(&std::fs::read(path).unwrap()).unwrap();
    v.as_object_mut().unwrap().remove("timing");
    v
}

/// report.html without its timing paragraph (`<p id="timing">…</p>`), the
/// only part that differs between identical runs.
pub fn report_without_timing(path: &Path) -> String {
    let page = std::fs::read_to_string(path).unwrap();
    match (page.find("<p id=\"timing\">"), page.find("<p id=\"timing\">").and_then(|i| page[i..].find("</p>").map(|j| i + j))) {
        (Some(i), Some(j)) => format!("{}{}", &page[..i], &page[j..]),
        _ => panic!("{}: no timing paragraph", path.display()),
    }
}

/// Asserts two capture output directories hold the same files with the same
/// bytes (log.json compared without timing).
pub fn assert_same_outputs(a: &Path, b: &Path) {
    let (ta, tb) = (tree(a), tree(b));
    assert_eq!(ta, tb, "{} vs {}", a.display(), b.display());
    for f in ta {
        if f.ends_with("log.json") {
            assert_eq!(log_without_timing(&a.join(&f)), log_without_timing(&b.join(&f)), "{f}");
        } else if f.ends_with("report.html") {
            assert!(report_without_timing(&a.join(&f)) == report_without_timing(&b.join(&f)), "{f} differs beyond its timing line");
        } else {
            assert!(std::fs::read(a.join(&f)).unwrap() == std::fs::read(b.join(&f)).unwrap(), "{f} differs");
        }
    }
}

/// Runs tests/decode_images.py (Pillow, NumPy, h5py: independent readers of
/// what fringeflow wrote) with `args`; fails the test on its FAIL line.
pub fn decode(args: &[&std::ffi::OsStr]) {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/decode_images.py");
    let o = Command::new("python3")
        .arg(&script)
        .args(args)
        .output()
        .expect("python3 with Pillow, numpy and h5py (make test installs them)");
    let text = String::from_utf8_lossy(&o.stdout);
    eprint!("{text}{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.status.success(), "decode check failed: {text}");
    assert!(text.contains("ok "), "nothing was checked: {text}");
}

/// A fenced block of a Markdown page (the README, docs/): its first line,
/// kind (sh, text, toml), text, and whether a skip marker or a "Printed
/// here" paragraph precedes it.
pub struct Block {
    pub line: usize,
    pub kind: String,
    pub text: String,
    pub skip: bool,
    /// The paragraph before it announces printed output.
    pub printed: bool,
}

/// The fenced blocks of `readme`, in order.
pub fn doc_blocks(readme: &str) -> Vec<Block> {
    let lines: Vec<&str> = readme.lines().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < lines.len() {
        if let Some(kind) = lines[i].strip_prefix("```") {
            let start = i;
            let mut j = i + 1;
            while j < lines.len() && !lines[j].starts_with("```") {
                j += 1;
            }
            let before = lines[..start].iter().rev().find(|l| !l.trim().is_empty()).copied().unwrap_or("");
            out.push(Block {
                line: start + 1,
                kind: kind.trim().to_string(),
                text: lines[start + 1..j].join("\n"),
                skip: before.starts_with("<!-- readme-test: skip"),
                printed: before.starts_with("Printed here"),
            });
            i = j + 1;
        } else {
            i += 1;
        }
    }
    out
}

/// Copies a folder tree.
pub fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        let target = to.join(e.file_name());
        if e.file_type().unwrap().is_dir() {
            copy_dir(&e.path(), &target);
        } else {
            std::fs::copy(e.path(), &target).unwrap();
        }
    }
}

/// Runs a Python snippet (NumPy, h5py, Pillow: the independent readers)
/// with `args` as sys.argv[1:]; its standard output.
pub fn python(code: &str, args: &[&Path]) -> String {
    let o = std::process::Command::new("python3").arg("-c").arg(code).args(args).output().expect("python3 with numpy and h5py (make test installs them)");
    assert!(o.status.success(), "python failed: {}", String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stdout).into_owned()
}

/// The number after `key` on the first line of `report` starting with
/// `line_start` (reports printed by the Python checks).
pub fn value(report: &str, line_start: &str, key: &str) -> f64 {
    let line = report.lines().find(|l| l.starts_with(line_start)).unwrap_or_else(|| panic!("no '{line_start}' in {report}"));
    let words: Vec<&str> = line.split_whitespace().collect();
    let at = words.iter().position(|w| *w == key).unwrap_or_else(|| panic!("no {key} in {line}"));
    words[at + 1].parse().unwrap()
}
