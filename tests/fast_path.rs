//! The fused f32 fast path against the plain f64 stage chain (the reference
//! implementation): for every kind of setting, the two amplitudes differ by
//! at most 1e-4 of the frame's peak. Also: the `bench` report runs and is consistent.

mod common;
use common::*;
use fringeflow::open::samples;
use fringeflow::io::capture::Capture;
use fringeflow::pipeline::config::PipelineConfig;
use fringeflow::pipeline::fused::FusedPlan;
use fringeflow::pipeline::kernel;
use fringeflow::pipeline::plan::{CaptureGeometry, Plan};
use ndarray::Array2;
use rustfft::num_complex::Complex32;

/// A layered sample with a mirror: many depths, real noise, 12-bit.
fn scene(dtype: &str, background_lines: usize) -> String {
    format!(
        r#"
seed = 21
frames = 2
alines = 40
background_lines = {background_lines}
[spectrometer]
pixels = 2048
start_nm = 765.0
stop_nm = 915.0
nonlinearity_nm = [2.0, -3.0]
resolution_nm = 0.05
[detector]
dtype = "{dtype}"
[dispersion]
fused_silica_mm = 3.0
[[reflector]]
depth_um = 900.0
reflectivity = 1e-4
[sample]
surface_um = 250.0
sag_um = 60.0
[[sample.layers]]
thickness_um = 150.0
group_index = 1.4
top_reflectivity = 1e-5
scatterers = 30
scatterer_reflectivity = 1e-7
"#
    )
}

/// Largest |A_fast − A_ref| over the frame divided by the peak of A_ref.
fn worst_difference(capture: &Capture, config: &PipelineConfig, frame: usize, variant: kernel::Variant) -> f64 {
    let (raw, _) = capture.read_raw_frame(frame).unwrap();
    let source = capture.background.clone().unwrap_or_else(|| fringeflow::stages::background::mean_spectrum(raw.to_f64().view()));
    let plan = Plan::new(
        config,
        CaptureGeometry { wavelength_nm: &capture.wavelength_nm, background: capture.background.as_deref(), source_spectrum: Some(&source) },
    )
    .unwrap();
    let depth = plan.summary.depth_pixels;
    let mut reference = Array2::<f32>::zeros((capture.alines, depth));
    let mut reference_complex = Array2::<Complex32>::zeros((capture.alines, depth));
    plan.process_frame_complex(raw.to_f64().view(), &mut reference, &mut reference_complex, &plan.new_timer());
    // The complex profile's modulus is the amplitude the dB values came from.
    let modulus_error = reference.iter().zip(reference_complex.iter()).map(|(&d, c)| (10f64.powf(d as f64 / 20.0) - c.norm() as f64).abs()).fold(0.0, f64::max);
    let amp = |d: f32| 10f64.powf(d as f64 / 20.0);
    let peak = reference.iter().map(|&d| amp(d)).fold(0.0, f64::max);
    // Both variants of the fast path: lane order with the lane FFT (on
    // CPUs with AVX-512) and rustfft per A-line (elsewhere).
    let lane = FusedPlan::new(&plan);
    assert_eq!(lane.variant, variant, "the forced variant is the one planned");
    assert_eq!(lane.uses_lane_fft(), variant == kernel::Variant::Avx512 && plan.summary.fft_length.is_power_of_two(), "lane FFT only in the AVX-512 variant");
    let uses_lane_fft = lane.uses_lane_fft();
    let mut worst = 0.0f64;
    let mut outputs = Vec::new();
    for fused in [lane, FusedPlan::new(&plan).without_lane_fft()] {
        let mut fast = Array2::<f32>::zeros((capture.alines, depth));
        fused.process_raw(samples(&raw), &mut fast, &fused.new_timer());
        // The image path (what `run` uses) must equal the row path transposed.
        let mut image = Array2::<f32>::zeros((depth, capture.alines));
        fused.process_raw_image(samples(&raw), &mut image, &fused.new_timer());
        assert_eq!(image.t(), fast.view(), "image path differs from the row path (lane FFT: {})", fused.uses_lane_fft());
        // With the complex depth profile alongside: the same dB bits, and
        // the complex values within 1e-4 of the peak of the reference's.
        let mut image2 = Array2::<f32>::zeros((depth, capture.alines));
        let mut complex = Array2::<Complex32>::zeros((depth, capture.alines));
        fused.process_raw_image_complex(samples(&raw), &mut image2, &mut complex, &fused.new_timer());
        assert_eq!(image2, image, "dB image changes when the complex profile is written too");
        let wc = reference_complex.iter().zip(complex.t().iter()).map(|(r, f)| (r - f).norm() as f64).fold(0.0, f64::max) / peak;
        eprintln!("  lane FFT {}: complex max |ΔA|/peak {wc:.2e}", fused.uses_lane_fft());
        assert!(wc <= 1e-4, "complex profile differs from the reference by {wc:e} of the peak");
        let w = reference.iter().zip(fast.iter()).map(|(&r, &f)| (amp(r) - amp(f)).abs()).fold(0.0, f64::max) / peak;
        eprintln!("  lane FFT {}: {w:.2e}", fused.uses_lane_fft());
        worst = worst.max(w);
        outputs.push(fast);
    }
    assert!(modulus_error / peak <= 1e-6, "reference |complex| vs amplitude: {:e}", modulus_error / peak);
    let between = outputs[0].iter().zip(outputs[1].iter()).map(|(&a, &b)| (amp(a) - amp(b)).abs()).fold(0.0, f64::max) / peak;
    eprintln!("  lane against per-line rustfft: {between:.2e}");
    if !uses_lane_fft {
        eprintln!("  (the lane FFT path is not exercised in this variant or at this length)");
    }
    worst
}

