//! Two-dimensional FFTs of complex images (rows × columns), planned once
//! per image size: rustfft along each row, then along each column through a
//! transpose, rows in parallel with rayon. Unnormalised in both directions
//! (inverse ∘ forward = rows·columns × identity), like rustfft.

use ndarray::Array2;
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use rustfft::{Fft, FftDirection, FftPlanner};
use std::sync::Arc;

pub struct Fft2 {
    rows: usize,
    cols: usize,
    along_rows: [Arc<dyn Fft<f32>>; 2],
    along_cols: [Arc<dyn Fft<f32>>; 2],
}

impl Fft2 {
    pub fn new(rows: usize, cols: usize) -> Self {
        let mut p = FftPlanner::<f32>::new();
        Fft2 {
            rows,
            cols,
            along_rows: [p.plan_fft_forward(cols), p.plan_fft_inverse(cols)],
            along_cols: [p.plan_fft_forward(rows), p.plan_fft_inverse(rows)],
        }
    }

    pub fn shape(&self) -> (usize, usize) {
        (self.rows, self.cols)
    }

    /// In place: forward (`FftDirection::Forward`) or inverse.
    pub fn process(&self, a: &mut Array2<Complex32>, direction: FftDirection) {
        assert_eq!(a.dim(), (self.rows, self.cols));
        let i = (direction == FftDirection::Inverse) as usize;
        let (r, c) = (self.rows, self.cols);
        let data = a.as_slice_mut().expect("standard layout");
        let row_fft = &self.along_rows[i];
        data.par_chunks_mut(c).for_each_init(
            || vec![Complex32::new(0.0, 0.0); row_fft.get_inplace_scratch_len()],
            |scratch, row| row_fft.process_with_scratch(row, scratch),
        );
        let mut t = transpose(data, r, c);
        let col_fft = &self.along_cols[i];
        t.par_chunks_mut(r).for_each_init(
            || vec![Complex32::new(0.0, 0.0); col_fft.get_inplace_scratch_len()],
            |scratch, col| col_fft.process_with_scratch(col, scratch),
        );
        let back = transpose(&t, c, r);
        data.copy_from_slice(&back);
    }
}

/// An image (rows × cols) transposed, in parallel.
pub fn transposed<T: Copy + Default + Send + Sync>(a: &Array2<T>) -> Array2<T> {
    let (r, c) = a.dim();
    let data = a.as_standard_layout();
    Array2::from_shape_vec((c, r), transpose(data.as_slice().expect("standard layout"), r, c)).expect("shape")
}

/// (rows × cols) row-major → (cols × rows), in parallel over bands of columns.
fn transpose<T: Copy + Default + Send + Sync>(src: &[T], rows: usize, cols: usize) -> Vec<T> {
    let mut out = vec![T::default(); rows * cols];
    const BAND: usize = 16;
    out.par_chunks_mut(BAND * rows).enumerate().for_each(|(b, dst)| {
        let c0 = b * BAND;
        let width = dst.len() / rows;
        for r in 0..rows {
            let row = &src[r * cols + c0..r * cols + c0 + width];
            for (c, &v) in row.iter().enumerate() {
                dst[c * rows + r] = v;
            }
        }
    });
    out
}

/// Signed frequency of DFT index k of an n-point transform: k for
/// k < n/2 (rounded up), else k − n.
pub fn signed_frequency(k: usize, n: usize) -> f64 {
    if k < n.div_ceil(2) {
        k as f64
    } else {
        k as f64 - n as f64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_a_direct_dft_and_inverts() {
        let (r, c) = (6, 10);
        let a = Array2::from_shape_fn((r, c), |(i, j)| Complex32::new((i * 3 + j) as f32 * 0.1, (i as f32 - j as f32).sin()));
        let mut f = a.clone();
        let fft = Fft2::new(r, c);
        fft.process(&mut f, FftDirection::Forward);
        for (u, v) in [(0, 0), (1, 3), (5, 9), (2, 5)] {
            let mut s = rustfft::num_complex::Complex64::new(0.0, 0.0);
            for i in 0..r {
                for j in 0..c {
                    let ph = -2.0 * std::f64::consts::PI * ((u * i) as f64 / r as f64 + (v * j) as f64 / c as f64);
                    let x = a[[i, j]];
                    s += rustfft::num_complex::Complex64::new(x.re as f64, x.im as f64) * rustfft::num_complex::Complex64::from_polar(1.0, ph);
                }
            }
            let g = f[[u, v]];
            assert!((g.re as f64 - s.re).abs() < 1e-4 && (g.im as f64 - s.im).abs() < 1e-4, "({u},{v}) {g} vs {s}");
        }
        fft.process(&mut f, FftDirection::Inverse);
        for (x, y) in f.iter().zip(a.iter()) {
            assert!((x / (r * c) as f32 - y).norm() < 1e-5);
        }
    }
}
