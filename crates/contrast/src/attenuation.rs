//! Depth-resolved attenuation coefficient of one B-scan (Vermeer et al.
//! 2014, Biomed. Opt. Express 5:322): μ[i] = I[i] / (2·Σ_{j>i} I[j]·Δ_j),
//! I the linear intensity, Δ_j the pixel size in the medium (depth step in
//! air over the group index of the layer holding pixel j). The estimate
//! assumes the intensity falls only by attenuation and that the light is
//! spent within the imaging range, so before it runs: the noise floor's
//! power is subtracted, the spectrometer's roll-off is divided out when its
//! −6 dB depth is given (Gaussian fall of the amplitude, 0.5 at that depth,
//! common practice for a Gaussian pixel response), and the intensity is
//! averaged over neighbouring A-lines (speckle) before the ratio; the
//! interfaces' own reflections (EDGE_PX either side of each surface) are
//! bridged by a straight line, since the model has none. Near the
//! bottom of the range the sum below lacks the light beyond the range and
//! μ is overestimated (the paper's stated limit); the per-layer medians
//! therefore leave out the last `BOTTOM_FRACTION` of the range.

use ndarray::{Array2, ArrayView2};

/// Part of the depth range, at its bottom, left out of the per-layer medians.
pub const BOTTOM_FRACTION: f64 = 0.1;
/// Pixels next to each surface left out of the per-layer medians (the
/// interface's own reflection is not backscatter of the layer).
pub const EDGE_PX: usize = 3;

/// What the estimate needs besides the image.
pub struct AttenuationInputs<'a> {
    /// Depth in air of each image row, µm (evenly spaced).
    pub depth_um: &'a [f64],
    /// The surfaces, [surface][A-line] µm (NaN where missing).
    pub surfaces_um: &'a [Vec<f32>],
    /// Group index of each layer between consecutive surfaces, and of the
    /// medium below the last surface.
    pub group_index: &'a [f64],
    pub below_group_index: f64,
    /// A-lines averaged (odd).
    pub alines_averaged: usize,
    /// −6 dB roll-off depth, µm in air, when the roll-off is to be divided out.
    pub rolloff_6db_um: Option<f64>,
    /// The k-resampling's power transfer per row (the plan's
    /// `resampling_power_transfer`), when it is to be divided out.
    pub resampling_power: Option<&'a [f64]>,
}

/// What the intensity of each row is divided by before the ratio: the
/// Gaussian roll-off (power falls to ¼ at the −6 dB depth of the
/// amplitude) times the k-resampling's power transfer, each when given.
pub fn depth_gain(depth_um: &[f64], rolloff_6db_um: Option<f64>, resampling_power: Option<&[f64]>) -> Vec<f64> {
    depth_um
        .iter()
        .enumerate()
        .map(|(i, &z)| {
            let rolloff = match rolloff_6db_um {
                Some(z6) if z6 > 0.0 => (-2.0 * std::f64::consts::LN_2 * (z / z6).powi(2)).exp(),
                _ => 1.0,
            };
            rolloff * resampling_power.and_then(|t| t.get(i)).copied().filter(|&t| t > 1e-6).unwrap_or(1.0)
        })
        .collect()
}

/// μ in mm⁻¹ (depth × A-lines), NaN above the first surface and where an
/// A-line lacks a surface; and per layer the values inside it (EDGE_PX from
/// its surfaces, above the bottom BOTTOM_FRACTION of the range) for the
/// medians.
pub fn attenuation(db: ArrayView2<'_, f32>, floor_db: f64, inputs: &AttenuationInputs<'_>) -> (Array2<f32>, Vec<Vec<f32>>) {
    let (depth, alines) = db.dim();
    let step_mm = if inputs.depth_um.len() > 1 { (inputs.depth_um[1] - inputs.depth_um[0]) * 1e-3 } else { 1e-3 };
    let floor = 10f64.powf(floor_db / 10.0);
    // Linear intensity, floor removed, roll-off and resampling loss divided out.
    let gain = depth_gain(inputs.depth_um, inputs.rolloff_6db_um, inputs.resampling_power);
    let linear = Array2::from_shape_fn((depth, alines), |(z, a)| (10f64.powf(db[[z, a]] as f64 / 10.0) - floor).max(0.0) / gain[z]);
    let half = inputs.alines_averaged / 2;
    let n_layers = inputs.surfaces_um.len().saturating_sub(1);
    let bottom_row = ((1.0 - BOTTOM_FRACTION) * depth as f64) as usize;
    let row_of = |um: f32| ((um as f64 - inputs.depth_um[0]) / (step_mm * 1e3)).round();
    let mut mu = Array2::from_elem((depth, alines), f32::NAN);
    let mut per_layer = vec![Vec::new(); n_layers];
    let mut intensity = vec![0f64; depth];
    for a in 0..alines {
        let rows: Vec<f64> = inputs.surfaces_um.iter().map(|s| row_of(s[a])).collect();
        if inputs.surfaces_um.is_empty() || rows.iter().any(|r| !r.is_finite()) {
            continue;
        }
        let (lo, hi) = (a.saturating_sub(half), (a + half).min(alines - 1));
        for (z, v) in intensity.iter_mut().enumerate() {
            *v = (lo..=hi).map(|j| linear[[z, j]]).sum::<f64>() / (hi - lo + 1) as f64;
        }
        // The interfaces' own reflections are not backscatter of a layer
        // (the single-scattering model has none): across EDGE_PX of each
        // surface the intensity is replaced by the line between the values
        // just outside.
        for &r in &rows {
            let (lo, hi) = (r as isize - EDGE_PX as isize - 1, r as isize + EDGE_PX as isize + 1);
            if lo < 0 || hi >= depth as isize {
                continue;
            }
            let (lo, hi) = (lo as usize, hi as usize);
            let (a0, a1) = (intensity[lo], intensity[hi]);
            for z in lo + 1..hi {
                let t = (z - lo) as f64 / (hi - lo) as f64;
                intensity[z] = a0 + t * (a1 - a0);
            }
        }
        let layer_of = |z: usize| -> Option<usize> {
            let zf = z as f64;
            if zf < rows[0] {
                return None;
            }
            Some(rows.windows(2).position(|w| zf >= w[0] && zf < w[1]).unwrap_or(n_layers))
        };
        let index = |layer: usize| if layer < n_layers { inputs.group_index[layer] } else { inputs.below_group_index };
        // Σ_{j>i} I[j]·Δ_j from the bottom up.
        let mut below = 0f64;
        for z in (0..depth).rev() {
            if let Some(layer) = layer_of(z) {
                if below > 0.0 {
                    let value = intensity[z] / (2.0 * below);
                    mu[[z, a]] = value as f32;
                    if layer < n_layers && z < bottom_row && (z as f64) >= rows[layer] + EDGE_PX as f64 && (z as f64) < rows[layer + 1] - EDGE_PX as f64 {
                        per_layer[layer].push(value as f32);
                    }
                }
                below += intensity[z] * step_mm / index(layer);
            }
        }
    }
    (mu, per_layer)
}

