//! k-linearization stage: resamples a spectrum from the camera's pixels
//! (roughly uniform in wavelength) onto a grid uniform in wavenumber
//! k = 2π/λ, so that the FFT maps a reflector to a single depth.
//!
//! The target grid runs from the smallest to the largest pixel wavenumber
//! (inclusive, increasing k), so nothing is extrapolated. Two interpolants:
//! `linear` (piecewise linear) and `cubic` (natural cubic spline, the same
//! function as SciPy's `CubicSpline(bc_type="natural")`). Both are linear in
//! the data, so everything that depends only on the wavelength map (interval
//! indices, weights, the spline's tridiagonal factorisation) is computed once
//! here; per A-line the spline costs one O(N) tridiagonal solve.

use rustfft::num_complex::Complex64;
use serde::{Deserialize, Serialize};

use super::{ALine, FrameContext, Stage};
use crate::physics::wavenumber_per_um;

/// Interpolation method of the resampling.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Interpolation {
    Linear,
    Cubic,
}

/// Precomputed resampling from pixels to a uniform wavenumber grid.
///
/// ```
/// use fringeflow_core::stages::k_linearization::{Interpolation, KLinearization};
/// use rustfft::num_complex::Complex64;
/// // A camera with pixels evenly spaced in wavelength, 800–900 nm.
/// let map: Vec<f64> = (0..64).map(|p| 800.0 + 100.0 * p as f64 / 63.0).collect();
/// let plan = KLinearization::new(&map, 64, Interpolation::Cubic);
/// let spectrum = vec![1.0; 64];
/// let mut out = vec![Complex64::new(0.0, 0.0); 64];
/// plan.resample(&spectrum, &mut vec![0.0; 64], &mut vec![0.0; 64], &mut out);
/// assert!(out.iter().all(|v| (v.re - 1.0).abs() < 1e-12)); // flat stays flat
/// ```
#[derive(Debug, Clone)]
pub struct KLinearization {
    method: Interpolation,
    /// Pixel index of the i-th source sample in increasing-k order.
    order: Vec<usize>,
    /// For each output sample: the source interval (in sorted order) it falls in.
    interval: Vec<usize>,
    /// Weight of the interval's left sample (linear part); right weight is 1 − this.
    left_weight: Vec<f64>,
    /// Spline curvature weights of the left and right sample's second derivative.
    left_curvature: Vec<f64>,
    right_curvature: Vec<f64>,
    /// Interval widths h_i in k (sorted order) and their inverses.
    h: Vec<f64>,
    inv_h: Vec<f64>,
    /// Thomas-algorithm coefficients for the natural spline system
    /// (rows 1..n−2): modified super-diagonal and inverse pivots.
    c_prime: Vec<f64>,
    inv_pivot: Vec<f64>,
    /// Wavenumber of the first and last output sample, rad/µm.
    pub k_min_per_um: f64,
    pub k_max_per_um: f64,
    /// Number of output samples.
    pub samples: usize,
}

/// Weights of the left and right knot's second derivative for a point whose
/// left (linear) weight is `a` in an interval of width `h` (either sign).
pub fn curvature_weights(a: f64, h: f64) -> (f64, f64) {
    let b = 1.0 - a;
    ((a * a * a - a) * h * h / 6.0, (b * b * b - b) * h * h / 6.0)
}

/// Thomas-algorithm factors (modified super-diagonal, inverse pivots) of the
/// natural spline's tridiagonal system for knot spacings `h`: for rows
/// r = 1..n−2, h[r−1]·M[r−1] + 2(h[r−1]+h[r])·M[r] + h[r]·M[r+1] =
/// 6·(Δ_r − Δ_{r−1}), with M[0] = M[n−1] = 0. Valid for knots in either
/// order (all h of one sign).
pub fn natural_spline_factors(h: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let rows = h.len() - 1;
    let mut c_prime = vec![0.0; rows];
    let mut inv_pivot = vec![0.0; rows];
    for r in 0..rows {
        let lower = if r == 0 { 0.0 } else { h[r] };
        let diag = 2.0 * (h[r] + h[r + 1]);
        let upper = if r + 1 == rows { 0.0 } else { h[r + 1] };
        let pivot = diag - if r == 0 { 0.0 } else { lower * c_prime[r - 1] };
        inv_pivot[r] = 1.0 / pivot;
        c_prime[r] = upper / pivot;
    }
    (c_prime, inv_pivot)
}

