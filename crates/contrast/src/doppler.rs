//! Phase-resolved Doppler flow by the Kasai autocorrelation estimator
//! (Kasai et al. 1985, IEEE Trans. Sonics Ultrason. 32:458):
//! Δφ = arg Σ A(t+T)·conj(A(t)) over a small kernel of depth pixels and
//! pairs, and the axial velocity v = λ0·Δφ/(4π·n·T).
//!
//! Pairs are neighbouring A-lines of a B-scan (T the A-line period) or the
//! same A-line of consecutive repeated B-scans (T the B-scan period); the
//! sums of every repeat of a position accumulate into one estimate. Before
//! summing, each pair's bulk-motion phase ([`super::phase`], pooled over
//! `bulk_pool_pairs` neighbouring pairs)
//! is removed. Pixels whose kernel-mean power is below the threshold have
//! no velocity (NaN).
//!
//! Sign: the complex depth profile's phase grows with depth (2·k_c·z), so
//! a positive Δφ and a positive velocity mean motion away from the probe
//! (towards larger depth).

use ndarray::{Array2, ArrayView2, Axis};
use rayon::prelude::*;
use rustfft::num_complex::{Complex32, Complex64};

use super::box_sum::box_sum;
use super::fft2::transposed;
use super::phase::{fast_atan2, static_bulk_phases, BulkVote};
use crate::pipeline::config::{DopplerConfig, DopplerPairs};

/// Velocity scale and limits of a Doppler measurement.
#[derive(Debug, Clone, Copy, serde::Serialize)]
pub struct DopplerScale {
    /// λ0 of v = λ0·Δφ/(4π·n·T), nm: 2π over the power-weighted mean
    /// wavenumber of the spectrum that reaches the FFT (the source spectrum
    /// on the wavenumber grid × shaping × window), where a reflector's phase
    /// advances (FIELD-NOTES; see `wavelength_source`).
    pub wavelength_nm: f64,
    /// What λ0 was computed from.
    pub wavelength_source: &'static str,
    /// The middle of the resampled band, λ of (k_min + k_max)/2, nm: for
    /// reference only (format 2 used it as λ0).
    pub band_centre_wavelength_nm: f64,
    pub group_index: f64,
    /// T, µs.
    pub period_us: f64,
    /// ±λ0/(4·n·T): |Δφ| = π, mm/s.
    pub aliasing_limit_mm_s: f64,
}

impl DopplerScale {
    pub fn new(wavelength_nm: f64, group_index: f64, period_us: f64, band_centre_wavelength_nm: f64, wavelength_source: &'static str) -> Self {
        // λ in nm over T in µs is mm/s.
        let limit = wavelength_nm / (4.0 * group_index * period_us);
        DopplerScale { wavelength_nm, wavelength_source, band_centre_wavelength_nm, group_index, period_us, aliasing_limit_mm_s: limit }
    }

    /// λ0 for `plan` from the source spectrum (per pixel: the background
    /// when `from_background`, else a frame's mean spectrum), with what it
    /// came from; the band's centre when there is no usable spectrum.
    pub fn wavelength_for(plan: &crate::pipeline::plan::Plan, source_spectrum: Option<&[f64]>, from_background: bool) -> (f64, &'static str) {
        match (source_spectrum.and_then(|s| plan.mean_wavenumber_per_um(s)), from_background) {
            (Some(k), true) => (crate::physics::wavelength_nm(k), "power-weighted mean wavenumber of the background spectrum × shaping × window"),
            (Some(k), false) => (crate::physics::wavelength_nm(k), "power-weighted mean wavenumber of frame 0's mean spectrum × shaping × window"),
            (None, _) => (plan.summary.band_centre_wavelength_nm, "the band's centre (no measurable source spectrum)"),
        }
    }

    /// Velocity in mm/s of a phase step in rad.
    pub fn velocity_mm_s(&self, phase_step: f64) -> f64 {
        self.wavelength_nm * phase_step / (4.0 * std::f64::consts::PI * self.group_index * self.period_us)
    }
}

