//! Resampling in the fused path: a block's spectra minus the reference into
//! lane order (one A-line per SIMD lane, pixel-major), the natural cubic
//! spline's second derivatives by the precomputed tridiagonal sweeps on all
//! lanes at once, and the interpolation onto the uniform k grid (scattered
//! into FFT rows, or evaluated inside the lane FFT's first level), in
//! scalar, AVX2 and AVX-512 forms.
//!
//! Must match `stages::k_linearization` (the same spline, the same
//! `curvature_weights` and `natural_spline_factors`) and, before it,
//! `stages::background` (the subtraction of the reference spectrum).

use rustfft::num_complex::Complex32;

use super::lane_fft::Interpolation;
use super::{FusedPlan, Lane, Sample, Workspace, LANES, ROW_PAD};
use crate::pipeline::kernel::Variant;
use crate::stages::k_linearization::{curvature_weights, natural_spline_factors};

/// Natural cubic spline tables in pixel order (k increasing or decreasing
/// with the pixel index), built like `stages::k_linearization` builds its
/// own in increasing-k order: the same interpolant.
pub(super) struct PixelOrderSpline {
    pub(super) interval: Vec<u32>,
    pub(super) left_weight: Vec<f64>,
    pub(super) left_curvature: Vec<f64>,
    pub(super) right_curvature: Vec<f64>,
    pub(super) h: Vec<f64>,
    pub(super) inv_h: Vec<f64>,
    pub(super) c_prime: Vec<f64>,
    pub(super) inv_pivot: Vec<f64>,
}