#[test]
fn fused_path_matches_the_reference_stages() {
    let dir = tempfile::tempdir().unwrap();
    let (u16_capture, _) = simulate_scene(dir.path(), "u16", &scene("u16", 16));
    let (f64_capture, _) = simulate_scene(dir.path(), "f64", &scene("f64", 0));
    let settings = [
        ("defaults (capture background, cubic, Hann)", ""),
        ("median background, dispersion", "[background]\nmethod = \"median\"\n[dispersion]\na2 = 30.0\na3 = -8.0\n"),
        ("mean background, linear, Blackman", "[background]\nmethod = \"mean\"\n[k_linearization]\nmethod = \"linear\"\n[window]\nkind = \"blackman\"\n"),
        ("no background, no window", "[background]\nmethod = \"none\"\n[window]\nkind = \"none\"\n"),
        ("shaping, Gaussian window, 2x padding, crop", "[shaping]\nenabled = true\ncentre_nm = 840.0\nfwhm_nm = 45.0\n[window]\nkind = \"gaussian\"\n[fft]\nzero_padding = 2\ncrop_um = [100.0, 1200.0]\n"),
        ("1500 k samples, Tukey", "[k_linearization]\nsamples = 1500\n[window]\nkind = \"tukey\"\n"),
    ];
    // Every kernel variant this CPU has (an AVX-512 machine also runs the
    // AVX2 and scalar code), forced in turn.
    let _only_this_test_forces = FORCING.lock().unwrap();
    for variant in kernel::supported() {
        kernel::force(Some(variant));
        for (path, kind) in [(&u16_capture, "u16"), (&f64_capture, "f64")] {
            for (name, text) in settings {
                let config = PipelineConfig::from_str("test", text).unwrap();
                let capture = fringeflow::run::open_capture(path, &config.input).unwrap();
                if capture.background.is_none() && text.is_empty() {
                    continue; // "auto" falls back to the median, covered above
                }
                let worst = worst_difference(&capture, &config, 1, variant);
                eprintln!("variant {}: {kind} {name}: max |ΔA|/peak = {worst:.2e}", variant.name());
                assert!(worst <= 1e-4, "variant {}: {kind} {name}: {worst:e}", variant.name());
            }
        }
    }
    kernel::force(None);
}

