//! Bulk-motion phase: the phase step that axial motion of the whole sample
//! adds to every pixel of a pair of A-lines (or of repeated B-scans).
//!
//! Estimated from the pairs' products P = A₂·conj(A₁) over the pixels above
//! an intensity threshold, in two passes ([`static_bulk_phases`]):
//!
//! 1. A first estimate per pair from a histogram of arg P (64 bins, one
//!    count per pixel, with the sum of P in each bin), pooled over the
//!    `pool` pairs centred on it (bulk motion changes slowly from A-line to
//!    A-line, while one A-line has too few bright static pixels for a
//!    stable mode): the phase of ΣP over the bins within ±π/8 of the mode
//!    of the counts (smoothed over 3 bins). Static tissue clusters at the
//!    mode while a vessel's pixels spread out; but slow flow near a
//!    vessel's wall also falls within ±π/8 and pulls the estimate towards
//!    the flow.
//! 2. Flow is marked and left out. Around each bright pixel (5 pairs × 5
//!    depth pixels) the local residual phase φ = arg Σ P·e^(−i·b₁) is
//!    taken; the static tissue's centre and spread of φ are the median and
//!    1.4826 × the median absolute deviation over the bright pixels (static
//!    tissue is most of them), and a pixel whose φ stands more than 3 such
//!    deviations from the centre is flow. The test runs twice, the second
//!    time centred on what the first left unmarked (a bright vessel pulls
//!    the first centre), and the mark is widened by 3 pairs and 3 depth
//!    pixels to take in the slow flow at the wall. The spread is measured
//!    on φ itself rather than predicted from the pixel count, because
//!    neighbouring pixels share speckle and are not independent. This is a
//!    phase test (a local mean phase step unlike static tissue's), not
//!    amplitude decorrelation. The bulk phase is then arg ΣP over the
//!    pool's unmarked bright pixels (each term weighted by |P| = |A₁|·|A₂|:
//!    the Kasai estimate over static tissue), or the first estimate where no
//!    unmarked pixel is left.
//!
//! (Removing the weighted mean phase step of static tissue is common
//! practice; the phase-variance criterion follows the circular statistics
//! of the Kasai estimate.)

use ndarray::{Array2, Axis};
use rayon::prelude::*;
use rustfft::num_complex::{Complex32, Complex64};
use std::f64::consts::PI;

use super::box_sum::{box_sum, clipped_around};

const BINS: usize = 64;
/// Half-width of the window around the mode that the final mean uses, rad.
const WINDOW: f64 = PI / 8.0;

/// atan2 to within 5e-6 rad (checked in the tests below): atan(a) on
/// [0, 1] as a·p(a²), p of degree 6 fitted by least squares on 20,001
/// points with NumPy (worst error 1.8e-6 rad in f64), and the octant
/// identities. For binning and for Doppler phases, where 5e-6 rad is far
/// below the phase noise.
#[inline(always)]
pub fn fast_atan2(y: f32, x: f32) -> f32 {
    let (ax, ay) = (x.abs(), y.abs());
    let (lo, hi) = if ax < ay { (ax, ay) } else { (ay, ax) };
    if hi == 0.0 {
        return 0.0;
    }
    let a = lo / hi;
    let s = a * a;
    const P: [f32; 7] = [0.999_999_5, -0.333_277_2, 0.198_973_4, -0.135_621_3, 0.085_451_95, -0.038_534_51, 0.008_408_16];
    let mut p = P[6];
    for &c in P[..6].iter().rev() {
        p = p * s + c;
    }
    let mut r = a * p;
    if ay > ax {
        r = std::f32::consts::FRAC_PI_2 - r;
    }
    if x < 0.0 {
        r = std::f32::consts::PI - r;
    }
    if y < 0.0 {
        -r
    } else {
        r
    }
}

/// The arg-P histogram of one pair.
#[derive(Clone)]
pub struct PhaseHistogram {
    counts: [u32; BINS],
    sums: [Complex64; BINS],
}

impl Default for PhaseHistogram {
    fn default() -> Self {
        PhaseHistogram { counts: [0; BINS], sums: [Complex64::new(0.0, 0.0); BINS] }
    }
}

impl PhaseHistogram {
    /// Of the products whose weight |p| is at least `min_weight`.
    pub fn of(p: impl Iterator<Item = Complex32>, min_weight: f32) -> Self {
        let min2 = min_weight * min_weight;
        let scale = BINS as f32 / (2.0 * std::f32::consts::PI);
        let mut h = PhaseHistogram::default();
        for v in p {
            let w2 = v.norm_sqr();
            if w2 >= min2 && w2 > 0.0 {
                let b = (((fast_atan2(v.im, v.re) + std::f32::consts::PI) * scale) as usize).min(BINS - 1);
                h.counts[b] += 1;
                h.sums[b] += Complex64::new(v.re as f64, v.im as f64);
            }
        }
        h
    }

