//! The planner: turns a pipeline file's settings and a capture's geometry
//! into a ready-to-run chain of stages with all tables precomputed
//! (resampling weights, dispersion phase, window, FFT plan), then runs frames
//! through it in parallel over A-lines.
//!
//! Processing works in blocks of A-lines: each worker thread owns one set of
//! [`ALine`] buffers per block slot, made once, so the per-A-line path
//! allocates nothing. Each stage's time is summed over worker threads.

use anyhow::{bail, Result};
use ndarray::{Array2, ArrayView2};
use rustfft::num_complex::Complex32;
use rayon::prelude::*;
use serde::Serialize;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Instant;

use super::config::{BackgroundMethod, PipelineConfig};
use crate::physics;
use crate::stages::background::{Background, BackgroundSource};
use crate::stages::dispersion::Dispersion;
use crate::stages::fft::Fft;
use crate::stages::k_linearization::KLinearization;
use crate::stages::log_compression::LogCompression;
use crate::stages::shaping::Shaping;
use crate::stages::window::{self, Window, WindowKind};
use crate::stages::{ALine, FrameContext, Stage};

/// A-lines processed together, stage by stage, by one worker.
const BLOCK: usize = 16;

/// What the planner needs to know of a capture.
#[derive(Debug, Clone, Copy)]
pub struct CaptureGeometry<'a> {
    pub wavelength_nm: &'a [f64],
    /// Mean blocked-sample-arm spectrum, when the capture has one.
    pub background: Option<&'a [f64]>,
    /// Source spectrum in counts per pixel (background, else a frame's mean
    /// spectrum); needed only by spectral shaping.
    pub source_spectrum: Option<&'a [f64]>,
}

/// Quantities derived while planning, logged beside the settings.
#[derive(Debug, Clone, Serialize)]
pub struct PlanSummary {
    pub background_method: BackgroundMethod,
    pub pixels: usize,
    pub k_samples: usize,
    pub fft_length: usize,
    pub wavelength_min_nm: f64,
    pub wavelength_max_nm: f64,
    /// Centre of the resampled band, λ of (k_min + k_max)/2, nm.
    pub band_centre_wavelength_nm: f64,
    pub k_min_per_um: f64,
    pub k_max_per_um: f64,
    /// Depth of one output pixel, single pass, in air.
    pub depth_spacing_um: f64,
    /// Gaussian target of spectral shaping (centre, FWHM in nm), when on.
    pub shaping_target_nm: Option<[f64; 2]>,
    pub first_depth_bin: usize,
    pub depth_pixels: usize,
    pub stages: Vec<&'static str>,
}

/// Accumulated time per stage (nanoseconds summed over worker threads).
#[derive(Debug, Default)]
pub struct StageTimer {
    nanos: Vec<AtomicU64>,
}

impl StageTimer {
    pub fn seconds(&self) -> Vec<f64> {
        self.nanos.iter().map(|n| n.load(Ordering::Relaxed) as f64 * 1e-9).collect()
    }
}

pub struct Plan {
    stages: Vec<Box<dyn Stage>>,
    /// Scratch length the planned FFT needs.
    fft_scratch_len: usize,
    /// Scale of |FFT| to fringe amplitude: 2/Σw.
    amplitude_scale: f64,
    /// Copies of what the fused fast path needs.
    pub(crate) resampling: KLinearization,
    pub(crate) background_source: Option<BackgroundSource>,
    pub(crate) dispersion: [f64; 2],
    pub(crate) wavelength_nm: Vec<f64>,
    pub summary: PlanSummary,
}

/// The sizes a pipeline gives a capture's spectra, found from the settings
/// and the wavelength map alone, before any table is built: uniform
/// wavenumber samples, FFT length and the kept depth bins.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DepthGeometry {
    pub k_samples: usize,
    pub fft_length: usize,
    pub depth_spacing_um: f64,
    pub first_depth_bin: usize,
    pub depth_pixels: usize,
}

