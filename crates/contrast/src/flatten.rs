//! Flattening: every A-line of a B-scan shifted in depth, sub-pixel, so that
//! a chosen surface lies on one row. The shift is a linear phase ramp on
//! the DFT of each complex column (band-limited interpolation of the depth
//! profile, zero-padded so content does not wrap round), with the ramp's
//! frequencies taken relative to the profile's carrier (the spectrum's
//! centre, measured from the data): the envelope moves and the phase at
//! each row stays what it was, so Doppler between neighbouring A-lines shifted by
//! different amounts sees no phase step, and the repeats of a position,
//! shifted alike, still compare pixel by pixel.
//!
//! Must agree with: a whole-pixel shift is a plain move of the column,
//! times the carrier's phase over the rows moved (test); a shift and its inverse give the column back away from its ends
//! (test); the envelope moves by the shift while the phase at each row
//! stays (test).

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use rustfft::{Fft, FftPlanner};
use std::sync::Arc;

/// Per-A-line shifts (pixels, positive = deeper) that move `surface_um`
/// (depth in air per A-line, NaN where missing) to `target_um`; missing
/// A-lines take the shift interpolated between their neighbours (held at
/// the ends). None when the surface is missing everywhere.
pub fn shifts_px(surface_um: &[f32], target_um: f64, depth_step_um: f64) -> Option<Vec<f64>> {
    let known: Vec<(usize, f64)> = surface_um.iter().enumerate().filter(|(_, v)| v.is_finite()).map(|(a, &v)| (a, (target_um - v as f64) / depth_step_um)).collect();
    if known.is_empty() {
        return None;
    }
    let mut out = vec![0.0; surface_um.len()];
    let mut k = 0;
    for (a, o) in out.iter_mut().enumerate() {
        while k + 1 < known.len() && known[k + 1].0 <= a {
            k += 1;
        }
        let (a0, s0) = known[k];
        *o = if a <= a0 || k + 1 == known.len() {
            s0
        } else {
            let (a1, s1) = known[k + 1];
            s0 + (s1 - s0) * (a - a0) as f64 / (a1 - a0) as f64
        };
    }
    Some(out)
}

/// Shifts the columns of depth × A-lines images.
pub struct Flattener {
    depth: usize,
    len: usize,
    forward: Arc<dyn Fft<f32>>,
    inverse: Arc<dyn Fft<f32>>,
}

impl Flattener {
    /// For columns `depth` long shifted by at most `max_shift_px` either way.
    pub fn new(depth: usize, max_shift_px: f64) -> Self {
        let len = (depth + max_shift_px.abs().ceil() as usize + 16).next_power_of_two();
        let mut planner = FftPlanner::new();
        Flattener { depth, len, forward: planner.plan_fft_forward(len), inverse: planner.plan_fft_inverse(len) }
    }

    /// Length of the transforms (the column zero-padded).
    pub fn len(&self) -> usize {
        self.len
    }

    /// The carrier of the complex depth profiles, cycles per depth pixel:
    /// the circular centroid of the columns' power spectra (every 4th
    /// column is enough).
    pub fn carrier(&self, c: ArrayView2<'_, Complex32>) -> f64 {
        let alines = c.ncols();
        let step = 4.min(alines.max(1));
        let sums: Vec<(f64, f64)> = (0..alines)
            .into_par_iter()
            .step_by(step)
            .map(|a| {
                let mut buf = self.column(c, a);
                self.forward.process(&mut buf);
                let mut acc = (0.0, 0.0);
                for (f, v) in buf.iter().enumerate() {
                    let p = v.norm_sqr() as f64;
                    let angle = std::f64::consts::TAU * f as f64 / self.len as f64;
                    acc.0 += p * angle.cos();
                    acc.1 += p * angle.sin();
                }
                acc
            })
            .collect();
        let (x, y) = sums.iter().fold((0.0, 0.0), |a, s| (a.0 + s.0, a.1 + s.1));
        y.atan2(x) / std::f64::consts::TAU
    }

    fn column(&self, c: ArrayView2<'_, Complex32>, a: usize) -> Vec<Complex32> {
        let mut buf = vec![Complex32::new(0.0, 0.0); self.len];
        for (b, v) in buf.iter_mut().zip(c.column(a).iter()) {
            *b = *v;
        }
        buf
    }

    /// Shifts each column `a` of `c` by `shifts[a]` pixels (positive:
    /// deeper), relative to `carrier` (cycles per pixel); rows shifted in
    /// from beyond the ends are zero.
    pub fn shift_complex(&self, c: &mut Array2<Complex32>, shifts: &[f64], carrier: f64) {
        let (depth, alines) = c.dim();
        assert_eq!(depth, self.depth);
        let len = self.len;
        let view = c.view();
        let columns: Vec<Vec<Complex32>> = (0..alines)
            .into_par_iter()
            .map(|a| {
                let mut buf = self.column(view, a);
                let s = shifts[a];
                if s == 0.0 {
                    buf.truncate(depth);
                    return buf;
                }
                self.forward.process(&mut buf);
                let scale = 1.0 / len as f64;
                for (f, v) in buf.iter_mut().enumerate() {
                    // Frequency relative to the carrier, in [−½, ½).
                    let mut rel = f as f64 / len as f64 - carrier;
                    rel -= rel.round();
                    let phase = -std::f64::consts::TAU * rel * s;
                    *v *= Complex32::new((phase.cos() * scale) as f32, (phase.sin() * scale) as f32);
                }
                self.inverse.process(&mut buf);
                // Back to the carrier's phase at the new row: the ramp above
                // was relative to the carrier, so the carrier itself stayed.
                buf.truncate(depth);
                buf
            })
            .collect();
        for (a, col) in columns.into_iter().enumerate() {
            for (d, v) in col.into_iter().enumerate() {
                c[[d, a]] = v;
            }
        }
    }
}

