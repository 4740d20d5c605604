//! Nothing lost, nothing clobbered: the user's own files, concurrent runs
//! (also from another PID namespace, standing in for another host), every
//! stop signal, implausible metadata, warnings on stderr, edited logs,
//! chunked captures, damaged files, image names that sort, memory.
//! Each test drives the binary as a user would.

mod common;
use common::*;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn fringeflow(args: &[&str]) -> std::process::Output {
    Command::new(bin()).env("HDF5_USE_FILE_LOCKING", "FALSE").args(args).output().unwrap()
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn text(o: &std::process::Output) -> String {
    format!("{}{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr))
}

/// No staging, lock or temporary entries left in `out`.
fn assert_clean(out: &Path) {
    for e in std::fs::read_dir(out).unwrap().flatten() {
        let n = e.file_name().to_string_lossy().into_owned();
        assert!(!n.starts_with('.'), "left behind in {}: {n}", out.display());
    }
}

/// Starts `fringeflow <args> <captures…>` with its output piped.
fn spawn_run(args: &[&str], caps: &[PathBuf]) -> std::process::Child {
    Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(args)
        .args(caps.iter().map(|c| s(c)))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap()
}

/// Waits until a run has a staging folder in `out` (it is writing).
fn wait_for_staging(out: &Path) {
    let t0 = Instant::now();
    while !std::fs::read_dir(out).map(|rd| rd.flatten().any(|e| e.file_name().to_string_lossy().contains(".partial-"))).unwrap_or(false) {
        assert!(t0.elapsed() < Duration::from_secs(60), "nothing started in {}", out.display());
        std::thread::sleep(Duration::from_millis(1));
    }
}

fn captures(dir: &Path, n: usize, frames: usize, alines: usize) -> Vec<PathBuf> {
    (0..n).map(|i| simulate_scene(dir, &format!("c{i:02}"), &small_scene(150.0 + 37.0 * i as f64, frames, alines, 1024)).0).collect()
}

#[test]
fn a_users_own_directory_or_file_is_never_replaced() {
    let dir = tempfile::tempdir().unwrap();
    let (good, _) = simulate_scene(dir.path(), "good", &small_scene(300.0, 1, 16, 256));
    let od = dir.path().join("od");
    std::fs::create_dir_all(od.join("good")).unwrap();
    std::fs::write(od.join("good/notes.txt"), "n").unwrap();
    let o = fringeflow(&["run", s(&good), "--out", s(&od)]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains(&format!("{} exists and was not made by fringeflow", od.join("good").display())), "{}", text(&o));
    assert_eq!(std::fs::read_to_string(od.join("good/notes.txt")).unwrap(), "n");
    assert_eq!(tree(&od.join("good")), vec!["notes.txt"]);
    // A file of that name, too.
    std::fs::remove_dir_all(od.join("good")).unwrap();
    std::fs::write(od.join("good"), "mine").unwrap();
    let o = fringeflow(&["run", s(&good), "--out", s(&od)]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert_eq!(std::fs::read_to_string(od.join("good")).unwrap(), "mine");
    // fringeflow's own output is replaced by a later run.
    std::fs::remove_file(od.join("good")).unwrap();
    assert!(fringeflow(&["run", s(&good), "--out", s(&od)]).status.success());
    assert!(fringeflow(&["run", s(&good), "--out", s(&od)]).status.success());
    assert!(od.join("good/.fringeflow-output").is_file());
    // A capture whose name would be one of fringeflow's own files.
    let batchy = dir.path().join("batch.json.h5");
    std::fs::copy(&good, &batchy).unwrap();
    let o = fringeflow(&["run", s(&batchy), "--out", s(&od)]);
    assert_eq!(o.status.code(), Some(1));
    assert!(text(&o).contains("is the name of one of fringeflow's own files"), "{}", text(&o));
    let summary: serde_json::Value = serde_json::from_slice(&std::fs::read(od.join("batch.json")).unwrap()).unwrap();
    assert_eq!(summary["captures"][0]["error_kind"].as_str(), Some("output-exists"), "{summary}");
    assert_clean(&od);
}

/// 6 runs at once into one directory, 3 rounds: every capture is done
/// exactly once per round (the others skip it or find it held), no run
/// fails (a run whose staging another removed would), all exit 0, and the
/// merged summary accounts for every capture.
#[test]
fn concurrent_runs_split_the_work() {
    let dir = tempfile::tempdir().unwrap();
    let caps = captures(dir.path(), 8, 3, 64);
    for round in 0..3 {
        let out = dir.path().join(format!("round{round}"));
        let children: Vec<_> = (0..6)
            .map(|_| {
                Command::new(bin())
                    .env("HDF5_USE_FILE_LOCKING", "FALSE")
                    .args(["run", "--resume", "--out", s(&out)])
                    .args(caps.iter().map(|c| s(c)))
                    .stdout(Stdio::piped())
                    .stderr(Stdio::piped())
                    .spawn()
                    .unwrap()
            })
            .collect();
        let mut done = std::collections::BTreeMap::<String, usize>::new();
        for c in children {
            let o = c.wait_with_output().unwrap();
            assert!(o.status.success(), "round {round}: {}", text(&o));
            // Each capture this run processed: its line on stderr.
            for line in String::from_utf8_lossy(&o.stderr).lines() {
                if let Some((input, _)) = line.strip_prefix("done    ").and_then(|r| r.split_once(" → ")) {
                    *done.entry(input.to_string()).or_default() += 1;
                }
            }
        }
        assert_eq!(done.len(), 8, "round {round}: {done:?}");
        assert!(done.values().all(|&n| n == 1), "round {round}: a capture was processed twice: {done:?}");
        let summary: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
        let counts = &summary["counts"];
        assert_eq!(counts["failed"], 0, "{summary}");
        assert_eq!(summary["captures"].as_array().unwrap().len(), 8);
        assert_clean(&out);
    }
}

/// The run in another PID namespace (`unshare`, as root) stands in for a
/// run on another host: its pids mean nothing here. It must leave the live
/// run's captures and staging alone, and both finish.
#[test]
fn a_run_in_another_pid_namespace_never_takes_a_live_lock() {
    let dir = tempfile::tempdir().unwrap();
    let caps = captures(dir.path(), 4, 16, 256);
    let slow = dir.path().join("slow.toml");
    std::fs::write(&slow, "[fft]\nzero_padding = 16\n").unwrap();
    let out = dir.path().join("out");
    let first = spawn_run(&["run", "--resume", "--pipeline", s(&slow), "--out", s(&out)], &caps);
    wait_for_staging(&out);
    let second = Command::new("unshare")
        .args(["--pid", "--fork", "--mount-proc"])
        .arg(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(["run", "--resume", "--pipeline", s(&slow), "--out", s(&out)])
        .args(caps.iter().map(|c| s(c)))
        .output()
        .expect("unshare (util-linux) runs as root");
    let first = first.wait_with_output().unwrap();
    assert!(first.status.success(), "the first run failed: {}", text(&first));
    assert!(second.status.success(), "the second run failed: {}", text(&second));
    let t = text(&second);
    assert!(t.contains("held by another run") || t.contains("skipped"), "{t}");
    for c in &caps {
        let name = c.file_stem().unwrap().to_str().unwrap();
        assert!(out.join(name).join("log.json").is_file(), "{name} missing");
    }
    assert_clean(&out);
}

fn signal_run(sig: &str, code: i32, twice: bool) {
    let dir = tempfile::tempdir().unwrap();
    let caps = captures(dir.path(), 6, 24, 128);
    let slow = dir.path().join("slow.toml");
    std::fs::write(&slow, "[fft]\nzero_padding = 16\n").unwrap();
    let out = dir.path().join("out");
    let child = spawn_run(&["run", "--pipeline", s(&slow), "--out", s(&out)], &caps);
    wait_for_staging(&out);
    let kill = |s: &str| Command::new("kill").arg(format!("-{s}")).arg(child.id().to_string()).status().unwrap();
    kill(sig);
    if twice {
        std::thread::sleep(Duration::from_millis(20));
        kill(sig);
    }
    let o = child.wait_with_output().unwrap();
    assert_eq!(o.status.code(), Some(code), "{sig} twice={twice}: {}", text(&o));
    if !twice {
        let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
        assert_eq!(batch["interrupted"], sig, "{batch}");
    }
    assert_clean(&out);
    // Whatever finished is complete.
    for e in std::fs::read_dir(&out).unwrap().flatten().filter(|e| e.path().is_dir()) {
        assert!(e.path().join("log.json").is_file(), "{} incomplete", e.path().display());
    }
}

#[test]
fn every_stop_signal_ends_cleanly_with_128_plus_its_number() {
    // SIGINT 2, SIGTERM 15, SIGHUP 1, SIGQUIT 3 (POSIX numbers on Linux).
    for (sig, code) in [("INT", 130), ("TERM", 143), ("HUP", 129), ("QUIT", 131)] {
        signal_run(&format!("SIG{sig}"), code, false);
    }
    // A second signal ends at once, still leaving nothing behind.
    signal_run("SIGINT", 130, true);
}

#[test]
fn signals_during_rerun_calibrate_and_sweep_exit_128_plus_signal() {
    let dir = tempfile::tempdir().unwrap();
    let (cap, _) = simulate_scene(dir.path(), "big", &small_scene(300.0, 40, 256, 2048));
    let slow = dir.path().join("slow.toml");
    std::fs::write(&slow, "[fft]\nzero_padding = 32\n").unwrap();
    let first = dir.path().join("first");
    assert!(fringeflow(&["run", s(&cap), "--pipeline", s(&slow), "--out", s(&first)]).status.success());
    let commands: Vec<(Vec<String>, PathBuf)> = vec![
        (vec!["rerun".into(), first.join("big/log.json").display().to_string(), "--out".into(), dir.path().join("again").display().to_string()], dir.path().join("again")),
        (vec!["dispersion".into(), "sweep".into(), s(&cap).into(), "--a2".into(), "-200:200:2".into(), "--out".into(), dir.path().join("sweep").display().to_string()], dir.path().join("sweep")),
    ];
    for (args, out) in commands {
        let child = Command::new(bin()).env("HDF5_USE_FILE_LOCKING", "FALSE").args(&args).stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().unwrap();
        std::thread::sleep(Duration::from_millis(400));
        Command::new("kill").arg("-TERM").arg(child.id().to_string()).status().unwrap();
        let o = child.wait_with_output().unwrap();
        assert_eq!(o.status.code(), Some(143), "{args:?}: {}", text(&o));
        if out.exists() {
            assert_clean(&out);
        }
    }
    // calibrate wavelength on two mirrors.
    let (m1, _) = simulate_scene(dir.path(), "m1", &small_scene(250.0, 30, 256, 2048));
    let (m2, _) = simulate_scene(dir.path(), "m2", &small_scene(700.0, 30, 256, 2048));
    let child = Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(["calibrate", "wavelength", s(&m1), s(&m2), "--centre-nm", "840", "--span-nm", "100", "--out", s(&dir.path().join("cal.json"))])
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(100));
    Command::new("kill").arg("-INT").arg(child.id().to_string()).status().unwrap();
    let o = child.wait_with_output().unwrap();
    // It may finish first on a fast machine; if it was stopped, 130.
    assert!(o.status.code() == Some(130) || o.status.success(), "{}", text(&o));
    assert_clean(dir.path());
}

#[test]
fn a_wavelength_map_in_metres_is_refused_by_run_and_inspect() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("metres.h5");
    {
        let f = fringeflow::io::h5::create_file(&path).unwrap();
        f.new_dataset_builder().with_data(&ndarray::Array3::<u16>::from_elem((1, 8, 64), 100)).create("fringes").unwrap();
        let map: Vec<f64> = (0..64).map(|p| 800e-9 + p as f64 * 1e-9).collect();
        f.new_dataset_builder().with_data(&map).create("wavelength_nm").unwrap();
    }
    for cmd in ["run", "inspect"] {
        let o = if cmd == "run" { fringeflow(&["run", s(&path), "--out", s(&dir.path().join("out"))]) } else { fringeflow(&["inspect", s(&path)]) };
        assert_eq!(o.status.code(), Some(1), "{cmd}: {}", text(&o));
        assert!(text(&o).contains("outside 200–20000 nm: it looks like metres"), "{cmd}: {}", text(&o));
    }
    // A non-positive full scale, and a constant capture.
    {
        let f = hdf5::File::open_rw(&path).unwrap();
        f.unlink("wavelength_nm").unwrap();
        f.new_dataset_builder().with_data(&(0..64).map(|p| 800.0 + p as f64).collect::<Vec<f64>>()).create("wavelength_nm").unwrap();
        f.dataset("fringes").unwrap().new_attr::<f64>().create("full_scale").unwrap().write_scalar(&0.0).unwrap();
    }
    let o = fringeflow(&["run", s(&path), "--out", s(&dir.path().join("out"))]);
    assert_eq!(o.status.code(), Some(1));
    assert!(text(&o).contains("full_scale") && text(&o).contains("must be a positive number"), "{}", text(&o));
    hdf5::File::open_rw(&path).unwrap().dataset("fringes").unwrap().delete_attr("full_scale").unwrap();
    let o = fringeflow(&["run", s(&path), "--out", s(&dir.path().join("out"))]);
    assert!(o.status.success(), "{}", text(&o));
    assert!(text(&o).contains("fringeflow: warning:") && text(&o).contains("the B-scan is flat"), "{}", text(&o));
}

#[test]
fn warnings_reach_stderr_and_the_summary() {
    let dir = tempfile::tempdir().unwrap();
    // A bright mirror on a 12-bit detector: clipped fringes.
    let scene = small_scene(300.0, 2, 16, 512).replace("reflectivity = 1e-4", "reflectivity = 0.5");
    let (cap, _) = simulate_scene(dir.path(), "bright", &scene);
    let out = dir.path().join("out");
    let o = fringeflow(&["run", s(&cap), "--out", s(&out)]);
    assert!(o.status.success(), "{}", text(&o));
    let stderr = String::from_utf8_lossy(&o.stderr);
    let lines: Vec<&str> = stderr.lines().filter(|l| l.starts_with("fringeflow: warning:")).collect();
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("bright/log.json")).unwrap()).unwrap();
    let warnings = log["warnings"].as_array().unwrap();
    assert!(!warnings.is_empty());
    assert_eq!(lines.len(), warnings.len(), "{stderr}");
    assert!(lines.iter().any(|l| l.contains("samples at or above full scale")), "{stderr}");
    assert!(!String::from_utf8_lossy(&o.stdout).contains("fringeflow: warning"), "warnings belong on stderr");
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
    assert_eq!(batch["counts"]["warnings"].as_u64().unwrap() as usize, warnings.len());
    assert_eq!(batch["captures"][0]["warnings"].as_u64().unwrap() as usize, warnings.len());
}

