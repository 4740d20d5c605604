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
//! sweeps and the interpolation run on all lanes at once (SIMD). On CPUs
//! with AVX-512 the block then stays in that order to the end: the FFT is
//! [`super::lane_fft`] (16 transforms per vector, the interpolation × factor
//! computed inside its first level), and the dB pass reads the depth bins
//! from the FFT's output order and stores 16 adjacent image columns per
//! vector: the only change of layout is the transpose of the camera samples
//! into lane order. Elsewhere (AVX2+FMA, or the baseline), each lane is
//! scattered into its own FFT row for one rustfft call per line, and |X|²,
//! dB and the transpose into the image go together in one pass. No
//! allocation per A-line: each worker thread owns one workspace. The plain
//! stage modules stay the reference implementation; tests hold every
//! variant of this path to them within 1e-4 of the peak amplitude.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use rustfft::{Fft, FftPlanner};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;
use std::time::Instant;

use super::lane_fft::{Interpolation, LaneComplex, LaneFft, Resampled};
use super::plan::Plan;
use crate::io::capture::RawFrame;
use crate::stages::background::{median_spectrum, BackgroundSource};
use crate::stages::dispersion::{correction_phase, normalised_coordinate};
use crate::stages::k_linearization::{curvature_weights, natural_spline_factors};
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
const DB_PER_LOG2: f32 = 10.0 * std::f32::consts::LOG10_2;
/// Degree of the log2 polynomial (see [`FastLog2`]).
const LOG2_DEGREE: usize = 6;
/// The log2 range reduction, shared by the scalar, AVX2 and AVX-512 code:
/// the bits of 0.75 (x = 2^e·m with m ∈ [0.75, 1.5)), and the map of m onto
/// the polynomial's u ∈ [−1, 1): u = (m − 1.125) / 0.375.
const LOG2_RANGE_BITS: i32 = 0x3f40_0000;
const LOG2_CENTRE: f32 = 1.125;
const LOG2_INV_HALF_WIDTH: f32 = 1.0 / 0.375;

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

/// log2 for positive normal f32 by range reduction to m ∈ [0.75, 1.5) and a
/// degree-6 polynomial in m − 1, fitted by least squares on 2049 points when
/// the plan is made. Worst error about 5e-6 in log2 (1.5e-5 dB; computed with
/// NumPy in f64), checked below 1e-4 dB in the tests; the requirement is
/// 0.01 dB. (Degree 8 cost 8 % more in the dB pass for 4e-7 dB.)
#[derive(Debug, Clone, Copy)]
pub struct FastLog2 {
    /// Coefficients in u = (t − 0.125)/0.375, t = m − 1 ∈ [−0.25, 0.5).
    c: [f32; LOG2_DEGREE + 1],
}

impl Default for FastLog2 {
    fn default() -> Self {
        Self::new()
    }
}

impl FastLog2 {
    pub fn new() -> Self {
        let n = 2049;
        let us: Vec<f64> = (0..n).map(|i| -1.0 + 2.0 * i as f64 / (n - 1) as f64).collect();
        let ys: Vec<f64> = us.iter().map(|u| (1.0 + 0.125 + 0.375 * u).log2()).collect();
        let fit = crate::analysis::polyfit(&us, &ys, LOG2_DEGREE);
        let mut c = [0.0f32; LOG2_DEGREE + 1];
        for (d, v) in c.iter_mut().zip(fit.iter()) {
            *d = *v as f32;
        }
        FastLog2 { c }
    }

    pub fn coefficients(&self) -> [f32; LOG2_DEGREE + 1] {
        self.c
    }

    #[inline(always)]
    pub fn log2(&self, x: f32) -> f32 {
        // x = 2^e · m with m ∈ [0.75, 1.5): subtract the bits of 0.75.
        let bits = x.to_bits() as i32;
        let e = (bits - LOG2_RANGE_BITS) >> 23;
        let m = f32::from_bits((bits - (e << 23)) as u32);
        let u = (m - LOG2_CENTRE) * LOG2_INV_HALF_WIDTH;
        let mut p = self.c[LOG2_DEGREE];
        for k in (0..LOG2_DEGREE).rev() {
            p = p * u + self.c[k];
        }
        e as f32 + p
    }
}

/// Natural cubic spline tables in pixel order (k increasing or decreasing
/// with the pixel index), built like `stages::k_linearization` builds its
/// own in increasing-k order: the same interpolant.
struct PixelOrderSpline {
    interval: Vec<u32>,
    left_weight: Vec<f64>,
    left_curvature: Vec<f64>,
    right_curvature: Vec<f64>,
    h: Vec<f64>,
    inv_h: Vec<f64>,
    c_prime: Vec<f64>,
    inv_pivot: Vec<f64>,
}

impl PixelOrderSpline {
    fn new(wavelength_nm: &[f64], k_min: f64, k_max: f64, samples: usize) -> Self {
        let k: Vec<f64> = wavelength_nm.iter().map(|&l| crate::physics::wavenumber_per_um(l)).collect();
        let n = k.len();
        let h: Vec<f64> = k.windows(2).map(|w| w[1] - w[0]).collect();
        let increasing = k[n - 1] > k[0];
        let mut interval = Vec::with_capacity(samples);
        let (mut left_weight, mut left_curvature, mut right_curvature) = (Vec::new(), Vec::new(), Vec::new());
        for j in 0..samples {
            let t = if j + 1 == samples { k_max } else { k_min + (k_max - k_min) * j as f64 / (samples - 1) as f64 };
            // First q with t between k[q] and k[q+1] (binary search on the monotonic map).
            let q = if increasing {
                k.partition_point(|&v| v < t).clamp(1, n - 1) - 1
            } else {
                k.partition_point(|&v| v > t).clamp(1, n - 1) - 1
            };
            let a = ((k[q + 1] - t) / h[q]).clamp(0.0, 1.0);
            let (lc, rc) = curvature_weights(a, h[q]);
            interval.push(q as u32);
            left_weight.push(a);
            left_curvature.push(lc);
            right_curvature.push(rc);
        }
        let (c_prime, inv_pivot) = natural_spline_factors(&h);
        let inv_h = h.iter().map(|v| 1.0 / v).collect();
        PixelOrderSpline { interval, left_weight, left_curvature, right_curvature, h, inv_h, c_prime, inv_pivot }
    }
}

/// Reference spectrum per frame.
#[derive(Debug, Clone)]
enum Reference {
    None,
    Fixed(Vec<f32>),
    Mean,
    Median,
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

/// One lane vector on its own 64-byte cache line.
#[repr(C, align(64))]
#[derive(Clone, Copy)]
struct AlignedLane(Lane);

/// Lane vectors, each on one cache line. (A plain Vec of `[f32; 16]` is
/// only 4-byte aligned, and glibc's large blocks start 16 bytes into a page,
/// so every vector load and store would straddle two lines.)
struct LaneBuffer(Vec<AlignedLane>);

impl LaneBuffer {
    fn new(len: usize) -> Self {
        LaneBuffer(vec![AlignedLane([0.0; LANES]); len])
    }
}

impl std::ops::Deref for LaneBuffer {
    type Target = [Lane];
    fn deref(&self) -> &[Lane] {
        // SAFETY: AlignedLane is repr(C) around one Lane with the same size
        // (64 bytes), so the slice reinterprets element for element.
        unsafe { std::slice::from_raw_parts(self.0.as_ptr().cast::<Lane>(), self.0.len()) }
    }
}

impl std::ops::DerefMut for LaneBuffer {
    fn deref_mut(&mut self) -> &mut [Lane] {
        // SAFETY: as in deref.
        unsafe { std::slice::from_raw_parts_mut(self.0.as_mut_ptr().cast::<Lane>(), self.0.len()) }
    }
}

const _: () = assert!(std::mem::size_of::<AlignedLane>() == std::mem::size_of::<Lane>());

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
    pub variant: super::kernel::Variant,
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
    median_hint: std::sync::Mutex<Vec<u16>>,
    /// Buffers of [`Self::process_raw_image_staged`]: dB, amplitude, complex.
    staging: std::sync::Mutex<(Array2<f32>, Array2<f32>, Array2<Complex32>)>,
}

fn to_f32(v: &[f64]) -> Vec<f32> {
    v.iter().map(|&x| x as f32).collect()
}

impl FusedPlan {
    pub fn new(plan: &Plan) -> Self {
        Self::with_spectral_gain(plan, &plan.spectral_gain(), plan.amplitude_scale())
    }

