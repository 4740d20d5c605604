//! The fused fast path: the same reconstruction as the stage chain of
//! [`Plan`], in f32, with every step before the FFT done in one pass over a
//! block of A-lines.
//!
//! Everything between the camera and the FFT is linear in the spectrum, so
//! per A-line the path is: samples (native type) − reference spectrum →
//! natural cubic spline (or linear) onto the k grid → × one precomputed
//! complex factor per k sample (dispersion phase × spectral shaping ×
//! window) → FFT → |·|² → dB by a polynomial log2 → output row.
//!
//! A-lines go through in blocks of [`LANES`]: the block is stored
//! pixel-major with one A-line per lane, so the spline's serial tridiagonal
//! sweeps and the interpolation run on all lanes at once (SIMD). In the
//! AVX-512 variant the block then stays in that order to the end: the FFT
//! is [`lane_fft`] (16 transforms per vector, the interpolation × factor
//! computed inside its first level), and the dB pass reads the depth bins
//! from the FFT's output order and stores 16 adjacent image columns per
//! vector. In the AVX2 and scalar variants each lane is scattered into its
//! own FFT row for one rustfft call per line, and |X|², dB and the
//! transpose into the image go together in one pass. No allocation per
//! A-line: each worker thread owns one workspace. The plain stage modules
//! stay the reference implementation; tests hold every variant of this
//! path to them within 1e-4 of the peak amplitude.
//!
//! The files, one per kernel family (each says which reference stage it
//! must match):
//! - this file: the plan (tables made once) and the frame entry points;
//! - [`dispatch`]: which variant's block kernel runs, and `simd_path`;
//! - [`tune`]: the variant chosen by timing it on the plan, and its cache;
//! - [`background`]: the reference spectrum (mean, exact median);
//! - [`resample`]: lane-order loading and the spline onto the k grid;
//! - [`super::factor`] (beside the plan, which uses it too): dispersion phase
//!   × shaping × window, and the depth phase;
//! - [`lane_fft`]: the FFT across lanes (AVX-512);
//! - [`log_db`]: |X|², the polynomial log2 and the dB, amplitude and
//!   complex outputs.

pub mod background;
pub mod dispatch;
pub mod lane_fft;
pub mod log_db;
pub mod resample;
pub mod tune;

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use rustfft::Fft;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;
use std::time::Instant;

pub use background::{MedianHint, MedianKey};
use background::Reference;
pub use dispatch::simd_path;
pub use super::factor::complex_depth_factors;
use lane_fft::{LaneComplex, LaneFft};
pub use log_db::FastLog2;
use resample::{LaneBuffer, PixelOrderSpline};
use super::kernel::Variant;
use super::plan::Plan;
use crate::stages::background::BackgroundSource;
use crate::stages::log_compression::AMPLITUDE_FLOOR;

/// A-lines processed together, one per SIMD lane.
pub const LANES: usize = 16;

/// Padding (f32 values) after each line of a block's spectra,
/// and (complex values) after each FFT row: line strides that are a power
/// of two put all 16 lines of a block into the same L1 cache set, so the
/// transposes between line order and lane order miss on every access.
const ROW_PAD: usize = 16;
const FFT_ROW_PAD: usize = 8;
type Lane = [f32; LANES];
/// 10·log10(2): dB of power per unit of log2.
/// A camera sample type.
pub trait Sample: Copy + Send + Sync + 'static {
    fn to_f32(self) -> f32;
}
macro_rules! sample {
    ($($t:ty),*) => {$(impl Sample for $t {
        #[inline(always)]
        fn to_f32(self) -> f32 { self as f32 }
    })*};
}
sample!(u8, u16, i16, u32, f32, f64);