impl DepthGeometry {
    pub fn of(config: &PipelineConfig, wavelength_nm: &[f64]) -> Result<Self> {
        let pixels = wavelength_nm.len();
        let k_samples = match config.k_linearization.samples {
            0 => pixels,
            n => n,
        };
        if k_samples < 16 {
            bail!("k_linearization.samples = {k_samples}: need 0 (as many as pixels) or at least 16");
        }
        let Some(fft_length) = k_samples.checked_mul(config.fft.zero_padding) else {
            bail!("{k_samples} wavenumber samples × fft.zero_padding {} is more than any FFT can hold", config.fft.zero_padding);
        };
        let (k_min, k_max) = wavelength_nm
            .iter()
            .map(|&l| physics::wavenumber_per_um(l))
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), k| (a.min(k), b.max(k)));
        let depth_spacing_um = physics::depth_spacing_um(k_max - k_min, k_samples, fft_length);
        let positive = fft_length / 2;
        let (first, end) = match (config.fft.crop_um, config.fft.crop_px) {
            (Some([a, b]), _) => ((a / depth_spacing_um).round() as usize, (b / depth_spacing_um).round() as usize),
            (_, Some([a, b])) => (a, b),
            _ => (0, positive),
        };
        let deepest = positive as f64 * depth_spacing_um;
        let key = if config.fft.crop_um.is_some() { "fft.crop_um" } else { "fft.crop_px" };
        if end > positive {
            bail!(
                "{key} ends beyond this capture's depth range: it reaches pixel {end} ({:.1} µm), the range is pixels 0–{positive} (0–{deepest:.1} µm in air)",
                end as f64 * depth_spacing_um
            );
        }
        if first >= end {
            bail!("{key} keeps no depth pixel: the range is pixels 0–{positive} (0–{deepest:.1} µm in air)");
        }
        Ok(DepthGeometry { k_samples, fft_length, depth_spacing_um, first_depth_bin: first, depth_pixels: end - first })
    }

    /// Bytes the plan's tables take at most, generously: the resampling
    /// tables (f64 and index per sample, both engines), dispersion, window
    /// and shaping per sample, the FFT's twiddles and scratch, and one
    /// worker's A-line buffers per thread.
    pub fn table_bytes(&self, pixels: usize) -> u64 {
        let threads = rayon::current_num_threads() as u64;
        let k = self.k_samples as u64;
        let n = self.fft_length as u64;
        let p = pixels as u64;
        k * 160 + p * 120 + n * 16 * 4 + threads * BLOCK as u64 * (p * 8 + n * 16 * 2 + self.depth_pixels as u64 * 12)
    }
}

impl Plan {
    /// The fraction of a fringe's power the k-resampling keeps at each depth
    /// (µm in air), computed from this plan's interpolation tables.
    pub fn resampling_power_transfer(&self, depth_um: &[f64]) -> Vec<f64> {
        self.resampling.power_transfer(&self.wavelength_nm, depth_um)
    }
}