/// Kasai sums of one position, accumulated pair by pair. Stored pair slot
/// by depth (one contiguous row per slot), so each pair is filled by one
/// worker without strided writes.
pub struct KasaiSums {
    pairs: DopplerPairs,
    /// Σ P (bulk removed) and Σ (|A₁|² + |A₂|²)/2, slots × depth.
    products: Array2<Complex64>,
    power: Array2<f64>,
    count: usize,
    /// Bulk phase removed, rad: per frame (A-line pairs, the circular mean
    /// over its pairs) or per repeat pair (mean over A-lines), in order.
    pub bulk_phases: Vec<f64>,
    bulk_correction: bool,
    /// Weight |A₁||A₂| a pixel needs to take part in the bulk estimate.
    bulk_min_weight: f32,
    /// Pairs pooled for each pair's bulk estimate.
    bulk_pool: usize,
    /// Bright pixels and those left out of the bulk vote as flow.
    pub vote: BulkVote,
}

impl KasaiSums {
    /// For frames of depth × A-lines. `floor_power` is the noise floor
    /// as power (|A|²) above which pixels count as tissue for the bulk phase.
    pub fn new(config: &DopplerConfig, depth: usize, alines: usize, floor_power: f64) -> Self {
        let slots = match config.between {
            DopplerPairs::Alines => alines.saturating_sub(1).max(1),
            DopplerPairs::Repeats => alines,
        };
        let threshold = floor_power * 10f64.powf(config.threshold_db / 10.0);
        KasaiSums {
            pairs: config.between,
            products: Array2::zeros((slots, depth)),
            power: Array2::zeros((slots, depth)),
            count: 0,
            bulk_phases: Vec::new(),
            bulk_correction: config.bulk_correction,
            bulk_min_weight: threshold as f32,
            bulk_pool: config.bulk_pool_pairs,
            vote: BulkVote::default(),
        }
    }

    /// Adds pairs: slot s pairs line `s` of `earlier` with line
    /// `s + offset` of `later`, lines being rows (A-lines × depth).
    fn add_pairs(&mut self, earlier: &Array2<Complex32>, later: &Array2<Complex32>, offset: usize) {
        let (slots, depth) = self.products.dim();
        let mut products = Array2::<Complex32>::zeros((slots, depth));
        products.axis_iter_mut(Axis(0)).into_par_iter().enumerate().for_each(|(slot, mut row)| {
            for ((p, a), b) in row.iter_mut().zip(earlier.row(slot)).zip(later.row(slot + offset)) {
                *p = b * a.conj();
            }
        });
        let bulks = if self.bulk_correction {
            let (bulks, vote) = static_bulk_phases(&products, self.bulk_min_weight, self.bulk_pool);
            self.vote.bright += vote.bright;
            self.vote.flow += vote.flow;
            bulks
        } else {
            vec![0.0; slots]
        };
        self.products
            .axis_iter_mut(Axis(0))
            .into_par_iter()
            .zip(self.power.axis_iter_mut(Axis(0)))
            .enumerate()
            .for_each(|(slot, (mut sum, mut power))| {
                let undo = Complex64::from_polar(1.0, -bulks[slot]);
                let (x, y) = (earlier.row(slot), later.row(slot + offset));
                for (((s, w), p), (a, b)) in sum.iter_mut().zip(power.iter_mut()).zip(products.row(slot)).zip(x.iter().zip(y.iter())) {
                    *s += Complex64::new(p.re as f64, p.im as f64) * undo;
                    *w += 0.5 * (a.norm_sqr() as f64 + b.norm_sqr() as f64);
                }
            });
        let mean: Complex64 = bulks.iter().map(|&b| Complex64::from_polar(1.0, b)).sum();
        self.bulk_phases.push(mean.arg());
        self.count += 1;
    }