/// Read-only view of a [`KLinearization`]'s tables (see its fields).
pub struct ResamplingTables<'a> {
    pub cubic: bool,
    pub order: &'a [usize],
    pub interval: &'a [usize],
    pub left_weight: &'a [f64],
    pub left_curvature: &'a [f64],
    pub right_curvature: &'a [f64],
    pub h: &'a [f64],
    pub inv_h: &'a [f64],
    pub c_prime: &'a [f64],
    pub inv_pivot: &'a [f64],
}

impl KLinearization {
    /// Plans the resampling for a per-pixel wavelength map (nm), which must be
    /// strictly monotonic (checked by the capture reader), onto `samples`
    /// uniform wavenumbers.
    pub fn new(wavelength_nm: &[f64], samples: usize, method: Interpolation) -> Self {
        let n = wavelength_nm.len();
        assert!(n >= 4 && samples >= 2, "k-linearization needs at least 4 pixels");
        let k_pixel: Vec<f64> = wavelength_nm.iter().map(|&l| wavenumber_per_um(l)).collect();
        let mut order: Vec<usize> = (0..n).collect();
        if k_pixel[0] > k_pixel[n - 1] {
            order.reverse();
        }
        let k: Vec<f64> = order.iter().map(|&p| k_pixel[p]).collect();
        let h: Vec<f64> = k.windows(2).map(|w| w[1] - w[0]).collect();
        let (k_min, k_max) = (k[0], k[n - 1]);

        let mut interval = Vec::with_capacity(samples);
        let mut left_weight = Vec::with_capacity(samples);
        let mut left_curvature = Vec::with_capacity(samples);
        let mut right_curvature = Vec::with_capacity(samples);
        let mut i = 0usize;
        for j in 0..samples {
            let t = if j + 1 == samples {
                k_max
            } else {
                k_min + (k_max - k_min) * j as f64 / (samples - 1) as f64
            };
            while i + 2 < n && t > k[i + 1] {
                i += 1;
            }
            let a = ((k[i + 1] - t) / h[i]).clamp(0.0, 1.0);
            let (lc, rc) = curvature_weights(a, h[i]);
            interval.push(i);
            left_weight.push(a);
            left_curvature.push(lc);
            right_curvature.push(rc);
        }

        // Factorise the natural spline's tridiagonal system once.
        let (c_prime, inv_pivot) = natural_spline_factors(&h);

        let inv_h = h.iter().map(|v| 1.0 / v).collect();
        KLinearization {
            method,
            order,
            inv_h,
            interval,
            left_weight,
            left_curvature,
            right_curvature,
            h,
            c_prime,
            inv_pivot,
            k_min_per_um: k_min,
            k_max_per_um: k_max,
            samples,
        }
    }

