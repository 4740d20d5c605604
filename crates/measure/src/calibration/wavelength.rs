//! Spectrometer calibration from the fringe phase of mirror captures: the
//! per-pixel wavenumber (and so wavelength) map, and the residual dispersion
//! of the mirror data.
//!
//! For a mirror at depth z the background-free fringe is
//! cos(2·k(p)·z + φ_disp(k(p))). Its analytic signal (band-pass around the
//! fringe frequency, one side only: a Hilbert transform) has unwrapped phase
//! ψ(p) = ±(2·k(p)·z + φ_disp) + const. Two depths give
//! ψ2 − ψ1 = ±2·k(p)·(z2 − z1): k(p) up to scale and offset, the dispersion
//! cancelling (autocalibration of this kind: Mujat et al. 2007, J. Biomed.
//! Opt. 12:041205). Scale and offset come from two of: the wavelength at the
//! middle pixel, the span of the band, the mirror depths. One mirror at a
//! known depth also works, but then its dispersion is folded into the map.

use anyhow::{anyhow, bail, Context, Result};
use ndarray::Array2;
use rustfft::num_complex::Complex64;
use rustfft::FftPlanner;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};

use crate::analysis::polyfit;
use crate::io::hash;
use crate::physics::{self, DispersionEquivalent};
use crate::pipeline::config::PipelineConfig;

/// Identifies our calibration files.
pub const FORMAT: &str = "fringeflow-wavelength-calibration";
/// A fringe peak must stand this far (dB) above the median of the fringe
/// spectrum to be used.
pub const MIN_FRINGE_SNR_DB: f64 = 20.0;
/// Pixels whose fringe amplitude (the weaker of the mirrors) is below this
/// fraction of its maximum are left out of the fit.
pub const FIT_AMPLITUDE_FRACTION: f64 = 0.05;

/// The calibration file (JSON).
#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct WavelengthCalibration {
    pub format: String,
    pub version: u32,
    pub pixels: usize,
    /// Fitted wavelength of each pixel, nm: what the pipeline uses.
    pub wavelength_nm: Vec<f64>,
    /// The fit as a polynomial in the pixel index p: λ(p) = Σ c_i·p^i, nm
    /// (usable as `input.wavelength_poly_nm`).
    pub polynomial_nm: Vec<f64>,
    /// RMS of measured minus fitted wavelength over the fitted pixels, nm.
    pub fit_residual_rms_nm: f64,
    /// First and last pixel used in the fit.
    pub fit_pixels: [usize; 2],
    /// What fixed scale and offset.
    pub scale: ScaleHints,
    pub inputs: Vec<MirrorInput>,
    /// Dispersion left in the mirror data, from the shallowest mirror's phase
    /// against the calibrated wavenumber (two or more mirrors only).
    pub residual_dispersion: Option<ResidualDispersion>,
    /// The wavelength of each pixel measured from the fringe phase, before
    /// the polynomial fit, nm (for plots; not in the file).
    #[serde(skip)]
    pub measured_nm: Vec<f64>,
}

#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct ScaleHints {
    /// Wavelength at the middle pixel, nm.
    pub centre_nm: Option<f64>,
    /// |λ(last pixel) − λ(first pixel)|, nm.
    pub span_nm: Option<f64>,
    /// Mirror depths in the order of the inputs (single pass, µm in air).
    pub depths_um: Option<Vec<f64>>,
    /// Wavelength decreases with pixel index (default: increases).
    pub decreasing: bool,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct MirrorInput {
    pub path: PathBuf,
    /// `blake3:<hex>` or `sha256:<hex>`; calibration files of version 1
    /// named it `sha256` (a bare SHA-256 hex digest) and still load.
    #[serde(alias = "sha256")]
    pub input_hash: String,
    /// Fringe frequency, cycles over the spectrum.
    pub fringe_cycles: f64,
    pub fringe_peak_over_median_db: f64,
}

#[derive(Debug, Clone, Serialize, Deserialize)]
pub struct ResidualDispersion {
    pub a2_rad: f64,
    pub a3_rad: f64,
    pub gdd_fs2: f64,
    pub fused_silica_mm: f64,
}