    /// Adds the pairs of neighbouring A-lines of one frame (depth × A-lines).
    pub fn add_frame(&mut self, frame: ArrayView2<'_, Complex32>) {
        debug_assert_eq!(self.pairs, DopplerPairs::Alines);
        if frame.ncols() < 2 {
            return;
        }
        let lines = transposed(&frame.to_owned());
        self.add_pairs(&lines, &lines, 1);
    }

    /// Adds the pair (earlier, later) of consecutive repeated B-scans.
    pub fn add_repeat_pair(&mut self, earlier: ArrayView2<'_, Complex32>, later: ArrayView2<'_, Complex32>) {
        debug_assert_eq!(self.pairs, DopplerPairs::Repeats);
        let (a, b) = (transposed(&earlier.to_owned()), transposed(&later.to_owned()));
        self.add_pairs(&a, &b, 0);
    }

    /// The velocity image (depth × A-lines, mm/s, NaN where masked): box
    /// sums over the kernel, arg, scale. `threshold_power` is the power a
    /// pixel's kernel mean needs (noise floor + threshold).
    ///
    /// Where a value belongs (see [`slot_window`]): between A-lines, the
    /// value on A-line a sums the `kernel_alines` pairs (m, m+1) with m from
    /// a − ⌊k/2⌋ (shifted inwards at the edges), so an even k is centred on
    /// a and an odd k half an A-line after it; between repeats, the k
    /// A-lines from a − ⌊(k−1)/2⌋. Depth: the `kernel_depth_px` pixels from
    /// d − ⌊(k−1)/2⌋.
    pub fn velocity(&self, config: &DopplerConfig, scale: &DopplerScale, threshold_power: f64, alines: usize) -> Array2<f32> {
        let (slots, depth) = self.products.dim();
        if self.count == 0 {
            return Array2::from_elem((depth, alines), f32::NAN);
        }
        let (kd, ka) = (config.kernel_depth_px, config.kernel_alines);
        let rows = |a: usize| slot_window(self.pairs, a, ka, slots);
        let cols = |d: usize| window(d, kd, depth);
        let sums = box_sum(&self.products, alines, rows, cols);
        let power = box_sum(&self.power, alines, rows, cols);
        let k = scale.velocity_mm_s(1.0) as f32;
        let mut by_aline = Array2::<f32>::zeros((alines, depth));
        by_aline.axis_iter_mut(Axis(0)).into_par_iter().enumerate().for_each(|(a, mut row)| {
            let (s0, s1) = rows(a);
            for (d, v) in row.iter_mut().enumerate() {
                let (d0, d1) = window(d, kd, depth);
                let n = ((d1 - d0) * (s1 - s0) * self.count) as f64;
                *v = if power[[a, d]] / n < threshold_power {
                    f32::NAN
                } else {
                    let c = sums[[a, d]];
                    k * fast_atan2(c.im as f32, c.re as f32)
                };
            }
        });
        transposed(&by_aline)
    }
}

/// The pair slots summed for the value on A-line `a` (inclusive-exclusive),
/// `k` of them, shifted inwards at the edges. Slot m of A-line pairs sits
/// between A-lines m and m+1 (at m + ½), so the slots from a − ⌊k/2⌋ are
/// centred on a for even k and on a + ½ for odd k; a repeat slot is the
/// A-line itself, centred as a depth kernel is.
pub fn slot_window(pairs: DopplerPairs, a: usize, k: usize, slots: usize) -> (usize, usize) {
    match pairs {
        DopplerPairs::Alines => clipped(a.saturating_sub(k / 2), k, slots),
        DopplerPairs::Repeats => window(a, k, slots),
    }
}

/// `k` elements from `lo`, shifted inwards to fit in `n` (all of `n` when k > n).
fn clipped(lo: usize, k: usize, n: usize) -> (usize, usize) {
    let hi = (lo + k).min(n);
    (hi.saturating_sub(k).min(lo), hi)
}

