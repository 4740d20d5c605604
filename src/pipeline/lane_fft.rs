//! A forward FFT across A-lines: [`LANES`] transforms of one power-of-two
//! length at once, one A-line per SIMD lane, for the fused path on CPUs with
//! AVX-512.
//!
//! The fused path already holds a block's spectra with one A-line per lane
//! (sample j of all 16 lines in one vector), so this transform needs no
//! shuffles and no change of layout: every butterfly works on whole
//! vectors. It is the textbook recursive decimation-in-frequency radix-4
//! Cooley–Tukey FFT, in place, depth first, so after the first level or two
//! a sub-transform fits in the L1 cache; the last level is a radix-8 (or
//! radix-4) leaf done in registers. The output is in digit-reversed order
//! and is left that way: [`LaneFft::position`] says where each frequency bin
//! is, and the dB pass reads the bins it needs from there, so no reordering
//! pass is spent. rustfft stays the FFT of the reference path; the tests hold
//! this one to it.

/// Transforms per call, one per lane of a 512-bit vector of f32.
pub const LANES: usize = 16;

/// Sample j of 16 A-lines: real parts, then imaginary parts.
#[repr(C, align(64))]
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct LaneComplex {
    pub re: [f32; LANES],
    pub im: [f32; LANES],
}

/// A planned forward FFT of one length (a power of two, at least 8).
pub struct LaneFft {
    len: usize,
    /// Per radix-4 level, outermost first (n = len, len/4, …, above the
    /// leaf): for p < n/4 the twiddles W_n^p, W_n^2p, W_n^3p as
    /// [re, im, re, im, re, im], W_n = exp(−2πi/n), computed in f64.
    twiddles: Vec<Vec<[f32; 6]>>,
    /// Position of each frequency bin in the transformed buffer.
    position: Vec<u32>,
}

impl LaneFft {
    /// The plan for `len`, or None when `len` is not a power of two ≥ 8.
    pub fn new(len: usize) -> Option<Self> {
        if !len.is_power_of_two() || len < 8 {
            return None;
        }
        let mut twiddles = Vec::new();
        let mut n = len;
        while n > 8 {
            let m = n / 4;
            let w = |k: usize| {
                let a = -2.0 * std::f64::consts::PI * (k % n) as f64 / n as f64;
                (a.cos() as f32, a.sin() as f32)
            };
            twiddles.push(
                (0..m)
                    .map(|p| {
                        let (w1, w2, w3) = (w(p), w(2 * p), w(3 * p));
                        [w1.0, w1.1, w2.0, w2.1, w3.0, w3.1]
                    })
                    .collect(),
            );
            n = m;
        }
        let mut position = vec![0u32; len];
        for (pos, bin) in bins_in_order(len).into_iter().enumerate() {
            position[bin] = pos as u32;
        }
        Some(LaneFft { len, twiddles, position })
    }

    pub fn len(&self) -> usize {
        self.len
    }

    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Where frequency bin `bin` is after [`Self::forward`].
    #[inline(always)]
    pub fn position(&self, bin: usize) -> usize {
        self.position[bin] as usize
    }

    /// Forward transform of the 16 lanes of `x` in place (output in the
    /// order given by [`Self::position`]). Needs AVX-512F.
    ///
    /// # Safety
    /// The CPU must support AVX-512F.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f")]
    pub unsafe fn forward(&self, x: &mut [LaneComplex]) {
        assert_eq!(x.len(), self.len, "lane FFT length");
        // SAFETY: the length is checked; the levels stay inside x.
        unsafe { self.level(x.as_mut_ptr(), self.len, 0) }
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f")]
    unsafe fn level(&self, x: *mut LaneComplex, n: usize, depth: usize) {
        use kernels::*;
        unsafe {
            match n {
                8 => leaf8(x),
                4 => leaf4(x),
                _ => {
                    let m = n / 4;
                    let tw = &self.twiddles[depth];
                    for (p, t) in tw.iter().enumerate().take(m) {
                        radix4(x.add(p), m, t);
                    }
                    for k in 0..4 {
                        self.level(x.add(k * m), m, depth + 1);
                    }
                }
            }
        }
    }
}

/// The frequency bin at each position of the output, by the same recursion
/// as the transform: the radix-4 step leaves in quarter k the sub-sequence
/// whose transform gives bins 4r + k (the radix-2 step of the 8-point leaf,
/// in half k the bins 2r + k).
fn bins_in_order(n: usize) -> Vec<usize> {
    match n {
        4 => vec![0, 1, 2, 3],
        8 => (0..8).map(|pos| 2 * (pos % 4) + pos / 4).collect(),
        _ => {
            let m = n / 4;
            let sub = bins_in_order(m);
            (0..n).map(|pos| 4 * sub[pos % m] + pos / m).collect()
        }
    }
}

#[cfg(target_arch = "x86_64")]
mod kernels {
    //! The butterflies, on (re, im) pairs of 512-bit vectors.
    use super::LaneComplex;
    use std::arch::x86_64::*;

