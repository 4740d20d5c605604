//! Motion contrast from N ≥ 2 repeated (registered) B-scans of one position.
//!
//! - Amplitude decorrelation: D = 1 − (1/(N−1))·Σₙ AₙAₙ₊₁ / (½(Aₙ² + Aₙ₊₁²));
//!   split-spectrum: the mean of D over Gaussian sub-bands of the spectrum
//!   (Jia et al. 2012, Opt. Express 20:4710).
//! - Speckle variance: (1/N)·Σₙ (Xₙ − X̄)² of the intensity X in dB, or of
//!   |A|² divided by its mean over the repeats, squared (Mariampillai et
//!   al. 2008, Opt. Lett. 33:1530).
//! - Complex difference (phase-sensitive): C = Σₙ |Aₙ₊₁e^{−iφₙ} − Aₙ|² /
//!   Σₙ (|Aₙ|² + |Aₙ₊₁|²), φₙ the bulk phase between the repeats of each
//!   A-line ([`super::phase`], pooled over neighbouring A-lines): 0 for a
//!   static reflector, 1 for
//!   independent speckle.
//!
//! Noise bias: static tissue decorrelates only through noise, and the
//! decorrelation of a static pixel grows as its SNR falls (to first order
//! D ≈ 1/(2·SNR), SNR = |A|²/E|n|², derived from A = |S + n|); pure noise
//! reaches the value of fully decorrelated speckle, D = 1 − π/4 ≈ 0.215
//! (independent exponential intensities: the fraction A₁²/(A₁²+A₂²) is
//! uniform on [0, 1]). So pixels whose mean amplitude over the repeats is
//! below the noise floor + `threshold_db` are masked (NaN).

use ndarray::{Array2, ArrayView2, Zip};
use rayon::prelude::*;
use rustfft::num_complex::{Complex32, Complex64};

use super::fft2::transposed;
use super::phase::{pooled_bulk_phases, PhaseHistogram};
use crate::pipeline::config::{AngiographyConfig, IntensityScale, Projection};

