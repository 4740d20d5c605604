//! Bulk-motion phase: the phase step that axial motion of the whole sample
//! adds to every pixel of a pair of A-lines (or of repeated B-scans).
//!
//! Estimated from the pairs' products P = A₂·conj(A₁) over the pixels above
//! an intensity threshold. Each pair gets a histogram of arg P (64 bins,
//! one count per pixel, with the sum of P in each bin); a pair's bulk phase
//! pools the histograms of the `pool` pairs centred on it (bulk motion
//! changes slowly from A-line to A-line, while one A-line has too few
//! bright static pixels for a stable mode). The mode of the pooled counts
//! (smoothed over 3 bins) is the static tissue's phase step: its pixels
//! cluster there while a vessel's spread out (a bright vessel would win an
//! intensity-weighted histogram). The bulk phase is then the
//! intensity-weighted phase of the static tissue, arg ΣP over the bins
//! within ±π/8 of the mode (each term weighted by |P| = |A₁|·|A₂|), so
//! flowing pixels of another phase do not pull it. (The histogram-mode idea
//! is common practice; the weighted mean alone is the Kasai estimate over
//! depth.)

use rustfft::num_complex::{Complex32, Complex64};
use std::f64::consts::PI;

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
