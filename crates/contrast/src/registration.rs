//! Sub-pixel rigid registration of B-scans: upsampled phase correlation
//! (Guizar-Sicairos, Thurman & Fienup 2008, Opt. Lett. 33:156).
//!
//! The shift between a reference and a moving image is the peak of the
//! inverse FFT of their normalised cross-power spectrum
//! F_mov·conj(F_ref)/|F_mov·conj(F_ref)|: first at whole pixels, then
//! refined by evaluating the same inverse transform, by matrix-multiply
//! DFTs (the paper's method; nothing is zero-padded), on grids around the
//! peak: 1/10 pixel over ±0.75 pixel, then ten times finer around the best
//! point each time, down to 1/`upsampling` pixel (the paper evaluates one
//! grid of 1/upsampling; the nested grids find the same maximum of a
//! smooth peak at a fraction of the cost). The
//! peak's height (1 for images equal up to a shift, near 0 for unrelated
//! ones) says how good the match is. Images are the linear amplitude with
//! the mean removed. Shifts are applied to the complex frame in the Fourier
//! domain (a linear phase across the 2-D spectrum), which wraps content
//! around the image edges: the outermost ⌈|shift|⌉ rows and columns are
//! wrapped material, reported by [`wrapped_margin`].
//!
//! Sign: a shift (a, l) means the moving image shows the reference's
//! content a depth pixels deeper and l A-lines to the right; applying it
//! moves the content back.

use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use rustfft::num_complex::{Complex32, Complex64};
use rustfft::FftDirection;
use serde::Serialize;

use super::fft2::{signed_frequency, Fft2};

/// A measured rigid shift.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Shift {
    pub axial_px: f64,
    pub lateral_px: f64,
    /// Height of the phase-correlation peak, 0–1.
    pub peak: f64,
}

impl Shift {
    pub const NONE: Shift = Shift { axial_px: 0.0, lateral_px: 0.0, peak: 1.0 };

    pub fn plus(self, other: Shift) -> Shift {
        Shift { axial_px: self.axial_px + other.axial_px, lateral_px: self.lateral_px + other.lateral_px, peak: self.peak.min(other.peak) }
    }
}

/// Precomputed transforms for images of one size.
pub struct Registrar {
    fft: Fft2,
    upsampling: usize,
}

/// The 2-D spectrum of an image prepared for registration.
pub struct RegistrationSpectrum(Array2<Complex32>);

impl Registrar {
    /// For images of depth × A-lines; shifts resolved to 1/`upsampling` pixel.
    pub fn new(depth: usize, alines: usize, upsampling: usize) -> Self {
        Registrar { fft: Fft2::new(depth, alines), upsampling: upsampling.max(1) }
    }

    /// Spectrum of the amplitude |A| of a complex frame, mean removed.
    pub fn spectrum(&self, frame: ArrayView2<'_, Complex32>) -> RegistrationSpectrum {
        let n = frame.len() as f64;
        let mean = frame.iter().map(|c| c.norm_sqr().sqrt() as f64).sum::<f64>() / n;
        let mut a = frame.mapv(|c| Complex32::new(c.norm_sqr().sqrt() - mean as f32, 0.0));
        self.fft.process(&mut a, FftDirection::Forward);
        RegistrationSpectrum(a)
    }