#[test]
fn rerun_refuses_an_edited_log() {
    let dir = tempfile::tempdir().unwrap();
    let (cap, _) = simulate_scene(dir.path(), "e", &small_scene(300.0, 1, 16, 256));
    let out = dir.path().join("out");
    assert!(fringeflow(&["run", s(&cap), "--out", s(&out)]).status.success());
    let log_path = out.join("e/log.json");
    let mut log: serde_json::Value = serde_json::from_slice(&std::fs::read(&log_path).unwrap()).unwrap();
    log["pipeline"]["window"]["kind"] = "blackman".into();
    let edited = dir.path().join("edited.json");
    std::fs::write(&edited, serde_json::to_vec(&log).unwrap()).unwrap();
    let o = fringeflow(&["rerun", s(&edited), "--out", s(&dir.path().join("again"))]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("does not match its pipeline_sha256"), "{}", text(&o));
    assert!(!dir.path().join("again").join("e").exists());
    // A consistent but invalid pipeline (hash recomputed) is refused by the checks `run` applies.
    let mut bad: fringeflow::pipeline::config::PipelineConfig = serde_json::from_value(log["pipeline"].clone()).unwrap();
    bad.log_compression.black_db = 10.0;
    bad.log_compression.white_db = 5.0;
    log["pipeline"] = serde_json::to_value(&bad).unwrap();
    log["pipeline_sha256"] = bad.sha256().into();
    std::fs::write(&edited, serde_json::to_vec(&log).unwrap()).unwrap();
    let o = fringeflow(&["rerun", s(&edited), "--out", s(&dir.path().join("again"))]);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    assert!(text(&o).contains("white_db"), "{}", text(&o));
}