    fn add(&mut self, other: &PhaseHistogram) {
        for b in 0..BINS {
            self.counts[b] += other.counts[b];
            self.sums[b] += other.sums[b];
        }
    }

    /// The bulk phase of this (pooled) histogram; None when empty.
    pub fn bulk_phase(&self) -> Option<f64> {
        let smoothed = |b: usize| self.counts[(b + BINS - 1) % BINS] + self.counts[b] + self.counts[(b + 1) % BINS];
        if self.counts.iter().all(|&c| c == 0) {
            return None;
        }
        let mode = (0..BINS).max_by_key(|&b| (smoothed(b), std::cmp::Reverse(b))).unwrap_or(0);
        let half = (WINDOW / (2.0 * PI / BINS as f64)).round() as usize;
        let mut sum = Complex64::new(0.0, 0.0);
        for k in 0..=2 * half {
            sum += self.sums[(mode + BINS + k - half) % BINS];
        }
        Some(sum.arg())
    }
}

/// Bulk phase of each pair from its own and its neighbours' histograms:
/// `pool` pairs centred on it (clipped at the ends); 0 where none has a
/// pixel above the threshold.
pub fn pooled_bulk_phases(histograms: &[PhaseHistogram], pool: usize) -> Vec<f64> {
    let n = histograms.len();
    let half = pool / 2;
    (0..n)
        .map(|s| {
            let mut h = PhaseHistogram::default();
            for other in &histograms[s.saturating_sub(half)..(s + half + 1).min(n)] {
                h.add(other);
            }
            h.bulk_phase().unwrap_or(0.0)
        })
        .collect()
}

/// Neighbourhood of the flow test: pairs × depth pixels.
const FLOW_KERNEL: (usize, usize) = (5, 5);
/// Robust standard deviations a local phase may stand from the static centre.
const FLOW_Z: f64 = 3.0;
/// Rounds of the test (each re-centres on what the last left unmarked).
const FLOW_ROUNDS: usize = 2;
/// The flow mark is widened by this many pairs and depth pixels.
const FLOW_MARGIN: (usize, usize) = (3, 3);

/// A phase wrapped into (−π, π].
fn wrap(p: f64) -> f64 {
    let w = (p + PI).rem_euclid(2.0 * PI) - PI;
    if w == -PI {
        PI
    } else {
        w
    }
}

/// The median (upper middle) of `v`; None when empty.
fn median(mut v: Vec<f64>) -> Option<f64> {
    if v.is_empty() {
        return None;
    }
    let mid = v.len() / 2;
    Some(*v.select_nth_unstable_by(mid, |a, b| a.total_cmp(b)).1)
}

/// What the flow test left out of the bulk vote, summed over pairs.
#[derive(Debug, Default, Clone, Copy, PartialEq)]
pub struct BulkVote {
    /// Pixels above the threshold.
    pub bright: usize,
    /// Of those, marked as flow (after widening) and left out.
    pub flow: usize,
}