impl WavelengthCalibration {
    /// Reads a calibration file; returns it with the file's SHA-256.
    pub fn load(path: &Path) -> Result<(Self, String)> {
        let bytes = std::fs::read(path).map_err(|e| anyhow!("calibration file {}: {e}", path.display()))?;
        let cal: WavelengthCalibration = serde_json::from_slice(&bytes)
            .map_err(|e| anyhow!("calibration file {}: not a wavelength calibration ({e})", path.display()))?;
        if cal.format != FORMAT {
            bail!("calibration file {}: format is '{}', expected '{FORMAT}'", path.display(), cal.format);
        }
        if cal.wavelength_nm.len() != cal.pixels {
            bail!("calibration file {}: {} wavelengths for {} pixels", path.display(), cal.wavelength_nm.len(), cal.pixels);
        }
        crate::io::capture::check_wavelength_map(&cal.wavelength_nm, cal.pixels, &format!("in {}", path.display()))?;
        Ok((cal, hash::sha256_hex(&bytes)))
    }
}

/// Unwrapped fringe phase of one background-free mirror spectrum.
#[derive(Debug, Clone)]
pub struct FringePhase {
    /// ψ(p), rad, increasing with p.
    pub phase: Vec<f64>,
    /// |analytic signal|.
    pub amplitude: Vec<f64>,
    /// Fringe frequency, cycles across the spectrum.
    pub cycles: f64,
    /// Peak over median of the fringe spectrum, dB.
    pub snr_db: f64,
}

/// Analytic signal of the fringe: FFT (zero-padded to twice the next power
/// of two), keep only the positive-frequency band around the strongest
/// peak, inverse FFT; then unwrap its phase.
pub fn fringe_phase(spectrum: &[f64]) -> Result<FringePhase> {
    let n = spectrum.len();
    let len = (2 * n).next_power_of_two();
    let mean = spectrum.iter().sum::<f64>() / n as f64;
    let mut buf: Vec<Complex64> = spectrum.iter().map(|&v| Complex64::new(v - mean, 0.0)).collect();
    buf.resize(len, Complex64::new(0.0, 0.0));
    let mut planner = FftPlanner::new();
    planner.plan_fft_forward(len).process(&mut buf);
    let half = len / 2;
    let mag: Vec<f64> = buf[..half].iter().map(|v| v.norm()).collect();
    // Skip the lowest frequencies, where what is left of the source envelope sits.
    let guard = (len / 64).max(8);
    let (peak_bin, peak) = mag.iter().enumerate().skip(guard).fold((0, 0.0), |b, (i, &m)| if m > b.1 { (i, m) } else { b });
    let mut sorted: Vec<f64> = mag[guard..].to_vec();
    let median = crate::stages::background::median_in_place(&mut sorted);
    let snr_db = 20.0 * (peak / median.max(1e-300)).log10();
    if peak_bin == 0 || snr_db < MIN_FRINGE_SNR_DB {
        bail!("no mirror fringe found: the strongest fringe frequency stands {snr_db:.1} dB above the median (need {MIN_FRINGE_SNR_DB} dB)");
    }
    // Band of ±50 % around the peak, with cosine tapers on its outer quarters.
    let (lo, hi) = (peak_bin / 2, (peak_bin * 3 / 2).min(half - 1));
    for (i, v) in buf.iter_mut().enumerate() {
        let w = if i < lo || i > hi {
            0.0
        } else {
            let t = if i < peak_bin {
                (i - lo) as f64 / (peak_bin - lo).max(1) as f64
            } else {
                (hi - i) as f64 / (hi - peak_bin).max(1) as f64
            };
            if t >= 0.5 {
                1.0
            } else {
                0.5 - 0.5 * (2.0 * std::f64::consts::PI * t).cos()
            }
        };
        *v *= w;
    }
    planner.plan_fft_inverse(len).process(&mut buf);
    let amplitude: Vec<f64> = buf[..n].iter().map(|v| v.norm()).collect();
    let phase = unwrap(&buf[..n].iter().map(|v| v.arg()).collect::<Vec<_>>());
    Ok(FringePhase { phase, amplitude, cycles: peak_bin as f64 * n as f64 / len as f64, snr_db })
}

/// Phase unwrapping: removes jumps larger than π between neighbours
/// (the same rule as NumPy's `unwrap`).
pub fn unwrap(wrapped: &[f64]) -> Vec<f64> {
    use std::f64::consts::PI;
    let mut out = Vec::with_capacity(wrapped.len());
    let mut offset = 0.0;
    for (i, &w) in wrapped.iter().enumerate() {
        if i > 0 {
            let d = w - wrapped[i - 1];
            if d > PI {
                offset -= 2.0 * PI * ((d + PI) / (2.0 * PI)).floor();
            } else if d < -PI {
                offset += 2.0 * PI * ((-d + PI) / (2.0 * PI)).floor();
            }
        }
        out.push(w + offset);
    }
    out
}

