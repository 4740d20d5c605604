//! The timing primitives of the bench: the bench capture and its frames in
//! memory, the fused pipeline and the bare FFT timed over a number of
//! A-lines, every kernel variant forced in turn, medians, the machine.

use anyhow::{Context, Result};
use ndarray::Array2;
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use rustfft::FftPlanner;
use std::path::PathBuf;
use std::time::Instant;

use super::*;
use crate::open::samples;
use crate::io::capture::{Capture, RawFrame};
use crate::pipeline::fused::{FusedPlan, LANES};
use crate::pipeline::plan::Plan;
use crate::stages::log_compression::{grey_levels_u8, noise_floor_db};

pub(super) fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

pub(super) fn machine() -> Machine {
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
pub(super) fn bench_capture(opts: &BenchOptions) -> Result<PathBuf> {
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
pub(super) fn load_frames(capture: &Capture) -> Result<Vec<RawFrame>> {
    (0..capture.frames).map(|f| capture.read_raw_frame(f).map(|(r, _)| r)).collect()
}

/// Times the fused pipeline plus the 8-bit mapping over `alines` A-lines,
/// cycling through the frames.
pub(super) fn time_pipeline(fused: &FusedPlan, frames: &[RawFrame], alines_per_frame: usize, depth: usize, alines: usize) -> (f64, crate::pipeline::fused::FusedTimer) {
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
pub(super) fn time_bare_fft(length: usize, alines: usize) -> f64 {
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

/// The fused pipeline with each variant the CPU runs forced in turn, as
/// A-lines per second (median of `repeats`) and against `fft_rate`. The
/// forcing of `bench --kernel` (or none) is restored afterwards.
pub(super) fn time_variants(plan: &Plan, frames: &[RawFrame], alines_per_frame: usize, alines: usize, repeats: usize, fft_rate: f64) -> Vec<VariantPoint> {
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
