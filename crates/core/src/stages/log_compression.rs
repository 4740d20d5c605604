//! Log-compression stage: 20·log10|A| in dB, and the mapping of a frame's dB
//! values to 8-bit or 16-bit grey levels for images.
//!
//! The grey mapping is either fixed ([black_db, white_db] → [0, max grey]) or
//! automatic: the frame's noise floor (median of its dB values: most depth
//! pixels hold only noise, common practice) plus an offset gives black, and
//! a high percentile of the frame's values (99.9th by default) gives white,
//! at most a dynamic range above black; so the brightest structure is near
//! white whatever the sample.

use serde::{Deserialize, Serialize};

use super::{ALine, FrameContext, Stage};

/// Amplitudes below this are treated as this (−240 dB), so log10 stays finite.
pub const AMPLITUDE_FLOOR: f64 = 1e-12;

pub fn to_db(amplitude: f64) -> f64 {
    20.0 * amplitude.max(AMPLITUDE_FLOOR).log10()
}

#[derive(Debug, Clone)]
pub struct LogCompression;

impl Stage for LogCompression {
    fn name(&self) -> &'static str {
        "log_compression"
    }

    fn apply(&self, _ctx: &FrameContext, line: &mut ALine) {
        for (d, a) in line.db.iter_mut().zip(line.amplitude.iter()) {
            *d = to_db(*a) as f32;
        }
    }
}

/// How dB values become grey levels.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum GreyMapping {
    Auto,
    Fixed,
}

/// Most values the noise-floor median looks at; larger frames are sampled
/// at a fixed stride.
pub const NOISE_FLOOR_SAMPLES: usize = 16_384;

/// Noise floor estimate of a frame in dB: the median of its values, or for
/// frames of more than [`NOISE_FLOOR_SAMPLES`] values the median of every
/// s-th value (s = ⌈n / NOISE_FLOOR_SAMPLES⌉; deterministic).
pub fn noise_floor_db(db: &[f32]) -> f64 {
    if db.is_empty() {
        return f64::NAN;
    }
    let stride = db.len().div_ceil(NOISE_FLOOR_SAMPLES);
    let mut v: Vec<f32> = db.iter().step_by(stride).copied().collect();
    let n = v.len();
    let mid = n / 2;
    let (lower, upper_mid, _) = v.select_nth_unstable_by(mid, f32::total_cmp);
    let upper = *upper_mid as f64;
    if n % 2 == 1 {
        upper
    } else {
        // NumPy convention for an even count: the mean of the two middle values.
        let below = lower.iter().copied().fold(f32::NEG_INFINITY, f32::max) as f64;
        0.5 * (below + upper)
    }
}

/// The q-th percentile (0 < q ≤ 100) of a frame's dB values, over the same
/// deterministic sample as [`noise_floor_db`] (nearest rank).
pub fn percentile_db(db: &[f32], q: f64) -> f64 {
    if db.is_empty() {
        return f64::NAN;
    }
    let stride = db.len().div_ceil(NOISE_FLOOR_SAMPLES);
    let mut v: Vec<f32> = db.iter().step_by(stride).copied().collect();
    // Nearest rank, with a margin for the rounding of q/100·n.
    let i = (((q / 100.0) * v.len() as f64 - 1e-9).ceil() as usize).clamp(1, v.len()) - 1;
    let (_, x, _) = v.select_nth_unstable_by(i, f32::total_cmp);
    *x as f64
}

/// (black, white) dB of the automatic mapping: black = floor + offset,
/// white = the `white_percentile`-th percentile, at most `dynamic_range_db`
/// above black and at least 1 dB above it.
pub fn auto_levels(db: &[f32], floor_db: f64, floor_offset_db: f64, dynamic_range_db: f64, white_percentile: f64) -> (f64, f64) {
    let black = floor_db + floor_offset_db;
    let white = percentile_db(db, white_percentile).min(black + dynamic_range_db).max(black + 1.0);
    (black, white)
}