/// Mean background-free spectrum of one frame of a mirror capture.
pub fn mirror_spectrum(path: &Path, config: &PipelineConfig, frame: usize) -> Result<Vec<f64>> {
    // The capture's own map, if any, is not used: open with a placeholder
    // (any plausible monotonic map: 800 nm + 0.001 nm per pixel).
    let mut input = config.input.clone();
    input.calibration = None;
    input.wavelength_poly_nm = Some(vec![800.0, 1e-3]);
    let capture = crate::open::open_capture(path, &input)?;
    if frame >= capture.frames {
        bail!("frame {frame} does not exist (the capture has {} frames)", capture.frames);
    }
    let mut spectra = Array2::<f64>::zeros(capture.frame_shape());
    capture.read_frame(frame, &mut spectra)?;
    let mut mean = crate::stages::background::mean_spectrum(spectra.view());
    if let Some(bg) = &capture.background {
        for (m, b) in mean.iter_mut().zip(bg.iter()) {
            *m -= b;
        }
    }
    Ok(mean)
}

/// Bisection for a root of a monotonic `f` on [lo, hi].
fn bisect(mut lo: f64, mut hi: f64, f: impl Fn(f64) -> f64) -> Option<f64> {
    let (flo, fhi) = (f(lo), f(hi));
    if !(flo.is_finite() && fhi.is_finite()) || flo.signum() == fhi.signum() {
        return None;
    }
    for _ in 0..200 {
        let m = 0.5 * (lo + hi);
        if f(m).signum() == flo.signum() {
            lo = m
        } else {
            hi = m
        }
    }
    Some(0.5 * (lo + hi))
}

/// The argument checks of a calibration: the degree, exactly two scale
/// hints, one depth per mirror. Run before any capture is read, so that a
/// wrong command line is a usage error.
pub fn check_hints(mirrors: usize, hints: &ScaleHints, degree: usize) -> Result<()> {
    if mirrors == 0 {
        bail!("no mirror captures given");
    }
    if !(1..=9).contains(&degree) {
        bail!("polynomial degree {degree}: need 1 to 9");
    }
    let given = [hints.centre_nm.is_some(), hints.span_nm.is_some(), hints.depths_um.is_some()];
    if given.iter().filter(|&&g| g).count() != 2 {
        bail!("give exactly two of --centre-nm, --span-nm and --depths-um to fix the wavelength scale");
    }
    if let Some(d) = &hints.depths_um {
        if d.len() != mirrors {
            bail!("--depths-um has {} values for {} mirror captures", d.len(), mirrors);
        }
        if d.iter().any(|z| !(z.is_finite() && *z > 0.0)) {
            bail!("--depths-um values must be positive");
        }
    }
    for v in [hints.centre_nm, hints.span_nm].into_iter().flatten() {
        if !(v.is_finite() && v > 0.0) {
            bail!("--centre-nm and --span-nm must be positive");
        }
    }
    if mirrors == 1 && hints.depths_um.is_none() {
        bail!("one mirror capture needs its depth (--depths-um) and the centre wavelength");
    }
    // The same plausible range of wavelengths that `run` holds a map to.
    let [min_nm, max_nm] = crate::io::capture::PLAUSIBLE_WAVELENGTH_NM;
    let half = hints.span_nm.unwrap_or(0.0) / 2.0;
    let (lo, hi) = match hints.centre_nm {
        Some(c) => (c - half, c + half),
        None => (min_nm, min_nm + 2.0 * half),
    };
    if lo < min_nm || hi > max_nm {
        let what = match (hints.centre_nm, hints.span_nm) {
            (Some(c), Some(s)) => format!("--centre-nm {c} --span-nm {s} give {lo:.4}–{hi:.4} nm"),
            (Some(c), None) => format!("--centre-nm {c}"),
            _ => format!("--span-nm {}", 2.0 * half),
        };
        bail!("{what}: outside the plausible {min_nm}–{max_nm} nm of an optical wavelength ({}); give the values in nm", crate::io::capture::unit_hint(lo.max(f64::MIN_POSITIVE), hi));
    }

    Ok(())
}

