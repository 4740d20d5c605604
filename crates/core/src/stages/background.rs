//! Background stage: removes the reference-arm spectrum (the "DC") and the
//! camera's fixed-pattern noise by subtracting a reference spectrum.
//!
//! The reference is either the mean of spectra recorded with the sample arm
//! blocked (stored in the capture), or estimated from the frame itself as the
//! mean or the median over its A-lines; the median resists bright structures
//! (Moon, Lee & Chen 2010, Opt. Express 18:24395).

use ndarray::{ArrayView2, Axis};
use rayon::prelude::*;

use super::{ALine, FrameContext, Stage};

/// Where the reference spectrum comes from.
#[derive(Debug, Clone)]
pub enum BackgroundSource {
    /// A fixed spectrum (the capture's blocked-sample-arm recording, averaged).
    Fixed(Vec<f64>),
    /// Mean over the frame's A-lines.
    FrameMean,
    /// Median over the frame's A-lines.
    FrameMedian,
}

#[derive(Debug, Clone)]
pub struct Background {
    pub source: BackgroundSource,
}

/// Mean over rows (axis 0) of a (rows × pixels) array.
pub fn mean_spectrum(rows: ArrayView2<'_, f64>) -> Vec<f64> {
    rows.mean_axis(Axis(0)).map(|m| m.to_vec()).unwrap_or_default()
}

/// Median over rows of a (rows × pixels) array; for an even count the mean of
/// the two middle values (the NumPy convention).
pub fn median_spectrum(rows: ArrayView2<'_, f64>) -> Vec<f64> {
    let n = rows.nrows();
    if n == 0 {
        return Vec::new();
    }
    (0..rows.ncols())
        .into_par_iter()
        .map_init(
            || Vec::with_capacity(n),
            |column, p| {
                if crate::interrupt::requested() {
                    return f64::NAN; // the frame in flight is discarded
                }
                column.clear();
                column.extend(rows.column(p).iter().copied());
                median_in_place(column)
            },
        )
        .collect()
}

/// Median of a slice (reordered in place), NumPy convention for even lengths.
pub fn median_in_place(values: &mut [f64]) -> f64 {
    let n = values.len();
    let mid = n / 2;
    let (lower, upper_mid, _) = values.select_nth_unstable_by(mid, f64::total_cmp);
    let upper = *upper_mid;
    if n % 2 == 1 {
        upper
    } else {
        let below = lower.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        0.5 * (below + upper)
    }
}

impl Stage for Background {
    fn name(&self) -> &'static str {
        "background"
    }

    fn begin_frame(&self, frame: ArrayView2<'_, f64>, ctx: &mut FrameContext) {
        ctx.reference = match &self.source {
            BackgroundSource::Fixed(spectrum) => spectrum.clone(),
            BackgroundSource::FrameMean => mean_spectrum(frame),
            BackgroundSource::FrameMedian => median_spectrum(frame),
        };
    }

    fn apply(&self, ctx: &FrameContext, line: &mut ALine) {
        for (s, r) in line.spectrum.iter_mut().zip(ctx.reference.iter()) {
            *s -= r;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    #[test]
    fn median_follows_numpy_convention() {
        // numpy.median([3, 1, 2, 10]) = 2.5; numpy.median([5, 1, 9]) = 5.
        assert_eq!(median_in_place(&mut [3.0, 1.0, 2.0, 10.0]), 2.5);
        assert_eq!(median_in_place(&mut [5.0, 1.0, 9.0]), 5.0);
    }

    #[test]
    fn median_spectrum_ignores_one_bright_line() {
        let frame = array![[1.0, 2.0], [1.0, 2.0], [100.0, 200.0], [1.0, 2.0], [1.0, 2.0]];
        assert_eq!(median_spectrum(frame.view()), vec![1.0, 2.0]);
        let mean = mean_spectrum(frame.view());
        assert!((mean[0] - 20.8).abs() < 1e-12);
    }
}