#[test]
fn pipeline_errors_are_reported_once_and_crops_name_the_range() {
    let dir = tempfile::tempdir().unwrap();
    let caps = captures(dir.path(), 3, 1, 16);
    let p = dir.path().join("p.toml");
    std::fs::write(&p, "[input]\ncalibration = \"missing-cal.json\"\n").unwrap();
    let out = dir.path().join("out");
    let mut args = vec!["run", "--pipeline", s(&p), "--out", s(&out)];
    args.extend(caps.iter().map(|c| s(c)));
    let o = fringeflow(&args);
    assert_eq!(o.status.code(), Some(2), "{}", text(&o));
    let errors: Vec<String> = text(&o).lines().filter(|l| l.contains("error")).map(String::from).collect();
    assert_eq!(errors.len(), 1, "{errors:?}");
    assert!(errors[0].contains("line 2") && errors[0].contains("input.calibration"), "{errors:?}");
    // A crop beyond the deepest depth says what the range is.
    std::fs::write(&p, "[fft]\ncrop_um = [100.0, 1e6]\n").unwrap();
    let o = fringeflow(&["run", "--pipeline", s(&p), "--out", s(&dir.path().join("out")), s(&caps[0])]);
    assert_eq!(o.status.code(), Some(1));
    assert!(text(&o).contains("fft.crop_um ends beyond this capture's depth range") && text(&o).contains("µm in air"), "{}", text(&o));
}