/// Tests of this file that force a kernel variant take it in turn.
static FORCING: std::sync::Mutex<()> = std::sync::Mutex::new(());

/// `run` end to end with both engines: the volumes agree within 1e-4 of the
/// peak amplitude and each log names its engine.
#[test]
fn run_with_either_engine_gives_the_same_volume() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "cap", &scene("u16", 16));
    let pipeline = dir.path().join("p.toml");
    std::fs::write(&pipeline, "[background]\nmethod = \"median\"\n[dispersion]\na2 = 12.0\n").unwrap();
    // The reference engine, then the fast path with every variant this CPU
    // has forced through FRINGEFLOW_KERNEL; each log names what ran.
    let run = |engine: &str, variant: Option<kernel::Variant>| {
        let out = dir.path().join(format!("{engine}-{}", variant.map_or("none", |v| v.name())));
        let mut command = std::process::Command::new(bin());
        command.env("HDF5_USE_FILE_LOCKING", "FALSE").args(["run", capture.to_str().unwrap(), "--pipeline", pipeline.to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet", "--engine", engine]);
        if let Some(v) = variant {
            command.env(kernel::ENV, v.name());
        }
        let o = command.output().unwrap();
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let log: serde_json::Value = serde_json::from_slice(&std::fs::read(out.join("cap/log.json")).unwrap()).unwrap();
        assert_eq!(log["engine"], engine);
        assert_eq!(log["kernel"].as_str(), variant.map(|v| v.name()), "the log names the variant that ran");
        read_volume(&out.join("cap/volume.h5"))
    };
    let reference = run("reference", None);
    let amp = |d: f32| 10f64.powf(d as f64 / 20.0);
    let peak = reference.db.iter().map(|&d| amp(d)).fold(0.0, f64::max);
    for variant in kernel::supported() {
        let fused = run("fused", Some(variant));
        let worst = fused.db.iter().zip(reference.db.iter()).map(|(&a, &b)| (amp(a) - amp(b)).abs()).fold(0.0, f64::max) / peak;
        eprintln!("run, fused ({}) vs reference engine: max |ΔA|/peak = {worst:.2e}", variant.name());
        assert!(worst <= 1e-4, "{}: {worst:e}", variant.name());
    }
}

#[test]
fn bench_report_runs_on_a_small_capture() {
    // `fringeflow bench` end to end on a small capture: the report's fields
    // are present and consistent (no speed is asserted: speed targets live
    // in the benchmark, not in tests).
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "small", &small_scene(300.0, 2, 64, 2048));
    let json = dir.path().join("report.json");
    let out = std::process::Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(["bench", "--alines", "512", "--repeats", "1", "--no-scaling", "--capture"])
        .arg(&capture)
        .arg("--work-dir")
        .arg(dir.path().join("work"))
        .arg("--report")
        .arg(&json)
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(String::from_utf8_lossy(&out.stdout).contains("ratio pipeline / bare FFT"));
    let r: serde_json::Value = serde_json::from_slice(&std::fs::read(&json).unwrap()).unwrap();
    // `--json` prints the same report on stdout instead of the table.
    let printed = std::process::Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .args(["bench", "--alines", "256", "--repeats", "1", "--no-scaling", "--no-end-to-end", "--no-simulator", "--json", "--capture"])
        .arg(&capture)
        .arg("--work-dir")
        .arg(dir.path().join("work"))
        .output()
        .unwrap();
    assert!(printed.status.success(), "{}", String::from_utf8_lossy(&printed.stderr));
    let p: serde_json::Value = serde_json::from_slice(&printed.stdout).expect("bench --json prints one JSON document");
    assert_eq!(p["alines_per_run"], 256);
    assert!(p["pipeline_over_fft"].as_f64().is_some_and(|v| v > 0.0));
    assert!(p["simulator"].is_null() && p["end_to_end_alines_per_second"].is_null());
    let get = |k: &str| r[k].as_f64().unwrap_or_else(|| panic!("{k} missing"));
    assert_eq!(r["alines_per_run"], 512);
    for k in ["bare_fft_alines_per_second", "pipeline_alines_per_second", "reference_alines_per_second", "end_to_end_alines_per_second", "end_to_end_uint16_alines_per_second"] {
        assert!(get(k) > 0.0 && get(k).is_finite(), "{k} = {}", get(k));
    }
    let ratio = get("pipeline_alines_per_second") / get("bare_fft_alines_per_second");
    assert!((get("pipeline_over_fft") - ratio).abs() <= 1e-9 * ratio);
    let parts = r["pipeline_parts_seconds"].as_object().unwrap();
    assert_eq!(parts.len(), 4);
    assert!(parts.values().all(|v| v.as_f64().unwrap() >= 0.0));
    // The plan's measured choice, and the camera-size table: every size,
    // its FFT length (2000 is not a power of two and stays 2000), every variant.
    assert!(r["kernel_choice"]["source"].is_string());
    let sizes = r["sizes"].as_array().unwrap();
    assert_eq!(sizes.iter().map(|p| p["pixels"].as_u64().unwrap()).collect::<Vec<_>>(), [1024, 2048, 4096, 2000]);
    for p in sizes {
        assert_eq!(p["fft_length"], p["pixels"]);
        assert_eq!(p["variants"].as_array().unwrap().len(), kernel::supported().len());
        assert!(p["over_fft"].as_f64().is_some_and(|v| v > 0.0 && v.is_finite()));
    }
    // The end-to-end runs leave nothing behind in the work directory.
    assert!(!dir.path().join("work/end-to-end").exists());
}