/// A frame of camera samples (A-lines × pixels), borrowed in the type it
/// was recorded in: what the layers above hand the fast path, whatever
/// read the samples.
#[derive(Debug, Clone, Copy)]
pub enum Samples<'a> {
    U8(ArrayView2<'a, u8>),
    U16(ArrayView2<'a, u16>),
    I16(ArrayView2<'a, i16>),
    U32(ArrayView2<'a, u32>),
    F32(ArrayView2<'a, f32>),
    F64(ArrayView2<'a, f64>),
}

/// Seconds (summed over threads) in the fused path's three parts.
#[derive(Debug, Default)]
pub struct FusedTimer {
    nanos: [AtomicU64; 4],
}

impl FusedTimer {
    pub const PARTS: [&'static str; 4] = ["background", "resample_disperse_window", "fft", "magnitude_log"];
    pub fn seconds(&self) -> [f64; 4] {
        let mut out = [0.0; 4];
        for (o, n) in out.iter_mut().zip(self.nanos.iter()) {
            *o = n.load(Ordering::Relaxed) as f64 * 1e-9;
        }
        out
    }
    fn add(&self, part: usize, since: Instant) {
        self.nanos[part].fetch_add(since.elapsed().as_nanos() as u64, Ordering::Relaxed);
    }
}

/// Per-worker buffers, made once per worker.
struct Workspace {
    /// Sizes it was made for: pixels, FFT length, FFT scratch, depth, lane FFT.
    shape: [usize; 5],
    /// One block's spectra as f32, line by line.
    rows: Vec<f32>,
    y: LaneBuffer,
    m: LaneBuffer,
    buf: Vec<Complex32>,
    scratch: Vec<Complex32>,
    /// The block in lane order for the lane FFT (empty without it).
    lanes: Vec<LaneComplex>,
}

/// The fused plan, built from a reference [`Plan`].
pub struct FusedPlan {
    /// The kernel variant this plan runs (see [`super::kernel`]).
    pub variant: Variant,
    /// How the variant was chosen (see [`tune`]).
    pub choice: tune::Choice,
    pixels: usize,
    k_samples: usize,
    fft_length: usize,
    first_bin: usize,
    depth: usize,
    reference: Reference,
    cubic: bool,
    /// For each k sample: the pixel interval (q, q+1) it falls in, in pixel
    /// order (the spline is the same function whichever way k runs).
    interval: Vec<u32>,
    left_weight: Vec<f32>,
    left_curvature: Vec<f32>,
    right_curvature: Vec<f32>,
    inv_h: Vec<f32>,
    c_prime: Vec<f32>,
    inv_pivot: Vec<f32>,
    /// h[r]·inv_pivot[r]: the forward sweep's coefficient on m[r].
    sweep_alpha: Vec<f32>,
    /// exp(−iφ_c)·shaping·window per k sample.
    factor: Vec<Complex32>,
    fft: Arc<dyn Fft<f32>>,
    fft_scratch: usize,
    /// The FFT across lanes, used instead of rustfft on CPUs with AVX-512F
    /// when the FFT length is a power of two: the block then stays in lane
    /// order from the spectra to the image.
    lane_fft: Option<LaneFft>,
    /// Where the lane FFT leaves each depth bin, in depth order.
    lane_bins: Vec<u32>,
    /// Per kept depth bin: the amplitude scale times e^{+2πi·c·m/M}
    /// (c = (N−1)/2, m the bin, M the FFT length), which turns the FFT's
    /// bins into the complex depth profile with its phase referred to the
    /// band's centre wavenumber (see `complex_depth_factors`).
    complex_factor: Vec<Complex32>,
    /// |FFT| to amplitude.
    amplitude_scale: f32,
    /// 20·log10 of the amplitude scale; floor on |X|².
    db_offset: f32,
    power_floor: f32,
    log2: FastLog2,
    /// Last frame's per-pixel lower middle values (median background).
    median_hint: std::sync::Mutex<MedianHint>,
    /// Buffers of [`Self::process_raw_image_staged`]: dB, amplitude, complex.
    staging: std::sync::Mutex<(Array2<f32>, Array2<f32>, Array2<Complex32>)>,
}

fn to_f32(v: &[f64]) -> Vec<f32> {
    v.iter().map(|&x| x as f32).collect()
}

impl FusedPlan {
    /// The plan for the pipeline's own shaping × window, with the kernel
    /// variant chosen by [`tune`] (forced, measured or cached).
    pub fn new(plan: &Plan) -> Self {
        Self::with_spectral_gain(plan, &plan.spectral_gain(), plan.amplitude_scale())
    }

    /// The plan with another real gain per k sample in place of the
    /// pipeline's shaping × window (e.g. one sub-band of split-spectrum
    /// angiography), and `scale` from |FFT| to amplitude.
    pub fn with_spectral_gain(plan: &Plan, gain: &[f64], scale: f64) -> Self {
        tune::planned(|variant| Self::with_variant(plan, gain, scale, variant))
    }

    /// As [`Self::with_spectral_gain`], running `variant` (clamped to what
    /// the CPU has), without measuring.
    pub fn with_variant(plan: &Plan, gain: &[f64], scale: f64, variant: Variant) -> Self {
        let variant = variant.min(super::kernel::best());
        let s = &plan.summary;
        let t = plan.resampling.tables();
        let n = s.k_samples;
        assert_eq!(gain.len(), n);
        let factor = super::factor::spectral_factors(plan.dispersion, gain);
        let reference = match &plan.background_source {
            None => Reference::None,
            Some(BackgroundSource::Fixed(b)) => Reference::Fixed(to_f32(b)),
            Some(BackgroundSource::FrameMean) => Reference::Mean,
            Some(BackgroundSource::FrameMedian) => Reference::Median,
        };
        let tables = PixelOrderSpline::new(&plan.wavelength_nm, plan.resampling.k_min_per_um, plan.resampling.k_max_per_um, n);
        let fft = dispatch::plan_fft(variant, s.fft_length);
        let lane_fft = if variant >= Variant::Avx512 { LaneFft::new(s.fft_length) } else { None };
        FusedPlan {
            variant,
            choice: tune::Choice { source: "planned".into(), alines_per_second: Default::default(), key: String::new() },
            pixels: s.pixels,
            k_samples: n,
            fft_length: s.fft_length,
            first_bin: s.first_depth_bin,
            depth: s.depth_pixels,
            reference,
            cubic: t.cubic,
            interval: tables.interval,
            left_weight: to_f32(&tables.left_weight),
            left_curvature: to_f32(&tables.left_curvature),
            right_curvature: to_f32(&tables.right_curvature),
            inv_h: to_f32(&tables.inv_h),
            c_prime: to_f32(&tables.c_prime),
            inv_pivot: to_f32(&tables.inv_pivot),
            sweep_alpha: tables.inv_pivot.iter().zip(tables.h.iter()).enumerate().map(|(r, (ip, h))| if r == 0 { 0.0 } else { (h * ip) as f32 }).collect(),
            factor,
            fft_scratch: fft.get_inplace_scratch_len(),
            fft,
            lane_bins: match lane_fft.as_ref() {
                Some(f) => (0..s.depth_pixels).map(|d| f.position(s.first_depth_bin + d) as u32).collect(),
                None => Vec::new(),
            },
            lane_fft,
            complex_factor: complex_depth_factors(scale, n, s.fft_length, s.first_depth_bin, s.depth_pixels)
                .into_iter()
                .map(|c| Complex32::new(c.re as f32, c.im as f32))
                .collect(),
            amplitude_scale: scale as f32,
            db_offset: (20.0 * scale.log10()) as f32,
            power_floor: ((AMPLITUDE_FLOOR / scale) * (AMPLITUDE_FLOOR / scale)) as f32,
            log2: FastLog2::new(),
            median_hint: std::sync::Mutex::new(MedianHint::default()),
            staging: std::sync::Mutex::new((Array2::zeros((0, 0)), Array2::zeros((0, 0)), Array2::zeros((0, 0)))),
        }
    }

    /// The same plan without the lane FFT: rustfft per A-line with the
    /// AVX2 (or portable) kernels around it, as on CPUs without AVX-512.
    pub fn without_lane_fft(mut self) -> Self {
        self.lane_fft = None;
        self.lane_bins.clear();
        self
    }

    /// Whether blocks go through the lane FFT.
    pub fn uses_lane_fft(&self) -> bool {
        self.lane_fft.is_some()
    }

    pub fn new_timer(&self) -> FusedTimer {
        FusedTimer::default()
    }

    /// Runs `f` with this thread's workspace, made (or remade for other
    /// sizes) once per thread rather than once per parallel job, so jobs can
    /// be small enough to keep both cores busy to the end of a frame.
    fn with_workspace<R>(&self, f: impl FnOnce(&mut Workspace) -> R) -> R {
        thread_local! {
            static WORKSPACE: std::cell::RefCell<Option<Workspace>> = const { std::cell::RefCell::new(None) };
        }
        let shape = [self.pixels, self.fft_length, self.fft_scratch, self.depth, self.lane_fft.is_some() as usize];
        WORKSPACE.with(|cell| {
            let mut slot = cell.borrow_mut();
            if slot.as_ref().is_none_or(|w| w.shape != shape) {
                *slot = Some(self.workspace());
            }
            f(slot.as_mut().expect("workspace"))
        })
    }

    fn workspace(&self) -> Workspace {
        Workspace {
            shape: [self.pixels, self.fft_length, self.fft_scratch, self.depth, self.lane_fft.is_some() as usize],
            rows: vec![0.0; LANES * (self.pixels + ROW_PAD)],
            y: LaneBuffer::new(self.pixels),
            m: LaneBuffer::new(self.pixels),
            // The FFT rows and rustfft's scratch serve the per-line path only.
            buf: vec![Complex32::new(0.0, 0.0); if self.lane_fft.is_some() { 0 } else { LANES * (self.fft_length + FFT_ROW_PAD) }],
            scratch: vec![Complex32::new(0.0, 0.0); if self.lane_fft.is_some() { 0 } else { self.fft_scratch }],
            lanes: vec![LaneComplex::default(); if self.lane_fft.is_some() { self.fft_length } else { 0 }],
        }
    }

    /// Processes a raw frame (A-lines × pixels) into `db_out` (A-lines ×
    /// depth pixels, 20·log10|A| like the reference path).
    pub fn process_raw(&self, frame: Samples<'_>, db_out: &mut Array2<f32>, timer: &FusedTimer) {
        match frame {
            Samples::U8(a) => self.process_frame(a, db_out, timer),
            Samples::U16(a) => self.process_frame(a, db_out, timer),
            Samples::I16(a) => self.process_frame(a, db_out, timer),
            Samples::U32(a) => self.process_frame(a, db_out, timer),
            Samples::F32(a) => self.process_frame(a, db_out, timer),
            Samples::F64(a) => self.process_frame(a, db_out, timer),
        }
    }

    /// Processes a frame (A-lines × pixels) of samples into `db_out`.
    pub fn process_frame<T: Sample + MedianKey>(&self, frame: ArrayView2<'_, T>, db_out: &mut Array2<f32>, timer: &FusedTimer) {
        let (alines, pixels) = frame.dim();
        assert_eq!(pixels, self.pixels);
        assert_eq!(db_out.dim(), (alines, self.depth));
        let t = Instant::now();
        let frame = frame.as_standard_layout();
        let reference = self.reference_sorted(frame.view());
        timer.add(0, t);
        let input = frame.as_slice().expect("standard layout");
        let output = db_out.as_slice_mut().expect("standard layout");
        let depth = self.depth;
        let blocks = alines.div_ceil(LANES);
        let min_blocks_per_job = (blocks / (4 * rayon::current_num_threads())).max(1);
        input
            .par_chunks(LANES * pixels)
            .zip(output.par_chunks_mut(LANES * depth))
            .with_min_len(min_blocks_per_job)
            .for_each_init(|| self.workspace(), |ws, (spectra, out)| self.block(spectra, &reference, Sink::Rows(out, depth), ws, timer));
    }

    /// Processes a raw frame straight into the B-scan image (depth pixels ×
    /// A-lines, depth down, as shown and stored), dB like the reference.
    pub fn process_raw_image(&self, frame: Samples<'_>, image: &mut Array2<f32>, timer: &FusedTimer) {
        self.process_raw_image_with(frame, image, Extra::default(), timer)
    }

    /// As [`Self::process_raw_image`], and also the complex depth profile
    /// (depth × A-lines, amplitude in the same units as the dB image, phase
    /// referred to the band's centre wavenumber) into `complex`.
    pub fn process_raw_image_complex(&self, frame: Samples<'_>, image: &mut Array2<f32>, complex: &mut Array2<Complex32>, timer: &FusedTimer) {
        self.process_raw_image_with(frame, image, Extra { complex: Some(complex), amplitude: None }, timer)
    }

    /// As [`Self::process_raw_image_with`], but the blocks write into this
    /// plan's own buffers (reused from frame to frame, so they stay in
    /// cache) and the results are then copied row by row into the
    /// destinations. For destinations that rotate through more memory than
    /// the cache holds (the repeats of a position): their column-wise
    /// writes from the blocks are slow on memory that has left the cache
    /// (measured on 1000 × 1024 frames with the amplitude alongside:
    /// 4.2 ms per frame into four rotating buffer pairs, 2.7 ms staged).
    pub fn process_raw_image_staged(&self, frame: Samples<'_>, image: &mut Array2<f32>, extra: Extra<'_>, timer: &FusedTimer) {
        let dim = image.dim();
        let mut staged = self.staging.lock().unwrap_or_else(|e| e.into_inner());
        let (db, amp, cx) = &mut *staged;
        if db.dim() != dim {
            *db = Array2::zeros(dim);
        }
        let want_amp = extra.amplitude.is_some();
        let want_cx = extra.complex.is_some();
        if want_amp && amp.dim() != dim {
            *amp = Array2::zeros(dim);
        }
        if want_cx && cx.dim() != dim {
            *cx = Array2::zeros(dim);
        }
        let hot = Extra { amplitude: want_amp.then_some(&mut *amp), complex: want_cx.then_some(&mut *cx) };
        self.process_raw_image_with(frame, db, hot, timer);
        par_copy(image, db);
        if let Some(a) = extra.amplitude {
            par_copy(a, amp);
        }
        if let Some(c) = extra.complex {
            par_copy(c, cx);
        }
    }

    /// As [`Self::process_raw_image`], with the extra images of `extra`.
    pub fn process_raw_image_with(&self, frame: Samples<'_>, image: &mut Array2<f32>, extra: Extra<'_>, timer: &FusedTimer) {
        match frame {
            Samples::U8(a) => self.frame_image(a, image, extra, timer),
            Samples::U16(a) => self.frame_image(a, image, extra, timer),
            Samples::I16(a) => self.frame_image(a, image, extra, timer),
            Samples::U32(a) => self.frame_image(a, image, extra, timer),
            Samples::F32(a) => self.frame_image(a, image, extra, timer),
            Samples::F64(a) => self.frame_image(a, image, extra, timer),
        }
    }

    /// As [`Self::process_frame`], but writes the image (depth × A-lines):
    /// each block's dB values go straight into its 16 adjacent columns.
    pub fn process_frame_image<T: Sample + MedianKey>(&self, frame: ArrayView2<'_, T>, image: &mut Array2<f32>, timer: &FusedTimer) {
        self.frame_image(frame, image, Extra::default(), timer)
    }

    /// As [`Self::process_frame_image`], and the complex depth profile.
    pub fn process_frame_image_complex<T: Sample + MedianKey>(&self, frame: ArrayView2<'_, T>, image: &mut Array2<f32>, complex: &mut Array2<Complex32>, timer: &FusedTimer) {
        self.frame_image(frame, image, Extra { complex: Some(complex), amplitude: None }, timer)
    }

    fn frame_image<T: Sample + MedianKey>(&self, frame: ArrayView2<'_, T>, image: &mut Array2<f32>, extra: Extra<'_>, timer: &FusedTimer) {
        let (alines, pixels) = frame.dim();
        assert_eq!(pixels, self.pixels);
        assert_eq!(image.dim(), (self.depth, alines));
        let complex = extra.complex.map(|c| {
            assert_eq!(c.dim(), (self.depth, alines));
            c.as_slice_mut().expect("standard layout").as_mut_ptr()
        });
        let amplitude = extra.amplitude.map(|c| {
            assert_eq!(c.dim(), (self.depth, alines));
            c.as_slice_mut().expect("standard layout").as_mut_ptr()
        });
        let t = Instant::now();
        let frame = frame.as_standard_layout();
        let reference = self.reference_sorted(frame.view());
        timer.add(0, t);
        let input = frame.as_slice().expect("standard layout");
        let target = ImagePtr {
            ptr: image.as_slice_mut().expect("standard layout").as_mut_ptr(),
            complex: complex.unwrap_or(std::ptr::null_mut()),
            amplitude: amplitude.unwrap_or(std::ptr::null_mut()),
            alines,
            depth: self.depth,
        };
        input.par_chunks(LANES * pixels).enumerate().for_each(|(b, spectra)| {
            self.with_workspace(|ws| {
                // Block b writes only columns b·LANES .. b·LANES + lines of
                // each image row; blocks are disjoint and the image outlives
                // the parallel loop.
                self.block(spectra, &reference, Sink::Image(target, b * LANES), ws, timer);
            })
        });
    }
}

/// dst ← src (same shape, standard layout), in parallel row chunks.
fn par_copy<T: Copy + Send + Sync>(dst: &mut Array2<T>, src: &Array2<T>) {
    assert_eq!(dst.dim(), src.dim());
    let (d, s) = (dst.as_slice_mut().expect("standard layout"), src.as_slice().expect("standard layout"));
    d.par_chunks_mut(1 << 16).zip(s.par_chunks(1 << 16)).for_each(|(a, b)| a.copy_from_slice(b));
}

/// Images a frame can write beside its dB image (each depth × A-lines).
#[derive(Default)]
pub struct Extra<'a> {
    /// The complex depth profile (see [`complex_depth_factors`]).
    pub complex: Option<&'a mut Array2<Complex32>>,
    /// The amplitude |A| (the dB image's linear value, without the log).
    pub amplitude: Option<&'a mut Array2<f32>>,
}

/// Where a block's dB values go.
enum Sink<'a> {
    /// Line l at out[l·stride ..][..depth].
    Rows(&'a mut [f32], usize),
    /// Straight into columns a0 .. a0 + LANES of the image (full blocks only).
    Image(ImagePtr, usize),
}

/// The output image shared by the parallel blocks of a frame.
#[derive(Clone, Copy)]
struct ImagePtr {
    ptr: *mut f32,
    /// The complex depth profile (same layout), or null when not wanted.
    complex: *mut Complex32,
    /// The amplitude |A| (same layout), or null when not wanted.
    amplitude: *mut f32,
    alines: usize,
    depth: usize,
}
// SAFETY: blocks write disjoint columns (see `process_frame_image`).
unsafe impl Send for ImagePtr {}
unsafe impl Sync for ImagePtr {}