impl PixelOrderSpline {
    pub(super) fn new(wavelength_nm: &[f64], k_min: f64, k_max: f64, samples: usize) -> Self {
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

/// One lane vector on its own 64-byte cache line.
#[repr(C, align(64))]
#[derive(Clone, Copy)]
struct AlignedLane(Lane);

/// Lane vectors, each on one cache line. (A plain Vec of `[f32; 16]` is
/// only 4-byte aligned, and glibc's large blocks start 16 bytes into a page,
/// so every vector load and store would straddle two lines.)
pub(super) struct LaneBuffer(Vec<AlignedLane>);

impl LaneBuffer {
    pub(super) fn new(len: usize) -> Self {
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

impl FusedPlan {
    /// The block's spectra minus the reference into lane order (ws.y):
    /// pixel-major with one lane per A-line; lanes past `lines` are zero.
    #[inline(always)]
    pub(super) fn load_block<T: Sample>(&self, spectra: &[T], lines: usize, reference: &[f32], ws: &mut Workspace) {
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
            transpose_in(&ws.rows, pixels, rs, reference, y, self.variant >= Variant::Avx2);
        }
    }

    /// For a full block of u16 spectra on an AVX2 machine: converts and
    /// transposes straight from the frame into lane order (no f32 copy of
    /// the block). Returns false when it does not apply.
    #[inline(always)]
    fn transpose_u16_in<T: Sample>(&self, spectra: &[T], lines: usize, reference: &[f32], y: &mut [Lane]) -> bool {
        #[cfg(target_arch = "x86_64")]
        {
            if lines == LANES && std::any::TypeId::of::<T>() == std::any::TypeId::of::<u16>() && self.variant >= Variant::Avx2 {
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

    /// A full block of u16 spectra straight from the frame into lane order
    /// with AVX-512 (16 × 16 transposes); false when it does not apply.
    #[cfg(target_arch = "x86_64")]
    #[inline(always)]
    pub(super) fn transpose_u16_lanes<T: Sample>(&self, spectra: &[T], lines: usize, reference: &[f32], y: &mut [Lane]) -> bool {
        if lines != LANES || std::any::TypeId::of::<T>() != std::any::TypeId::of::<u16>() {
            return false;
        }
        // SAFETY: T is u16 (same size and alignment), checked above.
        let samples = unsafe { std::slice::from_raw_parts(spectra.as_ptr().cast::<u16>(), spectra.len()) };
        let pixels = self.pixels;
        let whole = pixels / 32 * 32;
        // SAFETY: only reached from block_lanes (AVX-512F/BW present); bounds
        // are asserted inside.
        unsafe { avx512::transpose_u16_in(samples, pixels, whole, reference, y) };
        for p in whole..pixels {
            for l in 0..LANES {
                y[p][l] = samples[l * pixels + p] as f32 - reference[p];
            }
        }
        true
    }

    /// The natural spline's second derivatives m (all lanes) for samples y;
    /// nothing for linear resampling.
    #[inline(always)]
    pub(super) fn spline_curvatures(&self, y: &[Lane], m: &mut [Lane]) {
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

    /// The interpolation tables onto the k grid.
    pub(super) fn interpolation(&self) -> Interpolation<'_> {
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
    pub(super) fn eval_whole_tiles(&self, y: &[Lane], m: &[Lane], lines: usize, stride: usize, buf: &mut [Complex32]) -> usize {
        #[cfg(target_arch = "x86_64")]
        {
            if self.variant >= Variant::Avx2 {
                let whole = self.k_samples / 8 * 8;
                // SAFETY: AVX2 and FMA are present; indices are checked inside.
                unsafe { avx2::eval_scatter(&self.interpolation().head(whole), y, m, lines, stride, buf) };
                return whole;
            }
        }
        0
    }
}

/// y[p][l] = rows[l·pixels + p] − reference[p] for the LANES rows (with
/// the AVX2 kernel when `avx2`).
#[inline(always)]
fn transpose_in(rows: &[f32], pixels: usize, stride: usize, reference: &[f32], y: &mut [Lane], avx2: bool) {
    #[cfg(target_arch = "x86_64")]
    {
        if avx2 {
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
/// factor[q]·tile[q][l] into lane l's FFT row (with the AVX2 kernel when
/// `avx2`).
#[inline(always)]
#[allow(clippy::too_many_arguments)]
pub(super) fn scatter_tile(tile: &[Lane; 8], width: usize, factor: &[Complex32], lines: usize, stride: usize, j0: usize, buf: &mut [Complex32], avx2: bool) {
    #[cfg(target_arch = "x86_64")]
    {
        if width == 8 && avx2 {
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
pub(super) mod avx512 {
    //! AVX-512 resampling kernels of the lane-order path: one vector holds
    //! one sample of the block's 16 A-lines, so nothing is transposed.
    use super::super::{Lane, LANES};
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
}

#[cfg(target_arch = "x86_64")]
pub(super) mod avx2 {
    //! AVX2 resampling kernels: 8 × 8 transposes into lane order and the
    //! interpolation with the scatter into FFT rows.
    use super::super::lane_fft::Interpolation;
    use super::super::{Lane, LANES};
    use rustfft::num_complex::Complex32;
    use std::arch::x86_64::*;
    #[inline(always)]
    pub unsafe fn transpose8(r: [__m256; 8]) -> [__m256; 8] {
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

#[cfg(test)]
mod tests {
    use super::*;

    /// The AVX-512 16 × 16 transposes into lane order against plain indexing.
    #[cfg(target_arch = "x86_64")]
    #[test]
    fn lane_transpose_matches_plain_indexing() {
        if !Variant::Avx512.supported() {
            eprintln!("no AVX-512 here: lane transpose not exercised");
            return;
        }
        for pixels in [2048usize, 2080] {
            let samples: Vec<u16> = (0..LANES * pixels).map(|i| ((i * 2654435761usize) >> 7) as u16 & 0x0fff).collect();
            let reference: Vec<f32> = (0..pixels).map(|p| (p % 37) as f32 * 0.5).collect();
            let mut y = vec![[0.0f32; LANES]; pixels];
            let whole = pixels / 32 * 32;
            // SAFETY: AVX-512F/BW checked above.
            unsafe { avx512::transpose_u16_in(&samples, pixels, whole, &reference, &mut y) };
            for p in 0..whole {
                for l in 0..LANES {
                    assert_eq!(y[p][l], samples[l * pixels + p] as f32 - reference[p], "pixel {p} lane {l}");
                }
            }
        }
    }
}
