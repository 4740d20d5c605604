//! The processing stages, one module each, all behind the small [`Stage`] trait.
//!
//! A stage is built once per pipeline and capture by the planner
//! (`pipeline::plan`), which precomputes its tables (resampling weights,
//! dispersion phase, window). Per A-line it only reads and writes the
//! preallocated buffers of an [`ALine`]; it never allocates.
//!
//! Data flow through an A-line's buffers:
//! `spectrum` (camera pixels, real) → background → k-linearization writes
//! `field` (uniform wavenumber grid, complex, zero-padded) → dispersion →
//! shaping → window → fft writes `amplitude` (positive depths, cropped) → log
//! compression writes `db`.

use ndarray::ArrayView2;
use rustfft::num_complex::Complex64;

pub mod background;
pub mod dispersion;
pub mod fft;
pub mod k_linearization;
pub mod log_compression;
pub mod shaping;
pub mod window;

/// Per-thread working buffers for one A-line, sized once by the plan.
#[derive(Debug, Clone)]
pub struct ALine {
    /// Camera spectrum in pixel order (counts, as f64).
    pub spectrum: Vec<f64>,
    /// Scratch of spectrum length, for stages that reorder or solve.
    pub work: Vec<f64>,
    /// Second scratch of spectrum length.
    pub work2: Vec<f64>,
    /// Fringe on the uniform wavenumber grid, zero-padded to the FFT length;
    /// after the fft stage, the complex depth profile.
    pub field: Vec<Complex64>,
    /// FFT scratch.
    pub fft_scratch: Vec<Complex64>,
    /// Linear amplitude |A| of the kept depth range.
    pub amplitude: Vec<f64>,
    /// Log-compressed amplitude, 20·log10|A|, in dB.
    pub db: Vec<f32>,
}

impl ALine {
    pub fn new(pixels: usize, fft_length: usize, fft_scratch: usize, depth_pixels: usize) -> Self {
        ALine {
            spectrum: vec![0.0; pixels],
            work: vec![0.0; pixels],
            work2: vec![0.0; pixels],
            field: vec![Complex64::new(0.0, 0.0); fft_length],
            fft_scratch: vec![Complex64::new(0.0, 0.0); fft_scratch],
            amplitude: vec![0.0; depth_pixels],
            db: vec![0.0; depth_pixels],
        }
    }
}

/// Per-frame state shared by all A-lines of a frame.
#[derive(Debug, Clone, Default)]
pub struct FrameContext {
    /// Reference spectrum to subtract (empty: none).
    pub reference: Vec<f64>,
}

/// One processing step.
pub trait Stage: Send + Sync {
    /// The stage's name as written in the pipeline file and the log.
    fn name(&self) -> &'static str;
    /// Per-frame preparation from all of the frame's spectra
    /// (A-lines × pixels), before any A-line is processed. Default: nothing.
    fn begin_frame(&self, _frame: ArrayView2<'_, f64>, _ctx: &mut FrameContext) {}
    /// Process one A-line in place.
    fn apply(&self, ctx: &FrameContext, line: &mut ALine);
}