    /// The precomputed tables, for the fused fast path (`pipeline::fused`).
    pub fn tables(&self) -> ResamplingTables<'_> {
        ResamplingTables {
            cubic: self.method == Interpolation::Cubic,
            order: &self.order,
            interval: &self.interval,
            left_weight: &self.left_weight,
            left_curvature: &self.left_curvature,
            right_curvature: &self.right_curvature,
            h: &self.h,
            inv_h: &self.inv_h,
            c_prime: &self.c_prime,
            inv_pivot: &self.inv_pivot,
        }
    }

    /// Spectral span of the output grid in rad/µm.
    pub fn k_span_per_um(&self) -> f64 {
        self.k_max_per_um - self.k_min_per_um
    }

    /// Resamples `spectrum` (pixel order) into `out` (length `samples`),
    /// using `sorted` and `curvature` as scratch of the spectrum's length.
    pub fn resample(&self, spectrum: &[f64], sorted: &mut [f64], curvature: &mut [f64], out: &mut [Complex64]) {
        for (s, &p) in sorted.iter_mut().zip(self.order.iter()) {
            *s = spectrum[p];
        }
        match self.method {
            Interpolation::Linear => {
                for (j, o) in out.iter_mut().enumerate().take(self.samples) {
                    let i = self.interval[j];
                    let a = self.left_weight[j];
                    *o = Complex64::new(a * sorted[i] + (1.0 - a) * sorted[i + 1], 0.0);
                }
            }
            Interpolation::Cubic => {
                self.solve_curvature(sorted, curvature);
                for (j, o) in out.iter_mut().enumerate().take(self.samples) {
                    let i = self.interval[j];
                    let a = self.left_weight[j];
                    let v = a * sorted[i]
                        + (1.0 - a) * sorted[i + 1]
                        + self.left_curvature[j] * curvature[i]
                        + self.right_curvature[j] * curvature[i + 1];
                    *o = Complex64::new(v, 0.0);
                }
            }
        }
    }

    /// The fraction of a fringe's power the resampling keeps, at each depth
    /// of `depth_um` (µm in air): a unit fringe cos(2·k·z) sampled at the
    /// pixels' wavenumbers (`wavelength_nm`, pixel order) is resampled by
    /// this plan and projected onto the ideal fringe on the uniform grid;
    /// the squared ratio to the same projection of the exact fringe. The
    /// interpolation's low-pass response grows with depth (linear
    /// interpolation keeps about (2/π)⁴ at the end of the range). Computed
    /// at every depth, in parallel.
    pub fn power_transfer(&self, wavelength_nm: &[f64], depth_um: &[f64]) -> Vec<f64> {
        use rayon::prelude::*;
        let n = self.samples;
        let k_pixel: Vec<f64> = wavelength_nm.iter().map(|&l| wavenumber_per_um(l)).collect();
        let dk = if n > 1 { (self.k_max_per_um - self.k_min_per_um) / (n - 1) as f64 } else { 0.0 };
        let k_uniform: Vec<f64> = (0..n).map(|j| self.k_min_per_um + j as f64 * dk).collect();
        let project = |values: &mut dyn Iterator<Item = f64>, z: f64| -> f64 {
            let mut acc = Complex64::new(0.0, 0.0);
            for (v, &k) in values.zip(&k_uniform) {
                acc += Complex64::from_polar(v, -2.0 * k * z);
            }
            acc.norm()
        };
        depth_um
            .par_iter()
            .map_init(
                || (vec![0.0; k_pixel.len()], vec![0.0; k_pixel.len()], vec![Complex64::new(0.0, 0.0); n]),
                |(sorted, curvature, out), &z| {
                    let fringe: Vec<f64> = k_pixel.iter().map(|&k| (2.0 * k * z).cos()).collect();
                    self.resample(&fringe, sorted, curvature, out);
                    let resampled = project(&mut out.iter().map(|c| c.re), z);
                    let exact = project(&mut k_uniform.iter().map(|&k| (2.0 * k * z).cos()), z);
                    if exact > 0.0 { (resampled / exact).powi(2) } else { 1.0 }
                },
            )
            .collect()
    }

    /// Second derivatives of the natural cubic spline through (k, y).
    fn solve_curvature(&self, y: &[f64], m: &mut [f64]) {
        let n = y.len();
        let rows = n - 2;
        let (h, inv_h) = (&self.h, &self.inv_h);
        // Forward sweep: m[r+1] temporarily holds d'_r.
        for r in 0..rows {
            let rhs = 6.0 * ((y[r + 2] - y[r + 1]) * inv_h[r + 1] - (y[r + 1] - y[r]) * inv_h[r]);
            let prev = if r == 0 { 0.0 } else { h[r] * m[r] };
            m[r + 1] = (rhs - prev) * self.inv_pivot[r];
        }
        // Back substitution.
        for r in (0..rows.saturating_sub(1)).rev() {
            m[r + 1] -= self.c_prime[r] * m[r + 2];
        }
        m[0] = 0.0;
        m[n - 1] = 0.0;
    }
}

