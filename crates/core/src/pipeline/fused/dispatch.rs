//! Per-variant dispatch of the fused path: which block kernel a plan runs
//! (the AVX-512 lane-order block, the AVX2 + FMA block or the portable one,
//! by the plan's [`Variant`]), the FFT each variant plans, and the two block
//! drivers (lane order to the end; or one rustfft call per line with |X|²,
//! dB and the transpose into the image in one pass).
//!
//! Together with the kernels they call, each block must match the
//! reference chain of `stages` (background → k_linearization → dispersion
//! → shaping/window → fft → log_compression) within 1e-4 of the peak.

use rustfft::num_complex::Complex32;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;
use std::time::Instant;

use super::lane_fft::{LaneFft, Resampled};
use super::log_db::DB_PER_LOG2;
use super::{FusedPlan, FusedTimer, Sample, Sink, Workspace, FFT_ROW_PAD, LANES};
use crate::pipeline::kernel::Variant;

/// The per-line FFT of `variant`: rustfft picks its AVX kernels itself; the
/// scalar variant asks for its scalar planner.
pub(super) fn plan_fft(variant: Variant, length: usize) -> Arc<dyn Fft<f32>> {
    if variant >= Variant::Avx2 {
        FftPlanner::<f32>::new().plan_fft_forward(length)
    } else {
        rustfft::FftPlannerScalar::<f32>::new().plan_fft_forward(length)
    }
}

impl FusedPlan {
    /// One block of ≤ LANES A-lines into `sink`.
    pub(super) fn block<T: Sample>(&self, spectra: &[T], reference: &[f32], sink: Sink<'_>, ws: &mut Workspace, timer: &FusedTimer) {
        if crate::interrupt::requested() {
            return; // the frame in flight is discarded
        }
        #[cfg(target_arch = "x86_64")]
        {
            if let Some(lane_fft) = &self.lane_fft {
                // SAFETY: lane_fft is only planned in the AVX-512 variant,
                // which needs AVX-512F/BW, AVX2 and FMA (Variant::supported).
                unsafe { self.block_lanes(lane_fft, spectra, reference, sink, ws, timer) };
                return;
            }
            if self.variant >= Variant::Avx2 {
                // SAFETY: the CPU supports the features the function is compiled for.
                unsafe { self.block_avx2(spectra, reference, sink, ws, timer) };
                return;
            }
        }
        self.block_inline(spectra, reference, sink, ws, timer);
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
            let sweep = super::resample::avx512::Sweep { inv_h: &self.inv_h, inv_pivot: &self.inv_pivot, sweep_alpha: &self.sweep_alpha, c_prime: &self.c_prime };
            // SAFETY: AVX-512F and FMA are present; lengths are checked inside.
            unsafe { super::resample::avx512::spline_curvatures(&sweep, &ws.y, &mut ws.m) };
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
        let to_db = super::log_db::avx2::ToDb { log2: &self.log2, power_floor: self.power_floor, db_offset: self.db_offset };
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
        unsafe { super::log_db::avx512::db(&ws.lanes, bins, &to_db, base, depth_step, line_step, lines) };
        if let Some((image, a0)) = extra_target {
            // SAFETY: AVX-512F is present; d < depth and a0 + l < alines for
            // every store (asserted above): this block's columns only.
            if !image.complex.is_null() {
                unsafe { super::log_db::avx512::complex(&ws.lanes, bins, &self.complex_factor, image.complex.add(a0), image.alines, lines) };
            }
            if !image.amplitude.is_null() {
                unsafe { super::log_db::avx512::amplitude(&ws.lanes, bins, self.amplitude_scale, image.amplitude.add(a0), image.alines, lines) };
            }
        }
        timer.add(3, t2);
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn block_avx2<T: Sample>(&self, spectra: &[T], reference: &[f32], sink: Sink<'_>, ws: &mut Workspace, timer: &FusedTimer) {
        self.block_inline(spectra, reference, sink, ws, timer);
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
            super::resample::scatter_tile(&tile, width, &self.factor[j0..j0 + width], lines, fs, j0, buf, self.variant >= Variant::Avx2);
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
                    if lines == LANES && self.variant >= Variant::Avx2 {
                        first = depth / 8 * 8;
                        let to_db = super::log_db::avx2::ToDb { log2: &self.log2, power_floor: self.power_floor, db_offset: self.db_offset };
                        // SAFETY: AVX2 and FMA are present; the reads are in
                        // `buf` (asserted above) and the writes are this
                        // block's columns of the image.
                        unsafe { super::log_db::avx2::db_into_image(&buf[self.first_bin..], fs, first, &to_db, image.ptr, image.alines, a0) };
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

/// The vector kernels the fast path runs on this CPU unless a plan's
/// measurement picks a lower variant (for `--version` and the bench report).
pub fn simd_path() -> &'static str {
    match crate::pipeline::kernel::active() {
        Variant::Avx512 => "AVX-512 lane FFT (AVX-512F/BW, AVX2, FMA)",
        Variant::Avx2 => "AVX2 + FMA",
        Variant::Scalar => "scalar (portable code, rustfft's scalar FFT)",
    }
}