    #[derive(Clone, Copy)]
    pub struct V {
        re: __m512,
        im: __m512,
    }

    #[inline]
    #[target_feature(enable = "avx512f")]
    unsafe fn load(p: *const LaneComplex) -> V {
        unsafe {
            let f = p.cast::<f32>();
            V { re: _mm512_load_ps(f), im: _mm512_load_ps(f.add(16)) }
        }
    }

    #[inline]
    #[target_feature(enable = "avx512f")]
    unsafe fn store(p: *mut LaneComplex, v: V) {
        unsafe {
            let f = p.cast::<f32>();
            _mm512_store_ps(f, v.re);
            _mm512_store_ps(f.add(16), v.im);
        }
    }

    #[inline]
    #[target_feature(enable = "avx512f")]
    fn add(a: V, b: V) -> V {
        V { re: _mm512_add_ps(a.re, b.re), im: _mm512_add_ps(a.im, b.im) }
    }

    #[inline]
    #[target_feature(enable = "avx512f")]
    fn sub(a: V, b: V) -> V {
        V { re: _mm512_sub_ps(a.re, b.re), im: _mm512_sub_ps(a.im, b.im) }
    }

    /// a − i·b
    #[inline]
    #[target_feature(enable = "avx512f")]
    fn sub_i(a: V, b: V) -> V {
        V { re: _mm512_add_ps(a.re, b.im), im: _mm512_sub_ps(a.im, b.re) }
    }

    /// a + i·b
    #[inline]
    #[target_feature(enable = "avx512f")]
    fn add_i(a: V, b: V) -> V {
        V { re: _mm512_sub_ps(a.re, b.im), im: _mm512_add_ps(a.im, b.re) }
    }

    /// a·(wr + i·wi) for a scalar twiddle.
    #[inline]
    #[target_feature(enable = "avx512f")]
    fn twiddle(a: V, wr: f32, wi: f32) -> V {
        let (wr, wi) = (_mm512_set1_ps(wr), _mm512_set1_ps(wi));
        V { re: _mm512_fmsub_ps(a.re, wr, _mm512_mul_ps(a.im, wi)), im: _mm512_fmadd_ps(a.re, wi, _mm512_mul_ps(a.im, wr)) }
    }

    /// One radix-4 decimation-in-frequency butterfly on x[0], x[m], x[2m],
    /// x[3m] with the twiddles t of its index p.
    #[inline]
    #[target_feature(enable = "avx512f")]
    pub unsafe fn radix4(x: *mut LaneComplex, m: usize, t: &[f32; 6]) {
        unsafe {
            let (a, b, c, d) = (load(x), load(x.add(m)), load(x.add(2 * m)), load(x.add(3 * m)));
            let (apc, amc, bpd, bmd) = (add(a, c), sub(a, c), add(b, d), sub(b, d));
            store(x, add(apc, bpd));
            store(x.add(m), twiddle(sub_i(amc, bmd), t[0], t[1]));
            store(x.add(2 * m), twiddle(sub(apc, bpd), t[2], t[3]));
            store(x.add(3 * m), twiddle(add_i(amc, bmd), t[4], t[5]));
        }
    }

    /// 4-point DFT of (a, b, c, d), bins in natural order.
    #[inline]
    #[target_feature(enable = "avx512f")]
    fn dft4(a: V, b: V, c: V, d: V) -> [V; 4] {
        let (apc, amc, bpd, bmd) = (add(a, c), sub(a, c), add(b, d), sub(b, d));
        [add(apc, bpd), sub_i(amc, bmd), sub(apc, bpd), add_i(amc, bmd)]
    }