impl Plan {
    pub fn new(config: &PipelineConfig, capture: CaptureGeometry<'_>) -> Result<Self> {
        let pixels = capture.wavelength_nm.len();
        let geometry = DepthGeometry::of(config, capture.wavelength_nm)?;
        crate::memory::check_bytes_fit(
            &format!("the processing plan ({} wavenumber samples, FFT of {})", geometry.k_samples, geometry.fft_length),
            geometry.table_bytes(pixels),
        )?;
        let k_samples = geometry.k_samples;
        let mut stages: Vec<Box<dyn Stage>> = Vec::new();

        let method = match (config.background.method, capture.background) {
            (BackgroundMethod::Auto, Some(_)) => BackgroundMethod::Recorded,
            (BackgroundMethod::Auto, None) => BackgroundMethod::Median,
            (BackgroundMethod::Recorded, None) => {
                bail!("background.method = \"recorded\" but the capture has no '{}' dataset (the blocked-sample-arm spectra)", config.input.background)
            }
            (m, _) => m,
        };
        let source = match method {
            BackgroundMethod::Recorded => capture.background.map(|b| BackgroundSource::Fixed(b.to_vec())),
            BackgroundMethod::Mean => Some(BackgroundSource::FrameMean),
            BackgroundMethod::Median => Some(BackgroundSource::FrameMedian),
            BackgroundMethod::None | BackgroundMethod::Auto => None,
        };
        if let Some(source) = source.clone() {
            stages.push(Box::new(Background { source }));
        }

        let klin = KLinearization::new(capture.wavelength_nm, k_samples, config.k_linearization.method);
        let (k_min, k_max) = (klin.k_min_per_um, klin.k_max_per_um);
        let k_span = klin.k_span_per_um();
        let shaping = Self::plan_shaping(config, &capture, &klin)?;
        let resampling = klin.clone();
        stages.push(Box::new(klin));

        let d = &config.dispersion;
        if d.a2 != 0.0 || d.a3 != 0.0 {
            stages.push(Box::new(Dispersion::new(d.a2, d.a3, k_samples)));
        }

        let shaping_target_nm = shaping.as_ref().map(|(_, target)| *target);
        if let Some((stage, _)) = shaping {
            stages.push(Box::new(stage));
        }

        let w = &config.window;
        let coefficients = window::coefficients(w.kind, k_samples, w.gaussian_fwhm_fraction, w.tukey_alpha);
        let window_sum: f64 = coefficients.iter().sum();
        if w.kind != WindowKind::None {
            stages.push(Box::new(Window { coefficients }));
        }

        let fft_length = geometry.fft_length;
        let depth_spacing_um = physics::depth_spacing_um(k_span, k_samples, fft_length);
        let (first, end) = (geometry.first_depth_bin, geometry.first_depth_bin + geometry.depth_pixels);
        let fft = Fft::new(fft_length, first, end - first, window_sum);
        let fft_scratch_len = fft.scratch_length();
        stages.push(Box::new(fft));
        stages.push(Box::new(LogCompression));

        let (wl_min, wl_max) = capture
            .wavelength_nm
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
        let summary = PlanSummary {
            background_method: method,
            pixels,
            k_samples,
            fft_length,
            wavelength_min_nm: wl_min,
            wavelength_max_nm: wl_max,
            band_centre_wavelength_nm: physics::wavelength_nm(0.5 * (k_min + k_max)),
            k_min_per_um: k_min,
            k_max_per_um: k_max,
            depth_spacing_um,
            shaping_target_nm,
            first_depth_bin: first,
            depth_pixels: end - first,
            stages: stages.iter().map(|s| s.name()).collect(),
        };
        Ok(Plan {
            stages,
            fft_scratch_len,
            amplitude_scale: 2.0 / window_sum,
            resampling,
            background_source: source,
            dispersion: [d.a2, d.a3],
            wavelength_nm: capture.wavelength_nm.to_vec(),
            summary,
        })
    }

    /// The shaping stage and its Gaussian target (centre, FWHM in nm), when on.
    fn plan_shaping(config: &PipelineConfig, capture: &CaptureGeometry<'_>, klin: &KLinearization) -> Result<Option<(Shaping, [f64; 2])>> {
        let sh = &config.shaping;
        if !sh.enabled {
            return Ok(None);
        }
        let Some(source) = capture.source_spectrum else {
            bail!("shaping needs a measured source spectrum (a background dataset or a frame to average)");
        };
        let measured = crate::spectrum::estimate(capture.wavelength_nm, source)?;
        let centre = if sh.centre_nm > 0.0 { sh.centre_nm } else { measured.centre_nm };
        let fwhm = if sh.fwhm_nm > 0.0 { sh.fwhm_nm } else { measured.fwhm_nm };
        let (envelope, _) = crate::spectrum::remove_baseline(source);
        Ok(Some((Shaping::new(klin, &envelope, centre, fwhm, sh.envelope_floor), [centre, fwhm])))
    }

    /// Scale from |FFT| of the windowed fringe to fringe amplitude (2/Σw).
    pub fn amplitude_scale(&self) -> f64 {
        self.amplitude_scale
    }

    /// Background-free fringes of the chosen A-lines of a frame on the
    /// uniform wavenumber grid (lines × k samples): the stages before
    /// dispersion, with the frame's reference spectrum as in `process_frame`.
    pub fn resampled_fringes(&self, frame: ArrayView2<'_, f64>, lines: &[usize]) -> Array2<f64> {
        let mut ctx = FrameContext::default();
        for stage in &self.stages {
            stage.begin_frame(frame, &mut ctx);
        }
        let before: Vec<&dyn Stage> =
            self.stages.iter().filter(|s| matches!(s.name(), "background" | "k_linearization")).map(|s| s.as_ref()).collect();
        let n = self.summary.k_samples;
        let mut out = Array2::<f64>::zeros((lines.len(), n));
        out.as_slice_mut().expect("standard layout").par_chunks_mut(n).zip(lines.par_iter()).for_each_init(
            || self.new_aline(),
            |line, (row, &a)| {
                line.spectrum.iter_mut().zip(frame.row(a).iter()).for_each(|(d, s)| *d = *s);
                for stage in &before {
                    stage.apply(&ctx, line);
                }
                row.iter_mut().zip(line.field.iter()).for_each(|(d, v)| *d = v.re);
            },
        );
        out
    }