/// The measured choice of kernel variant (`fused::tune`): with nothing
/// forced, `run` times every variant on the plan, runs the fastest (never
/// slower than the slowest by its own measurement), logs how it chose, and
/// caches the choice per CPU and plan shape; a cached entry is obeyed;
/// `FRINGEFLOW_TUNING=off` measures nothing and writes no file; a bad value
/// is refused; `rerun` runs the variant the log names and gives the same bits.
#[test]
fn kernel_variant_is_measured_cached_logged_and_rerun() {
    let dir = tempfile::tempdir().unwrap();
    let (capture, _) = simulate_scene(dir.path(), "cap", &scene("u16", 16));
    let cache = dir.path().join("cache");
    let cache_file = cache.join(fringeflow::pipeline::fused::tune::CACHE_FILE);
    let run = |name: &str, envs: &[(&str, &str)], cache_dir: &std::path::Path| {
        let out = dir.path().join(name);
        let mut command = std::process::Command::new(bin());
        command.env("HDF5_USE_FILE_LOCKING", "FALSE").env_remove(kernel::ENV).env_remove("FRINGEFLOW_TUNING").env("FRINGEFLOW_CACHE_DIR", cache_dir);
        command.args(["run", capture.to_str().unwrap(), "--out", out.to_str().unwrap(), "--quiet"]);
        for (k, v) in envs {
            command.env(k, v);
        }
        let o = command.output().unwrap();
        (o, out)
    };
    let log_of = |out: &std::path::Path| -> serde_json::Value { serde_json::from_slice(&std::fs::read(out.join("cap/log.json")).unwrap()).unwrap() };
    let names: Vec<&str> = kernel::supported().iter().map(|v| v.name()).collect();

    // 1. Measured: the rates of every variant, the fastest (within the 5 %
    //    margin) chosen, and the cache file written with that choice.
    let (o, out1) = run("first", &[], &cache);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let log1 = log_of(&out1);
    let chosen = log1["kernel"].as_str().unwrap().to_string();
    let choice = &log1["timing"]["kernel_choice"];
    eprintln!("measured choice: {chosen}: {choice}");
    if names.len() == 1 {
        assert_eq!(choice["source"], "only variant");
        return;
    }
    assert_eq!(choice["source"], "measured");
    let rates = choice["alines_per_second"].as_object().unwrap();
    assert_eq!(rates.len(), names.len(), "every variant timed");
    let rate = |v: &str| rates[v].as_f64().unwrap();
    let slowest = names.iter().map(|v| rate(v)).fold(f64::INFINITY, f64::min);
    let fastest = names.iter().map(|v| rate(v)).fold(0.0, f64::max);
    assert!(rate(&chosen) >= slowest, "the chosen variant is never slower than the slowest");
    assert!(rate(&chosen) * fringeflow::pipeline::fused::tune::MARGIN >= fastest, "the chosen variant is the fastest within the margin");
    let key = choice["key"].as_str().unwrap().to_string();
    let cached: serde_json::Value = serde_json::from_slice(&std::fs::read(&cache_file).expect("cache file written")).unwrap();
    assert_eq!(cached["choices"][&key]["variant"], chosen.as_str());

    // 2. Cached: the same variant, without timing again.
    let (o, out2) = run("second", &[], &cache);
    assert!(o.status.success());
    let log2 = log_of(&out2);
    assert_eq!(log2["kernel"], chosen.as_str());
    assert_eq!(log2["timing"]["kernel_choice"]["source"], "cached");

    // 3. An edited cache entry is obeyed: it names the scalar variant.
    let mut edited = cached.clone();
    edited["choices"][&key]["variant"] = serde_json::json!("scalar");
    std::fs::write(&cache_file, serde_json::to_vec(&edited).unwrap()).unwrap();
    let (o, out3) = run("third", &[], &cache);
    assert!(o.status.success());
    let log3 = log_of(&out3);
    assert_eq!(log3["kernel"], "scalar", "the cached choice decides");

    // 4. Tuning off: the best variant by CPU flags, nothing timed, no file.
    let empty = dir.path().join("no-cache");
    let (o, out4) = run("off", &[("FRINGEFLOW_TUNING", "off")], &empty);
    assert!(o.status.success());
    let log4 = log_of(&out4);
    assert_eq!(log4["kernel"], kernel::best().name());
    assert_eq!(log4["timing"]["kernel_choice"]["source"], "tuning off");
    assert!(!empty.exists(), "FRINGEFLOW_TUNING=off writes no cache");

    // 5. A bad value: exit 2, one line naming the variable, no output.
    let (o, out5) = run("bad", &[("FRINGEFLOW_TUNING", "sometimes")], &cache);
    assert_eq!(o.status.code(), Some(2));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("FRINGEFLOW_TUNING") && err.trim().lines().count() == 1, "{err}");
    assert!(!out5.join("cap").exists());

    // 6. rerun of the scalar run, with a cache that would now pick another
    //    variant: the log's variant runs again, and the volume is the same bits.
    std::fs::write(&cache_file, serde_json::to_vec(&cached).unwrap()).unwrap();
    let rerun_out = dir.path().join("rerun");
    let o = std::process::Command::new(bin())
        .env("HDF5_USE_FILE_LOCKING", "FALSE")
        .env_remove(kernel::ENV)
        .env("FRINGEFLOW_CACHE_DIR", &cache)
        .args(["rerun", out3.join("cap/log.json").to_str().unwrap(), "--out", rerun_out.to_str().unwrap()])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(log_of(&rerun_out)["kernel"], "scalar");
    assert_eq!(read_volume(&rerun_out.join("cap/volume.h5")).db, read_volume(&out3.join("cap/volume.h5")).db, "rerun reproduces the bits");
}