    /// Shift of `moving` relative to `reference`.
    pub fn estimate(&self, reference: &RegistrationSpectrum, moving: &RegistrationSpectrum) -> Shift {
        let (rows, cols) = self.fft.shape();
        // Normalised cross-power spectrum.
        let mut cps = Array2::<Complex32>::zeros((rows, cols));
        ndarray::Zip::from(&mut cps).and(&moving.0).and(&reference.0).par_for_each(|c, &m, &r| {
            let p = m * r.conj();
            let norm = p.norm_sqr().sqrt();
            *c = if norm > 0.0 { p / norm } else { Complex32::new(0.0, 0.0) };
        });
        // The peak of identical images (every bin adds 1), so heights read 0–1.
        let bound = (rows * cols) as f64;
        let mut corr = cps.clone();
        self.fft.process(&mut corr, FftDirection::Inverse);
        let (mut best, mut at) = (f32::NEG_INFINITY, (0usize, 0usize));
        for ((i, j), v) in corr.indexed_iter() {
            if v.re > best {
                best = v.re;
                at = (i, j);
            }
        }
        let coarse = [signed_frequency(at.0, rows), signed_frequency(at.1, cols)];
        if self.upsampling == 1 {
            return Shift { axial_px: coarse[0], lateral_px: coarse[1], peak: best as f64 / bound };
        }
        // Refinement: the inverse DFT of the cross-power spectrum evaluated
        // on a grid around the best point so far, first of step 1/10 pixel
        // over ±0.75 pixel of the whole-pixel peak, then each time ten times
        // finer over ±one step of the last grid, down to 1/upsampling.
        let finest = 1.0 / self.upsampling as f64;
        let mut step = finest.max(0.1);
        let mut half = 0.75;
        let mut best = (coarse[0], coarse[1], best as f64);
        loop {
            let k = (half / step).ceil() as i64;
            let offsets: Vec<f64> = (-k..=k).map(|i| i as f64 * step).collect();
            let zs: Vec<f64> = offsets.iter().map(|o| best.0 + o).collect();
            let xs: Vec<f64> = offsets.iter().map(|o| best.1 + o).collect();
            let (v, zi, xi) = correlation_grid(&cps, &zs, &xs);
            best = (zs[zi], xs[xi], v);
            if step <= finest * 1.000_001 {
                break;
            }
            half = step;
            step = (step / 10.0).max(finest);
        }
        Shift { axial_px: round_to(best.0, finest), lateral_px: round_to(best.1, finest), peak: best.2 / bound }
    }

    /// Moves a complex frame's content back by `shift` (Fourier shift).
    pub fn apply(&self, frame: &mut Array2<Complex32>, shift: Shift) {
        if shift.axial_px == 0.0 && shift.lateral_px == 0.0 {
            return;
        }
        let (rows, cols) = self.fft.shape();
        self.fft.process(frame, FftDirection::Forward);
        let lateral: Vec<Complex32> = (0..cols)
            .map(|l| {
                let c = Complex64::from_polar(1.0, 2.0 * std::f64::consts::PI * signed_frequency(l, cols) * shift.lateral_px / cols as f64);
                Complex32::new(c.re as f32, c.im as f32)
            })
            .collect();
        let norm = 1.0 / (rows * cols) as f32;
        frame.axis_iter_mut(ndarray::Axis(0)).into_par_iter().enumerate().for_each(|(k, mut row)| {
            let e = Complex64::from_polar(norm as f64, 2.0 * std::f64::consts::PI * signed_frequency(k, rows) * shift.axial_px / rows as f64);
            let e = Complex32::new(e.re as f32, e.im as f32);
            for (v, l) in row.iter_mut().zip(&lateral) {
                *v *= e * l;
            }
        });
        self.fft.process(frame, FftDirection::Inverse);
    }

    /// Shifts a real image (e.g. one sub-band's amplitude) the same way.
    pub fn apply_real(&self, image: &mut Array2<f32>, shift: Shift) {
        if shift.axial_px == 0.0 && shift.lateral_px == 0.0 {
            return;
        }
        let mut c = image.mapv(|v| Complex32::new(v, 0.0));
        self.apply(&mut c, shift);
        ndarray::Zip::from(image).and(&c).for_each(|v, c| *v = c.re);
    }
}

