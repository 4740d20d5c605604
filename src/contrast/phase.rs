//! Bulk-motion phase: the phase step that axial motion of the whole sample
//! adds to every pixel of a pair of A-lines (or of repeated B-scans).
//!
//! Estimated from the pair's products P = A₂·conj(A₁) over the pixels
//! above an intensity threshold, weighted by |P| = |A₁|·|A₂| (intensity
//! weighting): a weighted histogram of arg P in 64 bins gives the mode
//! (static tissue is most of the bright pixels), and the bulk phase is
//! arg ΣP over the pixels within ±π/8 of that mode, so flowing pixels of
//! another phase do not pull it (the histogram-mode idea of common
//! practice; the weighted mean alone is the Kasai estimate over depth).

use rustfft::num_complex::Complex32;
use std::f64::consts::PI;

const BINS: usize = 64;
/// Half-width of the window around the mode that the final mean uses, rad.
const WINDOW: f64 = PI / 8.0;

/// Bulk phase (rad) of the products `p` whose weight |p| is at least
/// `min_weight`; None when no product qualifies.
pub fn bulk_phase(p: impl Iterator<Item = Complex32> + Clone, min_weight: f32) -> Option<f64> {
    let mut hist = [0.0f64; BINS];
    let mut any = false;
    for v in p.clone() {
        let w = v.norm();
        if w >= min_weight && w > 0.0 {
            let a = (v.im as f64).atan2(v.re as f64);
            let b = (((a + PI) / (2.0 * PI)) * BINS as f64) as usize;
            hist[b.min(BINS - 1)] += w as f64;
            any = true;
        }
    }
    if !any {
        return None;
    }
    let mode = (0..BINS).max_by(|&a, &b| hist[a].total_cmp(&hist[b])).unwrap_or(0);
    let centre = -PI + (mode as f64 + 0.5) * 2.0 * PI / BINS as f64;
    let (mut re, mut im) = (0.0f64, 0.0f64);
    for v in p {
        let w = v.norm();
        if w >= min_weight && w > 0.0 {
            let a = (v.im as f64).atan2(v.re as f64);
            let d = (a - centre + PI).rem_euclid(2.0 * PI) - PI;
            if d.abs() <= WINDOW {
                re += v.re as f64;
                im += v.im as f64;
            }
        }
    }
    Some(im.atan2(re))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_the_static_phase_despite_a_flowing_minority() {
        // 70 % of the bright pixels step by 0.8 rad (bulk), 30 % by −2.0
        // rad (flow); weak pixels at random phases stay below the threshold.
        let mut p = Vec::new();
        for i in 0..700 {
            p.push(Complex32::from_polar(1.0 + (i % 7) as f32 * 0.1, 0.8 + 0.05 * ((i % 11) as f32 - 5.0) / 5.0));
        }
        for i in 0..300 {
            p.push(Complex32::from_polar(1.2, -2.0 + 0.01 * i as f32 / 300.0));
        }
        for i in 0..500 {
            p.push(Complex32::from_polar(0.01, i as f32));
        }
        let b = bulk_phase(p.iter().copied(), 0.5).unwrap();
        assert!((b - 0.8).abs() < 0.01, "{b}");
        assert_eq!(bulk_phase(p.iter().copied(), 10.0), None);
    }
}