impl Stage for KLinearization {
    fn name(&self) -> &'static str {
        "k_linearization"
    }

    fn apply(&self, _ctx: &FrameContext, line: &mut ALine) {
        let (head, tail) = line.field.split_at_mut(self.samples);
        self.resample(&line.spectrum, &mut line.work, &mut line.work2, head);
        tail.fill(Complex64::new(0.0, 0.0));
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn grid(n: usize) -> Vec<f64> {
        // A non-linear wavelength map, increasing in λ (decreasing in k).
        (0..n).map(|p| 800.0 + 0.05 * p as f64 + 2e-6 * (p as f64).powi(2)).collect()
    }

    #[test]
    fn both_methods_reproduce_a_linear_function_of_k_exactly() {
        let map = grid(256);
        let f = |k: f64| 3.0 * k - 5.0;
        let y: Vec<f64> = map.iter().map(|&l| f(wavenumber_per_um(l))).collect();
        for method in [Interpolation::Linear, Interpolation::Cubic] {
            let plan = KLinearization::new(&map, 300, method);
            let mut out = vec![Complex64::new(0.0, 0.0); 300];
            plan.resample(&y, &mut vec![0.0; 256], &mut vec![0.0; 256], &mut out);
            for (j, o) in out.iter().enumerate() {
                let k = plan.k_min_per_um + plan.k_span_per_um() * j as f64 / 299.0;
                assert!((o.re - f(k)).abs() < 1e-9, "{method:?} sample {j}");
            }
        }
    }

    #[test]
    fn cubic_spline_tracks_a_smooth_fringe_far_better_than_linear() {
        // A fringe cos(2kz) at z = 300 µm sampled by the non-linear map.
        let map = grid(1024);
        let z = 300.0;
        let y: Vec<f64> = map.iter().map(|&l| (2.0 * wavenumber_per_um(l) * z).cos()).collect();
        let mut err = Vec::new();
        for method in [Interpolation::Linear, Interpolation::Cubic] {
            let plan = KLinearization::new(&map, 1024, method);
            let mut out = vec![Complex64::new(0.0, 0.0); 1024];
            plan.resample(&y, &mut vec![0.0; 1024], &mut vec![0.0; 1024], &mut out);
            let e = out
                .iter()
                .enumerate()
                .skip(8)
                .take(1000)
                .map(|(j, o)| {
                    let k = plan.k_min_per_um + plan.k_span_per_um() * j as f64 / 1023.0;
                    (o.re - (2.0 * k * z).cos()).abs()
                })
                .fold(0.0, f64::max);
            err.push(e);
        }
        assert!(err[1] < 1e-3, "cubic error {}", err[1]);
        assert!(err[0] > 10.0 * err[1], "linear {} cubic {}", err[0], err[1]);
    }

    #[test]
    fn linear_interpolation_keeps_sinc_squared_of_the_fringe_power() {
        // A wavelength map with a gentle nonlinearity, resampled to as many
        // uniform samples: linear interpolation's power response at
        // normalised frequency f (cycles per sample) is about
        // (sin(πf)/(πf))⁴ for the fringe (the triangle kernel's transform is
        // sinc², squared again for power; common practice, from memory),
        // and cubic interpolation keeps more at every depth.
        let pixels = 1024;
        let map: Vec<f64> = (0..pixels).map(|p| { let x = p as f64 / (pixels - 1) as f64; 790.0 + 100.0 * x + 2.0 * x * (1.0 - x) }).collect();
        let linear = KLinearization::new(&map, pixels, Interpolation::Linear);
        let cubic = KLinearization::new(&map, pixels, Interpolation::Cubic);
        let dk = (linear.k_max_per_um - linear.k_min_per_um) / (pixels - 1) as f64;
        // Depth of normalised frequency f: 2·dk·z = 2π·f.
        let depths: Vec<f64> = [0.05, 0.2, 0.35].iter().map(|f| std::f64::consts::PI * f / dk).collect();
        let tl = linear.power_transfer(&map, &depths);
        let tc = cubic.power_transfer(&map, &depths);
        for (i, f) in [0.05f64, 0.2, 0.35].iter().enumerate() {
            let x = std::f64::consts::PI * f;
            let expected = (x.sin() / x).powi(4);
            assert!((tl[i] - expected).abs() < 0.03, "f {f}: {} vs {expected}", tl[i]);
            assert!(tc[i] > tl[i] && tc[i] <= 1.02, "f {f}: cubic {} linear {}", tc[i], tl[i]);
        }
    }
}