/// A capture stored in gzip chunks of 16 frames reads within 10× the time of
/// the same frames stored contiguously (it took 33× before the chunk cache
/// was sized to a frame's chunks; 3–4× with it, the gzip decoding). A
/// generous bound: it catches the fault, not a speed.
#[test]
fn a_frame_chunked_capture_streams_at_the_speed_of_a_contiguous_one() {
    let dir = tempfile::tempdir().unwrap();
    let (base, _) = simulate_scene(dir.path(), "base", &small_scene(300.0, 2, 256, 2048));
    let src = hdf5::File::open(&base).unwrap();
    let frames = src.dataset("fringes").unwrap().read::<u16, ndarray::Ix3>().unwrap();
    let wl = src.dataset("wavelength_nm").unwrap().read_raw::<f64>().unwrap();
    let views = vec![frames.view(); 32];
    let many = ndarray::concatenate(ndarray::Axis(0), &views).unwrap();
    for (name, chunked) in [("contig", false), ("chunked", true)] {
        let f = fringeflow::io::h5::create_file(&dir.path().join(format!("{name}.h5"))).unwrap();
        let b = f.new_dataset_builder().with_data(&many);
        let b = if chunked { b.chunk((16, 256, 2048)).deflate(1) } else { b };
        b.create("fringes").unwrap();
        f.new_dataset_builder().with_data(&wl).create("wavelength_nm").unwrap();
    }
    let time = |name: &str| {
        let t = Instant::now();
        let o = fringeflow(&["run", s(&dir.path().join(format!("{name}.h5"))), "--out", s(&dir.path().join(format!("out-{name}"))), "--quiet"]);
        assert!(o.status.success(), "{}", text(&o));
        t.elapsed().as_secs_f64()
    };
    time("contig");
    let (c, k) = (time("contig"), time("chunked"));
    eprintln!("contiguous {c:.2} s, frame-chunked (16 frames, gzip 1) {k:.2} s: {:.1}x", k / c);
    assert!(k < 10.0 * c + 1.0, "chunked {k:.2} s against contiguous {c:.2} s");
}

