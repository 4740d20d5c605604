//! FFT stage: transforms the windowed fringe from wavenumber to depth with
//! rustfft, keeps the positive-depth half (optionally cropped) and writes the
//! amplitude |A|.
//!
//! The amplitude is scaled by 2/Σw (Σw the sum of the window over the
//! wavenumber samples), so a reflector whose fringe has amplitude a counts
//! reads close to a at its peak (common practice: coherent-gain normalisation).

use std::sync::Arc;

use rustfft::{Fft as RustFft, FftPlanner};

use super::{ALine, FrameContext, Stage};

pub struct Fft {
    transform: Arc<dyn RustFft<f64>>,
    /// First kept depth bin.
    pub first_bin: usize,
    /// Number of kept depth bins.
    pub depth_pixels: usize,
    scale: f64,
}

impl std::fmt::Debug for Fft {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Fft")
            .field("length", &self.transform.len())
            .field("first_bin", &self.first_bin)
            .field("depth_pixels", &self.depth_pixels)
            .finish()
    }
}

impl Fft {
    /// `fft_length` points, keeping bins `first_bin .. first_bin + depth_pixels`
    /// (all inside the positive half), amplitude scaled by `2 / window_sum`.
    pub fn new(fft_length: usize, first_bin: usize, depth_pixels: usize, window_sum: f64) -> Self {
        assert!(first_bin + depth_pixels <= fft_length / 2 + 1);
        let transform = FftPlanner::new().plan_fft_forward(fft_length);
        Fft { transform, first_bin, depth_pixels, scale: 2.0 / window_sum }
    }

    pub fn length(&self) -> usize {
        self.transform.len()
    }

    pub fn scratch_length(&self) -> usize {
        self.transform.get_inplace_scratch_len()
    }
}

impl Stage for Fft {
    fn name(&self) -> &'static str {
        "fft"
    }

    fn apply(&self, _ctx: &FrameContext, line: &mut ALine) {
        self.transform.process_with_scratch(&mut line.field, &mut line.fft_scratch);
        let kept = &line.field[self.first_bin..self.first_bin + self.depth_pixels];
        for (a, v) in line.amplitude.iter_mut().zip(kept.iter()) {
            *a = v.norm() * self.scale;
        }
    }
}
