//! The reference spectrum of the fused path, per frame: none, a fixed
//! spectrum, the mean over the frame's A-lines, or the exact per-pixel
//! median (NumPy's convention for even counts). For u16 samples the median
//! is found by counting passes (bisection on the value, started near last
//! frame's medians; one AVX-512BW pass usually settles every column),
//! exact whichever way.
//!
//! Must match `stages::background` (`median_spectrum`, the mean) exactly:
//! the tests compare bit for bit.

use ndarray::ArrayView2;
use rayon::prelude::*;

use super::{FusedPlan, Sample};
use crate::pipeline::kernel::Variant;

/// Reference spectrum per frame.
#[derive(Debug, Clone)]
pub(super) enum Reference {
    None,
    Fixed(Vec<f32>),
    Mean,
    Median,
}

impl FusedPlan {
    /// The frame's reference spectrum per pixel, as f32.
    pub(super) fn reference_sorted<T: Sample + MedianKey>(&self, frame: ArrayView2<'_, T>) -> Vec<f32> {
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
            Reference::Median => match T::median_columns(frame, self.variant, &mut self.median_hint.lock().unwrap_or_else(|e| e.into_inner())) {
                Some(m) => m,
                None => median_by_column(frame),
            },
        };
        by_pixel
    }
}

/// Median over rows of each column (NumPy's convention), column by column
/// from the frame as stored: no f64 copy of the frame is made, and a stop
/// is noticed between columns.
fn median_by_column<T: Sample>(frame: ArrayView2<'_, T>) -> Vec<f32> {
    let rows = frame.nrows();
    (0..frame.ncols())
        .into_par_iter()
        .map_init(
            || Vec::with_capacity(rows),
            |column: &mut Vec<f64>, p| {
                if rows == 0 || crate::interrupt::requested() {
                    return 0.0; // no rows; or the frame in flight is discarded
                }
                column.clear();
                column.extend(frame.column(p).iter().map(|v| v.to_f32() as f64));
                crate::stages::background::median_in_place(column) as f32
            },
        )
        .collect()
}

/// The state the median search carries from frame to frame: last frame's
/// lower middle values, and how many frames the one-pass search near them
/// rests after it failed to settle a quarter of the columns.
#[derive(Debug, Clone, Default)]
pub struct MedianHint {
    pub values: Vec<u16>,
    pub near_pass_off: u8,
}

impl From<Vec<u16>> for MedianHint {
    fn from(values: Vec<u16>) -> Self {
        MedianHint { values, near_pass_off: 0 }
    }
}

/// Frames the one-pass search rests after a frame it did not settle.
const NEAR_PASS_REST: u8 = 8;

/// Exact per-pixel median over A-lines for small unsigned integer samples,
/// by bisection on the value with SIMD-friendly counting passes.
pub trait MedianKey: Sized {
    /// Median of each column (NumPy convention for even counts), or None
    /// when this type has no fast path.
    /// `hint` holds last frame's lower middle values, which usually bracket
    /// this frame's closely (used only to start the search; the result is
    /// exact either way) and is updated. `variant` says which kernels
    /// may run.
    fn median_columns(_frame: ArrayView2<'_, Self>, _variant: Variant, _hint: &mut MedianHint) -> Option<Vec<f32>> {
        None
    }
}
impl MedianKey for u8 {}
impl MedianKey for i16 {}
impl MedianKey for u32 {}
impl MedianKey for f32 {}
impl MedianKey for f64 {}
impl MedianKey for u16 {
    fn median_columns(frame: ArrayView2<'_, u16>, variant: Variant, state: &mut MedianHint) -> Option<Vec<f32>> {
        let (rows, pixels) = frame.dim();
        if rows == 0 || rows > u16::MAX as usize || pixels % MEDIAN_ALIGN != 0 {
            return None;
        }
        let data = frame.as_slice()?;
        let chunk = pixels.div_ceil(2 * rayon::current_num_threads()).next_multiple_of(MEDIAN_ALIGN);
        let MedianHint { values: hint, near_pass_off } = state;
        if hint.len() != pixels {
            hint.clear();
        }
        let has_hint = !hint.is_empty();
        hint.resize(pixels, 0);
        let mut out = vec![0.0f32; pixels];
        let avx2 = variant >= Variant::Avx2;
        if has_hint && near_pass_available(variant) && *near_pass_off == 0 {
            let unsettled = median_u16_near(data, rows, pixels, &mut out, hint, avx2);
            // Medians that move more than the pass's window from frame to
            // frame (strong fringes in the reference) make it cost more than
            // it saves: the bisection alone runs for the next frames.
            if unsettled * 4 > pixels.div_ceil(MEDIAN_ALIGN) {
                *near_pass_off = NEAR_PASS_REST;
            }
        } else {
            *near_pass_off = near_pass_off.saturating_sub(1);
            out.par_chunks_mut(chunk).zip(hint.par_chunks_mut(chunk)).enumerate().for_each(|(c, (dst, h))| {
                median_u16_chunk(data, rows, pixels, c * chunk, dst, h, has_hint, avx2);
            });
        }
        Some(out)
    }
}

