//! Sums over rectangular neighbourhoods of a 2-D array (the Kasai kernel of
//! Doppler, the flow test of the bulk-phase vote): running sums along each
//! row, then sums over the rows each output row takes. The caller says
//! which rows and columns each output element covers, so clipped and
//! shifted-inwards edges are both one call.

use ndarray::{Array2, Axis};
use rayon::prelude::*;

/// Row r, column c of the result: Σ of `a` over rows `rows(r)` and columns
/// `cols(c)` (inclusive-exclusive ranges), for `out_rows` rows.
pub fn box_sum<T>(a: &Array2<T>, out_rows: usize, rows: impl Fn(usize) -> (usize, usize) + Sync, cols: impl Fn(usize) -> (usize, usize) + Sync) -> Array2<T>
where
    T: Copy + Default + std::ops::Add<Output = T> + std::ops::Sub<Output = T> + Send + Sync,
{
    let width = a.ncols();
    let mut along = Array2::<T>::from_elem(a.dim(), T::default());
    along.axis_iter_mut(Axis(0)).into_par_iter().zip(a.axis_iter(Axis(0))).for_each(|(mut out, row)| {
        let mut prefix = Vec::with_capacity(width + 1);
        prefix.push(T::default());
        for &v in row.iter() {
            let last = *prefix.last().expect("non-empty");
            prefix.push(last + v);
        }
        for (c, o) in out.iter_mut().enumerate() {
            let (c0, c1) = cols(c);
            *o = prefix[c1] - prefix[c0];
        }
    });
    let mut out = Array2::<T>::from_elem((out_rows, width), T::default());
    out.axis_iter_mut(Axis(0)).into_par_iter().enumerate().for_each(|(r, mut o)| {
        let (r0, r1) = rows(r);
        for rr in r0..r1 {
            for (x, &v) in o.iter_mut().zip(along.row(rr).iter()) {
                *x = *x + v;
            }
        }
    });
    out
}

/// The range within ±`half` of `i`, clipped to `0..n`.
pub fn clipped_around(i: usize, half: usize, n: usize) -> (usize, usize) {
    (i.saturating_sub(half), (i + half + 1).min(n))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_direct_sums() {
        let a = Array2::from_shape_fn((7, 9), |(i, j)| (i * 10 + j) as f64);
        let s = box_sum(&a, 7, |i| clipped_around(i, 1, 7), |j| clipped_around(j, 2, 9));
        for i in 0..7 {
            for j in 0..9 {
                let ((r0, r1), (c0, c1)) = (clipped_around(i, 1, 7), clipped_around(j, 2, 9));
                let direct: f64 = (r0..r1).flat_map(|r| (c0..c1).map(move |c| (r * 10 + c) as f64)).sum();
                assert_eq!(s[[i, j]], direct);
            }
        }
    }
}