/// Largest value (NaN-free input), in SIMD-friendly chunks.
pub fn peak_db(db: &[f32]) -> f32 {
    let mut acc = [f32::NEG_INFINITY; 16];
    let mut chunks = db.chunks_exact(16);
    for c in &mut chunks {
        for (a, &v) in acc.iter_mut().zip(c) {
            *a = if v > *a { v } else { *a };
        }
    }
    let rest = chunks.remainder().iter().copied().fold(f32::NEG_INFINITY, f32::max);
    acc.iter().copied().fold(rest, f32::max)
}

/// 8-bit grey levels of dB values: [black, white] → [0, 255], rounded,
/// clamped (the f32 twin of [`grey_levels`]).
pub fn grey_levels_u8(db: &[f32], black_db: f64, white_db: f64, out: &mut [u8]) {
    #[cfg(target_arch = "x86_64")]
    {
        if crate::pipeline::kernel::avx2() {
            // SAFETY: the CPU supports AVX2.
            unsafe { grey_levels_u8_avx2(db, black_db, white_db, out) };
            return;
        }
    }
    grey_levels_u8_inline(db, black_db, white_db, out);
}

/// The same loop compiled for AVX2 (8 values per instruction).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn grey_levels_u8_avx2(db: &[f32], black_db: f64, white_db: f64, out: &mut [u8]) {
    grey_levels_u8_inline(db, black_db, white_db, out);
}

#[inline(always)]
fn grey_levels_u8_inline(db: &[f32], black_db: f64, white_db: f64, out: &mut [u8]) {
    let scale = (255.0 / (white_db - black_db)) as f32;
    let black = black_db as f32;
    for (o, &d) in out.iter_mut().zip(db) {
        // Round half up (values are ≥ 0 after the clamp): the same as round().
        let v = ((d - black) * scale).clamp(0.0, 255.0) + 0.5;
        // f32::max/min drop a NaN (clamp would keep it), so v ends up
        // finite in [0, 255.5].
        #[allow(clippy::manual_clamp)]
        let v = v.max(0.0).min(255.5);
        // SAFETY: v is finite and within i32's range.
        *o = unsafe { v.to_int_unchecked::<i32>() } as u8;
    }
}

/// Maps dB values linearly from [black_db, white_db] to [0, max_grey],
/// clamping outside, rounding to nearest.
pub fn grey_levels(db: &[f32], black_db: f64, white_db: f64, max_grey: f64) -> Vec<u16> {
    let scale = max_grey / (white_db - black_db);
    db.iter()
        .map(|&d| ((d as f64 - black_db) * scale).round().clamp(0.0, max_grey) as u16)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn db_of_amplitude() {
        assert!((to_db(10.0) - 20.0).abs() < 1e-12);
        assert!((to_db(0.5) + 6.0206).abs() < 1e-4);
        assert_eq!(to_db(0.0), -240.0);
    }

    #[test]
    fn percentile_and_auto_levels() {
        let v: Vec<f32> = (0..1000).map(|i| i as f32 / 10.0).collect();
        // Nearest rank: the 999th of 1000 values for 99.9 %.
        assert_eq!(percentile_db(&v, 99.9), 99.8f32 as f64);
        assert_eq!(percentile_db(&v, 100.0), 99.9f32 as f64);
        let (b, w) = auto_levels(&v, 10.0, 3.0, 45.0, 99.9);
        assert_eq!((b, w), (13.0, 58.0)); // capped at black + 45 dB
        let (_, w) = auto_levels(&v, 80.0, 3.0, 45.0, 99.9);
        assert!((w - 99.8).abs() < 1e-4, "{w}");
    }

    #[test]
    fn grey_mapping_clamps_and_scales() {
        // 30 dB of 0..50 dB → 0.6 × 255 = 153.
        let g = grey_levels(&[-10.0, 0.0, 30.0, 50.0, 80.0], 0.0, 50.0, 255.0);
        assert_eq!(g, vec![0, 0, 153, 255, 255]);
    }
}
