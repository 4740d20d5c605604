//! `fringeflow bench`: throughput of the reconstruction in one process and
//! one run, against the irreducible cost, a bare rustfft forward FFT of the
//! same number of 2048-point A-lines, both on all cores.
//!
//! The capture is simulated once from `benches/throughput-scene.toml`
//! (embedded) unless one is given; its frames are held in memory, so the
//! in-memory figures exclude disk. Each figure is the median of several
//! runs. Also measured: the same pipeline at 10k, 100k and 1M A-lines (cost
//! linear in A-lines), the plain f64 stage chain, and `run` end to end
//! (HDF5 read, pipeline, PNG and volume.h5 writes).

use anyhow::{bail, Context, Result};
use ndarray::Array2;
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use rustfft::FftPlanner;
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::time::Instant;

use crate::open::samples;
use crate::io::capture::{Capture, RawFrame};
use crate::pipeline::config::PipelineConfig;
use crate::pipeline::fused::{Extra, FusedPlan, LANES};
use crate::pipeline::plan::{CaptureGeometry, Plan};
use crate::stages::log_compression::{grey_levels_u8, noise_floor_db};

/// The scene simulated when no capture is given.
pub const SCENE: &str = include_str!("../../benches/throughput-scene.toml");
/// The pipeline timed.
pub const PIPELINE: &str = include_str!("../../pipelines/throughput.toml");

#[derive(Debug, Clone)]
pub struct BenchOptions {
    pub capture: Option<PathBuf>,
    pub work_dir: PathBuf,
    /// A-lines per timed run.
    pub alines: usize,
    pub repeats: usize,
    /// Also time 10k, 100k and 1M A-lines.
    pub scaling: bool,
    /// Also time `run` end to end.
    pub end_to_end: bool,
    /// Also time the simulator against its scalar reference.
    pub simulator: bool,
    /// Show a progress bar while the bench capture is simulated.
    pub progress: bool,
    /// Also time every variant at each camera size of [`SIZES`].
    pub sizes: bool,
}

/// Camera sizes timed side by side (pixels per spectrum; 2000 is not a
/// power of two, so its FFT is rustfft's in every variant).
pub const SIZES: [usize; 4] = [1024, 2048, 4096, 2000];
/// A-lines per frame of the synthetic frames of the size table.
const SIZE_FRAME_ALINES: usize = 1000;

#[derive(Debug, Clone, Serialize)]
pub struct Machine {
    pub cpu: String,
    pub logical_cpus: usize,
    pub threads: usize,
    pub avx2_fma: bool,
}

/// The fused pipeline with one kernel variant forced (same run).
#[derive(Debug, Clone, Serialize)]
pub struct VariantPoint {
    pub variant: &'static str,
    pub alines_per_second: f64,
    pub over_fft: f64,
}

