//! The command line as a new user meets it: machine-readable output of
//! every command that prints results, generated completions and man pages,
//! `--dry-run` writing nothing, the overwrite refusal, and one check per
//! error hint (message and exit status). Exit codes: 0 success, 1 input
//! could not be processed, 2 usage or settings error (common practice:
//! clap and many Unix tools exit 2 on a usage error).

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_fringeflow")
}

fn sample() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/layered-phantom.h5")
}

fn ff(dir: &Path, args: &[&str]) -> Output {
    Command::new(bin()).args(args).current_dir(dir).env("HDF5_USE_FILE_LOCKING", "FALSE").output().unwrap()
}

fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn json(o: &Output) -> serde_json::Value {
    serde_json::from_slice(&o.stdout).unwrap_or_else(|e| panic!("not JSON ({e}): {}", String::from_utf8_lossy(&o.stdout)))
}

fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = walk(dir).into_iter().map(|p| p.strip_prefix(dir).unwrap().display().to_string()).collect();
    v.sort();
    v
}

fn walk(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        if p.is_dir() {
            out.extend(walk(&p));
        }
        out.push(p);
    }
    out
}

#[test]
fn json_output_of_every_command_has_its_documented_fields() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let s = sample();
    let s = s.to_str().unwrap();

    let o = ff(d, &["run", s, "--out", "out", "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    // An independent reader first: Python's json module parses every line.
    let mut py = Command::new("python3")
        .args(["-c", "import json,sys; rows=[json.loads(l) for l in sys.stdin]; print(len(rows), rows[-1]['kind'], rows[-1]['counts']['done'])"])
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .spawn()
        .unwrap();
    use std::io::Write;
    py.stdin.take().unwrap().write_all(&o.stdout).unwrap();
    let py = py.wait_with_output().unwrap();
    assert!(py.status.success(), "{}", String::from_utf8_lossy(&py.stderr));
    assert_eq!(String::from_utf8_lossy(&py.stdout).trim(), "2 batch 1");
    let lines: Vec<serde_json::Value> = String::from_utf8_lossy(&o.stdout).lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    assert_eq!(lines.len(), 2, "one capture line and one batch line");
    assert_eq!(lines[0]["kind"], "capture");
    assert_eq!(lines[0]["status"], "done");
    assert!(lines[0]["output"].as_str().unwrap().ends_with("layered-phantom"));
    assert_eq!(lines[1]["kind"], "batch");
    assert_eq!(lines[1]["counts"]["done"], 1);
    assert_eq!(lines[1]["format_version"], 1);
    // The batch summary carries a format version too.
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("out/batch.json")).unwrap()).unwrap();
    assert_eq!(batch["format_version"], 1);

    let o = ff(d, &["inspect", s, "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v = json(&o);
    assert!(v["inspection"]["datasets"].as_array().is_some_and(|a| a.iter().any(|x| x["path"] == "/fringes" || x["name"] == "/fringes")), "{v}");

    let o = ff(d, &["summarize", "out", "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v = json(&o);
    assert_eq!(v["report"]["counts"]["done"], 1);
    assert!(v["problems"].as_array().unwrap().is_empty());

    let o = ff(d, &["rerun", "out/layered-phantom/log.json", "--out", "again", "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v = json(&o);
    assert!(v["input_hash"].as_str().unwrap().starts_with("blake3:"), "{v}");
    assert_eq!(v["frames"], 2);

    let scene = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/bench-mirror.toml");
    let o = ff(d, &["simulate", scene.to_str().unwrap(), "--out", "sim/mirror.h5", "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v = json(&o);
    assert_eq!(v["capture"], "sim/mirror.h5");
    assert!(d.join(v["truth"].as_str().unwrap()).is_file());

    let o = ff(d, &["dispersion", "sweep", "sim/mirror.h5", "--a2", "-10:10:10", "--out", "sweep", "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v = json(&o);
    assert_eq!(v["rows"].as_array().unwrap().len(), 3);

    let o = ff(d, &["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "150", "--pixels", "2048", "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    // (2 ln2/π)·λ0²/Δλ = 6.227 µm for 840/50 nm (the Gaussian coherence-length formula).
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(text.contains("6.22") || text.contains("6.23"), "{text}");

    let o = ff(d, &["pipeline", "show", "--set", "window.kind=hamming", "--json"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let v = json(&o);
    assert_eq!(v["pipeline"]["window"]["kind"], "hamming");
}

#[test]
fn completions_and_man_pages_are_generated() {
    let dir = tempfile::tempdir().unwrap();
    for shell in ["bash", "zsh", "fish"] {
        let o = ff(dir.path(), &["completions", shell]);
        assert!(o.status.success());
        let text = String::from_utf8_lossy(&o.stdout);
        assert!(text.len() > 1000 && text.contains("dry-run"), "{shell}: {} bytes", text.len());
    }
    // bash itself reads the bash script (syntax check, then it defines the completion function).
    let script = dir.path().join("fringeflow.bash");
    std::fs::write(&script, ff(dir.path(), &["completions", "bash"]).stdout).unwrap();
    let b = Command::new("bash").arg("-c").arg(format!("source '{}' && complete -p fringeflow", script.display())).output().unwrap();
    assert!(b.status.success() && String::from_utf8_lossy(&b.stdout).contains("fringeflow"), "{}", String::from_utf8_lossy(&b.stderr));
    let o = ff(dir.path(), &["man"]);
    assert!(o.status.success());
    assert!(String::from_utf8_lossy(&o.stdout).contains(".TH fringeflow"));
    let o = ff(dir.path(), &["man", "--out-dir", "man"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let run = std::fs::read_to_string(dir.path().join("man/fringeflow-run.1")).unwrap();
    assert!(run.contains("overwrite") && run.contains("EXAMPLES"), "{run}");
    // --version names the commit, the profile and the SIMD path.
    let o = ff(dir.path(), &["--version"]);
    let v = String::from_utf8_lossy(&o.stdout);
    assert!(v.contains("commit") && v.contains("profile") && v.contains("SIMD path"), "{v}");
}

#[test]
fn dry_run_writes_nothing_and_overwrite_is_refused_unless_asked() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let s = sample();
    let s = s.to_str().unwrap();
    let o = ff(d, &["run", s, "--out", "out", "--dry-run"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(String::from_utf8_lossy(&o.stdout).contains("1 to run"));
    assert!(listing(d).is_empty(), "dry run wrote {:?}", listing(d));

    assert!(ff(d, &["run", s, "--out", "out"]).status.success());
    let before = listing(d);
    let png = std::fs::read(d.join("out/layered-phantom/bscan-0000.png")).unwrap();
    // Another pipeline into the same folder: refused, exit 2, both hashes named, nothing changed.
    let o = ff(d, &["run", s, "--out", "out", "--set", "window.kind=hamming"]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(e.contains("pipeline sha256") && e.contains("--overwrite") && e.matches("sha256 ").count() >= 2, "{e}");
    assert_eq!(listing(d), before);
    assert_eq!(std::fs::read(d.join("out/layered-phantom/bscan-0000.png")).unwrap(), png);
    // The dry run says so too, and writes nothing.
    let o = ff(d, &["run", s, "--out", "out", "--set", "window.kind=hamming", "--dry-run"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(String::from_utf8_lossy(&o.stdout).contains("refuse"));
    assert_eq!(listing(d), before);
    // --resume with the same pipeline skips.
    let o = ff(d, &["run", s, "--out", "out", "--resume"]);
    assert!(o.status.success());
    assert!(String::from_utf8_lossy(&o.stdout).contains("0 done, 1 skipped"));
    // --overwrite replaces.
    let o = ff(d, &["run", s, "--out", "out", "--set", "window.kind=hamming", "--overwrite"]);
    assert!(o.status.success(), "{}", stderr(&o));
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(d.join("out/layered-phantom/log.json")).unwrap()).unwrap();
    assert_eq!(log["pipeline"]["window"]["kind"], "hamming");
}

#[test]
fn measure_writes_a_plot_only_when_asked() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let scene = Path::new(env!("CARGO_MANIFEST_DIR")).join("sample-data/bench-mirror.toml");
    assert!(ff(d, &["simulate", scene.to_str().unwrap(), "--out", "m.h5"]).status.success());
    let before = listing(d);
    let o = ff(d, &["measure", "psf", "m.h5"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert_eq!(listing(d), before, "measure psf wrote a file without --plot");
    let o = ff(d, &["measure", "psf", "m.h5", "--plot", "plots/psf.png"]);
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(d.join("plots/psf.png").is_file());
}

/// Runs and returns (exit code, stderr).
fn err(d: &Path, args: &[&str]) -> (Option<i32>, String) {
    let o = ff(d, args);
    (o.status.code(), stderr(&o))
}

#[test]
fn errors_teach_and_usage_errors_exit_2() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let s = sample();
    let s = s.to_str().unwrap();
    let scene = root.join("sample-data/layered-phantom.toml");
    let scene = scene.to_str().unwrap();

    // Wrong dataset path: the capture's datasets and the key to set.
    std::fs::write(d.join("p.toml"), "[input]\nfringes = \"/nope\"\n").unwrap();
    let (code, e) = err(d, &["run", s, "-p", "p.toml", "--out", "o1"]);
    assert_eq!(code, Some(1));
    assert!(e.contains("/fringes [2, 256, 2048]") && e.contains("fringes = \"/fringes\"") && e.contains("[input]"), "{e}");

    // A scene file given to run, a capture given to simulate.
    let (code, e) = err(d, &["run", scene, "--out", "o2"]);
    assert_eq!(code, Some(1));
    assert!(e.contains("scene file") && e.contains("fringeflow simulate"), "{e}");
    let (code, e) = err(d, &["simulate", s, "--out", "x.h5"]);
    assert_eq!(code, Some(2));
    assert!(e.contains("HDF5 capture") && e.contains("fringeflow run"), "{e}");
    // A capture given as a pipeline.
    let (code, e) = err(d, &["pipeline", "check", s]);
    assert_eq!(code, Some(2));
    assert!(e.contains("not a pipeline file"), "{e}");

    // The common synonym is accepted; a typo gets the closest key, in words.
    std::fs::write(d.join("h.toml"), "[window]\nkind = \"hanning\"\n").unwrap();
    assert!(ff(d, &["pipeline", "check", "h.toml"]).status.success());
    std::fs::write(d.join("t.toml"), "[window]\nkidn = \"hann\"\n").unwrap();
    let (code, e) = err(d, &["pipeline", "check", "t.toml"]);
    assert_eq!(code, Some(2));
    assert!(e.contains("line 2") && e.contains("did you mean \"kind\"") && !e.contains("field"), "{e}");
    std::fs::write(d.join("z.toml"), "[fft]\nzero_padding = \"two\"\n").unwrap();
    let (_, e) = err(d, &["pipeline", "check", "z.toml"]);
    for jargon in ["i64", "f64", "variant", "field", "usize"] {
        assert!(!e.contains(jargon), "{jargon} in {e}");
    }

    // A calibration file that does not exist: a pipeline error up front.
    std::fs::write(d.join("c.toml"), "[input]\ncalibration = \"missing.json\"\n").unwrap();
    let (code, e) = err(d, &["run", s, "-p", "c.toml", "--out", "o3"]);
    assert_eq!(code, Some(2));
    assert!(e.contains("input.calibration") && e.contains("missing.json"), "{e}");
    assert!(!d.join("o3").exists());

    // Usage errors exit 2 in every command.
    std::fs::write(d.join("afile"), "x").unwrap();
    let (code, e) = err(d, &["run", s, "--out", "afile"]);
    assert_eq!(code, Some(2), "{e}");
    assert!(e.contains("is a file, not a folder"), "{e}");
    let (code, e) = err(d, &["summarize", "no-such-dir"]);
    assert_eq!(code, Some(2), "{e}");
    let (code, e) = err(d, &["calibrate", "wavelength", s, "--out", "cal.json"]);
    assert_eq!(code, Some(2), "{e}");
    assert!(e.contains("exactly two of --centre-nm, --span-nm and --depths-um"), "{e}");
    let (code, e) = err(d, &["design", "--centre-nm", "840", "--fwhm-nm", "50", "--pixels", "2048"]);
    assert_eq!(code, Some(2));
    assert!(e.contains("one of --span-nm, --pixel-width-nm"), "{e}");
    let (code, e) = err(d, &["bench", "--capture", "missing.h5"]);
    assert_eq!(code, Some(2));
    assert!(e.contains("missing.h5") && e.contains("no such file"), "{e}");
    let (code, _) = err(d, &["run", "--no-such-option"]);
    assert_eq!(code, Some(2));
}

#[test]
fn progress_json_is_one_event_per_line() {
    let dir = tempfile::tempdir().unwrap();
    let s = sample();
    let o = ff(dir.path(), &["run", s.to_str().unwrap(), "--out", "out", "--progress-json"]);
    assert!(o.status.success());
    let events: Vec<serde_json::Value> = stderr(&o).lines().map(|l| serde_json::from_str(l).unwrap_or_else(|e| panic!("{e}: {l}"))).collect();
    let names: Vec<&str> = events.iter().map(|e| e["event"].as_str().unwrap()).collect();
    assert_eq!(names, ["start", "capture_start", "frame", "frame", "capture_end", "end"]);
    assert_eq!(events[3]["done"], 2);
    assert_eq!(events[5]["counts"]["done"], 1);
}

/// `-j` is capped at 4 threads per logical CPU (more only adds switching):
/// `-j 100000` and the same in RAYON_NUM_THREADS are one-line settings errors.
#[test]
fn thread_counts_out_of_range_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let cpus = std::thread::available_parallelism().map_or(1, |n| n.get());
    let design = ["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "150", "--pixels", "2048"];
    let o = ff(dir.path(), &[&["-j", "100000"][..], &design].concat());
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains(&format!("--threads 100000: at most {}", 4 * cpus)), "{}", stderr(&o));
    assert!(o.stdout.is_empty());
    let o = Command::new(bin()).args(design).env("RAYON_NUM_THREADS", "100000").output().unwrap();
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("RAYON_NUM_THREADS 100000"), "{}", stderr(&o));
    let top = (4 * cpus).to_string();
    assert!(ff(dir.path(), &[&["-j", top.as_str()][..], &design].concat()).status.success());
}

/// A large file that is not HDF5 is refused without being read whole: a
/// 2 GB (sparse) file under a 600 MB address-space limit gets the one-line
/// "not an HDF5 file" error from `inspect` and `run`, not an abort.
#[test]
fn a_large_non_hdf5_file_is_refused_within_bounded_memory() {
    let dir = tempfile::tempdir().unwrap();
    let big = dir.path().join("big.bin");
    std::fs::File::create(&big).unwrap().set_len(2 << 30).unwrap();
    for cmd in ["inspect big.bin", "run big.bin --out out --quiet"] {
        let o = Command::new("sh").arg("-c").arg(format!("ulimit -v 600000; exec {} {cmd}", bin())).current_dir(dir.path()).output().unwrap();
        assert_eq!(o.status.code(), Some(1), "{cmd}: {}", stderr(&o));
        assert!(stderr(&o).contains("not an HDF5 file (no HDF5 signature)"), "{cmd}: {}", stderr(&o));
    }
}

/// A different capture with the same stem (a/x.h5, then b/x.h5 into one
/// --out) does not replace the first one's outputs, even with --resume:
/// exit 2 naming both; --overwrite replaces. `rerun` into a folder holding
/// another pipeline's outputs refuses the same way.
#[test]
fn same_stem_and_rerun_never_replace_silently() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    for sub in ["a", "b"] {
        std::fs::create_dir(d.join(sub)).unwrap();
        std::fs::copy(sample(), d.join(sub).join("x.h5")).unwrap();
    }
    assert!(ff(d, &["run", "a/x.h5", "--out", "out", "--quiet"]).status.success());
    let before = std::fs::read(d.join("out/x/log.json")).unwrap();
    for extra in [&[][..], &["--resume"][..]] {
        let o = ff(d, &[&["run", "b/x.h5", "--out", "out", "--quiet"][..], extra].concat());
        let e = stderr(&o);
        assert_eq!(o.status.code(), Some(2), "{e}");
        assert!(e.contains("another capture with the same name") && e.contains("a/x.h5") && e.contains("b/x.h5"), "{e}");
        assert_eq!(std::fs::read(d.join("out/x/log.json")).unwrap(), before, "outputs replaced");
    }
    // The same capture resumes as before.
    assert!(ff(d, &["run", "a/x.h5", "--out", "out", "--resume", "--quiet"]).status.success());
    // rerun of another pipeline's log into that folder.
    assert!(ff(d, &["run", "a/x.h5", "--out", "other", "--set", "window.kind=hamming", "--quiet"]).status.success());
    let o = ff(d, &["rerun", "other/x/log.json", "--out", "out"]);
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    assert!(stderr(&o).contains("holds outputs of pipeline sha256"), "{}", stderr(&o));
    assert_eq!(std::fs::read(d.join("out/x/log.json")).unwrap(), before, "rerun replaced outputs");
    // --overwrite lets b/x.h5 replace them.
    assert!(ff(d, &["run", "b/x.h5", "--out", "out", "--overwrite", "--quiet"]).status.success());
}