#[test]
fn inspect_diagnoses_damage_without_panicking() {
    let dir = tempfile::tempdir().unwrap();
    let (cap, _) = simulate_scene(dir.path(), "ok", &small_scene(300.0, 1, 8, 256));
    let mut bytes = std::fs::read(&cap).unwrap();
    bytes[8..40].fill(0xff);
    let broken = dir.path().join("broken.h5");
    std::fs::write(&broken, &bytes).unwrap();
    let o = fringeflow(&["inspect", s(&broken)]);
    assert_eq!(o.status.code(), Some(1));
    assert!(text(&o).contains("not a valid HDF5 file") && !text(&o).contains("locked"), "{}", text(&o));
    // A dangling link and text and compound datasets beside good ones.
    let odd = dir.path().join("odd.h5");
    std::fs::copy(&cap, &odd).unwrap();
    {
        let f = hdf5::File::open_rw(&odd).unwrap();
        f.link_soft("/nowhere", "dangling").unwrap();
        let note: hdf5::types::VarLenUnicode = "a".parse().unwrap();
        f.new_dataset_builder().with_data(&[note]).create("notes").unwrap();
    }
    let o = fringeflow(&["inspect", s(&odd)]);
    let t = text(&o);
    assert!(!t.contains("panicked"), "{t}");
    assert!(t.contains("/dangling: cannot be opened") && t.contains("/notes") && t.contains("text") && t.contains("/fringes"), "{t}");
}

#[test]
fn image_names_sort_in_frame_order_past_ten_thousand() {
    assert_eq!(fringeflow::run::bscan_png_name(7, 12), "bscan-0007.png");
    assert_eq!(fringeflow::run::bscan_png_name(7, 10_001), "bscan-00007.png");
    assert_eq!(fringeflow::run::bscan_png_name(10_000, 10_001), "bscan-10000.png");
    let dir = tempfile::tempdir().unwrap();
    let scene = "seed = 3\nframes = 10001\nalines = 2\nbackground_lines = 2\n[spectrometer]\npixels = 32\nstart_nm = 800.0\nstop_nm = 880.0\n[[reflector]]\ndepth_um = 50.0\nreflectivity = 1e-3\n";
    let (cap, _) = simulate_scene(dir.path(), "many", scene);
    let out = dir.path().join("out");
    let o = fringeflow(&["run", s(&cap), "--out", s(&out), "--quiet"]);
    assert!(o.status.success(), "{}", text(&o));
    let mut names: Vec<String> = std::fs::read_dir(out.join("many")).unwrap().flatten().map(|e| e.file_name().to_string_lossy().into_owned()).filter(|n| n.starts_with("bscan-")).collect();
    names.sort();
    assert_eq!(names.len(), 10_001);
    assert_eq!(names[0], "bscan-00000.png");
    assert_eq!(names[10_000], "bscan-10000.png");
    assert!(names.windows(2).all(|w| w[0] < w[1]));
}

