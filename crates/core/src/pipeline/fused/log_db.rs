//! Magnitude and log compression of the fused path: |X|² of each kept
//! depth bin, dB by a polynomial log2 (10·log10 of power plus the plan's
//! offset, floored like the reference), and the amplitude and complex
//! depth-profile outputs beside the dB image, in scalar, AVX2 and AVX-512
//! forms that compute the same bits (multiply then add, no FMA).
//!
//! Must match `stages::log_compression` (20·log10 of the amplitude, floored
//! at `AMPLITUDE_FLOOR`) within 1e-4 dB; the complex output must match the
//! reference engine's `complex_depth_factors` product.

/// 10·log10(2): dB of power per unit of log2.
pub(super) const DB_PER_LOG2: f32 = 10.0 * std::f32::consts::LOG10_2;
/// Degree of the log2 polynomial (see [`FastLog2`]).
const LOG2_DEGREE: usize = 6;
/// The log2 range reduction, shared by the scalar, AVX2 and AVX-512 code:
/// the bits of 0.75 (x = 2^e·m with m ∈ [0.75, 1.5)), and the map of m onto
/// the polynomial's u ∈ [−1, 1): u = (m − 1.125) / 0.375.
const LOG2_RANGE_BITS: i32 = 0x3f40_0000;
const LOG2_CENTRE: f32 = 1.125;
const LOG2_INV_HALF_WIDTH: f32 = 1.0 / 0.375;

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

#[cfg(target_arch = "x86_64")]
pub(super) mod avx512 {
    //! AVX-512 |X|², dB, complex and amplitude outputs read straight from
    //! the lane FFT's output order.
    use super::super::lane_fft::LaneComplex;
    use super::super::LANES;
    use super::avx2::ToDb;
    use rustfft::num_complex::Complex32;
    use std::arch::x86_64::*;
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

#[cfg(target_arch = "x86_64")]
pub(super) mod avx2 {
    //! AVX2 |X|² and dB with the transpose into image columns.
    use super::super::resample::avx2::transpose8;
    use super::super::LANES;
    use rustfft::num_complex::Complex32;
    use std::arch::x86_64::*;
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
}