/// Whether this CPU runs the one-pass search near last frame's medians
/// (AVX-512BW); elsewhere the bisection passes below do all the work.
fn near_pass_available(variant: Variant) -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        if NEAR_PASS_DISABLED.with(|d| d.get()) {
            return false;
        }
        variant >= Variant::Avx512
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        let _ = variant;
        false
    }
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
/// did not settle (in parallel). Exact either way. Returns how many groups
/// the pass left to the bisection. The pass is split by rows, not
/// columns: each worker streams whole rows (contiguous memory, so the
/// hardware prefetchers see long runs; a frame's rows are one 4 KB page
/// each) into its own counts, and the counts are summed.
fn median_u16_near(data: &[u16], rows: usize, pixels: usize, dst: &mut [f32], hint: &mut [u16], avx2: bool) -> usize {
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
    // The groups it did not settle, as runs of adjacent columns, by the
    // bisection in parallel (each run writes its own columns).
    let mut runs: Vec<(usize, usize)> = Vec::new();
    for (g, _) in unsettled.iter().enumerate().filter(|(_, u)| **u) {
        let (a, b) = (g * MEDIAN_ALIGN, ((g + 1) * MEDIAN_ALIGN).min(w));
        match runs.last_mut() {
            Some(last) if last.1 == a && last.1 - last.0 < 256 => last.1 = b,
            _ => runs.push((a, b)),
        }
    }
    let count = unsettled.iter().filter(|u| **u).count();
    let mut jobs = Vec::with_capacity(runs.len());
    let (mut dst_rest, mut hint_rest, mut at) = (dst, hint, 0);
    for &(a, b) in &runs {
        let (_, d) = std::mem::take(&mut dst_rest).split_at_mut(a - at);
        let (d, d_rest) = d.split_at_mut(b - a);
        let (_, h) = std::mem::take(&mut hint_rest).split_at_mut(a - at);
        let (h, h_rest) = h.split_at_mut(b - a);
        jobs.push((a, d, h));
        (dst_rest, hint_rest, at) = (d_rest, h_rest, b);
    }
    jobs.into_par_iter().for_each(|(a, d, h)| median_u16_chunk(data, rows, pixels, p0 + a, d, h, true, avx2));
    count
}