/// Estimates the wavelength map from mirror spectra (each background-free,
/// pixel order), their file records, the scale hints and the degree of the
/// polynomial fit.
pub fn calibrate(spectra: &[Vec<f64>], inputs: Vec<MirrorInput>, hints: &ScaleHints, degree: usize) -> Result<WavelengthCalibration> {
    if spectra.is_empty() {
        bail!("no mirror captures given");
    }
    let pixels = spectra[0].len();
    if let Some(i) = spectra.iter().position(|s| s.len() != pixels) {
        bail!("{} has {} pixels but {} has {pixels}", inputs[i].path.display(), spectra[i].len(), inputs[0].path.display());
    }
    check_hints(spectra.len(), hints, degree)?;

    let mut phases = Vec::new();
    for (s, input) in spectra.iter().zip(inputs.iter()) {
        phases.push(fringe_phase(s).with_context(|| format!("{}", input.path.display()))?);
    }
    let mut inputs = inputs;
    for (input, ph) in inputs.iter_mut().zip(phases.iter()) {
        input.fringe_cycles = ph.cycles;
        input.fringe_peak_over_median_db = ph.snr_db;
    }
    let (first, difference, depth_difference, weight) = phase_difference(&phases, hints)?;

    // k(p) = k_c + α·u(p), u = ψ-difference relative to the middle pixel.
    // The scale is fixed on a polynomial fit of u over the pixels that carry
    // fringe, so noisy phase at the band edges does not set the span.
    let mid = (pixels - 1) as f64 / 2.0;
    let wmax = weight.iter().copied().fold(0.0, f64::max);
    let used: Vec<usize> = (0..pixels).filter(|&p| weight[p] >= FIT_AMPLITUDE_FRACTION * wmax).collect();
    if used.len() < 4 * (degree + 1) {
        bail!("too few pixels carry fringe ({} of {pixels})", used.len());
    }
    let t_of = |p: f64| (p - mid) / mid;
    let ts: Vec<f64> = used.iter().map(|&p| t_of(p as f64)).collect();
    let u_coeff = polyfit(&ts, &used.iter().map(|&p| difference[p]).collect::<Vec<_>>(), degree);
    let u_fit = |p: f64| u_coeff.iter().rev().fold(0.0, |acc, c| acc * t_of(p) + c);
    let u0 = u_fit(mid);
    let u: Vec<f64> = difference.iter().map(|d| d - u0).collect();
    let u_smooth: Vec<f64> = (0..pixels).map(|p| u_fit(p as f64) - u0).collect();
    // Phase increases with p; k increases with p when λ decreases.
    let sign = if hints.decreasing { 1.0 } else { -1.0 };
    let umax = u_smooth.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    // Span of the polynomial λ(p) that a given (k_c, α) produces: the same
    // fit the final map uses, so the band edges come from the fit, not from
    // the noisy phase there.
    let fit_for = |kc: f64, alpha: f64| -> Option<Vec<f64>> {
        let ls: Vec<f64> = used.iter().map(|&p| kc + alpha * u[p]).map(|k| if k > 0.0 { physics::wavelength_nm(k) } else { f64::NAN }).collect();
        ls.iter().all(|v| v.is_finite()).then(|| polyfit(&ts, &ls, degree))
    };
    let eval = |c: &[f64], t: f64| c.iter().rev().fold(0.0, |acc, v| acc * t + v);
    let span_of = |kc: f64, alpha: f64| match fit_for(kc, alpha) {
        Some(c) => (eval(&c, 1.0) - eval(&c, -1.0)).abs(),
        None => f64::NAN,
    };
    let (kc, alpha) = match (hints.centre_nm, hints.span_nm, depth_difference) {
        (Some(c), _, Some(dz)) => (physics::wavenumber_per_um(c), sign / (2.0 * dz)),
        (Some(c), Some(span), None) => {
            let kc = physics::wavenumber_per_um(c);
            let limit = 0.9 * kc / umax;
            let a = bisect(1e-12 * limit, limit, |a| span_of(kc, sign * a) - span)
                .ok_or_else(|| anyhow!("no wavelength map spans {span} nm around {c} nm with these fringes"))?;
            (kc, sign * a)
        }
        (None, Some(span), Some(dz)) => {
            let alpha = sign / (2.0 * dz);
            let lo = alpha.abs() * umax * 1.1;
            let kc = bisect(lo, 1e4, |kc| span_of(kc, alpha) - span)
                .ok_or_else(|| anyhow!("no wavelength map spans {span} nm with mirror depths {dz} µm apart"))?;
            (kc, alpha)
        }
        _ => bail!("one mirror capture needs its depth (--depths-um) and the centre wavelength (--centre-nm)"),
    };
    let k: Vec<f64> = u.iter().map(|v| kc + alpha * v).collect();
    if used.iter().any(|&p| !(k[p].is_finite() && k[p] > 0.0)) {
        bail!("the recovered wavenumbers are not all positive: check the scale hints");
    }
    let measured_nm: Vec<f64> = k.iter().map(|&v| if v > 0.0 { physics::wavelength_nm(v) } else { f64::NAN }).collect();

    // Fit λ(t), t = (p − mid)/mid, over the pixels with enough fringe.
    let ls: Vec<f64> = used.iter().map(|&p| measured_nm[p]).collect();
    let coeff_t = polyfit(&ts, &ls, degree);
    let eval_t = |t: f64| coeff_t.iter().rev().fold(0.0, |acc, c| acc * t + c);
    let fitted: Vec<f64> = (0..pixels).map(|p| eval_t(t_of(p as f64))).collect();
    crate::io::capture::check_wavelength_map(&fitted, pixels, "calibrated from these mirrors")?;
    let rms = (used.iter().map(|&p| (measured_nm[p] - fitted[p]).powi(2)).sum::<f64>() / used.len() as f64).sqrt();
    let polynomial_nm = to_pixel_powers(&coeff_t, mid);

    // Residual dispersion: phase of the shallowest mirror against the
    // calibrated k, as a cubic in the pipeline's x coordinate.
    let residual_dispersion = (phases.len() >= 2).then(|| residual_dispersion(&fitted, &used, &k, alpha, &phases[first]));

    Ok(WavelengthCalibration {
        format: FORMAT.into(),
        version: crate::io::json_doc::CALIBRATION.version,
        pixels,
        wavelength_nm: fitted,
        polynomial_nm,
        fit_residual_rms_nm: rms,
        fit_pixels: [used[0], used[used.len() - 1]],
        scale: hints.clone(),
        inputs,
        residual_dispersion,
        measured_nm,
    })
}