    /// Per-sample real gain the stages after k-linearization apply besides
    /// dispersion (spectral shaping × window), on the k grid.
    pub fn spectral_gain(&self) -> Vec<f64> {
        let mut line = self.new_aline();
        let n = self.summary.k_samples;
        line.field[..n].fill(rustfft::num_complex::Complex64::new(1.0, 0.0));
        let ctx = FrameContext::default();
        for stage in self.stages.iter().filter(|s| matches!(s.name(), "shaping" | "window")) {
            stage.apply(&ctx, &mut line);
        }
        line.field[..n].iter().map(|v| v.re).collect()
    }

    /// The power-weighted mean wavenumber (rad/µm) of the spectrum that
    /// reaches the FFT: F = `source_counts` (per pixel, the source spectrum
    /// as the camera records it, its 1st-percentile dark level removed)
    /// resampled onto the uniform wavenumber grid, times shaping and window;
    /// k̄ = Σk·F²/ΣF². By Parseval, the |A|²-weighted rate at which the
    /// phase of a depth profile's samples advances with a reflector's
    /// displacement, summed over its point-spread function (as a Kasai sum
    /// over depth does), is 2·k̄ (FIELD-NOTES, "Which λ0"). None when no
    /// light is left.
    pub fn mean_wavenumber_per_um(&self, source_counts: &[f64]) -> Option<f64> {
        let s = &self.summary;
        if source_counts.len() != s.pixels {
            return None;
        }
        let (envelope, _) = crate::spectrum::remove_baseline(source_counts);
        let mut line = self.new_aline();
        self.resampling.resample(&envelope, &mut line.work, &mut line.work2, &mut line.field);
        let n = s.k_samples;
        let (mut sum, mut moment) = (0.0, 0.0);
        for (j, (v, g)) in line.field[..n].iter().zip(self.spectral_gain()).enumerate() {
            let k = s.k_min_per_um + (s.k_max_per_um - s.k_min_per_um) * j as f64 / (n - 1) as f64;
            let f = v.re.max(0.0) * g;
            let w = f * f;
            sum += w;
            moment += w * k;
        }
        (sum > 0.0 && moment.is_finite()).then(|| moment / sum)
    }

    /// Per-sample real gain of spectral shaping alone (1 where it is off).
    pub fn shaping_gain(&self) -> Vec<f64> {
        let mut line = self.new_aline();
        let n = self.summary.k_samples;
        line.field[..n].fill(rustfft::num_complex::Complex64::new(1.0, 0.0));
        let ctx = FrameContext::default();
        for stage in self.stages.iter().filter(|s| s.name() == "shaping") {
            stage.apply(&ctx, &mut line);
        }
        line.field[..n].iter().map(|v| v.re).collect()
    }

    /// Names of the stages in order.
    pub fn stage_names(&self) -> &[&'static str] {
        &self.summary.stages
    }

    pub fn new_timer(&self) -> StageTimer {
        StageTimer { nanos: self.stages.iter().map(|_| AtomicU64::new(0)).collect() }
    }

    /// Fresh working buffers for one A-line.
    pub fn new_aline(&self) -> ALine {
        let s = &self.summary;
        ALine::new(s.pixels, s.fft_length, self.fft_scratch_len, s.depth_pixels)
    }

    /// Depth of output pixel `i`, µm in air.
    pub fn depth_um(&self, i: usize) -> f64 {
        (self.summary.first_depth_bin + i) as f64 * self.summary.depth_spacing_um
    }

