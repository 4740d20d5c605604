//! Dispersion from the image itself: the a2/a3 that make the depth profiles
//! sharpest.
//!
//! Sharpness metric: Shannon entropy of the normalised intensity
//! p_i = |A_i|²/Σ|A|² over the depth pixels of a set of bright A-lines,
//! minimised (the entropy criterion for numerical dispersion compensation,
//! Wojtkowski et al. 2004, Opt. Express 12:2404; sharpness metrics of this
//! family: Marks et al. 2003, Appl. Opt. 42:3038). The fringes are
//! background-subtracted and resampled once; each trial only multiplies by
//! exp(−i·(a2·x² + a3·x³)) × window, transforms and sums. The optimiser is a
//! coarse grid on each coefficient followed by a compass (pattern) search
//! with halving steps, derivative-free.

use anyhow::{bail, Result};
use ndarray::{Array2, ArrayView2};
use rayon::prelude::*;
use rustfft::num_complex::Complex64;
use rustfft::FftPlanner;
use serde::Serialize;
use std::sync::Arc;
use std::time::Instant;

use crate::io::capture::Capture;
use crate::physics::{self, DispersionEquivalent};
use crate::pipeline::config::{DispersionMethod, PipelineConfig};
use crate::pipeline::plan::{CaptureGeometry, Plan};
use crate::stages::dispersion::normalised_coordinate;

/// The median bright A-line's peak must stand this far above its noise
/// floor (median dB) for an estimate.
pub const MIN_PEAK_OVER_FLOOR_DB: f64 = 15.0;
/// Points of the coarse grid over each coefficient's range.
const COARSE_POINTS: usize = 41;
/// The pattern search stops when both steps are below this, rad.
const FINE_STEP_RAD: f64 = 0.02;

/// Resampled fringes of some A-lines, ready for trial dispersion settings.
pub struct FringeSet {
    fringes: Array2<f64>,
    gain: Vec<f64>,
    x2: Vec<f64>,
    x3: Vec<f64>,
    fft: Arc<dyn rustfft::Fft<f64>>,
    first_bin: usize,
    depth: usize,
    scale: f64,
}

impl FringeSet {
    /// The chosen `lines` of `frame`, processed by `plan`'s stages before
    /// dispersion. The plan's own dispersion (if any) is ignored.
    pub fn new(plan: &Plan, frame: ArrayView2<'_, f64>, lines: &[usize]) -> Self {
        let s = &plan.summary;
        let n = s.k_samples;
        let x: Vec<f64> = (0..n).map(|j| normalised_coordinate(j, n)).collect();
        FringeSet {
            fringes: plan.resampled_fringes(frame, lines),
            gain: plan.spectral_gain(),
            x2: x.iter().map(|v| v * v).collect(),
            x3: x.iter().map(|v| v * v * v).collect(),
            fft: FftPlanner::new().plan_fft_forward(s.fft_length),
            first_bin: s.first_depth_bin,
            depth: s.depth_pixels,
            scale: plan.amplitude_scale(),
        }
    }

    pub fn lines(&self) -> usize {
        self.fringes.nrows()
    }

    /// Complex spectral factor exp(−iφ_c)·gain per k sample.
    fn factor(&self, a2: f64, a3: f64) -> Vec<Complex64> {
        self.gain
            .iter()
            .zip(self.x2.iter().zip(self.x3.iter()))
            .map(|(g, (x2, x3))| Complex64::from_polar(*g, -(a2 * x2 + a3 * x3)))
            .collect()
    }

    /// Amplitude |A| of every line's kept depth pixels (lines × depth),
    /// scaled like the pipeline's output.
    pub fn amplitudes(&self, a2: f64, a3: f64) -> Array2<f64> {
        let factor = self.factor(a2, a3);
        let mut out = Array2::<f64>::zeros((self.lines(), self.depth));
        let len = self.fft.len();
        let n = self.fringes.ncols();
        let fringes = self.fringes.as_slice().expect("standard layout");
        out.as_slice_mut().expect("standard layout").par_chunks_mut(self.depth).zip(fringes.par_chunks(n)).for_each_init(
            || (vec![Complex64::new(0.0, 0.0); len], vec![Complex64::new(0.0, 0.0); self.fft.get_inplace_scratch_len()]),
            |(buf, scratch), (row, fringe)| {
                for (b, (f, c)) in buf.iter_mut().zip(fringe.iter().zip(factor.iter())) {
                    *b = c * *f;
                }
                buf[fringe.len()..].fill(Complex64::new(0.0, 0.0));
                self.fft.process_with_scratch(buf, scratch);
                for (r, v) in row.iter_mut().zip(buf[self.first_bin..self.first_bin + self.depth].iter()) {
                    *r = v.norm() * self.scale;
                }
            },
        );
        out
    }

    /// Shannon entropy (nats) of the normalised intensity of all lines.
    pub fn entropy(&self, a2: f64, a3: f64) -> f64 {
        entropy(&self.amplitudes(a2, a3))
    }
}