/// The phase difference between the deepest and the shallowest mirror (by
/// fringe frequency; a single mirror's own phase), the depth between them
/// when given, and the weight per pixel (the smaller amplitude). Also the
/// index of the shallowest mirror.
fn phase_difference(phases: &[FringePhase], hints: &ScaleHints) -> Result<(usize, Vec<f64>, Option<f64>, Vec<f64>)> {
    // Shallowest and deepest mirror by fringe frequency.
    let order: Vec<usize> = {
        let mut o: Vec<usize> = (0..phases.len()).collect();
        o.sort_by(|&a, &b| phases[a].cycles.total_cmp(&phases[b].cycles));
        o
    };
    let (first, last) = (order[0], order[order.len() - 1]);
    let (difference, depth_difference, weight): (Vec<f64>, Option<f64>, Vec<f64>) = if phases.len() == 1 {
        let z = hints.depths_um.as_ref().map(|d| d[0]);
        (phases[0].phase.clone(), z, phases[0].amplitude.clone())
    } else {
        if phases[last].cycles - phases[first].cycles < 2.0 {
            bail!("the mirrors are at nearly the same depth ({:.1} and {:.1} fringe cycles); place them further apart", phases[first].cycles, phases[last].cycles);
        }
        let d = phases[last].phase.iter().zip(phases[first].phase.iter()).map(|(a, b)| a - b).collect();
        let w = phases[last].amplitude.iter().zip(phases[first].amplitude.iter()).map(|(a, b)| a.min(*b)).collect();
        let dz = hints.depths_um.as_ref().map(|z| z[last] - z[first]);
        if let Some(dz) = dz {
            if dz <= 0.0 {
                bail!("--depths-um disagree with the fringes: the mirror with the faster fringe must be the deeper one");
            }
        }
        (d, dz, w)
    };
    Ok((first, difference, depth_difference, weight))
}