/// One camera size: the bare FFT of its length, the fused pipeline with the
/// measured choice and with each variant forced, same run.
#[derive(Debug, Clone, Serialize)]
pub struct SizePoint {
    pub pixels: usize,
    pub fft_length: usize,
    pub bare_fft_alines_per_second: f64,
    /// The variant the plan chose by measurement, and its rate.
    pub chosen: &'static str,
    pub alines_per_second: f64,
    pub over_fft: f64,
    pub variants: Vec<VariantPoint>,
    /// Where the chosen variant's time goes (thread-seconds per part).
    pub parts_seconds: serde_json::Map<String, serde_json::Value>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ScalingPoint {
    pub alines: usize,
    pub alines_per_second: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct BenchReport {
    pub machine: Machine,
    pub capture: PathBuf,
    pub pixels: usize,
    pub alines_per_run: usize,
    pub repeats: usize,
    pub pipeline: String,
    /// Medians, A-lines per second.
    pub bare_fft_alines_per_second: f64,
    pub pipeline_alines_per_second: f64,
    pub pipeline_over_fft: f64,
    /// The variant the figures above ran: the plan's measured choice,
    /// unless forced by `FRINGEFLOW_KERNEL` or `--kernel`.
    pub kernel: &'static str,
    /// How it was chosen, with the plan-time measurement's rates.
    pub kernel_choice: crate::pipeline::fused::tune::Choice,
    /// Every variant this CPU has, forced in turn, same run.
    pub variants: Vec<VariantPoint>,
    /// Each camera size of [`SIZES`] on synthetic frames, every variant.
    pub sizes: Vec<SizePoint>,
    /// The same with the capture's recorded background instead of the
    /// per-frame median (what the default pipeline does when a capture has one).
    pub capture_background_alines_per_second: f64,
    pub capture_background_over_fft: f64,
    /// Where the fused pipeline's time goes (thread-seconds per part, one run).
    pub pipeline_parts_seconds: serde_json::Map<String, serde_json::Value>,
    /// The fused path's FFT: "lane" (AVX-512, 16 A-lines per vector; the
    /// interpolation × factor then runs inside the FFT's first level and its
    /// time counts under "fft") or "rustfft" (one call per A-line).
    pub fused_fft: String,
    pub reference_alines_per_second: f64,
    pub scaling: Vec<ScalingPoint>,
    pub end_to_end_alines_per_second: Option<f64>,
    pub end_to_end_over_pipeline: Option<f64>,
    /// The same with `[output] volume_type = "uint16"` (half the volume bytes).
    pub end_to_end_uint16_alines_per_second: Option<f64>,
    pub end_to_end_uint16_over_pipeline: Option<f64>,
    /// The same with no PNGs and no report (`png = false`, `report =
    /// false`: a volume-only batch).
    pub end_to_end_volume_only_alines_per_second: Option<f64>,
    pub end_to_end_volume_only_over_pipeline: Option<f64>,
    /// The default outputs with the input hashed by SHA-256 instead of BLAKE3.
    pub end_to_end_sha256_alines_per_second: Option<f64>,
    pub end_to_end_sha256_over_pipeline: Option<f64>,
    /// Contrast beyond intensity, in memory on the same frames taken 4 at
    /// a time as repeats of a position (same run as the pipeline figures).
    pub contrast: Vec<ContrastPoint>,
    /// The simulator on the sample scene (sample-data/layered-phantom.toml):
    /// seconds with the vectorised kernels and with the standard library's
    /// cos/sin/exp (the plain formulas), and their ratio; and the plain
    /// formulas on one thread (the serial scalar simulator), the baseline
    /// for parallel + vectorised together.
    pub simulator: Option<SimulatorPoint>,
}

#[derive(Debug, Clone, Serialize)]
pub struct ContrastPoint {
    pub workload: String,
    pub alines_per_second: f64,
    /// Against the intensity pipeline of this run.
    pub over_pipeline: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct SimulatorPoint {
    pub scene: String,
    pub alines: usize,
    pub vectorised_seconds: f64,
    pub standard_library_seconds: f64,
    /// Vectorised against the standard library, both on every thread.
    pub speed_up: f64,
    /// Threads of the parallel runs.
    pub threads: usize,
    /// The standard library's functions on one thread: the serial scalar simulator.
    pub serial_scalar_seconds: f64,
    /// serial_scalar_seconds / vectorised_seconds: parallel and vectorised together.
    pub speed_up_over_serial_scalar: f64,
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

fn machine() -> Machine {
    let cpu = std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|t| t.lines().find(|l| l.starts_with("model name")).and_then(|l| l.split(':').nth(1)).map(|s| s.trim().to_string()))
        .unwrap_or_else(|| "unknown".into());
    #[cfg(target_arch = "x86_64")]
    let avx2_fma = std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma");
    #[cfg(not(target_arch = "x86_64"))]
    let avx2_fma = false;
    Machine {
        cpu,
        logical_cpus: std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1),
        threads: rayon::current_num_threads(),
        avx2_fma,
    }
}

/// The bench capture: the given one, or the embedded scene simulated once.
fn bench_capture(opts: &BenchOptions) -> Result<PathBuf> {
    if let Some(c) = &opts.capture {
        anyhow::ensure!(c.is_file(), "--capture {}: no such file", c.display());
        return Ok(c.clone());
    }
    std::fs::create_dir_all(&opts.work_dir).with_context(|| format!("creating {}", opts.work_dir.display()))?;
    let path = opts.work_dir.join("throughput-v2.h5");
    if !path.exists() {
        eprintln!("simulating the bench capture {} (once)", path.display());
        let scene = crate::simulate::scene::Scene::from_str("benches/throughput-scene.toml", SCENE)?;
        let bar = opts.progress.then(|| {
            let b = indicatif::ProgressBar::new(scene.frames as u64);
            b.set_style(indicatif::ProgressStyle::with_template("  {bar:40} {pos}/{len} frames simulated, about {eta} left").unwrap());
            b
        });
        crate::simulate::simulate_with_progress(&scene, &path, &|done| {
            if let Some(b) = &bar {
                b.set_position(done as u64);
            }
        })?;
        if let Some(b) = bar {
            b.finish_and_clear();
        }
    }
    Ok(path)
}

/// The frames (A-lines × pixels, stored type) of a capture.
fn load_frames(capture: &Capture) -> Result<Vec<RawFrame>> {
    (0..capture.frames).map(|f| capture.read_raw_frame(f).map(|(r, _)| r)).collect()
}

/// Times the fused pipeline plus the 8-bit mapping over `alines` A-lines,
/// cycling through the frames.
fn time_pipeline(fused: &FusedPlan, frames: &[RawFrame], alines_per_frame: usize, depth: usize, alines: usize) -> (f64, crate::pipeline::fused::FusedTimer) {
    let timer = fused.new_timer();
    // Two images: frame i is reconstructed while frame i−1 is mapped to
    // 8 bits, as `run` overlaps them.
    let mut images = [Array2::<f32>::zeros((depth, alines_per_frame)), Array2::<f32>::zeros((depth, alines_per_frame))];
    let count = alines.div_ceil(alines_per_frame);
    let mut grey = Vec::new();
    let mut map = |image: &Array2<f32>| -> u64 {
        let values = image.as_slice().unwrap();
        let floor = noise_floor_db(values);
        // In chunks on the pool, so the mapping fills the gaps the next
        // frame's reconstruction leaves at its barriers (in `run` the writer
        // thread does this and the OS fills them).
        grey.resize(values.len(), 0);
        grey.par_chunks_mut(1 << 16).zip(values.par_chunks(1 << 16)).for_each(|(g, v)| grey_levels_u8(v, floor + 3.0, floor + 48.0, g));
        grey[grey.len() / 2] as u64
    };
    let start = Instant::now();
    let mut sink = 0u64;
    for i in 0..=count {
        let (a, b) = images.split_at_mut(1);
        let (current, previous) = if i % 2 == 0 { (&mut a[0], &b[0]) } else { (&mut b[0], &a[0]) };
        let (_, mapped) = rayon::join(
            || {
                if i < count {
                    fused.process_raw_image(samples(&frames[i % frames.len()]), current, &timer)
                }
            },
            || if i > 0 { map(previous) } else { 0 },
        );
        sink = sink.wrapping_add(mapped);
    }
    let s = start.elapsed().as_secs_f64();
    std::hint::black_box(sink);
    ((count * alines_per_frame) as f64 / s, timer)
}

/// Times bare forward FFTs of `alines` 2048-point (or `length`) complex
/// A-lines in blocks of LANES per worker, refilling each block from a
/// source block (as the pipeline fills its buffer).
fn time_bare_fft(length: usize, alines: usize) -> f64 {
    let fft = FftPlanner::<f32>::new().plan_fft_forward(length);
    let source: Vec<Complex32> = (0..LANES * length).map(|i| Complex32::new(((i * 7919) % 1000) as f32 * 1e-3, 0.0)).collect();
    let blocks = alines.div_ceil(LANES);
    let start = Instant::now();
    (0..blocks).into_par_iter().with_min_len(8).for_each_init(
        || (vec![Complex32::new(0.0, 0.0); LANES * length], vec![Complex32::new(0.0, 0.0); fft.get_inplace_scratch_len()]),
        |(buf, scratch), _| {
            buf.copy_from_slice(&source);
            fft.process_with_scratch(buf, scratch);
            std::hint::black_box(&buf[1]);
        },
    );
    (blocks * LANES) as f64 / start.elapsed().as_secs_f64()
}

pub fn run_bench(opts: &BenchOptions) -> Result<BenchReport> {
    if opts.repeats == 0 || opts.alines == 0 {
        bail!("--repeats and --alines must be at least 1");
    }
    let path = bench_capture(opts)?;
    let config = PipelineConfig::from_str("pipelines/throughput.toml", PIPELINE).map_err(|e| anyhow::anyhow!("{e}"))?;
    let capture = crate::run::open_capture(&path, &config.input)?;
    let frames = load_frames(&capture)?;
    let plan = Plan::new(&config, CaptureGeometry { wavelength_nm: &capture.wavelength_nm, background: capture.background.as_deref(), source_spectrum: None })?;
    let fused = FusedPlan::new(&plan);
    let depth = plan.summary.depth_pixels;
    let (alines_per_frame, pixels) = capture.frame_shape();
    let length = plan.summary.fft_length;

    // Warm up both, then alternate so that both see the same machine state.
    time_bare_fft(length, opts.alines.min(20_000));
    time_pipeline(&fused, &frames, alines_per_frame, depth, opts.alines.min(20_000));
    let (mut fft_runs, mut pipe_runs) = (Vec::new(), Vec::new());
    let mut parts = serde_json::Map::new();
    for r in 0..opts.repeats {
        fft_runs.push(time_bare_fft(length, opts.alines));
        let (rate, timer) = time_pipeline(&fused, &frames, alines_per_frame, depth, opts.alines);
        pipe_runs.push(rate);
        if r == 0 {
            for (name, s) in crate::pipeline::fused::FusedTimer::PARTS.iter().zip(timer.seconds()) {
                parts.insert(name.to_string(), serde_json::json!(s));
            }
        }
    }
    let (fft_rate, pipe_rate) = (median(fft_runs), median(pipe_runs));
    let capture_bg_rate = {
        let mut cfg = config.clone();
        cfg.background.method = crate::pipeline::config::BackgroundMethod::Recorded;
        let plan_b = Plan::new(&cfg, CaptureGeometry { wavelength_nm: &capture.wavelength_nm, background: capture.background.as_deref(), source_spectrum: None })?;
        let fused_b = FusedPlan::new(&plan_b);
        let runs: Vec<f64> = (0..opts.repeats).map(|_| time_pipeline(&fused_b, &frames, alines_per_frame, depth, opts.alines).0).collect();
        median(runs)
    };

    // Every variant this CPU runs, forced in turn (same run).
    let kernel = fused.variant;
    let variants = time_variants(&plan, &frames, alines_per_frame, opts.alines, opts.repeats, fft_rate);
    let sizes = if opts.sizes { time_sizes(&config, &capture.wavelength_nm, opts)? } else { Vec::new() };

    // The plain f64 stage chain on a smaller count.
    let reference_rate = {
        let timer = plan.new_timer();
        let mut db = Array2::<f32>::zeros((alines_per_frame, depth));
        let n = (10_000usize).div_ceil(alines_per_frame);
        let start = Instant::now();
        for i in 0..n {
            plan.process_frame(frames[i % frames.len()].to_f64().view(), &mut db, &timer);
        }
        (n * alines_per_frame) as f64 / start.elapsed().as_secs_f64()
    };

    let mut scaling = Vec::new();
    if opts.scaling {
        for n in [10_000usize, 100_000, 1_000_000] {
            let repeats = if n >= 1_000_000 { 1 } else { opts.repeats };
            let runs: Vec<f64> = (0..repeats).map(|_| time_pipeline(&fused, &frames, alines_per_frame, depth, n).0).collect();
            scaling.push(ScalingPoint { alines: n, alines_per_second: median(runs) });
        }
    }

    // `run` end to end, median of up to 3 runs, each into a fresh output
    // directory: replacing the last run's files (freeing their page cache)
    // is not part of `run`.
    let time_run = |config: &PipelineConfig| -> Result<f64> {
        let out = opts.work_dir.join("end-to-end");
        let mut runs = Vec::new();
        for _ in 0..opts.repeats.min(3) {
            std::fs::remove_dir_all(&out).ok();
            let outcome = crate::run::process_capture(&path, config, &out, crate::run::RunContext::default())?;
            runs.push((outcome.frames * outcome.alines) as f64 / outcome.seconds);
        }
        std::fs::remove_dir_all(&out).ok();
        Ok(median(runs))
    };
    let (end_to_end, end_to_end_uint16, volume_only, sha256) = if opts.end_to_end {
        let mut packed = config.clone();
        packed.output.volume_type = crate::pipeline::config::VolumeType::Uint16;
        let mut bare = config.clone();
        bare.output.png = false;
        bare.output.report = false;
        let mut sha = config.clone();
        sha.output.input_hash = crate::pipeline::config::InputHash::Sha256;
        (Some(time_run(&config)?), Some(time_run(&packed)?), Some(time_run(&bare)?), Some(time_run(&sha)?))
    } else {
        (None, None, None, None)
    };

    let contrast = time_contrast(&config, &capture, &plan, &frames, opts, pipe_rate)?;
    let simulator = if opts.simulator { Some(time_simulator(opts)?) } else { None };

    Ok(BenchReport {
        contrast,
        simulator,
        machine: machine(),
        capture: path,
        pixels,
        alines_per_run: opts.alines.div_ceil(alines_per_frame) * alines_per_frame,
        repeats: opts.repeats,
        pipeline: "pipelines/throughput.toml: u16, median background, cubic k-resampling, a2/a3 on, Hann, FFT, dB, 8-bit mapping".into(),
        bare_fft_alines_per_second: fft_rate,
        pipeline_alines_per_second: pipe_rate,
        pipeline_over_fft: pipe_rate / fft_rate,
        kernel: kernel.name(),
        kernel_choice: fused.choice.clone(),
        variants,
        sizes,
        capture_background_alines_per_second: capture_bg_rate,
        capture_background_over_fft: capture_bg_rate / fft_rate,
        pipeline_parts_seconds: parts,
        fused_fft: if fused.uses_lane_fft() { "lane" } else { "rustfft" }.into(),
        reference_alines_per_second: reference_rate,
        scaling,
        end_to_end_alines_per_second: end_to_end,
        end_to_end_over_pipeline: end_to_end.map(|e| e / pipe_rate),
        end_to_end_uint16_alines_per_second: end_to_end_uint16,
        end_to_end_uint16_over_pipeline: end_to_end_uint16.map(|e| e / pipe_rate),
        end_to_end_volume_only_alines_per_second: volume_only,
        end_to_end_volume_only_over_pipeline: volume_only.map(|e| e / pipe_rate),
        end_to_end_sha256_alines_per_second: sha256,
        end_to_end_sha256_over_pipeline: sha256.map(|e| e / pipe_rate),
    })
}

/// The fused pipeline with each variant the CPU runs forced in turn, as
/// A-lines per second (median of `repeats`) and against `fft_rate`. The
/// forcing of `bench --kernel` (or none) is restored afterwards.
fn time_variants(plan: &Plan, frames: &[RawFrame], alines_per_frame: usize, alines: usize, repeats: usize, fft_rate: f64) -> Vec<VariantPoint> {
    use crate::pipeline::kernel;
    let before = kernel::forced().filter(|(_, by)| *by != kernel::ENV).map(|(v, _)| v);
    let depth = plan.summary.depth_pixels;
    let points = kernel::supported()
        .into_iter()
        .map(|v| {
            kernel::force(Some(v));
            let f = FusedPlan::new(plan);
            time_pipeline(&f, frames, alines_per_frame, depth, alines.min(20_000));
            let rate = median((0..repeats).map(|_| time_pipeline(&f, frames, alines_per_frame, depth, alines).0).collect());
            VariantPoint { variant: v.name(), alines_per_second: rate, over_fft: rate / fft_rate }
        })
        .collect();
    kernel::force(before);
    points
}

/// The wavelength map `map` resampled to `pixels` pixels (linear
/// interpolation in the pixel coordinate: the same curve, another camera).
fn map_for_pixels(map: &[f64], pixels: usize) -> Vec<f64> {
    let n = map.len();
    (0..pixels)
        .map(|p| {
            let x = p as f64 * (n - 1) as f64 / (pixels - 1) as f64;
            let i = (x.floor() as usize).min(n - 2);
            let t = x - i as f64;
            map[i] * (1.0 - t) + map[i + 1] * t
        })
        .collect()
}

/// Synthetic u16 frames of 1000 A-lines at `pixels` pixels: a Gaussian
/// source spectrum on a dark level, a few reflectors' fringes and noise.
fn synthetic_frames(pixels: usize, frames: usize) -> Vec<RawFrame> {
    let mut state = 0x2545_F491_4F6C_DD1Du64;
    (0..frames)
        .map(|f| {
            RawFrame::U16(Array2::from_shape_fn((SIZE_FRAME_ALINES, pixels), |(a, p)| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                let x = p as f64 / pixels as f64;
                let source = 2400.0 * (-((x - 0.5) / 0.3).powi(2)).exp();
                let depth = 0.05 * pixels as f64 + ((a + 37 * f) % 200) as f64;
                let fringe = 0.08 * source * (2.0 * std::f64::consts::PI * depth * x).cos() + 0.03 * source * (2.0 * std::f64::consts::PI * 1.7 * depth * x).cos();
                (400.0 + source + fringe + (state % 61) as f64) as u16
            }))
        })
        .collect()
}

/// Every camera size of [`SIZES`]: the bench pipeline planned for that
/// many pixels (the capture's wavelength curve resampled), timed with its
/// measured choice and with each variant forced, against the bare FFT of
/// its length, same run.
fn time_sizes(config: &PipelineConfig, map: &[f64], opts: &BenchOptions) -> Result<Vec<SizePoint>> {
    let alines = opts.alines.clamp(SIZE_FRAME_ALINES, 50_000);
    let repeats = opts.repeats.min(3);
    let mut out = Vec::new();
    for pixels in SIZES {
        let map_n = map_for_pixels(map, pixels);
        let plan = Plan::new(config, CaptureGeometry { wavelength_nm: &map_n, background: None, source_spectrum: None })?;
        let frames = synthetic_frames(pixels, 4);
        let (length, depth) = (plan.summary.fft_length, plan.summary.depth_pixels);
        let fused = FusedPlan::new(&plan);
        time_bare_fft(length, alines.min(20_000));
        time_pipeline(&fused, &frames, SIZE_FRAME_ALINES, depth, alines.min(20_000));
        let (mut fft_runs, mut pipe_runs) = (Vec::new(), Vec::new());
        let mut parts = serde_json::Map::new();
        for r in 0..repeats {
            fft_runs.push(time_bare_fft(length, alines));
            let (rate, timer) = time_pipeline(&fused, &frames, SIZE_FRAME_ALINES, depth, alines);
            pipe_runs.push(rate);
            if r == 0 {
                for (name, s) in crate::pipeline::fused::FusedTimer::PARTS.iter().zip(timer.seconds()) {
                    parts.insert(name.to_string(), serde_json::json!(s));
                }
            }
        }
        let (fft_rate, rate) = (median(fft_runs), median(pipe_runs));
        let variants = time_variants(&plan, &frames, SIZE_FRAME_ALINES, alines, repeats, fft_rate);
        out.push(SizePoint { pixels, fft_length: length, bare_fft_alines_per_second: fft_rate, chosen: fused.variant.name(), alines_per_second: rate, over_fft: rate / fft_rate, variants, parts_seconds: parts });
    }
    Ok(out)
}

/// Contrast workloads in memory: each frame reconstructed with its complex
/// profile, every 4 frames one position through `contrast::position`, with
/// the buffers reused from position to position as `run` does.
fn time_contrast(base: &PipelineConfig, capture: &Capture, plan: &Plan, frames: &[RawFrame], opts: &BenchOptions, pipe_rate: f64) -> Result<Vec<ContrastPoint>> {
    use crate::contrast::doppler::DopplerScale;
    use crate::contrast::position::{PositionProcessor, RepeatFrame};
    const N: usize = 4;
    let (alines, _) = capture.frame_shape();
    let depth = plan.summary.depth_pixels;
    let depth_um: Vec<f64> = (0..depth).map(|i| plan.depth_um(i)).collect();
    let fused = FusedPlan::new(plan);
    let workloads: [(&str, &str); 6] = [
        ("complex depth profile only (no contrast stage)", "[output]\ncomplex = true\n"),
        ("Doppler between A-lines (Kasai 3 x 4)", "[doppler]\nenabled = true\n"),
        ("angiography N = 4, decorrelation", "[angiography]\nmethods = [\"decorrelation\"]\n"),
        ("angiography N = 4, decorrelation + registration", "[angiography]\nmethods = [\"decorrelation\"]\n[registration]\nrepeats = true\n"),
        ("angiography N = 4, split-spectrum (4 bands)", "[angiography]\nmethods = [\"split_spectrum\"]\n"),
        ("angiography N = 4, all four methods", "[angiography]\nmethods = [\"decorrelation\", \"split_spectrum\", \"speckle_variance\", \"complex_difference\"]\n"),
    ];
    let positions = (opts.alines.div_ceil(alines).div_ceil(N)).clamp(2, 16);
    let mut out = Vec::new();
    for (name, extra) in workloads {
        let mut config: PipelineConfig = PipelineConfig::from_str("bench", &format!("{PIPELINE}\n[volume]\naverage = {N}\n{extra}")).map_err(|e| anyhow::anyhow!("{e}"))?;
        config.input = base.input.clone();
        let sub_bands: Vec<FusedPlan> = if config.angiography.methods.contains(&crate::pipeline::config::AngiographyMethod::SplitSpectrum) {
            let shaping = plan.shaping_gain();
            crate::contrast::angiography::sub_band_windows(plan.summary.k_samples, config.angiography.split_bands, config.angiography.split_band_fwhm)
                .into_iter()
                .map(|w| {
                    let gain: Vec<f64> = w.iter().zip(&shaping).map(|(a, b)| a * b).collect();
                    FusedPlan::with_spectral_gain(plan, &gain, 2.0 / w.iter().sum::<f64>())
                })
                .collect()
        } else {
            Vec::new()
        };
        let centre = plan.summary.band_centre_wavelength_nm;
        let scale = config.doppler.enabled.then(|| DopplerScale::new(centre, config.doppler.group_index, 20.0, centre, "band centre (bench)"));
        let timer = fused.new_timer();
        let mut runs = Vec::new();
        for _ in 0..opts.repeats.min(3) {
            let mut processor = PositionProcessor::new(&config, depth_um.clone(), alines, scale);
            let needs_complex = config.needs_complex();
            let mut repeats: Vec<RepeatFrame> = (0..N)
                .map(|_| RepeatFrame {
                    db: Array2::<f32>::zeros((depth, alines)),
                    complex: needs_complex.then(|| Array2::<Complex32>::zeros((depth, alines))),
                    sub_bands: sub_bands.iter().map(|_| Array2::<f32>::zeros((depth, alines))).collect(),
                    amplitude: if needs_complex { Array2::zeros((0, 0)) } else { Array2::zeros((depth, alines)) },
                    ..Default::default()
                })
                .collect();
            let mut scratch = Array2::<f32>::zeros((depth, alines));
            let start = Instant::now();
            for p in 0..positions {
                for (r, slot) in repeats.iter_mut().enumerate() {
                    let raw = &frames[(p * N + r) % frames.len()];
                    if slot.db.dim() != (depth, alines) {
                        slot.db = Array2::<f32>::zeros((depth, alines));
                    }
                    let extra = match slot.complex.as_mut() {
                        Some(c) => Extra { complex: Some(c), amplitude: None },
                        None => Extra { complex: None, amplitude: Some(&mut slot.amplitude) },
                    };
                    fused.process_raw_image_staged(samples(raw), &mut slot.db, extra, &timer);
                    for (sp, band) in sub_bands.iter().zip(slot.sub_bands.iter_mut()) {
                        sp.process_raw_image_with(samples(raw), &mut scratch, Extra { complex: None, amplitude: Some(band) }, &timer);
                    }
                    slot.index = p * N + r;
                }
                std::hint::black_box(processor.process(p, &mut repeats)?);
            }
            runs.push((positions * N * alines) as f64 / start.elapsed().as_secs_f64());
        }
        let rate = median(runs);
        out.push(ContrastPoint { workload: name.into(), alines_per_second: rate, over_pipeline: rate / pipe_rate });
    }
    Ok(out)
}

/// The simulator on the sample scene, vectorised kernels against the
/// standard library's functions.
fn time_simulator(opts: &BenchOptions) -> Result<SimulatorPoint> {
    const SAMPLE: &str = include_str!("../../sample-data/layered-phantom.toml");
    let scene = crate::simulate::scene::Scene::from_str("sample-data/layered-phantom.toml", SAMPLE).map_err(|e| anyhow::anyhow!("{e}"))?;
    std::fs::create_dir_all(&opts.work_dir)?;
    let path = opts.work_dir.join("simulator-bench.h5");
    let time = |standard: bool| -> Result<f64> {
        crate::simulate::use_standard_library_math(standard);
        let t = Instant::now();
        crate::simulate::simulate(&scene, &path)?;
        Ok(t.elapsed().as_secs_f64())
    };
    // Warm the page cache and the allocator once, untimed, so the first
    // timed run does not pay for them alone.
    time(false)?;
    let fast = median(vec![time(false)?, time(false)?, time(false)?]);
    let plain = time(true);
    let serial = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .map_err(|e| anyhow::anyhow!("{e}"))
        .and_then(|pool| pool.install(|| time(true)));
    crate::simulate::use_standard_library_math(false);
    let plain = plain?;
    let serial = serial?;
    std::fs::remove_file(&path).ok();
    std::fs::remove_file(crate::simulate::truth_path(&path)).ok();
    Ok(SimulatorPoint { scene: "sample-data/layered-phantom.toml".into(), alines: scene.frames * scene.alines, vectorised_seconds: fast, standard_library_seconds: plain, speed_up: plain / fast,
        threads: rayon::current_num_threads(),
        serial_scalar_seconds: serial,
        speed_up_over_serial_scalar: serial / fast,
    })
}

impl BenchReport {
    pub fn render(&self) -> String {
        let m = &self.machine;
        let mut s = format!(
            "machine: {} ({} logical CPUs, {} threads, AVX2+FMA {})\ncapture: {} ({} pixels), {} A-lines per run, median of {}\npipeline: {}\n\n",
            m.cpu,
            m.logical_cpus,
            m.threads,
            if m.avx2_fma { "yes" } else { "no" },
            self.capture.display(),
            self.pixels,
            self.alines_per_run,
            self.repeats,
            self.pipeline
        );
        s += &format!("{:<44} {:>14}\n", "", "A-lines/s");
        s += &format!("{:<44} {:>14.0}\n", "bare rustfft forward FFT (f32)", self.bare_fft_alines_per_second);
        s += &format!("{:<44} {:>14.0}\n", format!("full pipeline (fused f32 path, {})", self.kernel), self.pipeline_alines_per_second);
        s += &format!("{:<44} {:>14.3}\n", "ratio pipeline / bare FFT", self.pipeline_over_fft);
        for v in &self.variants {
            s += &format!("{:<44} {:>14.0}   ratio {:.3}\n", format!("  forced kernel variant {}", v.variant), v.alines_per_second, v.over_fft);
        }
        s += &format!("  kernel variant chosen at plan time: {} ({})\n", self.kernel, self.kernel_choice.source);
        s += &format!("{:<44} {:>14.0}\n", "same, capture background instead of median", self.capture_background_alines_per_second);
        s += &format!("{:<44} {:>14.3}\n", "ratio (capture background) / bare FFT", self.capture_background_over_fft);
        s += &format!("{:<44} {:>14.0}\n", "plain f64 stage chain (reference)", self.reference_alines_per_second);
        for p in &self.scaling {
            s += &format!("{:<44} {:>14.0}\n", format!("pipeline over {} A-lines", p.alines), p.alines_per_second);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_alines_per_second, self.end_to_end_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "`run` end to end (default outputs, BLAKE3)", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio end to end / in-memory pipeline", r);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_uint16_alines_per_second, self.end_to_end_uint16_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "same, uint16 volume (half the bytes)", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio (uint16 volume) / in-memory pipeline", r);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_volume_only_alines_per_second, self.end_to_end_volume_only_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "same, volume only (no PNGs, no report)", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio (volume only) / in-memory pipeline", r);
        }
        if let (Some(e), Some(r)) = (self.end_to_end_sha256_alines_per_second, self.end_to_end_sha256_over_pipeline) {
            s += &format!("{:<44} {:>14.0}\n", "default outputs, input hashed by SHA-256", e);
            s += &format!("{:<44} {:>14.3}\n", "ratio (SHA-256) / in-memory pipeline", r);
        }
        if !self.sizes.is_empty() {
            s += "\ncamera sizes (synthetic u16 frames of 1000 A-lines, same pipeline), ratio to the bare FFT of each length:\n";
            s += &format!("  {:<8} {:<6} {:>12} {:>14}", "pixels", "FFT", "bare FFT/s", "chosen");
            for v in &self.sizes[0].variants {
                s += &format!(" {:>8}", v.variant);
            }
            s += "   thread-s: background / resample / fft / log\n";
            for p in &self.sizes {
                s += &format!("  {:<8} {:<6} {:>12.0} {:>7} {:>6.3}", p.pixels, p.fft_length, p.bare_fft_alines_per_second, p.chosen, p.over_fft);
                for v in &p.variants {
                    s += &format!(" {:>8.3}", v.over_fft);
                }
                let part = |k: &str| p.parts_seconds.get(k).and_then(|v| v.as_f64()).unwrap_or(0.0);
                s += &format!("   {:.3} / {:.3} / {:.3} / {:.3}\n", part("background"), part("resample_disperse_window"), part("fft"), part("magnitude_log"));
            }
            s += "\n";
        }
        for c in &self.contrast {
            s += &format!("{:<44} {:>14.0}\n", c.workload, c.alines_per_second);
            s += &format!("{:<44} {:>14.3}\n", "  ratio to the intensity pipeline", c.over_pipeline);
        }
        if let Some(sim) = &self.simulator {
            s += &format!(
                "simulator, {} ({} A-lines): {:.2} s vectorised, {:.2} s with the standard library's cos/sin/exp: {:.1}x\n",
                sim.scene, sim.alines, sim.vectorised_seconds, sim.standard_library_seconds, sim.speed_up
            );
            s += &format!(
                "  against the serial scalar simulator (standard library, 1 thread: {:.2} s): {:.1}x with {} threads\n",
                sim.serial_scalar_seconds, sim.speed_up_over_serial_scalar, sim.threads
            );
        }
        s += &format!("\nfused pipeline, thread-seconds per part (first run; FFT: {}):\n", self.fused_fft);
        if self.fused_fft == "lane" {
            s += "  (lane FFT: the interpolation x factor runs inside the FFT's first level, so its time is under fft)\n";
        }
        for (k, v) in &self.pipeline_parts_seconds {
            s += &format!("  {k:<28} {:.3} s\n", v.as_f64().unwrap_or(0.0));
        }
        s
    }
}

/// Where the report is written by default.
pub fn default_work_dir() -> PathBuf {
    Path::new("out").join("bench")
}