/// Shannon entropy −Σ p·ln p of p = |A|²/Σ|A|² over all values.
pub fn entropy(amplitude: &Array2<f64>) -> f64 {
    let total: f64 = amplitude.iter().map(|a| a * a).sum();
    if total <= 0.0 {
        return 0.0;
    }
    -amplitude
        .iter()
        .map(|a| {
            let p = a * a / total;
            if p > 0.0 {
                p * p.ln()
            } else {
                0.0
            }
        })
        .sum::<f64>()
}

/// Median over lines of (peak dB − median dB) of each line's amplitude.
pub fn peak_over_floor_db(amplitude: &Array2<f64>) -> f64 {
    let mut per_line: Vec<f64> = amplitude
        .rows()
        .into_iter()
        .map(|row| {
            let mut v: Vec<f64> = row.to_vec();
            let peak = v.iter().copied().fold(0.0, f64::max);
            let floor = crate::stages::background::median_in_place(&mut v);
            20.0 * (peak.max(1e-300) / floor.max(1e-300)).log10()
        })
        .collect();
    crate::stages::background::median_in_place(&mut per_line)
}

/// The `count` A-lines with the most fringe energy (sorted by index).
pub fn brightest_lines(plan: &Plan, frame: ArrayView2<'_, f64>, count: usize) -> Vec<usize> {
    let all: Vec<usize> = (0..frame.nrows()).collect();
    let fringes = plan.resampled_fringes(frame, &all);
    let mut energy: Vec<(usize, f64)> = fringes.rows().into_iter().enumerate().map(|(i, r)| (i, r.iter().map(|v| v * v).sum())).collect();
    energy.sort_by(|a, b| b.1.total_cmp(&a.1).then(a.0.cmp(&b.0)));
    let mut chosen: Vec<usize> = energy.iter().take(count).map(|e| e.0).collect();
    chosen.sort_unstable();
    chosen
}

/// Result of an automatic dispersion estimate (recorded in log.json).
#[derive(Debug, Clone, Serialize)]
pub struct DispersionEstimate {
    pub a2_rad: f64,
    pub a3_rad: f64,
    /// Entropy at the estimate and with no correction, nats.
    pub entropy: f64,
    pub entropy_uncorrected: f64,
    /// Median bright-line peak over floor at the estimate, dB.
    pub peak_over_floor_db: f64,
    pub frame: usize,
    pub alines_used: usize,
    pub evaluations: usize,
    /// The estimate lies on the edge of a search range.
    pub at_range_limit: bool,
    pub seconds: f64,
    /// a2 in physical units over the capture's band.
    pub equivalent: DispersionEquivalent,
}

/// Derivative-free minimisation of `f(a2, a3)` over the ranges: a coarse
/// grid on a2 (a3 = 0), then on a3, then a compass search with halving
/// steps. Returns the best point, its value and the number of evaluations.
pub fn minimise(f: impl Fn(f64, f64) -> f64, a2_range: [f64; 2], a3_range: [f64; 2]) -> ((f64, f64), f64, usize) {
    let mut evaluations = 0;
    let mut eval = |a2: f64, a3: f64| {
        evaluations += 1;
        f(a2, a3)
    };
    let grid = |r: [f64; 2], i: usize| r[0] + (r[1] - r[0]) * i as f64 / (COARSE_POINTS - 1) as f64;
    let clamp0 = |r: [f64; 2]| 0.0f64.clamp(r[0], r[1]);
    let mut best = (clamp0(a2_range), clamp0(a3_range));
    let mut best_value = eval(best.0, best.1);
    for axis in 0..2 {
        let range = if axis == 0 { a2_range } else { a3_range };
        if range[1] <= range[0] {
            continue;
        }
        for i in 0..COARSE_POINTS {
            let p = if axis == 0 { (grid(range, i), best.1) } else { (best.0, grid(range, i)) };
            let v = eval(p.0, p.1);
            if v < best_value {
                best_value = v;
                best = p;
            }
        }
    }
    let mut step = [(a2_range[1] - a2_range[0]) / (COARSE_POINTS - 1) as f64, (a3_range[1] - a3_range[0]) / (COARSE_POINTS - 1) as f64];
    let mut rounds = 0;
    while (step[0] > FINE_STEP_RAD || step[1] > FINE_STEP_RAD) && rounds < 400 {
        rounds += 1;
        let mut moved = false;
        for axis in 0..2 {
            if step[axis] <= FINE_STEP_RAD {
                continue;
            }
            for dir in [-1.0, 1.0] {
                let mut p = best;
                if axis == 0 {
                    p.0 = (p.0 + dir * step[0]).clamp(a2_range[0], a2_range[1]);
                } else {
                    p.1 = (p.1 + dir * step[1]).clamp(a3_range[0], a3_range[1]);
                }
                if p == best {
                    continue;
                }
                let v = eval(p.0, p.1);
                if v < best_value {
                    best_value = v;
                    best = p;
                    moved = true;
                    break;
                }
            }
        }
        if !moved {
            step[0] *= 0.5;
            step[1] *= 0.5;
        }
    }
    (best, best_value, evaluations)
}