/// Inclusive-exclusive range of a centred kernel of `k` around `i` within
/// `n`: from i − ⌊(k−1)/2⌋ (an even kernel reaches half a pixel further
/// down than up).
fn window(i: usize, k: usize, n: usize) -> (usize, usize) {
    clipped(i.saturating_sub((k - 1) / 2), k, n)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn kernel_windows_stay_inside_and_have_the_kernel_size() {
        for n in [1usize, 5, 9] {
            for k in 1..=n {
                for i in 0..n {
                    let (lo, hi) = window(i, k, n);
                    assert!(hi <= n && hi - lo == k && lo <= i && i < hi, "i {i} k {k} n {n}: {lo}..{hi}");
                }
            }
        }
    }

    #[test]
    fn a_velocity_belongs_to_the_centre_of_its_pairs() {
        // Phase step of pair (m, m+1) = c·(m + ½): a velocity growing along
        // the B-scan, so the value on A-line a is c·(centre of its window).
        let (depth, alines, c) = (6, 40, 0.01f32);
        let frame = Array2::from_shape_fn((depth, alines), |(_, a)| Complex32::from_polar(5.0, 0.5 * c * (a * a) as f32));
        for (ka, centre_offset) in [(4usize, 0.0f32), (2, 0.0), (3, 0.5), (1, 0.5)] {
            let config = DopplerConfig { enabled: true, bulk_correction: false, kernel_alines: ka, ..Default::default() };
            let mut sums = KasaiSums::new(&config, depth, alines, 1.0);
            sums.add_frame(frame.view());
            let scale = DopplerScale::new(840.0, 1.38, 20.0, 840.0, "test");
            let v = sums.velocity(&config, &scale, 1.0, alines);
            for a in ka..alines - ka {
                let want = scale.velocity_mm_s((c * (a as f32 + centre_offset)) as f64) as f32;
                assert!((v[[2, a]] - want).abs() < 1e-4, "k {ka}, A-line {a}: {} vs {want}", v[[2, a]]);
            }
        }
        // Windows: inside, k pairs; at the edges shifted inwards.
        assert_eq!(slot_window(DopplerPairs::Alines, 10, 4, 39), (8, 12));
        assert_eq!(slot_window(DopplerPairs::Alines, 0, 4, 39), (0, 4));
        assert_eq!(slot_window(DopplerPairs::Alines, 39, 4, 39), (35, 39));
        assert_eq!(slot_window(DopplerPairs::Repeats, 10, 3, 40), (9, 12));
    }

    #[test]
    fn a_uniform_phase_step_gives_its_velocity() {
        // Every A-line advances by 0.5 rad: v = λ0·0.5/(4π·n·T).
        let (depth, alines) = (20, 12);
        let frame = Array2::from_shape_fn((depth, alines), |(d, a)| Complex32::from_polar(10.0 + d as f32, 0.5 * a as f32 + 0.1 * d as f32));
        let config = DopplerConfig { enabled: true, bulk_correction: false, ..Default::default() };
        let mut sums = KasaiSums::new(&config, depth, alines, 1.0);
        sums.add_frame(frame.view());
        let scale = DopplerScale::new(840.0, 1.38, 20.0, 840.0, "test");
        let v = sums.velocity(&config, &scale, 1.0, alines);
        let want = scale.velocity_mm_s(0.5) as f32;
        assert!(v.iter().all(|&x| (x - want).abs() < 1e-4 * want), "{v:?} vs {want}");
        // 840 nm, n = 1.38, T = 20 µs: ±7.6 mm/s (FIELD-NOTES' worked example).
        assert!((scale.aliasing_limit_mm_s - 7.609).abs() < 1e-3, "{}", scale.aliasing_limit_mm_s);
        // With bulk correction the uniform step is all bulk motion: zero flow.
        let config = DopplerConfig { enabled: true, ..Default::default() };
        let mut sums = KasaiSums::new(&config, depth, alines, 1.0);
        sums.add_frame(frame.view());
        let v = sums.velocity(&config, &scale, 1.0, alines);
        assert!(v.iter().all(|&x| x.abs() < 1e-4), "{v:?}");
        assert!((sums.bulk_phases[0] - 0.5).abs() < 1e-4);
    }
}
