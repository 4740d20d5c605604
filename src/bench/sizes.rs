//! The camera-size table: the bench pipeline planned for 1024, 2048, 4096
//! and 2000 pixels on synthetic frames, each against the bare FFT of its
//! length, same run.

use anyhow::Result;
use ndarray::Array2;

use super::*;
use crate::io::capture::RawFrame;
use crate::pipeline::config::PipelineConfig;
use crate::pipeline::fused::FusedPlan;
use crate::pipeline::plan::{CaptureGeometry, Plan};

/// Camera sizes timed side by side (pixels per spectrum; 2000 is not a
/// power of two, so its FFT is rustfft's in every variant).
pub const SIZES: [usize; 4] = [1024, 2048, 4096, 2000];

/// A-lines per frame of the synthetic frames of the size table.
pub(super) const SIZE_FRAME_ALINES: usize = 1000;

/// The wavelength map `map` resampled to `pixels` pixels (linear
/// interpolation in the pixel coordinate: the same curve, another camera).
pub(super) fn map_for_pixels(map: &[f64], pixels: usize) -> Vec<f64> {
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
pub(super) fn synthetic_frames(pixels: usize, frames: usize) -> Vec<RawFrame> {
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
pub(super) fn time_sizes(config: &PipelineConfig, map: &[f64], opts: &BenchOptions) -> Result<Vec<SizePoint>> {
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