/// A plan that needs more memory than the machine has is refused before
/// anything is staged, with the figure.
#[test]
fn a_plan_that_cannot_fit_in_memory_is_refused_up_front() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("huge.h5");
    {
        // 16 frames of 4096 A-lines × 2048 pixels, all zeros: tiny on disk.
        let f = fringeflow::io::h5::create_file(&path).unwrap();
        f.new_dataset::<u16>().shape((16, 4096, 2048)).chunk((1, 4096, 2048)).deflate(9).create("fringes").unwrap();
        f.new_dataset_builder().with_data(&(0..2048).map(|p| 800.0 + p as f64 * 0.05).collect::<Vec<f64>>()).create("wavelength_nm").unwrap();
    }
    let p = dir.path().join("p.toml");
    std::fs::write(&p, "[fft]\nzero_padding = 64\n[volume]\naverage = 16\n[angiography]\nmethods = [\"decorrelation\", \"split_spectrum\"]\n").unwrap();
    let out = dir.path().join("out");
    let o = fringeflow(&["run", s(&path), "--pipeline", s(&p), "--out", s(&out)]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("GB of memory") && text(&o).contains("available"), "{}", text(&o));
    assert!(!out.join("huge").exists());
    assert_clean(&out);
}

/// A closed pipe or a full device on stdout is not a panic.
#[test]
fn a_closed_or_full_stdout_is_not_a_panic() {
    let args = ["design", "--centre-nm", "840", "--fwhm-nm", "50", "--span-nm", "150", "--pixels", "2048"];
    let full = std::fs::OpenOptions::new().write(true).open("/dev/full").unwrap();
    let o = Command::new(bin()).args(args).stdout(full).output().unwrap();
    assert!(!String::from_utf8_lossy(&o.stderr).contains("panicked"), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(o.status.code().is_some(), "killed by a signal");
    let mut child = Command::new(bin()).args(args).stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().unwrap();
    drop(child.stdout.take());
    let o = child.wait_with_output().unwrap();
    assert!(!String::from_utf8_lossy(&o.stderr).contains("panicked"), "{}", String::from_utf8_lossy(&o.stderr));
}

/// Two live runs with different pipelines never interleave in one folder:
/// while the first runs, the second exits 2 naming both pipeline hashes
/// and writes nothing; the first finishes; nothing is left behind. Runs
/// with the same pipeline still share the folder (see concurrent_runs_split_the_work).
#[test]
fn a_run_with_another_pipeline_waits_its_turn() {
    let dir = tempfile::tempdir().unwrap();
    let caps = captures(dir.path(), 4, 6, 64);
    let slow = dir.path().join("slow.toml");
    std::fs::write(&slow, "[fft]\nzero_padding = 16\n").unwrap();
    let out = dir.path().join("out");
    let mut args: Vec<String> = vec!["run".into(), "-p".into(), slow.display().to_string(), "--out".into(), out.display().to_string(), "--quiet".into()];
    args.extend(caps.iter().map(|c| c.display().to_string()));
    let first = Command::new(bin()).args(&args).env("HDF5_USE_FILE_LOCKING", "FALSE").stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().unwrap();
    let t0 = std::time::Instant::now();
    while !out.join(".pipeline.lock").exists() {
        assert!(t0.elapsed() < Duration::from_secs(30), "the first run never claimed the folder");
        std::thread::sleep(Duration::from_millis(2));
    }
    let second = Command::new(bin()).args(["run", caps[0].to_str().unwrap(), "--out", out.to_str().unwrap()]).env("HDF5_USE_FILE_LOCKING", "FALSE").output().unwrap();
    let first = first.wait_with_output().unwrap();
    let err = String::from_utf8_lossy(&second.stderr);
    if first.status.success() && err.is_empty() && second.status.success() {
        panic!("the first run ended before the second started: nothing was tested");
    }
    assert_eq!(second.status.code(), Some(2), "{err}");
    assert!(err.contains("another live run is writing into") && err.matches("sha256 ").count() == 2, "{err}");
    assert!(first.status.success(), "{}", String::from_utf8_lossy(&first.stderr));
    let slow_sha = serde_json::from_slice::<serde_json::Value>(&std::fs::read(out.join("batch.json")).unwrap()).unwrap()["pipeline_sha256"].as_str().unwrap().to_string();
    for c in &caps {
        let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join(c.file_stem().unwrap()).join("log.json")).unwrap()).unwrap();
        assert_eq!(log["pipeline_sha256"], slow_sha.as_str(), "a folder of the other pipeline");
    }
    assert_clean(&out);
}

