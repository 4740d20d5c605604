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

use rustfft::num_complex::Complex32;

/// Transforms per call, one per lane of a 512-bit vector of f32.
pub const LANES: usize = 16;

/// The fused path's interpolation onto the k grid, k samples long: sample
/// j is factor[j]·(a·y[i] + (1 − a)·y[i+1] + lc·m[i] + rc·m[i+1]) with
/// i = interval[j], a = left_weight[j], and lc, rc the left and right
/// curvature weights (used when `cubic`; m holds the spline's second
/// derivatives).
#[derive(Clone, Copy)]
pub struct Interpolation<'a> {
    pub interval: &'a [u32],
    pub left_weight: &'a [f32],
    pub left_curvature: &'a [f32],
    pub right_curvature: &'a [f32],
    pub factor: &'a [Complex32],
    pub cubic: bool,
}

impl Interpolation<'_> {
    /// The first `n` samples only.
    pub fn head(&self, n: usize) -> Self {
        Interpolation {
            interval: &self.interval[..n],
            left_weight: &self.left_weight[..n],
            left_curvature: &self.left_curvature[..n],
            right_curvature: &self.right_curvature[..n],
            factor: &self.factor[..n],
            cubic: self.cubic,
        }
    }
}

/// The transform's input as the interpolation of y and m (one A-line per
/// lane); samples from k on are zero (the FFT's padding).
pub struct Resampled<'a> {
    pub table: Interpolation<'a>,
    pub y: &'a [[f32; LANES]],
    pub m: &'a [[f32; LANES]],
}

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

    /// Resamples (see [`Resampled`]) and transforms in one go: the first
    /// radix-4 level computes its four inputs from the interpolation instead
    /// of reading them back, which saves a pass over the block. Same result
    /// as writing the samples out and calling [`Self::forward`].
    ///
    /// # Safety
    /// The CPU must support AVX-512F and FMA.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,fma")]
    pub unsafe fn forward_resampled(&self, x: &mut [LaneComplex], r: &Resampled<'_>) {
        let k = r.table.interval.len();
        assert!(x.len() == self.len && k <= self.len, "lane FFT length");
        assert!(r.table.left_weight.len() == k && r.table.factor.len() == k && (!r.table.cubic || (r.table.left_curvature.len() == k && r.table.right_curvature.len() == k)));
        assert!(r.table.interval.iter().all(|&i| (i as usize) + 1 < r.y.len() && (!r.table.cubic || (i as usize) + 1 < r.m.len())));
        let p = x.as_mut_ptr();
        // SAFETY: indices are checked above; x has self.len elements.
        unsafe {
            if self.twiddles.is_empty() {
                for j in 0..self.len {
                    kernels::store_resampled(p.add(j), r, j);
                }
                self.level(p, self.len, 0);
                return;
            }
            let m = self.len / 4;
            for (j, t) in self.twiddles[0].iter().enumerate() {
                kernels::radix4_resampled(p.add(j), m, j, t, r);
            }
            for q in 0..4 {
                self.level(p.add(q * m), m, 1);
            }
        }
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

    /// Sample j of the resampled input (zero from k on).
    #[inline]
    #[target_feature(enable = "avx512f,fma")]
    unsafe fn resampled(r: &super::Resampled<'_>, j: usize) -> V {
        unsafe {
            if j >= r.table.interval.len() {
                return V { re: _mm512_setzero_ps(), im: _mm512_setzero_ps() };
            }
            let i = *r.table.interval.get_unchecked(j) as usize;
            let w = *r.table.left_weight.get_unchecked(j);
            let (y, m) = (r.y.as_ptr(), r.m.as_ptr());
            let mut acc = _mm512_mul_ps(_mm512_set1_ps(w), _mm512_loadu_ps(y.add(i).cast()));
            acc = _mm512_fmadd_ps(_mm512_set1_ps(1.0 - w), _mm512_loadu_ps(y.add(i + 1).cast()), acc);
            if r.table.cubic {
                acc = _mm512_fmadd_ps(_mm512_set1_ps(*r.table.left_curvature.get_unchecked(j)), _mm512_loadu_ps(m.add(i).cast()), acc);
                acc = _mm512_fmadd_ps(_mm512_set1_ps(*r.table.right_curvature.get_unchecked(j)), _mm512_loadu_ps(m.add(i + 1).cast()), acc);
            }
            let f = *r.table.factor.get_unchecked(j);
            V { re: _mm512_mul_ps(acc, _mm512_set1_ps(f.re)), im: _mm512_mul_ps(acc, _mm512_set1_ps(f.im)) }
        }
    }

    #[inline]
    #[target_feature(enable = "avx512f,fma")]
    pub unsafe fn store_resampled(x: *mut LaneComplex, r: &super::Resampled<'_>, j: usize) {
        unsafe { store(x, resampled(r, j)) }
    }

    /// [`radix4`] with its inputs, samples j, j + m, j + 2m, j + 3m,
    /// computed by the resampling.
    #[inline]
    #[target_feature(enable = "avx512f,fma")]
    pub unsafe fn radix4_resampled(x: *mut LaneComplex, m: usize, j: usize, t: &[f32; 6], r: &super::Resampled<'_>) {
        unsafe {
            let (a, b, c, d) = (resampled(r, j), resampled(r, j + m), resampled(r, j + 2 * m), resampled(r, j + 3 * m));
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
            eprintln!("lane FFT, {len} points: worst |difference| {:.2e} of the peak", worst / peak.max(1.0));
            // f32 rounding over log2(len) levels: well under 1e-5 of the peak.
            assert!(worst <= 1e-5 * peak.max(1.0), "len {len}: worst {worst} against peak {peak}");
        }
        assert!(LaneFft::new(12).is_none() && LaneFft::new(4).is_none());
    }

    /// Resampling fused into the first level gives the same bits as
    /// resampling into the buffer and transforming it.
    #[test]
    fn fused_first_level_matches_separate_passes() {
        if !std::is_x86_feature_detected!("avx512f") || !std::is_x86_feature_detected!("fma") {
            return;
        }
        let pixels = 300;
        let y: Vec<[f32; LANES]> = (0..pixels).map(|p| std::array::from_fn(|l| ((p * 7 + l * 3) % 11) as f32 - 5.0)).collect();
        let m: Vec<[f32; LANES]> = (0..pixels).map(|p| std::array::from_fn(|l| ((p * 5 + l) % 13) as f32 * 0.1)).collect();
        for (len, k) in [(8usize, 8usize), (64, 50), (512, 512), (256, 200)] {
            let interval: Vec<u32> = (0..k).map(|j| ((j * (pixels - 2)) / k) as u32).collect();
            let left_weight: Vec<f32> = (0..k).map(|j| (j % 10) as f32 / 10.0).collect();
            let lc: Vec<f32> = (0..k).map(|j| -((j % 7) as f32) * 0.01).collect();
            let rc: Vec<f32> = (0..k).map(|j| -((j % 5) as f32) * 0.02).collect();
            let factor: Vec<Complex32> = (0..k).map(|j| Complex32::from_polar(1.0, j as f32 * 0.1)).collect();
            let table = Interpolation { interval: &interval, left_weight: &left_weight, left_curvature: &lc, right_curvature: &rc, factor: &factor, cubic: true };
            let r = Resampled { table, y: &y, m: &m };
            let plan = LaneFft::new(len).expect("plan");
            let mut fused = vec![LaneComplex::default(); len];
            let mut separate = vec![LaneComplex::default(); len];
            // SAFETY: AVX-512F and FMA checked above.
            unsafe {
                plan.forward_resampled(&mut fused, &r);
                for (j, v) in separate.iter_mut().enumerate() {
                    kernels::store_resampled(v, &r, j);
                }
                plan.forward(&mut separate);
            }
            assert_eq!(fused, separate, "len {len}, k {k}");
            // And the samples themselves against plain arithmetic (cubic
            // spline evaluation as in the fused path's doc).
            let mut direct = vec![LaneComplex::default(); len];
            for (j, v) in direct.iter_mut().enumerate().take(k) {
                let i = interval[j] as usize;
                for l in 0..LANES {
                    let w = left_weight[j];
                    let s = w * y[i][l] + (1.0 - w) * y[i + 1][l] + lc[j] * m[i][l] + rc[j] * m[i + 1][l];
                    v.re[l] = s * factor[j].re;
                    v.im[l] = s * factor[j].im;
                }
            }
            let mut stored = vec![LaneComplex::default(); len];
            // SAFETY: as above.
            unsafe {
                for (j, v) in stored.iter_mut().enumerate() {
                    kernels::store_resampled(v, &r, j);
                }
            }
            for (a, b) in stored.iter().zip(direct.iter()) {
                for l in 0..LANES {
                    assert!((a.re[l] - b.re[l]).abs() <= 1e-5 && (a.im[l] - b.im[l]).abs() <= 1e-5);
                }
            }
        }
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
