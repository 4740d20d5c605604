//! Log-compression stage: 20·log10|A| in dB, and the mapping of a frame's dB
//! values to 8-bit or 16-bit grey levels for images.
//!
//! The grey mapping is either fixed ([db_min, db_max] → [0, max grey]) or
//! automatic: the frame's noise floor (median of its dB values: most depth
//! pixels hold only noise, common practice) plus an offset gives black, and
//! black plus a dynamic range in dB gives white.

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

/// Noise floor estimate of a frame in dB: the median of its values.
pub fn noise_floor_db(db: &[f32]) -> f64 {
    if db.is_empty() {
        return f64::NAN;
    }
    let mut v: Vec<f64> = db.iter().map(|&x| x as f64).collect();
    crate::stages::background::median_in_place(&mut v)
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
    fn grey_mapping_clamps_and_scales() {
        // 30 dB of 0..50 dB → 0.6 × 255 = 153.
        let g = grey_levels(&[-10.0, 0.0, 30.0, 50.0, 80.0], 0.0, 50.0, 255.0);
        assert_eq!(g, vec![0, 0, 153, 255, 255]);
    }
}
