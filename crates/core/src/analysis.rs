//! Measuring depth profiles: peaks, FWHM, side lobes, polynomial fits.
//!
//! Used by the tests to compare reconstructions with ground truth and
//! published values, and by later measurement commands. Profiles are linear
//! amplitudes |A| sampled on a uniform depth grid.

/// Index and value of the largest sample in `profile[from..to]`.
pub fn peak(profile: &[f64], from: usize, to: usize) -> (usize, f64) {
    let to = to.min(profile.len());
    profile[from..to]
        .iter()
        .enumerate()
        .fold((from, f64::NEG_INFINITY), |(bi, bv), (i, &v)| if v > bv { (from + i, v) } else { (bi, bv) })
}

/// Sub-pixel position of a peak from a parabola through the peak sample and
/// its neighbours (in samples).
pub fn peak_position(profile: &[f64], index: usize) -> f64 {
    if index == 0 || index + 1 >= profile.len() {
        return index as f64;
    }
    let (a, b, c) = (profile[index - 1], profile[index], profile[index + 1]);
    let denom = a - 2.0 * b + c;
    if denom == 0.0 {
        index as f64
    } else {
        index as f64 + 0.5 * (a - c) / denom
    }
}

/// Full width at half maximum (in samples) of the peak at `index`, with the
/// half-maximum crossings found by linear interpolation between samples.
pub fn fwhm(profile: &[f64], index: usize) -> Option<f64> {
    let half = profile[index] / 2.0;
    let mut left = None;
    for i in (0..index).rev() {
        if profile[i] <= half {
            let t = (half - profile[i]) / (profile[i + 1] - profile[i]);
            left = Some(i as f64 + t);
            break;
        }
    }
    let mut right = None;
    for i in index + 1..profile.len() {
        if profile[i] <= half {
            let t = (profile[i - 1] - half) / (profile[i - 1] - profile[i]);
            right = Some((i - 1) as f64 + t);
            break;
        }
    }
    Some(right? - left?)
}

/// Highest side lobe of the peak at `index`, in dB relative to the peak:
/// the largest local maximum outside the main lobe (bounded by the first
/// local minima on either side) within `reach` samples.
pub fn highest_side_lobe_db(profile: &[f64], index: usize, reach: usize) -> Option<f64> {
    let mut l = index;
    while l > 0 && profile[l - 1] < profile[l] {
        l -= 1;
    }
    let mut r = index;
    while r + 1 < profile.len() && profile[r + 1] < profile[r] {
        r += 1;
    }
    let lo = index.saturating_sub(reach);
    let hi = (index + reach).min(profile.len() - 1);
    let mut best: Option<f64> = None;
    for i in lo.max(1)..hi {
        if (i < l || i > r) && profile[i] >= profile[i - 1] && profile[i] >= profile[i + 1] {
            best = Some(best.map_or(profile[i], |b: f64| b.max(profile[i])));
        }
    }
    best.map(|b| 20.0 * (b / profile[index]).log10())
}

/// Least-squares polynomial fit of degree `degree`; returns coefficients
/// c0, c1, … (lowest order first). Normal equations on centred data, solved
/// by Gaussian elimination with partial pivoting; fine for low degrees on
/// well-scaled abscissae.
pub fn polyfit(x: &[f64], y: &[f64], degree: usize) -> Vec<f64> {
    polyfit_weighted(x, y, None, degree)
}

/// Weighted least-squares polynomial fit: minimises Σ w·(y − p(x))²
/// (w = 1 when `weights` is None).
pub fn polyfit_weighted(x: &[f64], y: &[f64], weights: Option<&[f64]>, degree: usize) -> Vec<f64> {
    let m = degree + 1;
    let mut a = vec![vec![0.0; m + 1]; m];
    for (i, (&xi, &yi)) in x.iter().zip(y.iter()).enumerate() {
        let w = weights.map_or(1.0, |w| w[i]);
        let powers: Vec<f64> = (0..2 * m).map(|p| xi.powi(p as i32)).collect();
        for r in 0..m {
            for c in 0..m {
                a[r][c] += w * powers[r + c];
            }
            a[r][m] += w * powers[r] * yi;
        }
    }
    for col in 0..m {
        let pivot = (col..m).max_by(|&i, &j| a[i][col].abs().total_cmp(&a[j][col].abs())).unwrap();
        a.swap(col, pivot);
        for r in 0..m {
            if r != col {
                let f = a[r][col] / a[col][col];
                let pivot_row = a[col].clone();
                for (v, p) in a[r].iter_mut().zip(pivot_row.iter()).skip(col) {
                    *v -= f * p;
                }
            }
        }
    }
    (0..m).map(|r| a[r][m] / a[r][r]).collect()
}

/// Linear amplitude of a dB value (20·log10 convention).
pub fn amplitude_from_db(db: f64) -> f64 {
    10f64.powf(db / 20.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fwhm_of_a_sampled_gaussian() {
        // Gaussian of FWHM 10 samples: exp(−4 ln2 (x/10)²).
        let g: Vec<f64> = (0..101).map(|i| (-4.0 * 2f64.ln() * ((i as f64 - 50.0) / 10.0).powi(2)).exp()).collect();
        let w = fwhm(&g, 50).unwrap();
        assert!((w - 10.0).abs() < 0.05, "{w}");
        assert!((peak_position(&g, 50) - 50.0).abs() < 1e-12);
    }

    #[test]
    fn polyfit_recovers_a_cubic() {
        let x: Vec<f64> = (0..50).map(|i| i as f64 / 49.0 - 0.5).collect();
        let y: Vec<f64> = x.iter().map(|&t| 1.0 - 2.0 * t + 30.0 * t * t - 7.0 * t * t * t).collect();
        let c = polyfit(&x, &y, 3);
        for (got, want) in c.iter().zip([1.0, -2.0, 30.0, -7.0]) {
            assert!((got - want).abs() < 1e-9, "{c:?}");
        }
    }
}