    /// The plan with another real gain per k sample in place of the
    /// pipeline's shaping × window (e.g. one sub-band of split-spectrum
    /// angiography), and `scale` from |FFT| to amplitude.
    pub fn with_spectral_gain(plan: &Plan, gain: &[f64], scale: f64) -> Self {
        let s = &plan.summary;
        let t = plan.resampling.tables();
        let n = s.k_samples;
        assert_eq!(gain.len(), n);
        let [a2, a3] = plan.dispersion;
        let factor = (0..n)
            .map(|j| {
                let phi = correction_phase(a2, a3, normalised_coordinate(j, n));
                let c = rustfft::num_complex::Complex64::from_polar(gain[j], -phi);
                Complex32::new(c.re as f32, c.im as f32)
            })
            .collect();
        let reference = match &plan.background_source {
            None => Reference::None,
            Some(BackgroundSource::Fixed(b)) => Reference::Fixed(to_f32(b)),
            Some(BackgroundSource::FrameMean) => Reference::Mean,
            Some(BackgroundSource::FrameMedian) => Reference::Median,
        };
        let tables = PixelOrderSpline::new(&plan.wavelength_nm, plan.resampling.k_min_per_um, plan.resampling.k_max_per_um, n);
        let variant = super::kernel::active();
        // rustfft picks its AVX kernels itself; the scalar variant asks for
        // its scalar planner.
        let fft = if variant >= super::kernel::Variant::Avx2 { FftPlanner::<f32>::new().plan_fft_forward(s.fft_length) } else { rustfft::FftPlannerScalar::<f32>::new().plan_fft_forward(s.fft_length) };
        let lane_fft = if lane_fft_available() { LaneFft::new(s.fft_length) } else { None };
        FusedPlan {
            variant,
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
            median_hint: std::sync::Mutex::new(Vec::new()),
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
    pub fn process_raw(&self, frame: &RawFrame, db_out: &mut Array2<f32>, timer: &FusedTimer) {
        match frame {
            RawFrame::U8(a) => self.process_frame(a.view(), db_out, timer),
            RawFrame::U16(a) => self.process_frame(a.view(), db_out, timer),
            RawFrame::I16(a) => self.process_frame(a.view(), db_out, timer),
            RawFrame::U32(a) => self.process_frame(a.view(), db_out, timer),
            RawFrame::F32(a) => self.process_frame(a.view(), db_out, timer),
            RawFrame::F64(a) => self.process_frame(a.view(), db_out, timer),
        }
    }

    /// The frame's reference spectrum per pixel, as f32.
    fn reference_sorted<T: Sample + MedianKey>(&self, frame: ArrayView2<'_, T>) -> Vec<f32> {
        let pixels = self.pixels;
        let by_pixel: Vec<f32> = match &self.reference {
            Reference::None => vec![0.0; pixels],
            Reference::Fixed(b) => b.clone(),
            Reference::Mean => {
                let mut sum = vec![0.0f64; pixels];
                for row in frame.rows() {
                    for (s, v) in sum.iter_mut().zip(row.iter()) {
                        *s += v.to_f32() as f64;
                    }
                }
                sum.iter().map(|s| (s / frame.nrows() as f64) as f32).collect()
            }
            Reference::Median => match T::median_columns(frame, &mut self.median_hint.lock().unwrap_or_else(|e| e.into_inner())) {
                Some(m) => m,
                None => to_f32(&median_spectrum(frame.mapv(|v| v.to_f32() as f64).view())),
            },
        };
        by_pixel
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
    pub fn process_raw_image(&self, frame: &RawFrame, image: &mut Array2<f32>, timer: &FusedTimer) {
        self.process_raw_image_with(frame, image, Extra::default(), timer)
    }

    /// As [`Self::process_raw_image`], and also the complex depth profile
    /// (depth × A-lines, amplitude in the same units as the dB image, phase
    /// referred to the band's centre wavenumber) into `complex`.
    pub fn process_raw_image_complex(&self, frame: &RawFrame, image: &mut Array2<f32>, complex: &mut Array2<Complex32>, timer: &FusedTimer) {
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
    pub fn process_raw_image_staged(&self, frame: &RawFrame, image: &mut Array2<f32>, extra: Extra<'_>, timer: &FusedTimer) {
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
    pub fn process_raw_image_with(&self, frame: &RawFrame, image: &mut Array2<f32>, extra: Extra<'_>, timer: &FusedTimer) {
        match frame {
            RawFrame::U8(a) => self.frame_image(a.view(), image, extra, timer),
            RawFrame::U16(a) => self.frame_image(a.view(), image, extra, timer),
            RawFrame::I16(a) => self.frame_image(a.view(), image, extra, timer),
            RawFrame::U32(a) => self.frame_image(a.view(), image, extra, timer),
            RawFrame::F32(a) => self.frame_image(a.view(), image, extra, timer),
            RawFrame::F64(a) => self.frame_image(a.view(), image, extra, timer),
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

    /// One block of ≤ LANES A-lines into `sink`.
    fn block<T: Sample>(&self, spectra: &[T], reference: &[f32], sink: Sink<'_>, ws: &mut Workspace, timer: &FusedTimer) {
        #[cfg(target_arch = "x86_64")]
        {
            if let Some(lane_fft) = &self.lane_fft {
                // SAFETY: lane_fft is only planned when the CPU has AVX-512F/BW,
                // AVX2 and FMA (lane_fft_available).
                unsafe { self.block_lanes(lane_fft, spectra, reference, sink, ws, timer) };
                return;
            }
            if super::kernel::avx2() {
                // SAFETY: the CPU supports the features the function is compiled for.
                unsafe { self.block_avx2(spectra, reference, sink, ws, timer) };
                return;
            }
        }
        self.block_inline(spectra, reference, sink, ws, timer);
    }

    /// For a full block of u16 spectra on an AVX2 machine: converts and
    /// transposes straight from the frame into lane order (no f32 copy of
    /// the block). Returns false when it does not apply.
    #[inline(always)]
    fn transpose_u16_in<T: Sample>(&self, spectra: &[T], lines: usize, reference: &[f32], y: &mut [Lane]) -> bool {
        #[cfg(target_arch = "x86_64")]
        {
            if lines == LANES && std::any::TypeId::of::<T>() == std::any::TypeId::of::<u16>() && super::kernel::avx2() {
                // SAFETY: T is u16 (same size and alignment), checked above.
                let samples = unsafe { std::slice::from_raw_parts(spectra.as_ptr().cast::<u16>(), spectra.len()) };
                let pixels = self.pixels;
                let whole = pixels / 8 * 8;
                // SAFETY: AVX2 is present; bounds are asserted inside.
                unsafe { avx2::transpose_u16_in(samples, pixels, whole, reference, y) };
                for p in whole..pixels {
                    for l in 0..LANES {
                        y[p][l] = samples[l * pixels + p] as f32 - reference[p];
                    }
                }
                return true;
            }
        }
        let _ = (spectra, lines, reference, y);
        false
    }

    /// The interpolation tables onto the k grid.
    fn interpolation(&self) -> Interpolation<'_> {
        Interpolation {
            interval: &self.interval,
            left_weight: &self.left_weight,
            left_curvature: &self.left_curvature,
            right_curvature: &self.right_curvature,
            factor: &self.factor,
            cubic: self.cubic,
        }
    }

    /// Interpolation and scatter of the whole 8-sample tiles with AVX2+FMA;
    /// returns the first k sample left for the portable loop.
    #[inline(always)]
    fn eval_whole_tiles(&self, y: &[Lane], m: &[Lane], lines: usize, stride: usize, buf: &mut [Complex32]) -> usize {
        #[cfg(target_arch = "x86_64")]
        {
            if super::kernel::avx2() {
                let whole = self.k_samples / 8 * 8;
                // SAFETY: AVX2 and FMA are present; indices are checked inside.
                unsafe { avx2::eval_scatter(&self.interpolation().head(whole), y, m, lines, stride, buf) };
                return whole;
            }
        }
        0
    }

    /// One block in lane order throughout: spectra → lanes (the one
    /// transpose), spline, interpolation × factor, lane FFT, dB straight
    /// from the FFT's output order into the sink.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx512bw,avx2,fma")]
    unsafe fn block_lanes<T: Sample>(&self, lane_fft: &LaneFft, spectra: &[T], reference: &[f32], sink: Sink<'_>, ws: &mut Workspace, timer: &FusedTimer) {
        let lines = spectra.len() / self.pixels;
        let t0 = Instant::now();
        if !self.transpose_u16_lanes(spectra, lines, reference, &mut ws.y) {
            self.load_block(spectra, lines, reference, ws);
        }
        if self.cubic {
            let sweep = lanes::Sweep { inv_h: &self.inv_h, inv_pivot: &self.inv_pivot, sweep_alpha: &self.sweep_alpha, c_prime: &self.c_prime };
            // SAFETY: AVX-512F and FMA are present; lengths are checked inside.
            unsafe { lanes::spline_curvatures(&sweep, &ws.y, &mut ws.m) };
        }
        timer.add(1, t0);
        // The interpolation × factor is computed inside the FFT's first
        // level (no pass of its own), so its time counts as FFT time here.
        let t1 = Instant::now();
        let resampled = Resampled { table: self.interpolation(), y: &ws.y, m: &ws.m };
        // SAFETY: AVX-512F and FMA are present (this function's features);
        // bounds are checked inside.
        unsafe { lane_fft.forward_resampled(&mut ws.lanes, &resampled) };
        timer.add(2, t1);
        let t2 = Instant::now();
        let depth = self.depth;
        let to_db = avx2::ToDb { log2: &self.log2, power_floor: self.power_floor, db_offset: self.db_offset };
        let bins = &self.lane_bins;
        assert_eq!(bins.len(), depth);
        let extra_target = match &sink {
            Sink::Image(image, a0) => Some((*image, *a0)),
            _ => None,
        };
        let (base, depth_step, line_step) = match sink {
            Sink::Rows(out, stride) => {
                assert!(lines >= 1 && out.len() >= (lines - 1) * stride + depth);
                (out.as_mut_ptr(), 1, stride)
            }
            Sink::Image(image, a0) => {
                assert!(a0 + lines <= image.alines && image.depth == depth);
                // SAFETY: a0 < alines, inside the image.
                (unsafe { image.ptr.add(a0) }, image.alines, 1)
            }
        };
        // SAFETY: AVX-512F is present; every (d < depth, l < lines) store
        // lands at base + d·depth_step + l·line_step, inside the sink
        // (asserted above); this block's lines only.
        unsafe { lanes::db(&ws.lanes, bins, &to_db, base, depth_step, line_step, lines) };
        if let Some((image, a0)) = extra_target {
            // SAFETY: AVX-512F is present; d < depth and a0 + l < alines for
            // every store (asserted above): this block's columns only.
            if !image.complex.is_null() {
                unsafe { lanes::complex(&ws.lanes, bins, &self.complex_factor, image.complex.add(a0), image.alines, lines) };
            }
            if !image.amplitude.is_null() {
                unsafe { lanes::amplitude(&ws.lanes, bins, self.amplitude_scale, image.amplitude.add(a0), image.alines, lines) };
            }
        }
        timer.add(3, t2);
    }

    /// A full block of u16 spectra straight from the frame into lane order
    /// with AVX-512 (16 × 16 transposes); false when it does not apply.
    #[cfg(target_arch = "x86_64")]
    #[inline(always)]
    fn transpose_u16_lanes<T: Sample>(&self, spectra: &[T], lines: usize, reference: &[f32], y: &mut [Lane]) -> bool {
        if lines != LANES || std::any::TypeId::of::<T>() != std::any::TypeId::of::<u16>() {
            return false;
        }
        // SAFETY: T is u16 (same size and alignment), checked above.
        let samples = unsafe { std::slice::from_raw_parts(spectra.as_ptr().cast::<u16>(), spectra.len()) };
        let pixels = self.pixels;
        let whole = pixels / 32 * 32;
        // SAFETY: only reached from block_lanes (AVX-512F/BW present); bounds
        // are asserted inside.
        unsafe { lanes::transpose_u16_in(samples, pixels, whole, reference, y) };
        for p in whole..pixels {
            for l in 0..LANES {
                y[p][l] = samples[l * pixels + p] as f32 - reference[p];
            }
        }
        true
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn block_avx2<T: Sample>(&self, spectra: &[T], reference: &[f32], sink: Sink<'_>, ws: &mut Workspace, timer: &FusedTimer) {
        self.block_inline(spectra, reference, sink, ws, timer);
    }


    /// The block's spectra minus the reference into lane order (ws.y):
    /// pixel-major with one lane per A-line; lanes past `lines` are zero.
    #[inline(always)]
    fn load_block<T: Sample>(&self, spectra: &[T], lines: usize, reference: &[f32], ws: &mut Workspace) {
        let pixels = self.pixels;
        let y = &mut ws.y;
        if !self.transpose_u16_in(spectra, lines, reference, y) {
            // Spectra as f32 (contiguous, vectorised), then transposed.
            let rs = pixels + ROW_PAD;
            for (dst, row) in ws.rows.chunks_exact_mut(rs).zip(spectra.chunks_exact(pixels)) {
                for (d, v) in dst.iter_mut().zip(row) {
                    *d = v.to_f32();
                }
            }
            ws.rows[lines * rs..].fill(0.0);
            transpose_in(&ws.rows, pixels, rs, reference, y);
        }
    }

    /// The natural spline's second derivatives m (all lanes) for samples y;
    /// nothing for linear resampling.
    #[inline(always)]
    fn spline_curvatures(&self, y: &[Lane], m: &mut [Lane]) {
        if !self.cubic {
            return;
        }
        let pixels = self.pixels;
        // Natural spline second derivatives: forward sweep then back
        // substitution with the precomputed factors (as the reference),
        // written so that only one multiply-add per row sits on the
        // serial chain: m[r+1] = rhs·ip − (h·ip)·m[r].
        let rows = pixels - 2;
        m[0] = [0.0; LANES];
        let mut prev = [0.0f32; LANES];
        for r in 0..rows {
            let (ih0, ih1, ip, alpha) = (self.inv_h[r], self.inv_h[r + 1], self.inv_pivot[r], self.sweep_alpha[r]);
            let (y0, y1, y2) = (&y[r], &y[r + 1], &y[r + 2]);
            let mut next = [0.0f32; LANES];
            for l in 0..LANES {
                let rhs = 6.0 * ((y2[l] - y1[l]) * ih1 - (y1[l] - y0[l]) * ih0);
                next[l] = rhs * ip - alpha * prev[l];
            }
            m[r + 1] = next;
            prev = next;
        }
        let mut after = m[rows];
        for r in (0..rows.saturating_sub(1)).rev() {
            let c = self.c_prime[r];
            let mut cur = m[r + 1];
            for l in 0..LANES {
                cur[l] -= c * after[l];
            }
            m[r + 1] = cur;
            after = cur;
        }
        m[pixels - 1] = [0.0; LANES];
    }

    #[inline(always)]
    fn block_inline<T: Sample>(&self, spectra: &[T], reference: &[f32], sink: Sink<'_>, ws: &mut Workspace, timer: &FusedTimer) {
        let pixels = self.pixels;
        let lines = spectra.len() / pixels;
        let len = self.fft_length;
        let k = self.k_samples;
        let t0 = Instant::now();
        self.load_block(spectra, lines, reference, ws);
        self.spline_curvatures(&ws.y, &mut ws.m);
        let (y, m) = (&ws.y, &ws.m);
        // Interpolate, scale by the complex factor, scatter to the lanes' FFT rows.
        let buf = &mut ws.buf;
        let fs = len + FFT_ROW_PAD;
        let whole = self.eval_whole_tiles(y, m, lines, fs, buf);
        let mut tile = [[0.0f32; LANES]; 8];
        for j0 in (whole..k).step_by(8) {
            let width = (k - j0).min(8);
            for (q, v) in tile.iter_mut().enumerate().take(width) {
                let j = j0 + q;
                let i = self.interval[j] as usize;
                let a = self.left_weight[j];
                let b = 1.0 - a;
                let (ya, yb) = (&y[i], &y[i + 1]);
                let (lc, rc) = if self.cubic { (self.left_curvature[j], self.right_curvature[j]) } else { (0.0, 0.0) };
                let (ma, mb) = (&m[i], &m[i + 1]);
                for l in 0..LANES {
                    v[l] = a * ya[l] + b * yb[l] + lc * ma[l] + rc * mb[l];
                }
            }
            scatter_tile(&tile, width, &self.factor[j0..j0 + width], lines, fs, j0, buf);
        }
        for l in 0..lines {
            buf[l * fs + k..l * fs + len].fill(Complex32::new(0.0, 0.0));
        }
        timer.add(1, t0);
        let t1 = Instant::now();
        for l in 0..lines {
            self.fft.process_with_scratch(&mut buf[l * fs..l * fs + len], &mut ws.scratch);
        }
        timer.add(2, t1);
        let t2 = Instant::now();
        let depth = self.depth;
        let db = |x: &Complex32| DB_PER_LOG2 * self.log2.log2((x.re * x.re + x.im * x.im).max(self.power_floor)) + self.db_offset;
        match sink {
            Sink::Rows(out, out_stride) => {
                for l in 0..lines {
                    let src = &buf[l * fs + self.first_bin..l * fs + self.first_bin + depth];
                    let dst = &mut out[l * out_stride..l * out_stride + depth];
                    for (d, x) in dst.iter_mut().zip(src.iter()) {
                        *d = db(x);
                    }
                }
            }
            Sink::Image(image, a0) => {
                assert!(a0 + lines <= image.alines && image.depth == depth);
                assert!(buf.len() >= (LANES - 1) * fs + self.first_bin + depth);
                // Full blocks: 8 depths × 16 lines at a time with AVX2; the
                // rest (and a frame's last, partial block) one value at a time.
                let mut first = 0;
                #[cfg(target_arch = "x86_64")]
                {
                    if lines == LANES && super::kernel::avx2() {
                        first = depth / 8 * 8;
                        let to_db = avx2::ToDb { log2: &self.log2, power_floor: self.power_floor, db_offset: self.db_offset };
                        // SAFETY: AVX2 and FMA are present; the reads are in
                        // `buf` (asserted above) and the writes are this
                        // block's columns of the image.
                        unsafe { avx2::db_into_image(&buf[self.first_bin..], fs, first, &to_db, image.ptr, image.alines, a0) };
                    }
                }
                for d in first..depth {
                    for l in 0..lines {
                        // SAFETY: d < depth, a0 + l < alines; this block's columns.
                        unsafe { *image.ptr.add(d * image.alines + a0 + l) = db(&buf[l * fs + self.first_bin + d]) };
                    }
                }
                if !image.complex.is_null() {
                    for (d, f) in self.complex_factor.iter().enumerate() {
                        for l in 0..lines {
                            // SAFETY: as above.
                            unsafe { *image.complex.add(d * image.alines + a0 + l) = buf[l * fs + self.first_bin + d] * f };
                        }
                    }
                }
                if !image.amplitude.is_null() {
                    for d in 0..depth {
                        for l in 0..lines {
                            let x = buf[l * fs + self.first_bin + d];
                            // SAFETY: as above.
                            unsafe { *image.amplitude.add(d * image.alines + a0 + l) = (x.re * x.re + x.im * x.im).sqrt() * self.amplitude_scale };
                        }
                    }
                }
            }
        }
        timer.add(3, t2);
    }
}

/// The vector kernels the fast path will run on this CPU (for `--version`
/// and the bench report).
pub fn simd_path() -> &'static str {
    #[cfg(target_arch = "x86_64")]
    {
        if lane_fft_available() {
            return "AVX-512 lane FFT (AVX-512F/BW, AVX2, FMA)";
        }
        if super::kernel::avx2() {
            return "AVX2 + FMA";
        }
    }
    "scalar (portable code, rustfft's scalar FFT)"
}

/// Whether this CPU runs the lane FFT path (AVX-512F/BW besides AVX2 and FMA).
fn lane_fft_available() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        super::kernel::avx512()
    }
    #[cfg(not(target_arch = "x86_64"))]
    false
}

#[cfg(target_arch = "x86_64")]
mod lanes {
    //! AVX-512 kernels of the lane-order path: one vector holds one sample
    //! of the block's 16 A-lines, so nothing is transposed.
    use super::avx2::ToDb;
    use super::{Lane, LaneComplex, LANES};
    use rustfft::num_complex::Complex32;
    use std::arch::x86_64::*;

    /// The spline's sweep factors (see `FusedPlan::spline_curvatures`).
    pub struct Sweep<'a> {
        pub inv_h: &'a [f32],
        pub inv_pivot: &'a [f32],
        pub sweep_alpha: &'a [f32],
        pub c_prime: &'a [f32],
    }

    /// The natural spline's second derivatives on all lanes: the same
    /// recurrences as `FusedPlan::spline_curvatures`, with the serial
    /// multiply-add of each row as one FMA (half the latency on the chain).
    #[target_feature(enable = "avx512f,fma")]
    pub unsafe fn spline_curvatures(t: &Sweep<'_>, y: &[Lane], m: &mut [Lane]) {
        let pixels = y.len();
        assert!(pixels >= 3 && m.len() == pixels);
        let rows = pixels - 2;
        assert!(t.inv_h.len() > rows && t.inv_pivot.len() >= rows && t.sweep_alpha.len() >= rows && t.c_prime.len() + 1 >= rows);
        let six = _mm512_set1_ps(6.0);
        unsafe {
            let yp = y.as_ptr().cast::<f32>();
            let mp = m.as_mut_ptr().cast::<f32>();
            _mm512_storeu_ps(mp, _mm512_setzero_ps());
            let mut prev = _mm512_setzero_ps();
            let mut y0 = _mm512_loadu_ps(yp);
            let mut y1 = _mm512_loadu_ps(yp.add(LANES));
            for r in 0..rows {
                let y2 = _mm512_loadu_ps(yp.add((r + 2) * LANES));
                let ih0 = _mm512_set1_ps(*t.inv_h.get_unchecked(r));
                let ih1 = _mm512_set1_ps(*t.inv_h.get_unchecked(r + 1));
                let rhs = _mm512_mul_ps(six, _mm512_fmsub_ps(_mm512_sub_ps(y2, y1), ih1, _mm512_mul_ps(_mm512_sub_ps(y1, y0), ih0)));
                let scaled = _mm512_mul_ps(rhs, _mm512_set1_ps(*t.inv_pivot.get_unchecked(r)));
                let next = _mm512_fnmadd_ps(_mm512_set1_ps(*t.sweep_alpha.get_unchecked(r)), prev, scaled);
                _mm512_storeu_ps(mp.add((r + 1) * LANES), next);
                prev = next;
                y0 = y1;
                y1 = y2;
            }
            let mut after = prev;
            for r in (0..rows.saturating_sub(1)).rev() {
                let cur = _mm512_loadu_ps(mp.add((r + 1) * LANES));
                let cur = _mm512_fnmadd_ps(_mm512_set1_ps(*t.c_prime.get_unchecked(r)), after, cur);
                _mm512_storeu_ps(mp.add((r + 1) * LANES), cur);
                after = cur;
            }
            _mm512_storeu_ps(mp.add((pixels - 1) * LANES), _mm512_setzero_ps());
        }
    }

    /// y[p][l] = samples[l·pixels + p] − reference[p] for the 16 lines and
    /// p < whole (a multiple of 32): each row's 64-byte run is loaded once
    /// and goes through two 16 × 16 transposes.
    #[target_feature(enable = "avx512f,avx512bw")]
    pub unsafe fn transpose_u16_in(samples: &[u16], pixels: usize, whole: usize, reference: &[f32], y: &mut [Lane]) {
        assert!(samples.len() >= LANES * pixels && y.len() >= whole && reference.len() >= whole && whole <= pixels && whole.is_multiple_of(32));
        unsafe {
            for p0 in (0..whole).step_by(32) {
                let rows: [__m512i; 16] = std::array::from_fn(|l| _mm512_loadu_si512(samples.as_ptr().add(l * pixels + p0).cast()));
                for half in 0..2 {
                    let r: [__m512; 16] = std::array::from_fn(|l| {
                        let h = if half == 0 { _mm512_castsi512_si256(rows[l]) } else { _mm512_extracti64x4_epi64::<1>(rows[l]) };
                        _mm512_cvtepi32_ps(_mm512_cvtepu16_epi32(h))
                    });
                    let c = transpose16(r);
                    let base = p0 + half * 16;
                    for (q, cq) in c.iter().enumerate() {
                        let v = _mm512_sub_ps(*cq, _mm512_set1_ps(*reference.get_unchecked(base + q)));
                        _mm512_storeu_ps(y.as_mut_ptr().add(base + q).cast::<f32>(), v);
                    }
                }
            }
        }
    }

    /// 16 × 16 transpose: out[q][l] = r[l][q].
    #[inline]
    #[target_feature(enable = "avx512f")]
    fn transpose16(r: [__m512; 16]) -> [__m512; 16] {
        // Stage 1: interleave pairs of rows (32-bit), stage 2: 64-bit,
        // stages 3 and 4: 128-bit blocks across the four lanes of 4.
        let t: [__m512; 16] = std::array::from_fn(|i| {
            let (a, b) = (r[2 * (i / 2)], r[2 * (i / 2) + 1]);
            if i % 2 == 0 { _mm512_unpacklo_ps(a, b) } else { _mm512_unpackhi_ps(a, b) }
        });
        // In each 128-bit block c: t[2k] = (r2k, r2k+1) at columns 4c, 4c+1,
        // t[2k+1] the same at 4c+2, 4c+3.
        let u: [__m512; 16] = std::array::from_fn(|i| {
            // i = 4g + j: g = row quad, j ∈ 0..4 picks (lo/hi 32-bit) × (lo/hi 64-bit)
            let (g, j) = (i / 4, i % 4);
            let (a, b) = (t[4 * g + (j / 2)], t[4 * g + 2 + (j / 2)]);
            let (a, b) = (_mm512_castps_pd(a), _mm512_castps_pd(b));
            _mm512_castpd_ps(if j % 2 == 0 { _mm512_unpacklo_pd(a, b) } else { _mm512_unpackhi_pd(a, b) })
        });
        // u[4g + j], block c: column 4c + j of rows 4g .. 4g + 3.
        let v: [__m512; 16] = std::array::from_fn(|i| {
            // i = 8h + 4k + j, quads 2h and 2h + 1: blocks (4k + j, 8 + 4k + j)
            // of quad 2h, then the same of quad 2h + 1.
            let (h, k, j) = (i / 8, (i / 4) % 2, i % 4);
            let (a, b) = (u[8 * h + j], u[8 * h + 4 + j]);
            if k == 0 { _mm512_shuffle_f32x4::<0x88>(a, b) } else { _mm512_shuffle_f32x4::<0xDD>(a, b) }
        });
        std::array::from_fn(|i| {
            // Column q = 4c + j from quad pairs 0 and 1.
            let (c, j) = (i / 4, i % 4);
            let (a, b) = (v[4 * (c % 2) + j], v[8 + 4 * (c % 2) + j]);
            if c / 2 == 0 { _mm512_shuffle_f32x4::<0x88>(a, b) } else { _mm512_shuffle_f32x4::<0xDD>(a, b) }
        })
    }

    /// For each depth d: dB(|x[bins[d]]|²) of the first `lines` lanes to
    /// base + d·depth_step + l·line_step (contiguous when line_step is 1).
    /// The same operations as the scalar and AVX2 dB (multiply then add, no
    /// FMA), so every sink gets the same bits.
    #[target_feature(enable = "avx512f")]
    pub unsafe fn db(x: &[LaneComplex], bins: &[u32], to_db: &ToDb<'_>, base: *mut f32, depth_step: usize, line_step: usize, lines: usize) {
        assert!(lines <= LANES && bins.iter().all(|&b| (b as usize) < x.len()));
        let c = to_db.log2.coefficients();
        let floor = _mm512_set1_ps(to_db.power_floor);
        let (scale, offset) = (_mm512_set1_ps(super::DB_PER_LOG2), _mm512_set1_ps(to_db.db_offset));
        let mask: __mmask16 = if lines == LANES { u16::MAX } else { (1u16 << lines) - 1 };
        let index = _mm512_mullo_epi32(_mm512_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15), _mm512_set1_epi32(line_step as i32));
        assert!((LANES - 1) * line_step <= i32::MAX as usize);
        for (d, &b) in bins.iter().enumerate() {
            unsafe {
                let src = x.as_ptr().add(b as usize).cast::<f32>();
                let (re, im) = (_mm512_load_ps(src), _mm512_load_ps(src.add(LANES)));
                let power = _mm512_add_ps(_mm512_mul_ps(re, re), _mm512_mul_ps(im, im));
                let v = _mm512_add_ps(_mm512_mul_ps(scale, log2_ps(_mm512_max_ps(power, floor), &c)), offset);
                let dst = base.add(d * depth_step);
                if line_step == 1 {
                    _mm512_mask_storeu_ps(dst, mask, v);
                } else {
                    _mm512_mask_i32scatter_ps::<4>(dst.cast(), mask, index, v);
                }
            }
        }
    }

    /// For each depth d: x[bins[d]]·factor[d] of the first `lines` lanes to
    /// base + d·depth_step + l (16 adjacent complex values of an image row).
    /// Multiply, then add or subtract (no FMA): the bits of the scalar
    /// complex product.
    #[target_feature(enable = "avx512f")]
    pub unsafe fn complex(x: &[LaneComplex], bins: &[u32], factor: &[Complex32], base: *mut Complex32, depth_step: usize, lines: usize) {
        assert!(lines <= LANES && bins.len() == factor.len() && bins.iter().all(|&b| (b as usize) < x.len()));
        // Interleave re and im: out0 = re0 im0 … re7 im7, out1 = re8 im8 … re15 im15.
        let first = _mm512_setr_epi32(0, 16, 1, 17, 2, 18, 3, 19, 4, 20, 5, 21, 6, 22, 7, 23);
        let second = _mm512_setr_epi32(8, 24, 9, 25, 10, 26, 11, 27, 12, 28, 13, 29, 14, 30, 15, 31);
        let floats = 2 * lines;
        let mask0: __mmask16 = if floats >= 16 { u16::MAX } else { (1u16 << floats) - 1 };
        let mask1: __mmask16 = if floats >= 32 { u16::MAX } else if floats > 16 { (1u16 << (floats - 16)) - 1 } else { 0 };
        for (d, (&b, f)) in bins.iter().zip(factor).enumerate() {
            unsafe {
                let src = x.as_ptr().add(b as usize).cast::<f32>();
                let (re, im) = (_mm512_load_ps(src), _mm512_load_ps(src.add(LANES)));
                let (fr, fi) = (_mm512_set1_ps(f.re), _mm512_set1_ps(f.im));
                let out_re = _mm512_sub_ps(_mm512_mul_ps(re, fr), _mm512_mul_ps(im, fi));
                let out_im = _mm512_add_ps(_mm512_mul_ps(re, fi), _mm512_mul_ps(im, fr));
                let dst = base.add(d * depth_step).cast::<f32>();
                _mm512_mask_storeu_ps(dst, mask0, _mm512_permutex2var_ps(out_re, first, out_im));
                if mask1 != 0 {
                    _mm512_mask_storeu_ps(dst.add(16), mask1, _mm512_permutex2var_ps(out_re, second, out_im));
                }
            }
        }
    }

    /// For each depth d: scale·|x[bins[d]]| of the first `lines` lanes to
    /// base + d·depth_step + l (the scalar path's operations).
    #[target_feature(enable = "avx512f")]
    pub unsafe fn amplitude(x: &[LaneComplex], bins: &[u32], scale: f32, base: *mut f32, depth_step: usize, lines: usize) {
        assert!(lines <= LANES && bins.iter().all(|&b| (b as usize) < x.len()));
        let mask: __mmask16 = if lines == LANES { u16::MAX } else { (1u16 << lines) - 1 };
        let k = _mm512_set1_ps(scale);
        for (d, &b) in bins.iter().enumerate() {
            unsafe {
                let src = x.as_ptr().add(b as usize).cast::<f32>();
                let (re, im) = (_mm512_load_ps(src), _mm512_load_ps(src.add(LANES)));
                let power = _mm512_add_ps(_mm512_mul_ps(re, re), _mm512_mul_ps(im, im));
                _mm512_mask_storeu_ps(base.add(d * depth_step), mask, _mm512_mul_ps(_mm512_sqrt_ps(power), k));
            }
        }
    }

    /// [`super::FastLog2::log2`] on 16 values (the same operations, in the
    /// same order, as the scalar and the AVX2 versions).
    #[inline]
    #[target_feature(enable = "avx512f")]
    fn log2_ps(x: __m512, c: &[f32; super::LOG2_DEGREE + 1]) -> __m512 {
        let bits = _mm512_castps_si512(x);
        let e = _mm512_srai_epi32::<23>(_mm512_sub_epi32(bits, _mm512_set1_epi32(super::LOG2_RANGE_BITS)));
        let m = _mm512_castsi512_ps(_mm512_sub_epi32(bits, _mm512_slli_epi32::<23>(e)));
        let u = _mm512_mul_ps(_mm512_sub_ps(m, _mm512_set1_ps(super::LOG2_CENTRE)), _mm512_set1_ps(super::LOG2_INV_HALF_WIDTH));
        let mut p = _mm512_set1_ps(c[super::LOG2_DEGREE]);
        for k in (0..super::LOG2_DEGREE).rev() {
            p = _mm512_add_ps(_mm512_mul_ps(p, u), _mm512_set1_ps(c[k]));
        }
        _mm512_add_ps(_mm512_cvtepi32_ps(e), p)
    }
}

/// Per kept depth bin m = first_bin + d: scale·e^{+2πi·c·m/M} with
/// c = (N−1)/2 for N wavenumber samples and an M-point FFT. The FFT sums
/// over the sample index j from 0; this factor moves the origin to the
/// band's centre sample, so that a reflector at optical depth z (fringe
/// cos(2kz)) has phase 2·k_c·z at every bin of its PSF (k_c the centre of
/// the uniform grid) for a symmetric window: the phase grows with depth,
/// and motion towards the probe lowers it. The reference engine uses the
/// same factors.
pub fn complex_depth_factors(scale: f64, k_samples: usize, fft_length: usize, first_bin: usize, depth: usize) -> Vec<rustfft::num_complex::Complex64> {
    let c = 0.5 * (k_samples as f64 - 1.0);
    (first_bin..first_bin + depth)
        .map(|m| rustfft::num_complex::Complex64::from_polar(scale, 2.0 * std::f64::consts::PI * c * m as f64 / fft_length as f64))
        .collect()
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

/// y[p][l] = rows[l·pixels + p] − reference[p] for the LANES rows.
#[inline(always)]
fn transpose_in(rows: &[f32], pixels: usize, stride: usize, reference: &[f32], y: &mut [Lane]) {
    #[cfg(target_arch = "x86_64")]
    {
        if super::kernel::avx2() {
            let whole = pixels / 8 * 8;
            // SAFETY: AVX2 is present; every access is in bounds (checked
            // by the slicing below).
            unsafe { avx2::transpose_in(rows, stride, whole, reference, y) };
            for p in whole..pixels {
                for l in 0..LANES {
                    y[p][l] = rows[l * stride + p] - reference[p];
                }
            }
            return;
        }
    }
    for (p, yp) in y.iter_mut().enumerate().take(pixels) {
        for l in 0..LANES {
            yp[l] = rows[l * stride + p] - reference[p];
        }
    }
}

/// For the tile of ≤ 8 k samples (tile[q][lane]) starting at j0: writes
/// factor[q]·tile[q][l] into lane l's FFT row.
#[inline(always)]
fn scatter_tile(tile: &[Lane; 8], width: usize, factor: &[Complex32], lines: usize, stride: usize, j0: usize, buf: &mut [Complex32]) {
    #[cfg(target_arch = "x86_64")]
    {
        if width == 8 && super::kernel::avx2() {
            // SAFETY: AVX2 is present; the destination ranges are in bounds
            // (j0 + 8 ≤ k ≤ len, l < lines ≤ LANES, buf holds LANES·len).
            unsafe { avx2::scatter_tile(tile, factor, lines, stride, j0, buf) };
            return;
        }
    }
    for (q, f) in factor.iter().enumerate().take(width) {
        for l in 0..lines {
            let v = tile[q][l];
            buf[l * stride + j0 + q] = Complex32::new(f.re * v, f.im * v);
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod avx512 {
    //! The one-pass median count with AVX-512BW: 32 columns per vector.
    use super::{NEAR, NEAR_TILE_ROWS};
    use std::arch::x86_64::*;

    /// counts[i·w + q] = #{r : x[r][p0 + q] ≤ base[q] + i} for i < NEAR, q < w.
    ///
    /// x ≤ base + i exactly when d = x ⊖ base (saturating) ≤ i, and for
    /// i < NEAR ≤ 255 it is the same with d capped at 255: so two vectors
    /// of 32 columns become one vector of 64 bytes, and each threshold
    /// costs one byte compare and one masked byte add per 64 samples
    /// instead of per 32. Byte counters hold a tile's rows (≤ 255) and are
    /// widened into the u16 counts after each tile.
    #[target_feature(enable = "avx512f,avx512bw")]
    pub unsafe fn count_near(data: &[u16], rows: usize, pixels: usize, p0: usize, base: &[u16], counts: &mut [u16]) {
        const { assert!(NEAR <= 255 && NEAR_TILE_ROWS <= 255) };
        let w = base.len();
        assert!(p0 + w <= pixels && data.len() >= rows * pixels && counts.len() == NEAR * w);
        // Opaque to the compiler: with a known 1 it turns each masked add
        // into mask-to-vector + subtract, two more uops on the port the
        // compares already saturate (half the speed, measured).
        let one = std::hint::black_box(_mm512_set1_epi8(1));
        let cap = _mm512_set1_epi16(255);
        let zero = _mm512_setzero_si512();
        let t: [__m512i; NEAR] = std::array::from_fn(|i| _mm512_set1_epi8(i as i8));
        counts.fill(0);
        let mask_of = |v0: usize| -> __mmask32 {
            let lanes = w.saturating_sub(v0).min(32);
            if lanes == 32 { u32::MAX } else { (1u32 << lanes) - 1 }
        };
        // Row tiles outermost: within a tile each row is read left to right
        // (prefetch-friendly), while one 64-column pair's counters stay in
        // registers for the tile's rows.
        for r0 in (0..rows).step_by(NEAR_TILE_ROWS) {
            let r1 = (r0 + NEAR_TILE_ROWS).min(rows);
            for v0 in (0..w).step_by(64) {
                let (ma, mb) = (mask_of(v0), mask_of(v0 + 32));
                unsafe {
                    let ba = _mm512_maskz_loadu_epi16(ma, base.as_ptr().add(v0).cast());
                    let bb = _mm512_maskz_loadu_epi16(mb, base.as_ptr().wrapping_add(v0 + 32).cast());
                    let mut c = [zero; NEAR];
                    let src = data.as_ptr().add(p0 + v0);
                    for r in r0..r1 {
                        let xa = _mm512_maskz_loadu_epi16(ma, src.add(r * pixels).cast());
                        // (Masked off past the last column; the pointer is never read there.)
                        let xb = _mm512_maskz_loadu_epi16(mb, src.wrapping_add(r * pixels + 32).cast());
                        let da = _mm512_min_epu16(_mm512_subs_epu16(xa, ba), cap);
                        let db = _mm512_min_epu16(_mm512_subs_epu16(xb, bb), cap);
                        // Per 128-bit lane: 8 columns of a, then 8 of b.
                        let d = _mm512_packus_epi16(da, db);
                        for i in 0..NEAR {
                            let k = _mm512_cmple_epu8_mask(d, t[i]);
                            c[i] = _mm512_mask_add_epi8(c[i], k, c[i], one);
                        }
                    }
                    // Unpacking against zero undoes the pack's interleave:
                    // the low bytes of each lane are a's columns, the high b's.
                    for (i, ci) in c.iter().enumerate() {
                        let (lo, hi) = (_mm512_unpacklo_epi8(*ci, zero), _mm512_unpackhi_epi8(*ci, zero));
                        let pa = counts.as_mut_ptr().add(i * w + v0);
                        _mm512_mask_storeu_epi16(pa.cast(), ma, _mm512_add_epi16(_mm512_maskz_loadu_epi16(ma, pa.cast()), lo));
                        if mb != 0 {
                            let pb = pa.add(32);
                            _mm512_mask_storeu_epi16(pb.cast(), mb, _mm512_add_epi16(_mm512_maskz_loadu_epi16(mb, pb.cast()), hi));
                        }
                    }
                }
            }
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod avx2 {
    //! AVX2 kernels: 8 × 8 transposes into lane order, interpolation with the
    //! scatter into FFT rows, and dB with the transpose into image columns.
    use super::{Complex32, Interpolation, Lane, LANES};
    use std::arch::x86_64::*;

    #[inline(always)]
    unsafe fn transpose8(r: [__m256; 8]) -> [__m256; 8] {
        let t0 = _mm256_unpacklo_ps(r[0], r[1]);
        let t1 = _mm256_unpackhi_ps(r[0], r[1]);
        let t2 = _mm256_unpacklo_ps(r[2], r[3]);
        let t3 = _mm256_unpackhi_ps(r[2], r[3]);
        let t4 = _mm256_unpacklo_ps(r[4], r[5]);
        let t5 = _mm256_unpackhi_ps(r[4], r[5]);
        let t6 = _mm256_unpacklo_ps(r[6], r[7]);
        let t7 = _mm256_unpackhi_ps(r[6], r[7]);
        let u0 = _mm256_shuffle_ps::<0x44>(t0, t2);
        let u1 = _mm256_shuffle_ps::<0xEE>(t0, t2);
        let u2 = _mm256_shuffle_ps::<0x44>(t1, t3);
        let u3 = _mm256_shuffle_ps::<0xEE>(t1, t3);
        let u4 = _mm256_shuffle_ps::<0x44>(t4, t6);
        let u5 = _mm256_shuffle_ps::<0xEE>(t4, t6);
        let u6 = _mm256_shuffle_ps::<0x44>(t5, t7);
        let u7 = _mm256_shuffle_ps::<0xEE>(t5, t7);
        [
            _mm256_permute2f128_ps::<0x20>(u0, u4),
            _mm256_permute2f128_ps::<0x20>(u1, u5),
            _mm256_permute2f128_ps::<0x20>(u2, u6),
            _mm256_permute2f128_ps::<0x20>(u3, u7),
            _mm256_permute2f128_ps::<0x31>(u0, u4),
            _mm256_permute2f128_ps::<0x31>(u1, u5),
            _mm256_permute2f128_ps::<0x31>(u2, u6),
            _mm256_permute2f128_ps::<0x31>(u3, u7),
        ]
    }

    /// The 16 rows × 8 columns at `src[row·stride + col ..]`, transposed:
    /// for each of the 8 columns, its 16 row values as two vectors (rows
    /// 0–7, rows 8–15).
    #[inline(always)]
    unsafe fn load_16x8_transposed(src: *const f32, stride: usize, col: usize) -> [[__m256; 8]; 2] {
        let mut halves = [[_mm256_setzero_ps(); 8]; 2];
        for (half, out) in halves.iter_mut().enumerate() {
            let mut r = [_mm256_setzero_ps(); 8];
            for (i, ri) in r.iter_mut().enumerate() {
                *ri = _mm256_loadu_ps(src.add((half * 8 + i) * stride + col));
            }
            *out = transpose8(r);
        }
        halves
    }

    #[target_feature(enable = "avx2")]
    pub unsafe fn transpose_in(rows: &[f32], stride: usize, whole: usize, reference: &[f32], y: &mut [Lane]) {
        assert!(rows.len() >= LANES * stride && y.len() >= whole && reference.len() >= whole && whole <= stride);
        for p0 in (0..whole).step_by(8) {
            let halves = load_16x8_transposed(rows.as_ptr(), stride, p0);
            for (half, c) in halves.iter().enumerate() {
                for (q, cq) in c.iter().enumerate() {
                    let v = _mm256_sub_ps(*cq, _mm256_set1_ps(*reference.get_unchecked(p0 + q)));
                    _mm256_storeu_ps(y.as_mut_ptr().add(p0 + q).cast::<f32>().add(half * 8), v);
                }
            }
        }
    }

    /// As [`transpose_in`], from 16 rows of u16 samples (stride `pixels`).
    #[target_feature(enable = "avx2")]
    pub unsafe fn transpose_u16_in(samples: &[u16], pixels: usize, whole: usize, reference: &[f32], y: &mut [Lane]) {
        assert!(samples.len() >= LANES * pixels && y.len() >= whole && reference.len() >= whole && whole <= pixels && whole.is_multiple_of(8));
        // Lines 0–7 over all pixels, then lines 8–15: the frame's rows are
        // 4 KB apart (one L1 set), and 8 of them stay cached across the four
        // 8-pixel steps that share each cache line; 16 would not.
        for half in 0..2 {
            for p0 in (0..whole).step_by(8) {
                let mut r = [_mm256_setzero_ps(); 8];
                for (i, ri) in r.iter_mut().enumerate() {
                    let v = _mm_loadu_si128(samples.as_ptr().add((half * 8 + i) * pixels + p0).cast());
                    *ri = _mm256_cvtepi32_ps(_mm256_cvtepu16_epi32(v));
                }
                let c = transpose8(r);
                for (q, cq) in c.iter().enumerate() {
                    let v = _mm256_sub_ps(*cq, _mm256_set1_ps(*reference.get_unchecked(p0 + q)));
                    _mm256_storeu_ps(y.as_mut_ptr().add(p0 + q).cast::<f32>().add(half * 8), v);
                }
            }
        }
    }

    /// Power to dB: the fast log2 and its constants.
    pub struct ToDb<'a> {
        pub log2: &'a super::FastLog2,
        pub power_floor: f32,
        pub db_offset: f32,
    }

    /// image[d·alines + a0 + l] = dB(|src[l·stride + d]|²) for 16 lines and
    /// d < whole (a multiple of 8): |x|², log and the transpose into image
    /// columns in one pass over 8 depths × 16 lines at a time.
    #[target_feature(enable = "avx2,fma")]
    pub unsafe fn db_into_image(src: &[Complex32], stride: usize, whole: usize, to_db: &ToDb<'_>, image: *mut f32, alines: usize, a0: usize) {
        assert!(whole.is_multiple_of(8) && src.len() >= (LANES - 1) * stride + whole && a0 + LANES <= alines);
        let c = to_db.log2.coefficients();
        let floor = _mm256_set1_ps(to_db.power_floor);
        let (scale, offset) = (_mm256_set1_ps(super::DB_PER_LOG2), _mm256_set1_ps(to_db.db_offset));
        for d0 in (0..whole).step_by(8) {
            for half in 0..2 {
                let mut r = [_mm256_setzero_ps(); 8];
                for (i, ri) in r.iter_mut().enumerate() {
                    let p = src.as_ptr().add((half * 8 + i) * stride + d0).cast::<f32>();
                    let (a, b) = (_mm256_loadu_ps(p), _mm256_loadu_ps(p.add(8)));
                    // [p0 p1 p4 p5 | p2 p3 p6 p7] → [p0 … p7]
                    let h = _mm256_hadd_ps(_mm256_mul_ps(a, a), _mm256_mul_ps(b, b));
                    let power = _mm256_castpd_ps(_mm256_permute4x64_pd::<0xD8>(_mm256_castps_pd(h)));
                    *ri = _mm256_add_ps(_mm256_mul_ps(scale, log2_ps(_mm256_max_ps(power, floor), &c)), offset);
                }
                let t = transpose8(r);
                for (q, tq) in t.iter().enumerate() {
                    _mm256_storeu_ps(image.add((d0 + q) * alines + a0 + half * 8), *tq);
                }
            }
        }
    }

    /// [`super::FastLog2::log2`] on 8 values (the same operations).
    #[inline(always)]
    unsafe fn log2_ps(x: __m256, c: &[f32; super::LOG2_DEGREE + 1]) -> __m256 {
        let bits = _mm256_castps_si256(x);
        let e = _mm256_srai_epi32::<23>(_mm256_sub_epi32(bits, _mm256_set1_epi32(super::LOG2_RANGE_BITS)));
        let m = _mm256_castsi256_ps(_mm256_sub_epi32(bits, _mm256_slli_epi32::<23>(e)));
        let u = _mm256_mul_ps(_mm256_sub_ps(m, _mm256_set1_ps(super::LOG2_CENTRE)), _mm256_set1_ps(super::LOG2_INV_HALF_WIDTH));
        let mut p = _mm256_set1_ps(c[super::LOG2_DEGREE]);
        // Multiply then add, not FMA: bit for bit what the scalar code does,
        // so the image and row outputs are identical (tested).
        for k in (0..super::LOG2_DEGREE).rev() {
            p = _mm256_add_ps(_mm256_mul_ps(p, u), _mm256_set1_ps(c[k]));
        }
        _mm256_add_ps(_mm256_cvtepi32_ps(e), p)
    }


    /// For each tile of 8 k samples: v = a·y[i] + b·y[i+1] + lc·m[i] +
    /// rc·m[i+1] on all 16 lanes, then the lanes' FFT rows get factor·v.
    #[target_feature(enable = "avx2,fma")]
    pub unsafe fn eval_scatter(t: &Interpolation<'_>, y: &[Lane], m: &[Lane], lines: usize, stride: usize, buf: &mut [Complex32]) {
        let k = t.interval.len();
        assert!(k.is_multiple_of(8) && t.left_weight.len() == k && t.left_curvature.len() == k && t.right_curvature.len() == k && t.factor.len() == k);
        assert!(t.interval.iter().all(|&i| (i as usize) + 1 < y.len() && (i as usize) + 1 < m.len()));
        assert!(lines <= LANES && buf.len() >= LANES * stride && k <= stride);
        let mut tile = [[0.0f32; LANES]; 8];
        for j0 in (0..k).step_by(8) {
            for (q, v) in tile.iter_mut().enumerate() {
                let j = j0 + q;
                let i = *t.interval.get_unchecked(j) as usize;
                let a = _mm256_set1_ps(*t.left_weight.get_unchecked(j));
                let b = _mm256_set1_ps(1.0 - *t.left_weight.get_unchecked(j));
                let ya = y.as_ptr().add(i).cast::<f32>();
                let yb = y.as_ptr().add(i + 1).cast::<f32>();
                for half in 0..2 {
                    let o = half * 8;
                    let mut acc = _mm256_mul_ps(a, _mm256_loadu_ps(ya.add(o)));
                    acc = _mm256_fmadd_ps(b, _mm256_loadu_ps(yb.add(o)), acc);
                    if t.cubic {
                        let ma = m.as_ptr().add(i).cast::<f32>();
                        let mb = m.as_ptr().add(i + 1).cast::<f32>();
                        acc = _mm256_fmadd_ps(_mm256_set1_ps(*t.left_curvature.get_unchecked(j)), _mm256_loadu_ps(ma.add(o)), acc);
                        acc = _mm256_fmadd_ps(_mm256_set1_ps(*t.right_curvature.get_unchecked(j)), _mm256_loadu_ps(mb.add(o)), acc);
                    }
                    _mm256_storeu_ps(v.as_mut_ptr().add(o), acc);
                }
            }
            scatter_tile(&tile, &t.factor[j0..j0 + 8], lines, stride, j0, buf);
        }
    }

    #[inline]
    #[target_feature(enable = "avx2")]
    pub unsafe fn scatter_tile(tile: &[Lane; 8], factor: &[Complex32], lines: usize, stride: usize, j0: usize, buf: &mut [Complex32]) {
        assert!(factor.len() >= 8 && lines <= LANES && buf.len() >= lines.saturating_sub(1) * stride + j0 + 8);
        let mut fr = [0.0f32; 8];
        let mut fi = [0.0f32; 8];
        for q in 0..8 {
            fr[q] = factor[q].re;
            fi[q] = factor[q].im;
        }
        let (fr, fi) = (_mm256_loadu_ps(fr.as_ptr()), _mm256_loadu_ps(fi.as_ptr()));
        for half in 0..2 {
            let mut r = [_mm256_setzero_ps(); 8];
            for (q, rq) in r.iter_mut().enumerate() {
                *rq = _mm256_loadu_ps(tile[q].as_ptr().add(half * 8));
            }
            let c = transpose8(r);
            for (i, ci) in c.iter().enumerate() {
                let l = half * 8 + i;
                if l >= lines {
                    break;
                }
                let re = _mm256_mul_ps(*ci, fr);
                let im = _mm256_mul_ps(*ci, fi);
                let lo = _mm256_unpacklo_ps(re, im);
                let hi = _mm256_unpackhi_ps(re, im);
                let dst = buf.as_mut_ptr().add(l * stride + j0).cast::<f32>();
                _mm256_storeu_ps(dst, _mm256_permute2f128_ps::<0x20>(lo, hi));
                _mm256_storeu_ps(dst.add(8), _mm256_permute2f128_ps::<0x31>(lo, hi));
            }
        }
    }
}

/// Exact per-pixel median over A-lines for small unsigned integer samples,
/// by bisection on the value with SIMD-friendly counting passes.
pub trait MedianKey: Sized {
    /// Median of each column (NumPy convention for even counts), or None
    /// when this type has no fast path.
    /// `hint` holds last frame's lower middle values, which usually bracket
    /// this frame's closely (used only to start the search; the result is
    /// exact either way) and is updated.
    fn median_columns(_frame: ArrayView2<'_, Self>, _hint: &mut Vec<u16>) -> Option<Vec<f32>> {
        None
    }
}
impl MedianKey for u8 {}
impl MedianKey for i16 {}
impl MedianKey for u32 {}
impl MedianKey for f32 {}
impl MedianKey for f64 {}
impl MedianKey for u16 {
    fn median_columns(frame: ArrayView2<'_, u16>, hint: &mut Vec<u16>) -> Option<Vec<f32>> {
        let (rows, pixels) = frame.dim();
        if rows == 0 || rows > u16::MAX as usize || pixels % MEDIAN_ALIGN != 0 {
            return None;
        }
        let data = frame.as_slice()?;
        let chunk = pixels.div_ceil(2 * rayon::current_num_threads()).next_multiple_of(MEDIAN_ALIGN);
        if hint.len() != pixels {
            hint.clear();
        }
        let has_hint = !hint.is_empty();
        hint.resize(pixels, 0);
        let mut out = vec![0.0f32; pixels];
        if has_hint && near_pass_available() {
            median_u16_near(data, rows, pixels, &mut out, hint);
        } else {
            out.par_chunks_mut(chunk).zip(hint.par_chunks_mut(chunk)).enumerate().for_each(|(c, (dst, h))| {
                median_u16_chunk(data, rows, pixels, c * chunk, dst, h, has_hint);
            });
        }
        Some(out)
    }
}

/// Whether this CPU runs the one-pass search near last frame's medians
/// (AVX-512BW); elsewhere the bisection passes below do all the work.
fn near_pass_available() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        if NEAR_PASS_DISABLED.with(|d| d.get()) {
            return false;
        }
        super::kernel::avx512()
    }
    #[cfg(not(target_arch = "x86_64"))]
    false
}

thread_local! {
    /// Tests switch the one-pass search off to exercise the bisection alone.
    static NEAR_PASS_DISABLED: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Thresholds of the one-pass search: NEAR consecutive values from
/// last frame's lower middle − NEAR_BELOW. Frame to frame a pixel's median
/// moves by a few counts (on the bench capture 99.99 % of pixels by ≤ 4),
/// so one pass usually settles every column; the rest go to the bisection.
const NEAR: usize = 10;
const NEAR_BELOW: u16 = 5;
/// Rows per tile of the one-pass search: the counters of one 32-column
/// vector stay in registers while the tile's rows stream past (with the
/// pass split by rows, 32 was the fastest of 16, 32 and 64 on the bench
/// capture: 0.088 against 0.104 and 0.106–0.123 s per 100k A-lines).
const NEAR_TILE_ROWS: usize = 32;

/// Median of every column: one counting pass against NEAR consecutive
/// thresholds around `hint`, then the bisection for any 16-column group it
/// did not settle. Exact either way. The pass is split by rows, not
/// columns: each worker streams whole rows (contiguous memory, so the
/// hardware prefetchers see long runs; a frame's rows are one 4 KB page
/// each) into its own counts, and the counts are summed.
fn median_u16_near(data: &[u16], rows: usize, pixels: usize, dst: &mut [f32], hint: &mut [u16]) {
    let w = pixels;
    assert!(hint.len() == w && dst.len() == w && data.len() >= rows * pixels && rows > 0 && rows <= u16::MAX as usize);
    let base: Vec<u16> = hint.iter().map(|&h| h.saturating_sub(NEAR_BELOW).min(u16::MAX - (NEAR as u16 - 1))).collect();
    let parts = (2 * rayon::current_num_threads()).clamp(1, rows.div_ceil(NEAR_TILE_ROWS));
    let per = rows.div_ceil(parts).next_multiple_of(NEAR_TILE_ROWS);
    let counts = (0..rows.div_ceil(per))
        .into_par_iter()
        .map(|i| {
            let (r0, r1) = (i * per, ((i + 1) * per).min(rows));
            let mut c = vec![0u16; NEAR * w];
            #[cfg(target_arch = "x86_64")]
            // SAFETY: only called when near_pass_available() saw AVX-512F/BW;
            // bounds are asserted inside.
            unsafe {
                avx512::count_near(&data[r0 * pixels..r1 * pixels], r1 - r0, pixels, 0, &base, &mut c)
            };
            c
        })
        .reduce_with(|mut a, b| {
            // Counts add up to at most `rows` ≤ u16::MAX.
            for (x, y) in a.iter_mut().zip(b) {
                *x += y;
            }
            a
        })
        .expect("at least one row");
    let p0 = 0;
    let target = ((rows - 1) / 2 + 1) as u16;
    let even = rows.is_multiple_of(2);
    let mut unsettled = vec![false; w.div_ceil(MEDIAN_ALIGN)];
    for q in 0..w {
        let c = |i: usize| counts[i * w + q];
        let t = |i: usize| base[q] + i as u16;
        // Lower middle: the smallest v with #(x ≤ v) ≥ target; known when the
        // first threshold is below it (or is 0) and some threshold reaches it.
        let lower = if c(0) >= target { (base[q] == 0).then_some(0) } else { (1..NEAR).find(|&i| c(i) >= target) };
        let Some(il) = lower else {
            unsettled[q / MEDIAN_ALIGN] = true;
            continue;
        };
        let value = if even {
            match (il..NEAR).find(|&i| c(i) > target) {
                Some(iu) => 0.5 * (t(il) as f32 + t(iu) as f32),
                None => {
                    unsettled[q / MEDIAN_ALIGN] = true;
                    continue;
                }
            }
        } else {
            t(il) as f32
        };
        dst[q] = value;
        hint[q] = t(il);
    }
    for (g, _) in unsettled.iter().enumerate().filter(|(_, u)| **u) {
        let (a, b) = (g * MEDIAN_ALIGN, ((g + 1) * MEDIAN_ALIGN).min(w));
        median_u16_chunk(data, rows, pixels, p0 + a, &mut dst[a..b], &mut hint[a..b], true);
    }
}

fn median_u16_chunk(data: &[u16], rows: usize, pixels: usize, p0: usize, dst: &mut [f32], hint: &mut [u16], has_hint: bool) {
    #[cfg(target_arch = "x86_64")]
    {
        if super::kernel::avx2() {
            // SAFETY: the CPU supports AVX2.
            unsafe { median_u16_chunk_avx2(data, rows, pixels, p0, dst, hint, has_hint) };
            return;
        }
    }
    median_u16_chunk_inline(data, rows, pixels, p0, dst, hint, has_hint);
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
unsafe fn median_u16_chunk_avx2(data: &[u16], rows: usize, pixels: usize, p0: usize, dst: &mut [f32], hint: &mut [u16], has_hint: bool) {
    median_u16_chunk_inline(data, rows, pixels, p0, dst, hint, has_hint);
}

/// Column ranges per task are multiples of this (one AVX2 vector of u16).
const MEDIAN_ALIGN: usize = 16;

/// Half-width of the bracket tried around last frame's median: 41 values,
/// which the first pass's SPLITS thresholds cut into ranges of at most
/// SPLITS values, so that one final pass settles them.
const HINT_HALF_WIDTH: u16 = 20;

/// Thresholds per counting pass of the median search.
const SPLITS: usize = 7;

/// One counting pass: counts[i][q] = #{rows r : x[r][q] ≤ t[i][q]}.
#[inline(always)]
fn count_at_most(data: &[u16], rows: usize, pixels: usize, p0: usize, t: &[Vec<u16>; SPLITS], counts: &mut [Vec<u16>; SPLITS]) {
    let w = t[0].len();
    for c in counts.iter_mut() {
        assert_eq!(c.len(), w);
        c.fill(0);
    }
    for ti in t.iter() {
        assert_eq!(ti.len(), w);
    }
    for r in 0..rows {
        let x = &data[r * pixels + p0..r * pixels + p0 + w];
        for i in 0..SPLITS {
            let (c, ti) = (&mut counts[i][..w], &t[i][..w]);
            for q in 0..w {
                c[q] += (x[q] <= ti[q]) as u16;
            }
        }
    }
}

/// The bracket [lo, hi] of the lower middle (the smallest v with
/// #(x ≤ v) ≥ target), narrowed by (threshold, #(x ≤ threshold)) pairs.
#[inline(always)]
fn narrow(mut lo: u16, mut hi: u16, counted: impl Iterator<Item = (u16, u16)>, target: u16) -> (u16, u16) {
    for (t, c) in counted {
        if c >= target {
            hi = hi.min(t);
        } else {
            lo = lo.max(t + 1);
        }
    }
    (lo, hi)
}

#[inline(always)]
fn median_u16_chunk_inline(data: &[u16], rows: usize, pixels: usize, p0: usize, dst: &mut [f32], hint: &mut [u16], has_hint: bool) {
    let w = dst.len();
    assert!(hint.len() == w);
    // Lower middle (0-based rank (rows−1)/2): the smallest v with
    // #(x ≤ v) ≥ target = rank + 1, for all columns at once. Each counting
    // pass streams the frame row by row (columns contiguous, counters in
    // L1) against SPLITS thresholds per column, shrinking every bracket
    // [lo, hi] about eightfold. The first pass tries the bracket around last
    // frame's answer, which usually holds; columns where it does not start
    // again from [min, max].
    let target = ((rows - 1) / 2 + 1) as u16;
    let mut t: [Vec<u16>; SPLITS] = std::array::from_fn(|_| vec![0u16; w]);
    let mut counts: [Vec<u16>; SPLITS] = std::array::from_fn(|_| vec![0u16; w]);
    let (mut lo, mut hi) = (vec![0u16; w], vec![u16::MAX; w]);
    let mut settled = vec![false; w];
    if has_hint {
        // Thresholds: below the bracket, SPLITS−2 inside, its top.
        for q in 0..w {
            let (a, b) = (hint[q].saturating_sub(HINT_HALF_WIDTH), hint[q].saturating_add(HINT_HALF_WIDTH));
            t[0][q] = a.saturating_sub(1);
            for (i, ti) in t.iter_mut().enumerate().take(SPLITS - 1).skip(1) {
                ti[q] = (a as u32 + i as u32 * (b - a) as u32 / (SPLITS as u32 - 1)) as u16;
            }
            t[SPLITS - 1][q] = b;
        }
        count_at_most(data, rows, pixels, p0, &t, &mut counts);
        for q in 0..w {
            let a = hint[q].saturating_sub(HINT_HALF_WIDTH);
            let below_ok = a == 0 || counts[0][q] < target;
            if below_ok && counts[SPLITS - 1][q] >= target {
                (lo[q], hi[q]) = narrow(a, t[SPLITS - 1][q], (1..SPLITS).map(|i| (t[i][q], counts[i][q])), target);
                settled[q] = true;
            }
        }
    }
    if settled.iter().any(|s| !s) {
        // [min, max] for the columns the hint did not settle.
        let (mut mn, mut mx) = (vec![u16::MAX; w], vec![0u16; w]);
        for r in 0..rows {
            let x = &data[r * pixels + p0..r * pixels + p0 + w];
            for q in 0..w {
                mn[q] = mn[q].min(x[q]);
                mx[q] = mx[q].max(x[q]);
            }
        }
        for q in 0..w {
            if !settled[q] {
                lo[q] = mn[q];
                hi[q] = mx[q];
            }
        }
    }
    // Narrow until every bracket holds at most SPLITS values.
    while lo.iter().zip(hi.iter()).any(|(a, b)| (b - a) as usize >= SPLITS) {
        for q in 0..w {
            let (a, span) = (lo[q] as u32, (hi[q] - lo[q]) as u32);
            for (i, ti) in t.iter_mut().enumerate() {
                ti[q] = (a + (i as u32 + 1) * span / (SPLITS as u32 + 1)) as u16;
            }
        }
        count_at_most(data, rows, pixels, p0, &t, &mut counts);
        for q in 0..w {
            if lo[q] >= hi[q] {
                continue;
            }
            (lo[q], hi[q]) = narrow(lo[q], hi[q], (0..SPLITS).map(|i| (t[i][q], counts[i][q])), target);
        }
    }
    // Final pass: a threshold at each of lo, lo+1, …, lo+SPLITS−1 gives the
    // lower middle and, for an even count, usually the upper middle too
    // (the smallest v with #(x ≤ v) ≥ target + 1).
    for q in 0..w {
        for (i, ti) in t.iter_mut().enumerate() {
            ti[q] = lo[q].saturating_add(i as u16);
        }
    }
    count_at_most(data, rows, pixels, p0, &t, &mut counts);
    let even = rows.is_multiple_of(2);
    let mut upper: Vec<Option<u16>> = vec![None; w];
    for q in 0..w {
        let first = |need: u16| (0..SPLITS).find(|&i| counts[i][q] >= need).map(|i| t[i][q]);
        lo[q] = first(target).expect("the bracket holds the lower middle");
        if even {
            upper[q] = first(target + 1);
        }
    }
    hint.copy_from_slice(&lo);
    if !even {
        for (d, &v) in dst.iter_mut().zip(lo.iter()) {
            *d = v as f32;
        }
        return;
    }
    if upper.iter().any(|u| u.is_none()) {
        // Upper middle beyond the thresholds: the smallest value above the
        // lower one (one more pass, rarely needed).
        let mut above = vec![u16::MAX; w];
        for r in 0..rows {
            for ((a, &v), &l) in above.iter_mut().zip(&data[r * pixels + p0..r * pixels + p0 + w]).zip(lo.iter()) {
                *a = (*a).min(if v > l { v } else { u16::MAX });
            }
        }
        for q in 0..w {
            upper[q] = upper[q].or(Some(above[q]));
        }
    }
    for q in 0..w {
        dst[q] = 0.5 * (lo[q] as f32 + upper[q].expect("set above") as f32);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fast_log2_is_accurate() {
        let f = FastLog2::new();
        let mut worst = 0.0f64;
        let mut x = 1e-30f32;
        while x < 1e30 {
            let e = (f.log2(x) as f64 - (x as f64).log2()).abs();
            worst = worst.max(e);
            x *= 1.0137;
        }
        // ≤ 0.01 dB is the requirement; this is far inside it.
        let db = worst * DB_PER_LOG2 as f64;
        assert!(db < 1e-4, "worst error {worst} in log2 = {db} dB");
    }

    /// The AVX-512 16 × 16 transposes into lane order against plain indexing.
    #[cfg(target_arch = "x86_64")]
    #[test]
    fn lane_transpose_matches_plain_indexing() {
        if !lane_fft_available() {
            eprintln!("no AVX-512 here: lane transpose not exercised");
            return;
        }
        for pixels in [2048usize, 2080] {
            let samples: Vec<u16> = (0..LANES * pixels).map(|i| ((i * 2654435761usize) >> 7) as u16 & 0x0fff).collect();
            let reference: Vec<f32> = (0..pixels).map(|p| (p % 37) as f32 * 0.5).collect();
            let mut y = vec![[0.0f32; LANES]; pixels];
            let whole = pixels / 32 * 32;
            // SAFETY: AVX-512F/BW checked above.
            unsafe { lanes::transpose_u16_in(&samples, pixels, whole, &reference, &mut y) };
            for p in 0..whole {
                for l in 0..LANES {
                    assert_eq!(y[p][l], samples[l * pixels + p] as f32 - reference[p], "pixel {p} lane {l}");
                }
            }
        }
    }

    #[test]
    fn integer_median_matches_the_reference_median() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        // With the one-pass search near the hint (where the CPU has it) and
        // with the bisection alone.
        for disabled in [false, true] {
            NEAR_PASS_DISABLED.with(|d| d.set(disabled));
            // 304 columns: a partial 32-column vector at the end (the
            // second of a 64-column pair); 272: the pair's first vector
            // partial and no second.
            for (rows, pixels) in [(1usize, 304usize), (2, 304), (7, 304), (64, 304), (101, 304), (1000, 64), (300, 272)] {
                for (lo, hi) in [(1000u16, 1400u16), (0, 6), (65528, 65535)] {
                    let data: Vec<u16> = (0..rows * pixels)
                        .map(|_| if rng.random_bool(0.05) { rng.random_range(0..=u16::MAX) } else { rng.random_range(lo..=hi) })
                        .collect();
                    let a = Array2::from_shape_vec((rows, pixels), data).unwrap();
                    let reference = median_spectrum(a.mapv(|v| v as f64).view());
                    let check = |fast: Vec<f32>, what: &str| {
                        for (q, (f, r)) in fast.iter().zip(reference.iter()).enumerate() {
                            assert_eq!(*f as f64, *r, "rows {rows}, values {lo}..{hi}, column {q}, {what}, near pass off {disabled}");
                        }
                    };
                    // Without a hint, then with a good one (its own), a
                    // slightly wrong one, and a wrong one.
                    let mut hint = Vec::new();
                    check(u16::median_columns(a.view(), &mut hint).unwrap(), "no hint");
                    check(u16::median_columns(a.view(), &mut hint).unwrap(), "own hint");
                    let mut near: Vec<u16> = hint.iter().enumerate().map(|(q, &h)| if q % 3 == 0 { h.saturating_add(4) } else { h.saturating_sub(7) }).collect();
                    check(u16::median_columns(a.view(), &mut near).unwrap(), "near hint");
                    let mut wrong = vec![3500u16; pixels];
                    check(u16::median_columns(a.view(), &mut wrong).unwrap(), "wrong hint");
                }
            }
        }
        NEAR_PASS_DISABLED.with(|d| d.set(false));
    }
}