/// The frame the estimate uses: the configured one or the middle frame.
pub fn search_frame(config: &PipelineConfig, frames: usize) -> Result<usize> {
    let f = config.dispersion.search_frame.unwrap_or(frames / 2);
    if f >= frames {
        bail!("dispersion.search_frame = {f} but the capture has {frames} frames");
    }
    Ok(f)
}

/// The estimate for a capture file, as `fringeflow dispersion estimate`
/// makes it: the given frame, or the pipeline's, else the middle one; the
/// source spectrum from the background, else that frame's mean spectrum
/// when shaping needs it.
pub fn estimate_file(path: &std::path::Path, config: &PipelineConfig, frame: Option<usize>) -> Result<DispersionEstimate> {
    let capture = crate::open::open_capture(path, &config.input)?;
    let frame = match frame {
        Some(f) if f >= capture.frames => bail!("frame {f} does not exist (the capture has {} frames)", capture.frames),
        Some(f) => f,
        None => search_frame(config, capture.frames)?,
    };
    let mut source = capture.background.clone();
    if source.is_none() && config.shaping.enabled {
        let mut first = Array2::<f64>::zeros(capture.frame_shape());
        capture.read_frame(frame, &mut first)?;
        source = Some(crate::stages::background::mean_spectrum(first.view()));
    }
    estimate(&capture, config, frame, source.as_deref())
}

/// Estimates a2/a3 for an opened capture with a pipeline's other settings.
pub fn estimate(capture: &Capture, config: &PipelineConfig, frame: usize, source_spectrum: Option<&[f64]>) -> Result<DispersionEstimate> {
    let start = Instant::now();
    let mut cfg = config.clone();
    cfg.dispersion.method = DispersionMethod::Fixed;
    cfg.dispersion.a2 = 0.0;
    cfg.dispersion.a3 = 0.0;
    let plan = Plan::new(
        &cfg,
        CaptureGeometry { wavelength_nm: &capture.wavelength_nm, background: capture.background.as_deref(), source_spectrum },
    )?;
    let mut spectra = Array2::<f64>::zeros(capture.frame_shape());
    capture.read_frame(frame, &mut spectra)?;
    let lines = brightest_lines(&plan, spectra.view(), config.dispersion.search_alines);
    let set = FringeSet::new(&plan, spectra.view(), &lines);
    let d = &config.dispersion;
    let ((a2, a3), value, evaluations) = minimise(|a2, a3| set.entropy(a2, a3), d.a2_range, d.a3_range);
    let peak_over_floor = peak_over_floor_db(&set.amplitudes(a2, a3));
    if peak_over_floor.is_nan() || peak_over_floor < MIN_PEAK_OVER_FLOOR_DB {
        bail!(
            "no reflector bright enough to estimate dispersion from in frame {frame}: the brightest A-lines peak {peak_over_floor:.1} dB above their noise floor (need {MIN_PEAK_OVER_FLOOR_DB} dB)"
        );
    }
    let edge = |v: f64, r: [f64; 2]| r[1] > r[0] && ((v - r[0]).abs() < 1e-9 || (v - r[1]).abs() < 1e-9);
    let s = &plan.summary;
    Ok(DispersionEstimate {
        a2_rad: a2,
        a3_rad: a3,
        entropy: value,
        entropy_uncorrected: set.entropy(0.0, 0.0),
        peak_over_floor_db: peak_over_floor,
        frame,
        alines_used: lines.len(),
        evaluations,
        at_range_limit: edge(a2, d.a2_range) || edge(a3, d.a3_range),
        seconds: start.elapsed().as_secs_f64(),
        equivalent: physics::dispersion_equivalent(a2, s.k_min_per_um, s.k_max_per_um),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn minimiser_finds_a_quadratic_bowl() {
        let f = |a: f64, b: f64| (a - 37.3).powi(2) + 3.0 * (b + 12.6).powi(2) + 0.5 * (a - 37.3) * (b + 12.6);
        let ((a, b), _, n) = minimise(f, [-300.0, 300.0], [-150.0, 150.0]);
        assert!((a - 37.3).abs() < 0.05 && (b + 12.6).abs() < 0.05, "{a} {b}");
        assert!(n < 1000, "{n} evaluations");
    }

    #[test]
    fn entropy_of_a_single_spike_is_zero_and_of_a_flat_line_ln_n() {
        let mut spike = Array2::<f64>::zeros((1, 100));
        spike[[0, 7]] = 3.0;
        assert!(entropy(&spike).abs() < 1e-12);
        let flat = Array2::<f64>::from_elem((1, 100), 2.0);
        assert!((entropy(&flat) - (100f64).ln()).abs() < 1e-12);
    }
}