/// The shallowest mirror's phase against the measured k (x from k, linear in
/// the phase difference, normalised by the fitted band), fitted as a cubic
/// weighted by amplitude²: the dispersion the calibration leaves.
fn residual_dispersion(fitted: &[f64], used: &[usize], k: &[f64], alpha: f64, shallowest: &FringePhase) -> ResidualDispersion {
    let k_fit: Vec<f64> = fitted.iter().map(|&l| physics::wavenumber_per_um(l)).collect();
    let (k_min, k_max) = k_fit.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
    let k_mid = 0.5 * (k_min + k_max);
    // x from the measured k (linear in ψ2 − ψ1, so free of the map
    // fit's error), normalised by the fitted band.
    let xs: Vec<f64> = used.iter().map(|&p| (k[p] - k_mid) / (k_max - k_min)).collect();
    // The fringe phase 2kz + φ increases with k; ψ increases with p.
    let psi: Vec<f64> = used.iter().map(|&p| alpha.signum() * shallowest.phase[p]).collect();
    // Phase noise goes as 1/amplitude: weight by amplitude².
    let w: Vec<f64> = used.iter().map(|&p| shallowest.amplitude[p].powi(2)).collect();
    let c = crate::analysis::polyfit_weighted(&xs, &psi, Some(&w), 3);
    let DispersionEquivalent { gdd_fs2, fused_silica_mm } = physics::dispersion_equivalent(c[2], k_min, k_max);
    ResidualDispersion { a2_rad: c[2], a3_rad: c[3], gdd_fs2, fused_silica_mm }
}

/// The map the first capture would be processed with before calibration
/// (its own wavelength dataset, or the pipeline's polynomial or calibration
/// file), when it has one.
pub fn nominal_map(path: &Path, config: &PipelineConfig) -> Option<Vec<f64>> {
    crate::open::open_capture(path, &config.input).ok().map(|c| c.wavelength_nm.clone())
}

/// Converts coefficients of a polynomial in t = (p − m)/m into coefficients
/// of the same polynomial in p.
fn to_pixel_powers(coeff_t: &[f64], m: f64) -> Vec<f64> {
    let n = coeff_t.len();
    let mut out = vec![0.0; n];
    for (j, &a) in coeff_t.iter().enumerate() {
        // a·((p − m)/m)^j = a·m^−j·Σ_i C(j,i)·p^i·(−m)^(j−i)
        let mut binom = 1.0;
        for (i, o) in out.iter_mut().enumerate().take(j + 1) {
            if i > 0 {
                binom = binom * (j - i + 1) as f64 / i as f64;
            }
            *o += a * m.powi(-(j as i32)) * binom * (-m).powi((j - i) as i32);
        }
    }
    out
}

/// Reads the mirrors, calibrates, and returns the calibration.
pub fn calibrate_files(paths: &[PathBuf], config: &PipelineConfig, frame: usize, hints: &ScaleHints, degree: usize) -> Result<WavelengthCalibration> {
    let mut spectra = Vec::new();
    let mut inputs = Vec::new();
    for p in paths {
        let s = mirror_spectrum(p, config, frame).with_context(|| format!("{}", p.display()))?;
        let input_hash = hash::input_hash(p).with_context(|| format!("{}", p.display()))?;
        spectra.push(s);
        let path = std::path::absolute(p).unwrap_or_else(|_| p.clone());
        inputs.push(MirrorInput { path, input_hash, fringe_cycles: 0.0, fringe_peak_over_median_db: 0.0 });
    }
    calibrate(&spectra, inputs, hints, degree)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn unwrap_matches_numpy_rule() {
        // A ramp of 2.5 rad per step (below π, so recoverable), wrapped into
        // [−π, π), comes back exactly (NumPy's unwrap does the same).
        let ramp: Vec<f64> = (0..20).map(|i| 2.5 * i as f64).collect();
        let wrapped: Vec<f64> = ramp.iter().map(|v| (v + std::f64::consts::PI).rem_euclid(2.0 * std::f64::consts::PI) - std::f64::consts::PI).collect();
        let back = unwrap(&wrapped);
        for (a, b) in back.iter().zip(ramp.iter()) {
            assert!((a - b).abs() < 1e-9, "{a} {b}");
        }
    }

    #[test]
    fn pixel_power_conversion_evaluates_the_same() {
        let c = [840.0, 75.0, -1.5, 0.7];
        let m = 1023.5;
        let p = to_pixel_powers(&c, m);
        for x in [0.0, 100.0, 1023.5, 2047.0] {
            let t = (x - m) / m;
            let a = c.iter().rev().fold(0.0, |acc, v| acc * t + v);
            let b = p.iter().rev().fold(0.0, |acc, v| acc * x + v);
            assert!((a - b).abs() < 1e-9, "{a} {b}");
        }
    }
}