/// Counts of values in log-spaced bins from 1e-3 to 1e3 mm⁻¹ (values
/// outside go to the end bins): the per-layer median over a whole volume
/// in bounded memory, to 0.35 % (half a bin).
#[derive(Debug, Clone)]
pub struct Histogram {
    counts: Vec<u64>,
}

const BINS: usize = 4000;
const LOG_LO: f64 = -3.0;
const LOG_HI: f64 = 3.0;

impl Default for Histogram {
    fn default() -> Self {
        Histogram { counts: vec![0; BINS] }
    }
}

impl Histogram {
    pub fn add(&mut self, values: &[f32]) {
        for &v in values {
            if v.is_finite() && v > 0.0 {
                let t = ((v as f64).log10() - LOG_LO) / (LOG_HI - LOG_LO);
                self.counts[((t * BINS as f64) as isize).clamp(0, BINS as isize - 1) as usize] += 1;
            }
        }
    }

    pub fn count(&self) -> u64 {
        self.counts.iter().sum()
    }

    /// The median (the centre of the bin holding it), None when empty.
    pub fn median(&self) -> Option<f64> {
        let n = self.count();
        if n == 0 {
            return None;
        }
        let mut seen = 0;
        for (i, &c) in self.counts.iter().enumerate() {
            seen += c;
            if 2 * seen >= n {
                return Some(10f64.powf(LOG_LO + (i as f64 + 0.5) / BINS as f64 * (LOG_HI - LOG_LO)));
            }
        }
        None
    }
}

/// The median of finite values (None when there are none).
pub fn median(values: &mut [f32]) -> Option<f64> {
    let mut v: Vec<f32> = values.iter().copied().filter(|x| x.is_finite()).collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f32::total_cmp);
    let m = v.len() / 2;
    Some(if v.len() % 2 == 1 { v[m] as f64 } else { 0.5 * (v[m - 1] as f64 + v[m] as f64) })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A medium of constant μ from its surface to far below the range:
    /// I(z) = exp(−2μz), and the estimate returns μ within 2 % (the
    /// discrete sum's own +1.6 %), as does the layer's median.
    #[test]
    fn an_exponential_decay_gives_its_coefficient() {
        let (depth, alines) = (800, 3);
        let step_um = 2.0;
        let mu_per_mm = 4.0;
        let depth_um: Vec<f64> = (0..depth).map(|z| z as f64 * step_um).collect();
        let surface = 40.0;
        let db = Array2::from_shape_fn((depth, alines), |(z, _)| {
            let d = (z as f64 * step_um - surface * step_um).max(0.0) * 1e-3;
            if z < surface as usize {
                -200.0
            } else {
                (10.0 * (-2.0 * mu_per_mm * d).exp().log10()) as f32
            }
        });
        let surfaces = vec![vec![(surface * step_um) as f32; alines], vec![(790.0 * step_um) as f32; alines]];
        let inputs = AttenuationInputs { depth_um: &depth_um, surfaces_um: &surfaces, group_index: &[1.0], below_group_index: 1.0, alines_averaged: 1, rolloff_6db_um: None, resampling_power: None };
        let (mu, mut layers) = attenuation(db.view(), -300.0, &inputs);
        // The discrete sum gives (e^{2μΔ} − 1)/(2Δ) = 1.016·μ here, less
        // the light beyond the range (e^{−11} of it at the surface).
        let at = mu[[100, 1]] as f64;
        assert!((at - mu_per_mm).abs() / mu_per_mm < 0.02, "{at}");
        let m = median(&mut layers[0]).unwrap();
        assert!((m - mu_per_mm).abs() / mu_per_mm < 0.02, "{m}");
        assert!(mu[[10, 1]].is_nan());
        let mut h = Histogram::default();
        h.add(&layers[0]);
        assert!((h.median().unwrap() - m).abs() / m < 0.004);
    }
}
