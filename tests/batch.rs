//! Headless batches that lose nothing: failure isolation, interruption and
//! resume, rerun from a log, a full disk, shards, averaging and en face.

mod common;
use common::*;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

fn fringeflow(args: &[&str]) -> std::process::Output {
    Command::new(bin()).env("HDF5_USE_FILE_LOCKING", "FALSE").args(args).output().unwrap()
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

/// No staging directories, lock files or temporary files anywhere below `out`.
fn assert_no_partials(out: &Path) {
    for f in tree(out) {
        assert!(!f.contains(".partial-") && !f.contains(".lock") && !f.contains(".tmp-") && !f.contains(".old-"), "left behind: {f}");
    }
    for e in std::fs::read_dir(out).unwrap().flatten() {
        let n = e.file_name().to_string_lossy().into_owned();
        assert!(!n.starts_with('.'), "hidden entry left: {n}");
    }
}

/// Every capture directory below `out` is complete: its log lists outputs that all exist.
fn assert_complete(out: &Path) -> usize {
    let mut n = 0;
    for e in std::fs::read_dir(out).unwrap().flatten() {
        if e.path().is_dir() {
            let log: serde_json::Value = serde_json::from_slice(&std::fs::read(e.path().join("log.json")).expect("a capture directory without log.json")).unwrap();
            for o in log["outputs"].as_array().unwrap() {
                assert!(e.path().join(o.as_str().unwrap()).is_file(), "{} lacks {o}", e.path().display());
            }
            n += 1;
        }
    }
    n
}

#[test]
fn six_captures_two_bad_four_done_exit_one() {
    let dir = tempfile::tempdir().unwrap();
    let inputs = dir.path().join("captures");
    std::fs::create_dir(&inputs).unwrap();
    for (i, depth) in [200.0, 300.0, 400.0, 500.0].iter().enumerate() {
        simulate_scene(&inputs, &format!("good-{i}"), &small_scene(*depth, 2, 16, 512));
    }
    // Truncated HDF5.
    let (whole, _) = simulate_scene(dir.path(), "whole", &small_scene(250.0, 2, 16, 512));
    let bytes = std::fs::read(&whole).unwrap();
    std::fs::write(inputs.join("bad-truncated.h5"), &bytes[..bytes.len() / 2]).unwrap();
    // Wrong rank.
    {
        let f = fringeflow::io::h5::create_file(&inputs.join("bad-rank.h5")).unwrap();
        f.new_dataset_builder().with_data(&ndarray::Array4::<u16>::zeros((1, 2, 4, 64))).create("fringes").unwrap();
    }
    let out = dir.path().join("out");
    // The directory expands to its six .h5 files.
    let o = fringeflow(&["run", s(&inputs), "--out", s(&out)]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{stdout}{stderr}");
    assert!(stdout.contains("4 done, 0 skipped, 2 failed"), "{stdout}");
    let errors: Vec<&str> = stderr.lines().filter(|l| l.starts_with("fringeflow: error:")).collect();
    assert_eq!(errors.len(), 2, "{stderr}");
    assert!(errors.iter().any(|l| l.contains("bad-truncated.h5: truncated HDF5 file")), "{stderr}");
    assert!(errors.iter().any(|l| l.contains("bad-rank.h5: dataset '/fringes' has rank 4")), "{stderr}");
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
    assert_eq!(batch["counts"]["done"], 4);
    assert_eq!(batch["counts"]["failed"], 2);
    assert_eq!(assert_complete(&out), 4);
    assert_no_partials(&out);
    assert!(!out.join("bad-truncated").exists() && !out.join("bad-rank").exists());
}

fn make_captures(dir: &Path, n: usize, frames: usize) -> Vec<PathBuf> {
    (0..n).map(|i| simulate_scene(dir, &format!("cap-{i:02}"), &small_scene(150.0 + 40.0 * i as f64, frames, 128, 1024)).0).collect()
}

#[test]
fn interrupted_run_then_resume_matches_a_clean_run() {
    let dir = tempfile::tempdir().unwrap();
    let caps = make_captures(dir.path(), 8, 24);
    let pipeline = dir.path().join("slow.toml");
    // Heavier FFTs so the batch runs long enough to be interrupted.
    std::fs::write(&pipeline, "[fft]\nzero_padding = 16\n").unwrap();
    let clean = dir.path().join("clean");
    let args: Vec<&str> = vec!["run", "--pipeline", s(&pipeline), "--out"];
    let run_into = |out: &Path, extra: &[&str]| {
        let mut a = args.clone();
        a.push(s(out));
        a.extend(extra);
        a.extend(caps.iter().map(|c| s(c)));
        a.iter().map(|x| x.to_string()).collect::<Vec<_>>()
    };
    let o = Command::new(bin()).env("HDF5_USE_FILE_LOCKING", "FALSE").args(run_into(&clean, &[])).output().unwrap();
    assert!(o.status.success());

    let out = dir.path().join("interrupted");
    let child = Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(run_into(&out, &[]))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Interrupt as soon as the first capture is complete.
    let t0 = std::time::Instant::now();
    while !std::fs::read_dir(&out).map(|rd| rd.flatten().any(|e| e.path().join("log.json").exists())).unwrap_or(false) {
        assert!(t0.elapsed().as_secs() < 60, "no capture finished");
        std::thread::sleep(std::time::Duration::from_millis(5));
    }
    Command::new("kill").arg("-INT").arg(child.id().to_string()).status().unwrap();
    let o = child.wait_with_output().unwrap();
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(130), "{stdout}{}", String::from_utf8_lossy(&o.stderr));
    assert!(stdout.contains("stopped by SIGINT"), "{stdout}");
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
    let not_run = batch["counts"]["not_run"].as_u64().unwrap();
    let done = batch["counts"]["done"].as_u64().unwrap();
    eprintln!("interrupted: {done} done, {not_run} not run");
    assert!(not_run > 0, "the interrupt came too late to test anything");
    assert_eq!(assert_complete(&out) as u64, done);
    assert_no_partials(&out);

    let o = Command::new(bin()).env("HDF5_USE_FILE_LOCKING", "FALSE").args(run_into(&out, &["--resume"])).output().unwrap();
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{stdout}");
    assert!(stdout.contains(&format!("{} done, {done} skipped, 0 failed", 8 - done)), "{stdout}");
    for c in &caps {
        let name = c.file_stem().unwrap();
        assert_same_outputs(&clean.join(name), &out.join(name));
    }
    assert_no_partials(&out);
}

#[test]
fn rerun_from_log_reproduces_the_outputs() {
    let dir = tempfile::tempdir().unwrap();
    let (cap, _) = simulate_scene(dir.path(), "again", &small_scene(300.0, 3, 32, 512));
    let first = dir.path().join("first");
    std::fs::write(dir.path().join("p.toml"), "[window]\nkind = \"blackman\"\n[dispersion]\na2 = 3.0\n[volume]\nen_face = true\n").unwrap();
    let o = fringeflow(&["run", s(&cap), "--pipeline", s(&dir.path().join("p.toml")), "--out", s(&first)]);
    assert!(o.status.success());
    let second = dir.path().join("second");
    let o = fringeflow(&["rerun", s(&first.join("again/log.json")), "--out", s(&second)]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_same_outputs(&first.join("again"), &second.join("again"));
    // A log made with a relative input path still reruns from another directory.
    let rel = Command::new(bin()).current_dir(dir.path()).env("HDF5_USE_FILE_LOCKING", "FALSE").args(["run", "again.h5", "--out", "relative", "--quiet"]).output().unwrap();
    assert!(rel.status.success());
    let elsewhere = tempfile::tempdir().unwrap();
    let o = Command::new(bin()).current_dir(elsewhere.path()).env("HDF5_USE_FILE_LOCKING", "FALSE").arg("rerun").arg(dir.path().join("relative/again/log.json")).args(["--out", "copy"]).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(elsewhere.path().join("copy/again/volume.h5").is_file());
    // A changed input is refused.
    std::fs::write(&cap, b"changed").unwrap();
    let o = fringeflow(&["rerun", s(&first.join("again/log.json")), "--out", s(&dir.path().join("third"))]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("not the same input"));
}

/// The input hash: BLAKE3 by default, equal to the PyPI `blake3` package's
/// digest of the file; SHA-256 with `[output] input_hash = "sha256"`, equal
/// to Python's hashlib. A SHA-256 log reruns (verified with SHA-256), and
/// so does a BLAKE3 one; a changed input is refused by both.
#[test]
fn input_hash_is_blake3_or_sha256_and_reruns_verify_it() {
    let dir = tempfile::tempdir().unwrap();
    let (cap, _) = simulate_scene(dir.path(), "hashed", &small_scene(300.0, 2, 32, 512));
    let digest = |algorithm: &str| -> String {
        let code = format!("import {0}, sys; print({0}.{1}(open(sys.argv[1], 'rb').read()).hexdigest())", if algorithm == "blake3" { "blake3" } else { "hashlib" }, algorithm);
        let o = Command::new("python3").arg("-c").arg(code).arg(&cap).output().expect("python3 with blake3 (make test installs it)");
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        String::from_utf8_lossy(&o.stdout).trim().to_string()
    };
    for (pipeline, algorithm) in [("", "blake3"), ("[output]\ninput_hash = \"sha256\"\n", "sha256")] {
        let out = dir.path().join(format!("out-{algorithm}"));
        run_ok(dir.path(), &[&cap], pipeline, &out);
        let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("hashed/log.json")).unwrap()).unwrap();
        // BLAKE3: the PyPI blake3 package (the reference implementation's
        // bindings); SHA-256: Python's hashlib (FIPS 180-4).
        assert_eq!(log["input_hash"].as_str().unwrap(), format!("{algorithm}:{}", digest(algorithm)));
        let again = dir.path().join(format!("again-{algorithm}"));
        let o = fringeflow(&["rerun", s(&out.join("hashed/log.json")), "--out", s(&again)]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        assert_same_outputs(&out.join("hashed"), &again.join("hashed"));
    }
    let copy = std::fs::read(&cap).unwrap();
    let mut changed = copy.clone();
    let last = changed.len() - 1;
    changed[last] ^= 1;
    std::fs::write(&cap, &changed).unwrap();
    for algorithm in ["blake3", "sha256"] {
        let o = fringeflow(&["rerun", s(&dir.path().join(format!("out-{algorithm}/hashed/log.json"))), "--out", s(&dir.path().join(format!("third-{algorithm}")))]);
        assert_eq!(o.status.code(), Some(1), "{algorithm}");
        let e = String::from_utf8_lossy(&o.stderr);
        assert!(e.contains("not the same input") && e.contains(&format!("{algorithm}:")), "{e}");
    }
}

/// Runs into a 600 kB tmpfs (needs root, as CI and this machine are): the
/// captures that do not fit fail with a clear error, nothing partial stays,
/// and the outputs finished earlier are intact.
#[test]
fn full_disk_fails_cleanly_and_keeps_earlier_outputs() {
    let dir = tempfile::tempdir().unwrap();
    let caps: Vec<PathBuf> = (0..6).map(|i| simulate_scene(dir.path(), &format!("d{i}"), &small_scene(200.0 + 50.0 * i as f64, 1, 64, 1024)).0).collect();
    let mnt = dir.path().join("small");
    std::fs::create_dir(&mnt).unwrap();
    let m = Command::new("mount").args(["-t", "tmpfs", "-o", "size=600k", "tmpfs", s(&mnt)]).output().unwrap();
    assert!(m.status.success(), "mounting a tmpfs needs root: {}", String::from_utf8_lossy(&m.stderr));
    struct Unmount(PathBuf);
    impl Drop for Unmount {
        fn drop(&mut self) {
            Command::new("umount").arg(&self.0).status().ok();
        }
    }
    let _guard = Unmount(mnt.clone());
    let out = mnt.join("out");
    let mut args = vec!["run", "--out", s(&out)];
    args.extend(caps.iter().map(|c| s(c)));
    let o = fringeflow(&args);
    let stderr = String::from_utf8_lossy(&o.stderr);
    eprintln!("{stderr}");
    assert_eq!(o.status.code(), Some(1), "{stderr}");
    assert!(stderr.lines().any(|l| l.starts_with("fringeflow: error:") && l.contains("No space left on device")), "{stderr}");
    let complete = assert_complete(&out);
    assert!((1..6).contains(&complete), "{complete} complete");
    assert_no_partials(&out);
}

#[test]
fn shards_from_flag_cover_the_inputs_once_and_merge() {
    let dir = tempfile::tempdir().unwrap();
    let caps: Vec<PathBuf> = (0..5).map(|i| simulate_scene(dir.path(), &format!("s{i}"), &small_scene(200.0 + 30.0 * i as f64, 1, 8, 256)).0).collect();
    let list = dir.path().join("list.txt");
    std::fs::write(&list, caps.iter().map(|c| format!("{}\n", c.display())).collect::<String>()).unwrap();
    let out = dir.path().join("out");
    for i in 0..3 {
        let shard = format!("{i}/3");
        let o = fringeflow(&["run", "--list", s(&list), "--out", s(&out), "--shard", &shard, "--quiet"]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    }
    assert_eq!(assert_complete(&out), 5);
    let o = fringeflow(&["summarize", s(&out)]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert!(o.status.success(), "{stdout}{}", String::from_utf8_lossy(&o.stderr));
    assert!(stdout.contains("5 done, 0 skipped, 0 failed"), "{stdout}");
    // A shard summarised twice is caught.
    std::fs::copy(out.join("batch-0-of-3.json"), out.join("batch-extra.json")).unwrap();
    let o = fringeflow(&["summarize", s(&out)]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("more than one shard"));
}

/// Averaging N repeated B-scans reduces the noise's standard deviation by
/// about 10·log10(N) dB for independent noise (common practice: averaging
/// N samples divides the variance by N); en face output matches the volume.
#[test]
fn averaging_and_en_face() {
    let dir = tempfile::tempdir().unwrap();
    let scene = small_scene(350.0, 8, 64, 1024).replace("frames = 8", "frames = 8\nrepeats = 4");
    let (cap, _) = simulate_scene(dir.path(), "repeats", &scene);
    std::fs::write(dir.path().join("p.toml"), "[volume]\naverage = 4\nen_face = true\nen_face_depth_um = [300.0, 400.0]\nen_face_projection = \"max\"\n").unwrap();
    let out = dir.path().join("out");
    let o = fringeflow(&["run", s(&cap), "--pipeline", s(&dir.path().join("p.toml")), "--out", s(&out)]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("repeats/log.json")).unwrap()).unwrap();
    let reduction = log["averaging"]["noise_sd_reduction_db"].as_f64().unwrap();
    eprintln!("noise sd reduction {reduction:.2} dB for 4 B-scans (expected ≈ 6.02 dB)");
    assert!((reduction - 6.02).abs() < 1.0, "{reduction}");
    assert_eq!(log["frames"].as_array().unwrap().len(), 2);
    assert!(out.join("repeats/bscan-0001.png").exists() && !out.join("repeats/bscan-0002.png").exists());

    let img = image::open(out.join("repeats/en-face.png")).unwrap();
    assert_eq!((img.width(), img.height()), (64, 2));
    let f = hdf5::File::open(out.join("repeats/volume.h5")).unwrap();
    let vol = f.dataset("volume_db").unwrap().read::<f32, ndarray::Ix3>().unwrap();
    let en = f.dataset("en_face_db").unwrap().read_2d::<f32>().unwrap();
    let depth = f.dataset("depth_um").unwrap().read_raw::<f64>().unwrap();
    assert_eq!(vol.dim().0, 2);
    let (a, b) = (depth.iter().position(|&z| z >= 300.0).unwrap(), depth.iter().position(|&z| z >= 400.0).unwrap());
    for p in 0..2 {
        for x in [0usize, 17, 63] {
            let max = (a..b).map(|d| vol[[p, d, x]]).fold(f32::NEG_INFINITY, f32::max);
            assert_eq!(en[[p, x]], max);
        }
    }
    // The mirror at 350 µm lies in the range: its en face values stand far above the noise.
    assert!(en.iter().all(|&v| v > log["frames"][0]["noise_floor_db"].as_f64().unwrap() as f32 + 20.0));
}

/// A capture whose output is locked by a live run is left to it: "held by
/// another run", not a failure, while the other captures are processed.
#[test]
fn a_live_lock_keeps_a_second_run_off_that_capture() {
    let dir = tempfile::tempdir().unwrap();
    let a = simulate_scene(dir.path(), "lock-a", &small_scene(250.0, 1, 8, 256)).0;
    let b = simulate_scene(dir.path(), "lock-b", &small_scene(300.0, 1, 8, 256)).0;
    let out = dir.path().join("out");
    std::fs::create_dir_all(&out).unwrap();
    // This test process plays the other run, holding lock-a's OS lock.
    let held = std::fs::File::create(out.join(".lock-a.lock")).unwrap();
    held.lock().unwrap();
    let o = fringeflow(&["run", s(&a), s(&b), "--out", s(&out)]);
    let (stdout, stderr) = (String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr));
    assert_eq!(o.status.code(), Some(0), "{stdout}{stderr}");
    assert!(stdout.contains("1 held by another run"), "{stdout}");
    assert!(stderr.contains("held    ") || stdout.contains("held     "), "{stdout}{stderr}");
    assert!(out.join("lock-b/log.json").exists() && !out.join("lock-a").exists());
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
    assert_eq!(batch["counts"]["held"], 1);
    assert!(out.join(".lock-a.lock").exists(), "another run's lock must stay");
    drop(held);
    // A lock file whose holder is gone (no OS lock; even a pid that is
    // alive, like this process's) is stale and taken over.
    std::fs::write(out.join(".lock-a.lock"), format!("{{\"host\":\"{}\",\"boot_id\":\"{}\",\"pid\":{},\"tool\":\"x\"}}", fringeflow::batch::lock::host_name(), fringeflow::batch::lock::boot_id(), std::process::id())).unwrap();
    let o = fringeflow(&["run", s(&a), "--out", s(&out)]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(out.join("lock-a/log.json").exists() && !out.join(".lock-a.lock").exists());
}

/// SIGTERM (what a scheduler sends at a time limit) stops as cleanly as
/// SIGINT, with exit status 143.
#[test]
fn sigterm_stops_cleanly_with_143() {
    let dir = tempfile::tempdir().unwrap();
    let caps = make_captures(dir.path(), 6, 24);
    std::fs::write(dir.path().join("slow.toml"), "[fft]\nzero_padding = 16\n").unwrap();
    let out = dir.path().join("out");
    let child = Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(["run", "--pipeline", s(&dir.path().join("slow.toml")), "--out", s(&out)])
        .args(caps.iter().map(|c| s(c)))
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Wait until the first frame of work is under way (a staging directory exists).
    let t0 = std::time::Instant::now();
    while !std::fs::read_dir(&out).map(|rd| rd.flatten().any(|e| e.file_name().to_string_lossy().contains(".partial-"))).unwrap_or(false) {
        assert!(t0.elapsed().as_secs() < 60, "nothing started");
        std::thread::sleep(std::time::Duration::from_millis(2));
    }
    Command::new("kill").arg("-TERM").arg(child.id().to_string()).status().unwrap();
    let o = child.wait_with_output().unwrap();
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(143), "{stdout}");
    assert!(stdout.contains("stopped by SIGTERM"), "{stdout}");
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
    assert_eq!(batch["interrupted"], "SIGTERM");
    assert!(batch["counts"]["not_run"].as_u64().unwrap() > 0);
    assert_complete(&out);
    assert_no_partials(&out);
}

/// A run's records are this run's (the sequence): after `run good
/// bad`, `run good --resume` reports 1 skipped and exits 0, its batch.json
/// holds only good.h5; a run with another pipeline counts only its own
/// capture while the folder's index.html lists the earlier folder as
/// `earlier` with its pipeline, and one whose input is gone as `stale`,
/// uncounted. A user's own index.html in --out is refused, untouched.
#[test]
fn a_runs_records_are_its_own_and_the_index_lists_the_folder() {
    let dir = tempfile::tempdir().unwrap();
    let good = simulate_scene(dir.path(), "good", &small_scene(250.0, 1, 8, 256)).0;
    let other = simulate_scene(dir.path(), "other", &small_scene(300.0, 1, 8, 256)).0;
    let bad = dir.path().join("bad.h5");
    std::fs::write(&bad, b"not a capture").unwrap();
    let out = dir.path().join("X");
    assert_eq!(fringeflow(&["run", s(&good), s(&bad), "--out", s(&out), "--quiet"]).status.code(), Some(1));
    let o = fringeflow(&["run", s(&good), "--out", s(&out), "--resume"]);
    let stdout = String::from_utf8_lossy(&o.stdout);
    assert_eq!(o.status.code(), Some(0), "{stdout}{}", String::from_utf8_lossy(&o.stderr));
    assert!(stdout.contains("0 done, 1 skipped, 0 failed"), "{stdout}");
    let batch: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("batch.json")).unwrap()).unwrap();
    assert_eq!(batch["captures"].as_array().unwrap().len(), 1, "{batch}");
    assert_eq!(batch["counts"]["failed"], 0);
    // Another pipeline, another capture: counted alone, the first listed as earlier.
    let o = fringeflow(&["run", s(&other), "--out", s(&out), "--set", "window.kind=hamming", "--quiet"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let statuses = |page: &str| -> Vec<String> { page.split("data-status=\"").skip(1).map(|r| r.split('"').next().unwrap().to_string()).collect() };
    let page = std::fs::read_to_string(out.join("index.html")).unwrap();
    assert_eq!(statuses(&page), ["done", "earlier"], "{page}");
    let first_pipeline = serde_json::from_slice::<serde_json::Value>(&std::fs::read(out.join("good/log.json")).unwrap()).unwrap()["pipeline_sha256"].as_str().unwrap().to_string();
    assert!(page.contains(&first_pipeline) && page.contains("1 output folder(s) of earlier runs"), "{page}");
    // Its input gone: stale, still not counted.
    std::fs::remove_file(&good).unwrap();
    assert!(fringeflow(&["run", s(&other), "--out", s(&out), "--set", "window.kind=hamming", "--resume", "--quiet"]).status.success());
    let page = std::fs::read_to_string(out.join("index.html")).unwrap();
    assert_eq!(statuses(&page), ["skipped", "stale"], "{page}");
    assert!(page.contains("is gone"), "{page}");
    // A user's own index.html is never overwritten.
    let mine = dir.path().join("mine");
    std::fs::create_dir(&mine).unwrap();
    std::fs::write(mine.join("index.html"), "<html>my notes</html>").unwrap();
    let o = fringeflow(&["run", s(&other), "--out", s(&mine)]);
    assert_eq!(o.status.code(), Some(2), "{}", String::from_utf8_lossy(&o.stderr));
    assert!(String::from_utf8_lossy(&o.stderr).contains("not written by fringeflow"));
    assert_eq!(std::fs::read_to_string(mine.join("index.html")).unwrap(), "<html>my notes</html>");
    assert!(!mine.join("other").exists());
}