#[allow(clippy::too_many_arguments)]
fn median_u16_chunk(data: &[u16], rows: usize, pixels: usize, p0: usize, dst: &mut [f32], hint: &mut [u16], has_hint: bool, avx2: bool) {
    #[cfg(target_arch = "x86_64")]
    {
        if avx2 {
            // SAFETY: the AVX2 variant runs only where the CPU has AVX2.
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

/// The first counting pass of [`median_u16_chunk_inline`] around last
/// frame's answers: thresholds below the bracket, SPLITS−2 inside, its top;
/// the columns whose median the bracket holds are narrowed and settled.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
fn hint_brackets(data: &[u16], rows: usize, pixels: usize, p0: usize, hint: &[u16], target: u16, (t, counts): (&mut [Vec<u16>; SPLITS], &mut [Vec<u16>; SPLITS]), (lo, hi): (&mut [u16], &mut [u16]), settled: &mut [bool]) {
    let w = hint.len();
    // Thresholds: below the bracket, SPLITS−2 inside, its top.
    for q in 0..w {
        let (a, b) = (hint[q].saturating_sub(HINT_HALF_WIDTH), hint[q].saturating_add(HINT_HALF_WIDTH));
        t[0][q] = a.saturating_sub(1);
        for (i, ti) in t.iter_mut().enumerate().take(SPLITS - 1).skip(1) {
            ti[q] = (a as u32 + i as u32 * (b - a) as u32 / (SPLITS as u32 - 1)) as u16;
        }
        t[SPLITS - 1][q] = b;
    }
    count_at_most(data, rows, pixels, p0, t, counts);
    for q in 0..w {
        let a = hint[q].saturating_sub(HINT_HALF_WIDTH);
        let below_ok = a == 0 || counts[0][q] < target;
        if below_ok && counts[SPLITS - 1][q] >= target {
            (lo[q], hi[q]) = narrow(a, t[SPLITS - 1][q], (1..SPLITS).map(|i| (t[i][q], counts[i][q])), target);
            settled[q] = true;
        }
    }
}

/// Brackets [min, max] per column for the columns the hint did not settle.
#[inline(always)]
fn min_max_brackets(data: &[u16], rows: usize, pixels: usize, p0: usize, (lo, hi): (&mut [u16], &mut [u16]), settled: &[bool]) {
    let w = lo.len();
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

/// The upper middle of an even count where the final thresholds did not
/// reach it: the smallest value above the lower middle (one more pass,
/// rarely needed).
#[inline(always)]
fn fill_upper_middle(data: &[u16], rows: usize, pixels: usize, p0: usize, lo: &[u16], upper: &mut [Option<u16>]) {
    let w = lo.len();
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
        hint_brackets(data, rows, pixels, p0, hint, target, (&mut t, &mut counts), (&mut lo, &mut hi), &mut settled);
    }
    if settled.iter().any(|s| !s) {
        min_max_brackets(data, rows, pixels, p0, (&mut lo, &mut hi), &settled);
    }
    // Narrow until every bracket holds at most SPLITS values.
    while lo.iter().zip(hi.iter()).any(|(a, b)| (b - a) as usize >= SPLITS) {
        if crate::interrupt::requested() {
            return; // the frame in flight is discarded
        }
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
        fill_upper_middle(data, rows, pixels, p0, &lo, &mut upper);
    }
    for q in 0..w {
        dst[q] = 0.5 * (lo[q] as f32 + upper[q].expect("set above") as f32);
    }
}

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

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stages::background::median_spectrum;
    use ndarray::Array2;

    #[test]
    fn integer_median_matches_the_reference_median() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        // With the one-pass search near the hint (where the CPU has it) and
        // with the bisection alone.
        for (variant, disabled) in crate::pipeline::kernel::supported().into_iter().flat_map(|v| [(v, false), (v, true)]) {
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
                            assert_eq!(*f as f64, *r, "rows {rows}, values {lo}..{hi}, column {q}, {what}, near pass off {disabled}, variant {}", variant.name());
                        }
                    };
                    // Without a hint, then with a good one (its own), a
                    // slightly wrong one, and a wrong one.
                    let mut hint = MedianHint::default();
                    check(u16::median_columns(a.view(), variant, &mut hint).unwrap(), "no hint");
                    check(u16::median_columns(a.view(), variant, &mut hint).unwrap(), "own hint");
                    let mut near: MedianHint = hint.values.iter().enumerate().map(|(q, &h)| if q % 3 == 0 { h.saturating_add(4) } else { h.saturating_sub(7) }).collect::<Vec<u16>>().into();
                    check(u16::median_columns(a.view(), variant, &mut near).unwrap(), "near hint");
                    let mut wrong = MedianHint::from(vec![3500u16; pixels]);
                    check(u16::median_columns(a.view(), variant, &mut wrong).unwrap(), "wrong hint");
                }
            }
        }
        NEAR_PASS_DISABLED.with(|d| d.set(false));
    }
}