/// A second signal stops the writers before their folders are removed:
/// 40 trials with varying delays, on captures of many small frames (many
/// files written while the cleanup runs). Every run exits 130 and leaves no
/// staging folder, temporary file or lock behind, and every output folder
/// there is complete. Measured on this machine with the same loop in a
/// shell: 3 of 40 trials left a staging folder before the fix, 0 of 120
/// after.
#[test]
fn a_double_signal_repeated_leaves_nothing_behind() {
    let dir = tempfile::tempdir().unwrap();
    let caps: Vec<PathBuf> = (0..4).map(|i| simulate_scene(dir.path(), &format!("d{i}"), &small_scene(200.0 + 40.0 * i as f64, 80, 32, 512)).0).collect();
    for trial in 0..40u64 {
        let out = dir.path().join(format!("out{trial}"));
        let child = spawn_run(&["run", "--quiet", "--out", s(&out)], &caps);
        wait_for_staging(&out);
        std::thread::sleep(Duration::from_millis(trial % 5 * 10));
        let kill = || Command::new("kill").arg("-INT").arg(child.id().to_string()).status().unwrap();
        kill();
        std::thread::sleep(Duration::from_millis(trial % 3));
        kill();
        let o = child.wait_with_output().unwrap();
        // The run may have finished between the two signals.
        assert!(matches!(o.status.code(), Some(130) | Some(0)), "trial {trial}: {}", text(&o));
        assert_clean(&out);
        for e in std::fs::read_dir(&out).unwrap().flatten().filter(|e| e.path().is_dir()) {
            assert!(e.path().join("log.json").is_file(), "trial {trial}: {} incomplete", e.path().display());
        }
    }
}

/// Sizes a file declares are checked against memory before anything is
/// allocated: small files (chunked, nothing written) declaring one frame of
/// 10¹² values, a background of 2·10¹⁰ and a wavelength map of 10¹⁰ are each
/// refused by `run` and `inspect` with a one-line error giving the figures,
/// under a 4 GB address-space limit (an allocation would abort), and
/// `inspect` finishes, sampling its statistics.
#[test]
fn declared_sizes_are_checked_before_allocating() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let wl: Vec<f64> = (0..2048).map(|i| 800.0 + 0.05 * i as f64).collect();
    let write = |name: &str, frame: (usize, usize, usize), background: Option<(usize, usize)>, map_len: Option<usize>| {
        let f = fringeflow::io::h5::create_file(&d.join(name)).unwrap();
        f.new_dataset::<u16>().chunk((1, 1, frame.2.min(2048))).shape(frame).create("fringes").unwrap();
        match map_len {
            Some(n) => drop(f.new_dataset::<f64>().chunk(4096).shape(n).create("wavelength_nm").unwrap()),
            None => drop(fringeflow::io::h5::write_1d(&f, "wavelength_nm", &wl).unwrap()),
        }
        if let Some(b) = background {
            f.new_dataset::<u16>().chunk((1, 2048)).shape(b).create("background").unwrap();
        }
    };
    write("frame.h5", (1, 1_000_000, 1_000_000), None, Some(1_000_000));
    write("background.h5", (2, 64, 2048), Some((10_000_000, 2048)), None);
    write("map.h5", (2, 64, 2048), None, Some(10_000_000_000));
    for (file, expect) in [("frame.h5", "one frame of dataset '/fringes'"), ("background.h5", "dataset '/background' declares 20480000000 values"), ("map.h5", "dataset '/wavelength_nm' declares 10000000000 values")] {
        for cmd in [format!("run {file} --out out --quiet"), format!("inspect {file}")] {
            let t = Instant::now();
            let o = Command::new("sh").arg("-c").arg(format!("ulimit -v 4000000; exec {} {cmd}", bin())).current_dir(d).env("HDF5_USE_FILE_LOCKING", "FALSE").output().unwrap();
            let all = text(&o);
            assert_eq!(o.status.code(), Some(1), "{cmd}: {all}");
            assert!(all.contains(expect) && all.contains("GB of memory available"), "{cmd}: {all}");
            assert!(t.elapsed() < Duration::from_secs(60), "{cmd} took {:?}", t.elapsed());
        }
    }
    assert!(!d.join("out/frame").exists() && !d.join("out/background").exists());
    assert_clean(&d.join("out"));
}

/// A plan's own tables are counted before they are built: a capture of
/// 5·10⁷ pixels per spectrum (one A-line pair, a 400 MB wavelength map)
/// is refused with the figures under a 4 GB address-space limit, where
/// building its resampling tables and FFT (tens of GB) would abort.
#[test]
fn a_plan_too_wide_for_memory_is_refused_before_its_tables_are_built() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let n = 50_000_000usize;
    {
        let f = fringeflow::io::h5::create_file(&d.join("wide.h5")).unwrap();
        f.new_dataset::<u16>().chunk((1, 1, 1 << 20)).shape((1, 2, n)).create("fringes").unwrap();
        let map: Vec<f64> = (0..n).map(|i| 800.0 + 100.0 * i as f64 / n as f64).collect();
        fringeflow::io::h5::write_1d(&f, "wavelength_nm", &map).unwrap();
    }
    let o = Command::new("sh").arg("-c").arg(format!("ulimit -v 4000000; exec {} run wide.h5 --out out --quiet", bin())).current_dir(d).env("HDF5_USE_FILE_LOCKING", "FALSE").output().unwrap();
    let all = text(&o);
    assert_eq!(o.status.code(), Some(1), "{all}");
    assert!(all.contains("need about") && all.contains("GB of memory is available to this process") && all.contains("FFT of 50000000"), "{all}");
    assert!(!all.contains("memory allocation") && !all.contains("panicked"), "{all}");
    assert!(!d.join("out/wide").exists());
    assert_clean(&d.join("out"));
}