    /// Processes one frame (A-lines × pixels) into `db_out` (A-lines × depth
    /// pixels), in parallel over blocks of A-lines.
    pub fn process_frame(&self, frame: ArrayView2<'_, f64>, db_out: &mut Array2<f32>, timer: &StageTimer) {
        self.frame(frame, db_out, None, timer)
    }

    /// As [`Self::process_frame`], and the complex depth profile (A-lines ×
    /// depth pixels) into `complex_out`: the FFT's kept bins times
    /// [`crate::pipeline::factor::complex_depth_factors`] (amplitude scale,
    /// phase referred to the band's centre wavenumber).
    pub fn process_frame_complex(&self, frame: ArrayView2<'_, f64>, db_out: &mut Array2<f32>, complex_out: &mut Array2<Complex32>, timer: &StageTimer) {
        self.frame(frame, db_out, Some(complex_out), timer)
    }

    fn frame(&self, frame: ArrayView2<'_, f64>, db_out: &mut Array2<f32>, complex_out: Option<&mut Array2<Complex32>>, timer: &StageTimer) {
        let (alines, pixels) = frame.dim();
        let depth = self.summary.depth_pixels;
        assert_eq!(pixels, self.summary.pixels);
        assert_eq!(db_out.dim(), (alines, depth));

        let mut ctx = FrameContext::default();
        for (i, stage) in self.stages.iter().enumerate() {
            let t = Instant::now();
            stage.begin_frame(frame, &mut ctx);
            timer.nanos[i].fetch_add(t.elapsed().as_nanos() as u64, Ordering::Relaxed);
        }

        let frame = frame.as_standard_layout();
        let input = frame.as_slice().expect("standard layout");
        let output = db_out.as_slice_mut().expect("output in standard layout");
        let s = &self.summary;
        let factors = complex_out.is_some().then(|| super::factor::complex_depth_factors(self.amplitude_scale, s.k_samples, s.fft_length, s.first_depth_bin, depth));
        let mut no_complex = Vec::new();
        let complex = match complex_out {
            Some(c) => {
                assert_eq!(c.dim(), (alines, depth));
                c.as_slice_mut().expect("standard layout")
            }
            None => no_complex.as_mut_slice(),
        };
        let complex_chunk = if factors.is_some() { BLOCK * depth } else { 1 };
        let ctx = &ctx;
        // Few enough rayon jobs that each worker's buffers are made a handful
        // of times per frame, not once per block.
        let blocks = alines.div_ceil(BLOCK);
        let min_blocks_per_job = (blocks / (4 * rayon::current_num_threads())).max(1);
        let complex_blocks: Vec<&mut [Complex32]> = if factors.is_some() { complex.chunks_mut(complex_chunk).collect() } else { (0..blocks).map(|_| &mut [][..]).collect() };
        input
            .par_chunks(BLOCK * pixels)
            .zip(output.par_chunks_mut(BLOCK * depth))
            .zip(complex_blocks.into_par_iter())
            .with_min_len(min_blocks_per_job)
            .for_each_init(
                || (0..BLOCK).map(|_| self.new_aline()).collect::<Vec<_>>(),
                |lines, ((spectra, out), complex)| {
                    if crate::interrupt::requested() {
                        return; // the frame in flight is discarded
                    }
                    let n = spectra.len() / pixels;
                    for (line, spectrum) in lines.iter_mut().zip(spectra.chunks_exact(pixels)) {
                        line.spectrum.copy_from_slice(spectrum);
                    }
                    for (i, stage) in self.stages.iter().enumerate() {
                        let t = Instant::now();
                        for line in lines.iter_mut().take(n) {
                            stage.apply(ctx, line);
                        }
                        timer.nanos[i].fetch_add(t.elapsed().as_nanos() as u64, Ordering::Relaxed);
                    }
                    for (line, row) in lines.iter().zip(out.chunks_exact_mut(depth)) {
                        row.copy_from_slice(&line.db);
                    }
                    if let Some(f) = &factors {
                        let first = self.summary.first_depth_bin;
                        for (line, row) in lines.iter().zip(complex.chunks_exact_mut(depth)) {
                            for ((c, x), f) in row.iter_mut().zip(&line.field[first..first + depth]).zip(f) {
                                let v = x * f;
                                *c = Complex32::new(v.re as f32, v.im as f32);
                            }
                        }
                    }
                },
            );
    }
}