/// Amplitude decorrelation of the repeats' amplitudes (each depth × A-lines).
pub fn decorrelation(amplitudes: &[ArrayView2<'_, f32>]) -> Array2<f32> {
    let n = amplitudes.len();
    assert!(n >= 2);
    let (depth, alines) = amplitudes[0].dim();
    let rows: Vec<_> = amplitudes.iter().map(|m| m.as_standard_layout()).collect();
    let slices: Vec<&[f32]> = rows.iter().map(|m| m.as_slice().expect("standard layout")).collect();
    let mut out = Array2::<f32>::zeros((depth, alines));
    out.as_slice_mut().expect("standard layout").par_chunks_mut(alines).enumerate().for_each(|(d, o)| {
        let r = d * alines..(d + 1) * alines;
        let mut s = vec![0.0f64; alines];
        for w in slices.windows(2) {
            for ((acc, &x), &y) in s.iter_mut().zip(&w[0][r.clone()]).zip(&w[1][r.clone()]) {
                let (x, y) = (x as f64, y as f64);
                let den = 0.5 * (x * x + y * y);
                *acc += if den > 0.0 { x * y / den } else { 1.0 };
            }
        }
        for (v, acc) in o.iter_mut().zip(&s) {
            *v = (1.0 - acc / (n - 1) as f64) as f32;
        }
    });
    out
}

/// Speckle variance of the repeats' amplitudes.
pub fn speckle_variance(amplitudes: &[ArrayView2<'_, f32>], scale: IntensityScale) -> Array2<f32> {
    let n = amplitudes.len() as f64;
    let (depth, alines) = amplitudes[0].dim();
    let rows: Vec<_> = amplitudes.iter().map(|m| m.as_standard_layout()).collect();
    let slices: Vec<&[f32]> = rows.iter().map(|m| m.as_slice().expect("standard layout")).collect();
    let mut out = Array2::<f32>::zeros((depth, alines));
    out.as_slice_mut().expect("standard layout").par_chunks_mut(alines).enumerate().for_each(|(d, o)| {
        let base = d * alines;
        let mut x = vec![0.0f64; slices.len()];
        for (j, v) in o.iter_mut().enumerate() {
            for (xi, m) in x.iter_mut().zip(&slices) {
                let i = (m[base + j] as f64).powi(2);
                *xi = match scale {
                    IntensityScale::Db => 10.0 * i.max(1e-24).log10(),
                    IntensityScale::Linear => i,
                };
            }
            let mean = x.iter().sum::<f64>() / n;
            let var = x.iter().map(|xi| (xi - mean).powi(2)).sum::<f64>() / n;
            *v = match scale {
                IntensityScale::Db => var,
                IntensityScale::Linear => {
                    if mean > 0.0 {
                        var / (mean * mean)
                    } else {
                        0.0
                    }
                }
            } as f32;
        }
    });
    out
}

/// Normalised complex difference of the repeats (each depth × A-lines),
/// the bulk phase of each pair removed per A-line. Pixels above
/// `bulk_min_power` (|A₁||A₂|) estimate the bulk phase.
pub fn complex_difference(frames: &[ArrayView2<'_, Complex32>], bulk_min_power: f32, pool: usize) -> Array2<f32> {
    let (depth, alines) = frames[0].dim();
    let lines: Vec<Array2<Complex32>> = frames.iter().map(|f| transposed(&f.to_owned())).collect();
    // Bulk phase of each repeat pair and A-line, pooled over neighbouring A-lines.
    let bulks: Vec<Vec<f64>> = lines
        .windows(2)
        .map(|w| {
            let h: Vec<PhaseHistogram> = (0..alines)
                .into_par_iter()
                .map(|a| PhaseHistogram::of(w[0].row(a).iter().zip(w[1].row(a).iter()).map(|(x, y)| y * x.conj()), bulk_min_power))
                .collect();
            pooled_bulk_phases(&h, pool)
        })
        .collect();
    let mut out = Array2::<f32>::zeros((alines, depth));
    out.axis_iter_mut(ndarray::Axis(0)).into_par_iter().enumerate().for_each(|(a, mut row)| {
        let mut num = vec![0.0f64; depth];
        let mut den = vec![0.0f64; depth];
        for (k, w) in lines.windows(2).enumerate() {
            let undo = Complex64::from_polar(1.0, -bulks[k][a]);
            for (d, (x, y)) in w[0].row(a).iter().zip(w[1].row(a).iter()).enumerate() {
                let (x, y) = (Complex64::new(x.re as f64, x.im as f64), Complex64::new(y.re as f64, y.im as f64));
                num[d] += (y * undo - x).norm_sqr();
                den[d] += x.norm_sqr() + y.norm_sqr();
            }
        }
        for (v, (n, d)) in row.iter_mut().zip(num.iter().zip(&den)) {
            *v = if *d > 0.0 { (n / d) as f32 } else { 0.0 };
        }
    });
    transposed(&out)
}

/// Sets to NaN the pixels whose structure (dB of the mean amplitude over
/// the repeats) is below `threshold_db`, and a margin of rows and columns
/// at each edge (content wrapped around by registration).
pub fn mask(values: &mut Array2<f32>, structure_db: ArrayView2<'_, f32>, threshold_db: f64, margin: (usize, usize)) {
    let (depth, alines) = values.dim();
    Zip::indexed(values).and(structure_db).par_for_each(|(d, a), v, &s| {
        let edge = d < margin.0 || d + margin.0 >= depth || a < margin.1 || a + margin.1 >= alines;
        if (s as f64) < threshold_db || edge {
            *v = f32::NAN;
        }
    });
}

/// Gaussian sub-band windows over the k grid for split-spectrum
/// angiography: `bands` centres evenly spaced across the band (at
/// (m + ½)/bands of it), each of FWHM `fwhm` × the band.
pub fn sub_band_windows(k_samples: usize, bands: usize, fwhm: f64) -> Vec<Vec<f64>> {
    let sigma = fwhm * (k_samples - 1) as f64 / (2.0 * (2.0 * std::f64::consts::LN_2).sqrt());
    (0..bands)
        .map(|m| {
            let centre = (m as f64 + 0.5) / bands as f64 * (k_samples - 1) as f64;
            (0..k_samples).map(|j| (-0.5 * ((j as f64 - centre) / sigma).powi(2)).exp()).collect()
        })
        .collect()
}

/// First depth pixel of each A-line whose structure dB reaches
/// `threshold_db`, median-filtered over 9 A-lines (the surface); None
/// where no pixel does.
pub fn surface(structure_db: ArrayView2<'_, f32>, threshold_db: f64) -> Vec<Option<usize>> {
    let (_, alines) = structure_db.dim();
    // Row by row from the top (contiguous reads), stopping once every
    // A-line has its surface.
    let mut raw: Vec<Option<usize>> = vec![None; alines];
    let mut left = alines;
    let t = threshold_db as f32;
    for (d, row) in structure_db.outer_iter().enumerate() {
        for (r, &v) in raw.iter_mut().zip(row.iter()) {
            if r.is_none() && v >= t {
                *r = Some(d);
                left -= 1;
            }
        }
        if left == 0 {
            break;
        }
    }
    (0..alines)
        .map(|a| {
            let mut near: Vec<usize> = raw[a.saturating_sub(4)..(a + 5).min(alines)].iter().flatten().copied().collect();
            if near.is_empty() || raw[a].is_none() {
                return raw[a];
            }
            near.sort_unstable();
            Some(near[near.len() / 2])
        })
        .collect()
}

/// En face projection of a flow image over each A-line's slab of rows
/// [start, end): mean or maximum of the unmasked values (NaN when none).
pub fn en_face(values: ArrayView2<'_, f32>, slabs: &[(usize, usize)], projection: Projection) -> Vec<f32> {
    // Row by row over the rows any slab covers (contiguous reads).
    let top = slabs.iter().map(|s| s.0).min().unwrap_or(0);
    let bottom = slabs.iter().map(|s| s.1).max().unwrap_or(0).min(values.nrows());
    let mut sum = vec![0.0f64; slabs.len()];
    let mut count = vec![0usize; slabs.len()];
    let mut max = vec![f32::NAN; slabs.len()];
    for d in top..bottom.max(top) {
        for (a, &v) in values.row(d).iter().enumerate() {
            let (lo, hi) = slabs[a];
            if d >= lo && d < hi && !v.is_nan() {
                sum[a] += v as f64;
                count[a] += 1;
                if max[a].is_nan() || v > max[a] {
                    max[a] = v;
                }
            }
        }
    }
    match projection {
        Projection::Mean => sum.iter().zip(&count).map(|(s, &n)| if n == 0 { f32::NAN } else { (s / n as f64) as f32 }).collect(),
        Projection::Max => max,
    }
}

/// Rows of each A-line's en face slab for a B-scan of `depth_um` (µm per
/// row): the configured depths, from zero delay or from the surface.
pub fn slabs(config: &AngiographyConfig, depth_um: &[f64], surface: &[Option<usize>]) -> Vec<(usize, usize)> {
    let rows = depth_um.len();
    let first = |z: f64| depth_um.iter().position(|&d| d >= z).unwrap_or(rows);
    surface
        .iter()
        .map(|s| match (config.en_face_depth_um, config.en_face_from_surface) {
            (None, false) => (0, rows),
            (None, true) => (s.unwrap_or(rows), rows),
            (Some([a, b]), false) => (first(a), first(b)),
            (Some([a, b]), true) => match s {
                Some(s) => {
                    let z0 = depth_um[*s];
                    (first(z0 + a), first(z0 + b))
                }
                None => (rows, rows),
            },
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn decorrelation_of_identical_and_of_independent_speckle() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(3);
        let (d, a) = (200, 200);
        // Rayleigh amplitudes: |complex Gaussian|.
        let mut speckle = || Array2::from_shape_fn((d, a), |_| {
            let (x, y): (f64, f64) = (rng.sample(rand_distr::StandardNormal), rng.sample(rand_distr::StandardNormal));
            (x * x + y * y).sqrt() as f32
        });
        let s0 = speckle();
        let same = decorrelation(&[s0.view(), s0.view(), s0.view()]);
        assert!(same.iter().all(|&v| v.abs() < 1e-6));
        let (s1, s2) = (speckle(), speckle());
        let independent = decorrelation(&[s0.view(), s1.view(), s2.view()]);
        let mean = independent.iter().map(|&v| v as f64).sum::<f64>() / independent.len() as f64;
        // 1 − π/4 for independent Rayleigh amplitudes (derived in the module comment).
        assert!((mean - (1.0 - std::f64::consts::FRAC_PI_4)).abs() < 0.005, "{mean}");
    }

    #[test]
    fn complex_difference_ignores_a_bulk_phase_and_sees_a_change() {
        let (d, a) = (50, 8);
        let base = Array2::from_shape_fn((d, a), |(i, j)| Complex32::from_polar(5.0 + (i % 3) as f32, (i * 7 + j * 3) as f32));
        let shifted = base.mapv(|c| c * Complex32::from_polar(1.0, 1.3));
        let c = complex_difference(&[base.view(), shifted.view()], 1.0, 1);
        assert!(c.iter().all(|&v| v < 1e-6), "{c:?}");
        let mut changed = shifted.clone();
        changed[[10, 2]] = Complex32::from_polar(6.0, 0.2);
        let c = complex_difference(&[base.view(), changed.view()], 1.0, 1);
        assert!(c[[10, 2]] > 0.1 && c[[11, 2]] < 1e-6);
    }
}