/// Bulk phase of each pair slot (rows of `products`, slots × depth, the
/// products P = A₂·conj(A₁)) with flowing pixels left out of the vote; see
/// the module's comment. Pixels count when |P| ≥ `min_weight`.
pub fn static_bulk_phases(products: &Array2<Complex32>, min_weight: f32, pool: usize) -> (Vec<f64>, BulkVote) {
    let (slots, depth) = products.dim();
    let min2 = min_weight * min_weight;
    let bright = |v: &Complex32| {
        let w2 = v.norm_sqr();
        w2 >= min2 && w2 > 0.0
    };
    let histograms: Vec<PhaseHistogram> = products.axis_iter(Axis(0)).into_par_iter().map(|row| PhaseHistogram::of(row.iter().copied(), min_weight)).collect();
    let first = pooled_bulk_phases(&histograms, pool);

    // Residuals to the first estimate, summed over each pixel's neighbourhood.
    let mut residual = Array2::<Complex64>::zeros((slots, depth));
    residual.axis_iter_mut(Axis(0)).into_par_iter().enumerate().for_each(|(s, mut r)| {
        let undo = Complex64::from_polar(1.0, -first[s]);
        for (d, v) in products.row(s).iter().enumerate() {
            if bright(v) {
                r[d] = Complex64::new(v.re as f64, v.im as f64) * undo;
            }
        }
    });
    let local: Array2<f64> = box_sum_2d(&residual, FLOW_KERNEL.0, FLOW_KERNEL.1).mapv(|c| c.arg());
    let is_bright = products.mapv(|v| bright(&v));
    // The static tissue's centre and spread of the local phase, robustly
    // (median, 1.4826 × median absolute deviation), first over all bright
    // pixels, then over those the first round left unmarked.
    let mut flow = Array2::<bool>::from_elem((slots, depth), false);
    for _ in 0..FLOW_ROUNDS {
        let candidates: Vec<f64> = local.iter().zip(is_bright.iter()).zip(flow.iter()).filter(|((_, &b), &f)| b && !f).map(|((&p, _), _)| p).collect();
        let Some(centre) = median(candidates.clone()) else { break };
        let Some(spread) = median(candidates.iter().map(|&p| wrap(p - centre).abs()).collect()) else { break };
        let limit = FLOW_Z * 1.4826 * spread;
        flow = ndarray::Zip::from(&local).and(&is_bright).map_collect(|&p, &b| b && wrap(p - centre).abs() > limit);
    }
    let flow = dilate(&flow, FLOW_MARGIN.0, FLOW_MARGIN.1);

    // The vote: Σ P of the unmarked bright pixels, pooled like the histograms.
    let static_sums: Vec<Complex64> = (0..slots)
        .into_par_iter()
        .map(|s| {
            let mut sum = Complex64::new(0.0, 0.0);
            for (v, &f) in products.row(s).iter().zip(flow.row(s).iter()) {
                if !f && bright(v) {
                    sum += Complex64::new(v.re as f64, v.im as f64);
                }
            }
            sum
        })
        .collect();
    let half = pool / 2;
    let bulk = (0..slots)
        .map(|s| {
            let sum: Complex64 = static_sums[s.saturating_sub(half)..(s + half + 1).min(slots)].iter().sum();
            if sum.norm() > 0.0 {
                sum.arg()
            } else {
                first[s]
            }
        })
        .collect();
    let vote = BulkVote { bright: is_bright.iter().filter(|&&b| b).count(), flow: flow.iter().zip(is_bright.iter()).filter(|(&f, &b)| f && b).count() };
    (bulk, vote)
}

/// Σ over the centred ks × kd neighbourhood (clipped at the edges).
fn box_sum_2d<T>(a: &Array2<T>, ks: usize, kd: usize) -> Array2<T>
where
    T: Copy + Default + std::ops::Add<Output = T> + std::ops::Sub<Output = T> + Send + Sync,
{
    let (rows, cols) = a.dim();
    box_sum(a, rows, |r| clipped_around(r, ks / 2, rows), |c| clipped_around(c, kd / 2, cols))
}

/// `mask` widened by `ms` rows and `md` columns each way.
fn dilate(mask: &Array2<bool>, ms: usize, md: usize) -> Array2<bool> {
    let counts = box_sum_2d(&mask.mapv(|m| m as u32), 2 * ms + 1, 2 * md + 1);
    counts.mapv(|c| c > 0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fast_atan2_is_within_5e6_rad() {
        let mut worst = 0.0f64;
        for i in 0..20_000 {
            let t = i as f64 * 0.000_314_159_3 * 2.0 - std::f64::consts::PI;
            for r in [1e-3, 1.0, 7e4] {
                let (y, x) = ((r * t.sin()) as f32, (r * t.cos()) as f32);
                let d = (fast_atan2(y, x) as f64 - (y as f64).atan2(x as f64)).abs();
                worst = worst.max(d.min(2.0 * std::f64::consts::PI - d));
            }
        }
        assert!(worst < 5e-6, "{worst:e}");
    }

    #[test]
    fn finds_the_static_phase_despite_a_bright_flowing_minority() {
        // 70 % of the pixels step by 0.8 rad (bulk), 30 % by -2.0 to -1.0 rad
        // (flow, twice as bright); weak pixels at random phases stay below
        // the threshold. Spread over 9 pairs, each pooled with all others.
        let mut pairs = Vec::new();
        for k in 0..9 {
            let mut p = Vec::new();
            for i in 0..70 {
                p.push(Complex32::from_polar(1.0 + (i % 7) as f32 * 0.1, 0.8 + 0.05 * ((i + k) % 11) as f32 / 5.0 - 0.05));
            }
            for i in 0..30 {
                p.push(Complex32::from_polar(2.5, -2.0 + i as f32 / 30.0));
            }
            for i in 0..50 {
                p.push(Complex32::from_polar(0.01, i as f32));
            }
            pairs.push(PhaseHistogram::of(p.into_iter(), 0.5));
        }
        for b in pooled_bulk_phases(&pairs, 9) {
            assert!((b - 0.8).abs() < 0.02, "{b}");
        }
        assert_eq!(PhaseHistogram::of([Complex32::new(0.1, 0.0)].into_iter(), 10.0).bulk_phase(), None);
    }
}