    #[inline]
    #[target_feature(enable = "avx512f")]
    pub unsafe fn leaf4(x: *mut LaneComplex) {
        unsafe {
            let y = dft4(load(x), load(x.add(1)), load(x.add(2)), load(x.add(3)));
            for (i, v) in y.into_iter().enumerate() {
                store(x.add(i), v);
            }
        }
    }

    /// 8-point DFT: one radix-2 step (twiddles W_8^p) then two 4-point DFTs.
    #[inline]
    #[target_feature(enable = "avx512f")]
    pub unsafe fn leaf8(x: *mut LaneComplex) {
        unsafe {
            let v: [V; 8] = std::array::from_fn(|i| load(x.add(i)));
            let s: [V; 4] = std::array::from_fn(|p| add(v[p], v[p + 4]));
            let d: [V; 4] = std::array::from_fn(|p| sub(v[p], v[p + 4]));
            let c = _mm512_set1_ps(std::f32::consts::FRAC_1_SQRT_2);
            // d1·W_8 = c·(re + im) + i·c·(im − re); d2·W_8² = −i·d2 = im − i·re;
            // d3·W_8³ = c·(im − re) − i·c·(re + im).
            let t1 = V { re: _mm512_mul_ps(c, _mm512_add_ps(d[1].re, d[1].im)), im: _mm512_mul_ps(c, _mm512_sub_ps(d[1].im, d[1].re)) };
            let t2 = V { re: d[2].im, im: _mm512_sub_ps(_mm512_setzero_ps(), d[2].re) };
            let t3 = V { re: _mm512_mul_ps(c, _mm512_sub_ps(d[3].im, d[3].re)), im: _mm512_sub_ps(_mm512_setzero_ps(), _mm512_mul_ps(c, _mm512_add_ps(d[3].re, d[3].im))) };
            let e = dft4(s[0], s[1], s[2], s[3]);
            let o = dft4(d[0], t1, t2, t3);
            for i in 0..4 {
                store(x.add(i), e[i]);
                store(x.add(4 + i), o[i]);
            }
        }
    }
}

#[cfg(all(test, target_arch = "x86_64"))]
mod tests {
    use super::*;
    use rustfft::num_complex::Complex32;
    use rustfft::FftPlanner;

    /// The lane FFT against rustfft (an independent, general-purpose FFT
    /// library) on pseudo-random data, each lane its own transform.
    #[test]
    fn lane_fft_matches_rustfft() {
        if !std::is_x86_feature_detected!("avx512f") {
            eprintln!("no AVX-512F on this CPU: lane FFT not exercised");
            return;
        }
        let mut state = 0x9e37_79b9_7f4a_7c15u64;
        let mut rand = move || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            (state >> 40) as f32 / (1u64 << 24) as f32 - 0.5
        };
        for len in [8usize, 16, 32, 64, 128, 1024, 2048, 4096] {
            let plan = LaneFft::new(len).expect("power of two");
            let mut x = vec![LaneComplex::default(); len];
            for v in x.iter_mut() {
                for l in 0..LANES {
                    v.re[l] = rand();
                    v.im[l] = rand();
                }
            }
            let lines: Vec<Vec<Complex32>> = (0..LANES).map(|l| x.iter().map(|v| Complex32::new(v.re[l], v.im[l])).collect()).collect();
            // SAFETY: AVX-512F checked above.
            unsafe { plan.forward(&mut x) };
            let fft = FftPlanner::<f32>::new().plan_fft_forward(len);
            let mut worst = 0.0f32;
            let mut peak = 0.0f32;
            for (l, line) in lines.into_iter().enumerate() {
                let mut want = line;
                fft.process(&mut want);
                for (bin, w) in want.iter().enumerate() {
                    let got = x[plan.position(bin)];
                    let got = Complex32::new(got.re[l], got.im[l]);
                    worst = worst.max((got - w).norm());
                    peak = peak.max(w.norm());
                }
            }
            // f32 rounding over log2(len) levels: well under 1e-5 of the peak.
            assert!(worst <= 1e-5 * peak.max(1.0), "len {len}: worst {worst} against peak {peak}");
        }
        assert!(LaneFft::new(12).is_none() && LaneFft::new(4).is_none());
    }

    #[test]
    fn positions_are_a_permutation() {
        let plan = LaneFft::new(2048).expect("plan");
        let mut seen = vec![false; 2048];
        for bin in 0..2048 {
            assert!(!std::mem::replace(&mut seen[plan.position(bin)], true));
        }
    }
}