/// Shifts each column of a real image by linear interpolation (amplitude
/// images: sub-bands, the attenuation map), NaN kept as NaN; rows shifted
/// in from beyond the ends are `fill`.
pub fn shift_real(x: &mut Array2<f32>, shifts: &[f64], fill: f32) {
    let depth = x.nrows();
    let src = x.clone();
    ndarray::Zip::indexed(x).par_for_each(|(d, a), o| {
        let z = d as f64 - shifts[a];
        let i = z.floor();
        let t = (z - i) as f32;
        let i = i as isize;
        let at = |k: isize| if k < 0 || k >= depth as isize { fill } else { src[[k as usize, a]] };
        *o = if t == 0.0 { at(i) } else { at(i) * (1.0 - t) + at(i + 1) * t };
    });
}

#[cfg(test)]
mod tests {
    use super::*;

    fn profile(depth: usize, alines: usize, carrier: f64) -> Array2<Complex32> {
        // Gaussian envelopes (PSF 3 px FWHM) on a carrier, a few per column.
        Array2::from_shape_fn((depth, alines), |(d, a)| {
            let mut v = Complex32::new(0.0, 0.0);
            for (k, z) in [40.3 + a as f64 * 0.7, 70.8, 100.1].iter().enumerate() {
                let env = (-(d as f64 - z).powi(2) / (2.0 * 1.27f64.powi(2))).exp();
                let phase = std::f64::consts::TAU * carrier * (d as f64 - z) + 0.9 * k as f64 + 0.3 * a as f64;
                v += Complex32::from_polar(env as f32, phase as f32);
            }
            v
        })
    }

    #[test]
    fn whole_pixel_shift_is_a_move_and_fractional_shifts_invert() {
        let c0 = profile(160, 6, 0.37);
        let f = Flattener::new(160, 20.0);
        let mut c = c0.clone();
        let carrier = f.carrier(c0.view());
        f.shift_complex(&mut c, &[3.0; 6], carrier);
        // A move by 3 rows, with the carrier's phase over those rows put back.
        let turn = Complex32::from_polar(1.0, (std::f64::consts::TAU * carrier * 3.0) as f32);
        for a in 0..6 {
            for d in 20..150 {
                assert!((c[[d, a]] - c0[[d - 3, a]] * turn).norm() < 1e-4, "{d} {a}");
            }
        }
        let mut c = c0.clone();
        assert!((carrier - 0.37).abs() < 0.01, "carrier {carrier}");
        let s = [0.3, -1.7, 2.45, 0.5, -0.25, 7.6];
        f.shift_complex(&mut c, &s, carrier);
        f.shift_complex(&mut c, &s.map(|v| -v), carrier);
        for a in 0..6 {
            for d in 25..140 {
                assert!((c[[d, a]] - c0[[d, a]]).norm() < 2e-3, "{d} {a}: {} vs {}", c[[d, a]], c0[[d, a]]);
            }
        }
    }

    #[test]
    fn the_envelope_moves_and_the_phase_at_each_row_stays() {
        // One scatterer at 70.8 px on a carrier of −0.45 cycles per pixel:
        // shifted by 2.6 px its peak is at 73.4, and the phase at each row
        // near it is the phase that row had before (what makes Doppler
        // between A-lines shifted differently see no step).
        let carrier = -0.45;
        let c0 = Array2::from_shape_fn((128, 1), |(d, _)| {
            let env = (-(d as f64 - 70.8).powi(2) / (2.0 * 1.27f64.powi(2))).exp();
            Complex32::from_polar(env as f32, (std::f64::consts::TAU * carrier * (d as f64 - 70.8) + 0.9) as f32)
        });
        let f = Flattener::new(128, 4.0);
        let mut c = c0.clone();
        f.shift_complex(&mut c, &[2.6], f.carrier(c0.view()));
        let wrap = |p: f64| (p + std::f64::consts::PI).rem_euclid(std::f64::consts::TAU) - std::f64::consts::PI;
        for d in [72, 73, 74, 75] {
            assert!(wrap(c[[d, 0]].arg() as f64 - c0[[d, 0]].arg() as f64).abs() < 0.02, "row {d}");
        }
        let peak = (60..90).max_by(|&a, &b| c[[a, 0]].norm().total_cmp(&c[[b, 0]].norm())).unwrap();
        assert_eq!(peak, 73);
        let env = |d: usize| (-(d as f64 - 73.4).powi(2) / (2.0 * 1.27f64.powi(2))).exp();
        for d in 68..80 {
            assert!((c[[d, 0]].norm() as f64 - env(d)).abs() < 2e-3, "row {d}");
        }
    }

    #[test]
    fn shifts_fill_missing_alines_between_neighbours() {
        let s = shifts_px(&[f32::NAN, 10.0, f32::NAN, f32::NAN, 16.0, f32::NAN], 20.0, 2.0).unwrap();
        assert_eq!(s, vec![5.0, 5.0, 4.0, 3.0, 2.0, 2.0]);
        assert!(shifts_px(&[f32::NAN; 3], 20.0, 2.0).is_none());
        let mut x = Array2::from_shape_fn((5, 1), |(d, _)| d as f32);
        shift_real(&mut x, &[0.5], f32::NAN);
        assert!(x[[0, 0]].is_nan());
        assert_eq!(x[[1, 0]], 0.5);
        assert_eq!(x[[4, 0]], 3.5);
    }
}