/// Re of the inverse DFT of `cps` at every (z, x) of the grid zs × xs,
/// by two matrix products (along A-lines, then along depth); returns the
/// largest value and where it is.
fn correlation_grid(cps: &Array2<Complex32>, zs: &[f64], xs: &[f64]) -> (f64, usize, usize) {
    let (rows, cols) = cps.dim();
    let n = xs.len();
    let lateral_kernel: Vec<Complex64> = (0..cols)
        .flat_map(|l| {
            let f = signed_frequency(l, cols);
            xs.iter().map(move |&x| Complex64::from_polar(1.0, 2.0 * std::f64::consts::PI * f * x / cols as f64))
        })
        .collect();
    // T[k][v] = Σ_l cps[k][l]·e^{+2πi·f_l·x_v/cols}
    let partial: Vec<Complex64> = cps
        .as_slice()
        .expect("standard layout")
        .par_chunks(cols)
        .flat_map_iter(|row| {
            let mut acc = vec![Complex64::new(0.0, 0.0); n];
            for (l, c) in row.iter().enumerate() {
                let c = Complex64::new(c.re as f64, c.im as f64);
                for (a, k) in acc.iter_mut().zip(&lateral_kernel[l * n..(l + 1) * n]) {
                    *a += c * k;
                }
            }
            acc
        })
        .collect();
    let mut best = (f64::NEG_INFINITY, 0usize, 0usize);
    for (zi, &z) in zs.iter().enumerate() {
        let mut acc = vec![Complex64::new(0.0, 0.0); n];
        for k in 0..rows {
            let e = Complex64::from_polar(1.0, 2.0 * std::f64::consts::PI * signed_frequency(k, rows) * z / rows as f64);
            for (a, p) in acc.iter_mut().zip(&partial[k * n..(k + 1) * n]) {
                *a += e * p;
            }
        }
        for (xi, a) in acc.iter().enumerate() {
            if a.re > best.0 {
                best = (a.re, zi, xi);
            }
        }
    }
    best
}

/// v to the nearest multiple of `step` (removes the grid's rounding dust).
fn round_to(v: f64, step: f64) -> f64 {
    (v / step).round() * step
}

/// Rows and columns at each edge that hold wrapped-around content after a
/// shift: ⌈|shift|⌉ each way.
pub fn wrapped_margin(shift: Shift) -> (usize, usize) {
    (shift.axial_px.abs().ceil() as usize, shift.lateral_px.abs().ceil() as usize)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A random pattern with content at every spatial frequency (spectrum
    /// falling as 1/(1 + |f|)), displaced by (dz, dx) through the Fourier
    /// shift theorem, so sub-pixel shifts of it are exact.
    fn pattern(rows: usize, cols: usize, dz: f64, dx: f64) -> Array2<Complex32> {
        let mut spectrum = Array2::<Complex32>::zeros((rows, cols));
        for ((k, l), v) in spectrum.indexed_iter_mut() {
            let (fk, fl) = (signed_frequency(k, rows), signed_frequency(l, cols));
            let phase = ((k * 7919 + l * 104_729) as f64 * 0.618_033_988_75).fract() * 2.0 * std::f64::consts::PI;
            let shift = -2.0 * std::f64::consts::PI * (fk * dz / rows as f64 + fl * dx / cols as f64);
            let c = Complex64::from_polar(1.0 / (1.0 + (fk * fk + fl * fl).sqrt()), phase + shift);
            *v = Complex32::new(c.re as f32, c.im as f32);
        }
        // Σ|S| bounds the image, whatever the shift.
        let peak: f32 = spectrum.iter().map(|c| c.norm()).sum();
        Fft2::new(rows, cols).process(&mut spectrum, FftDirection::Inverse);
        // Real part plus an offset: a positive amplitude image.
        spectrum.mapv(|c| Complex32::new(c.re / peak + 2.0, 0.0))
    }

    #[test]
    fn recovers_a_known_subpixel_shift_and_undoes_it() {
        // Odd sizes: no Nyquist bin, so the Fourier shift is exact.
        let (rows, cols) = (63, 47);
        let reference = pattern(rows, cols, 0.0, 0.0);
        let moving = pattern(rows, cols, 3.37, -5.62);
        let r = Registrar::new(rows, cols, 50);
        let s = r.estimate(&r.spectrum(reference.view()), &r.spectrum(moving.view()));
        // Amplitudes here are positive, so |A| is the pattern itself.
        assert!((s.axial_px - 3.37).abs() <= 0.03 && (s.lateral_px + 5.62).abs() <= 0.03, "{s:?}");
        assert!(s.peak > 0.9, "{s:?}");
        let mut back = moving.clone();
        r.apply(&mut back, Shift { axial_px: 3.37, lateral_px: -5.62, peak: 1.0 });
        let worst = back.iter().zip(reference.iter()).map(|(a, b)| (a - b).norm()).fold(0.0f32, f32::max);
        assert!(worst < 1e-4, "{worst}");
    }
}
