//! Dispersion stage: numerical compensation of the dispersion mismatch
//! between the interferometer's arms.
//!
//! Multiplies the resampled fringe by exp(−i·(a2·x² + a3·x³)), with
//! x = (k − k_centre)/(k_max − k_min) ∈ [−½, ½] and a2, a3 in radians
//! (polynomial phase correction as in Wojtkowski et al. 2004, Opt. Express
//! 12:2404). The complex factor is computed once per pipeline.

use rustfft::num_complex::Complex64;

use super::{ALine, FrameContext, Stage};

#[derive(Debug, Clone)]
pub struct Dispersion {
    factor: Vec<Complex64>,
}

/// Normalised spectral coordinate x ∈ [−½, ½] of sample `j` of `samples`.
pub fn normalised_coordinate(j: usize, samples: usize) -> f64 {
    j as f64 / (samples - 1) as f64 - 0.5
}

/// The correction phase a2·x² + a3·x³ in radians.
pub fn correction_phase(a2: f64, a3: f64, x: f64) -> f64 {
    a2 * x * x + a3 * x * x * x
}

impl Dispersion {
    pub fn new(a2: f64, a3: f64, samples: usize) -> Self {
        let factor = (0..samples)
            .map(|j| {
                let phi = correction_phase(a2, a3, normalised_coordinate(j, samples));
                Complex64::from_polar(1.0, -phi)
            })
            .collect();
        Dispersion { factor }
    }
}

impl Stage for Dispersion {
    fn name(&self) -> &'static str {
        "dispersion"
    }

    fn apply(&self, _ctx: &FrameContext, line: &mut ALine) {
        for (v, f) in line.field.iter_mut().zip(self.factor.iter()) {
            *v *= f;
        }
    }
}