/// Outputs are checked against the free space of the output file system
/// before anything is staged: an 18 kB file declaring 10¹⁰ frames (chunked,
/// nothing written) is refused at once with the figure needed and the
/// figure free, where it used to stage until the disk was full.
#[test]
fn outputs_larger_than_the_free_space_are_refused_before_staging() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    {
        let f = fringeflow::io::h5::create_file(&d.join("endless.h5")).unwrap();
        f.new_dataset::<u16>().chunk((1, 256, 1024)).shape((10_000_000_000usize, 256, 1024)).create("fringes").unwrap();
        let map: Vec<f64> = (0..1024).map(|i| 800.0 + 0.05 * i as f64).collect();
        fringeflow::io::h5::write_1d(&f, "wavelength_nm", &map).unwrap();
    }
    assert!(std::fs::metadata(d.join("endless.h5")).unwrap().len() < 100_000);
    let t = Instant::now();
    let o = Command::new(bin()).args(["run", "endless.h5", "--out", "out", "--quiet"]).current_dir(d).env("HDF5_USE_FILE_LOCKING", "FALSE").output().unwrap();
    let all = text(&o);
    assert_eq!(o.status.code(), Some(1), "{all}");
    assert!(all.contains("the outputs of this capture (10000000000 positions of 256 A-lines × 512 depth pixels) need about") && all.contains("GB free"), "{all}");
    // The figure: 10¹⁰ positions × 256 × 512 × (4 B volume + ¼ B PNG) = 5.58·10⁶ GB.
    assert!(all.contains("5580800.0 GB"), "{all}");
    assert!(t.elapsed() < Duration::from_secs(60), "took {:?}", t.elapsed());
    assert!(!d.join("out/endless").exists());
    assert_clean(&d.join("out"));
}

/// A stop is acted on inside a frame, however large: one frame whose
/// reconstruction takes many seconds (65,536 A-lines, each an FFT of
/// 131,072 with fft.zero_padding = 64, depth cropped so little is written)
/// is abandoned soon after SIGINT. Bounded against the same run's own
/// figure: the whole frame's run, timed first, takes at least four times
/// as long as the stop (measured on this machine, an Intel Xeon model 167
/// with 2 vCPU: about 12 s for the run, 0.1–0.4 s for the stop).
#[test]
fn a_stop_is_acted_on_within_a_frame() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    {
        let f = fringeflow::io::h5::create_file(&d.join("slow.h5")).unwrap();
        let frame: Vec<u16> = (0..65_536usize * 2048).map(|i| 1000 + ((i * 7919) % 1024) as u16).collect();
        f.new_dataset_builder().with_data(&ndarray::Array3::from_shape_vec((1, 65_536, 2048), frame).unwrap()).chunk((1, 4096, 2048)).create("fringes").unwrap();
        let map: Vec<f64> = (0..2048).map(|i| 800.0 + 0.05 * i as f64).collect();
        fringeflow::io::h5::write_1d(&f, "wavelength_nm", &map).unwrap();
    }
    std::fs::write(d.join("p.toml"), "[fft]\nzero_padding = 64\ncrop_px = [0, 64]\n").unwrap();
    let run = |out: &str| Command::new(bin()).args(["run", "slow.h5", "-p", "p.toml", "--out", out, "--quiet"]).current_dir(d).env("HDF5_USE_FILE_LOCKING", "FALSE").stdout(Stdio::piped()).stderr(Stdio::piped()).spawn().unwrap();
    let t = Instant::now();
    let whole = run("whole").wait_with_output().unwrap();
    let whole_s = t.elapsed().as_secs_f64();
    assert!(whole.status.success(), "{}", text(&whole));
    let child = run("stopped");
    wait_for_staging(&d.join("stopped"));
    std::thread::sleep(Duration::from_millis(300));
    Command::new("kill").arg("-INT").arg(child.id().to_string()).status().unwrap();
    let t = Instant::now();
    let o = child.wait_with_output().unwrap();
    let stop_s = t.elapsed().as_secs_f64();
    eprintln!("whole run {whole_s:.2} s, stop {stop_s:.2} s");
    assert_eq!(o.status.code(), Some(130), "{}", text(&o));
    assert!(stop_s * 4.0 < whole_s, "the stop took {stop_s:.2} s, the whole run {whole_s:.2} s");
    assert!(!d.join("stopped/slow").exists());
    assert_clean(&d.join("stopped"));
}
