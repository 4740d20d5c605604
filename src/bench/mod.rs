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
//!
//! By part: `timing.rs` the primitives (capture, bare FFT, pipeline,
//! variants), `sizes.rs` the camera-size table, `contrast.rs` and
//! `simulator.rs` their workloads, `report.rs` the report and its text.

mod contrast;
mod readers;
mod report;
mod simulator;
mod sizes;
mod timing;

use anyhow::{bail, Result};
use ndarray::Array2;
use std::path::{Path, PathBuf};
use std::time::Instant;

use crate::pipeline::config::PipelineConfig;
use crate::pipeline::fused::FusedPlan;
use crate::pipeline::plan::{CaptureGeometry, Plan};
pub use readers::{ReaderPoint, ReadersReport};
pub use report::{BenchReport, ContrastPoint, Machine, ScalingPoint, SimulatorPoint, SizePoint, VariantPoint};
pub use sizes::SIZES;
use contrast::time_contrast;
use simulator::time_simulator;
use sizes::time_sizes;
use timing::{bench_capture, load_frames, machine, median, time_bare_fft, time_pipeline, time_variants};

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
    /// Also time the capture readers against HDF5 and the memory of reading
    /// a 2 GB raw capture.
    pub readers: bool,
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
    let reference_rate = reference_rate(&plan, &frames, alines_per_frame, depth);
    let scaling = if opts.scaling { time_scaling(&fused, &frames, alines_per_frame, depth, opts.repeats) } else { Vec::new() };
    let (end_to_end, end_to_end_uint16, volume_only, sha256) = if opts.end_to_end { time_end_to_end(&path, &config, opts)? } else { (None, None, None, None) };

    let contrast = time_contrast(&config, &capture, &plan, &frames, opts, pipe_rate)?;
    let readers = if opts.readers { Some(readers::time_readers(&path, &config, &opts.work_dir, opts.repeats)?) } else { None };
    let simulator = if opts.simulator { Some(time_simulator(opts)?) } else { None };

    Ok(BenchReport {
        readers,
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

/// The plain f64 stage chain (the reference engine) on about 10,000 A-lines.
fn reference_rate(plan: &Plan, frames: &[crate::io::capture::RawFrame], alines_per_frame: usize, depth: usize) -> f64 {
    let timer = plan.new_timer();
    let mut db = Array2::<f32>::zeros((alines_per_frame, depth));
    let n = (10_000usize).div_ceil(alines_per_frame);
    let start = Instant::now();
    for i in 0..n {
        plan.process_frame(frames[i % frames.len()].to_f64().view(), &mut db, &timer);
    }
    (n * alines_per_frame) as f64 / start.elapsed().as_secs_f64()
}

/// The fused pipeline at 10k, 100k and 1M A-lines (1M once).
fn time_scaling(fused: &FusedPlan, frames: &[crate::io::capture::RawFrame], alines_per_frame: usize, depth: usize, repeats: usize) -> Vec<ScalingPoint> {
    [10_000usize, 100_000, 1_000_000]
        .into_iter()
        .map(|n| {
            let repeats = if n >= 1_000_000 { 1 } else { repeats };
            let runs: Vec<f64> = (0..repeats).map(|_| time_pipeline(fused, frames, alines_per_frame, depth, n).0).collect();
            ScalingPoint { alines: n, alines_per_second: median(runs) }
        })
        .collect()
}

/// Rates of `run` end to end with the bench pipeline, with a uint16 volume,
/// with the volume only (no PNGs, no report) and with SHA-256 input hashes.
#[allow(clippy::type_complexity)]
fn time_end_to_end(path: &Path, config: &PipelineConfig, opts: &BenchOptions) -> Result<(Option<f64>, Option<f64>, Option<f64>, Option<f64>)> {
    let time_run = |config: &PipelineConfig| -> Result<f64> {
        let out = opts.work_dir.join("end-to-end");
        let mut runs = Vec::new();
        for _ in 0..opts.repeats.min(3) {
            std::fs::remove_dir_all(&out).ok();
            let outcome = crate::run::process_capture(path, config, &out, crate::run::RunContext::default())?;
            runs.push((outcome.frames * outcome.alines) as f64 / outcome.seconds);
        }
        std::fs::remove_dir_all(&out).ok();
        Ok(median(runs))
    };
    let mut packed = config.clone();
    packed.output.volume_type = crate::pipeline::config::VolumeType::Uint16;
    let mut bare = config.clone();
    bare.output.png = false;
    bare.output.report = false;
    let mut sha = config.clone();
    sha.output.input_hash = crate::pipeline::config::InputHash::Sha256;
    Ok((Some(time_run(config)?), Some(time_run(&packed)?), Some(time_run(&bare)?), Some(time_run(&sha)?)))
}

/// Where the report is written by default.
pub fn default_work_dir() -> PathBuf {
    Path::new("out").join("bench")
}
