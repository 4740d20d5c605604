//! The simulator: writes captures of invented scenes, with the ground truth
//! beside them, so that every stage can be checked against known answers.
//!
//! Signal model (spectral-domain OCT, reference reflectivity normalised to 1,
//! sample reflectivities R_n relative to it), per camera pixel p at
//! wavenumber k_p:
//!
//! I(p) = dark + pattern(p) + I_ref·S(k_p)·[1 + ΣR_n
//!        + Σ 2√R_n·V_p(z_n)·cos(2k_p z_n + φ(k_p))
//!        + Σ_{n<m} 2√(R_n R_m)·V_p(z_m − z_n)·cos(2k_p (z_m − z_n))]
//!
//! plus shot noise (Gaussian approximation of Poisson), read noise, and
//! clipping at full scale. V_p(z) is the fringe visibility left by the
//! pixel's spectral response: exp(−2σ_k² z²) for a Gaussian response of
//! standard deviation σ_k in k, times sin(zΔk)/(zΔk) when the pixel
//! integrates over its width Δk (roll-off). φ(k) is the round-trip chirp of
//! unmatched fused silica (Sellmeier, Malitson 1965), with its group delay
//! folded into the reflector's depth. Sample–sample terms are included
//! between interfaces and mirrors, not for scatterers.

pub mod beam;
mod kernels;
pub mod optics;
pub mod scene;

pub use scene::wavelength_map;

use anyhow::{Context, Result};
use hdf5::H5Type;
use ndarray::Array2;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Exp1, StandardNormal};
use rayon::prelude::*;
use serde::Serialize;
use std::path::Path;

use fringeflow_io::h5::{create_file, write_1d, write_attr, write_attr_str};
use fringeflow_io::staging::write_atomically;
use optics::{silica_chirp_rad, wavenumber};
use fringeflow_io::capture::SampleType;
use beam::ScannedSample;
use kernels::{add_fringe, FringeTables};
use scene::{Scene, SpectrumShape};

#[derive(Debug, Clone, Serialize)]
pub struct DispersionTruth {
    pub fused_silica_mm: f64,
    /// Round-trip group-delay dispersion of the glass at the source centre, fs².
    pub gdd_round_trip_fs2: f64,
    /// The chirp as our correction polynomial over the uniform-k band:
    /// compensating needs dispersion.a2 = a2_rad, a3 = a3_rad.
    pub a2_rad: f64,
    pub a3_rad: f64,
}

#[derive(Debug, Clone, Serialize)]
pub struct InterfaceTruth {
    pub reflectivity: f64,
    /// Optical depth (in air) at the scan's centre before sag and tilt.
    pub depth_um: f64,
    /// Optical depth at each A-line of frame 0.
    pub depth_um_frame0: Vec<f64>,
}

/// Ground truth written beside a simulated capture.
#[derive(Debug, Clone, Serialize)]
pub struct Truth {
    pub scene: Scene,
    /// Coherence-length limit of the source, (2 ln2/π)·λ0²/Δλ (Gaussian only).
    pub coherence_length_um: Option<f64>,
    /// Depth pixel spacing of the band, π(N−1)/(N·K), N = pixels, no padding.
    pub depth_spacing_um: f64,
    /// The same from λ0²/(2·Δλ_span), λ0 the band's centre wavelength.
    pub depth_spacing_from_span_um: f64,
    /// Depth where the fringe visibility falls to one half (−6 dB), at the centre wavelength.
    pub rolloff_6db_depth_um: Option<f64>,
    pub dispersion: DispersionTruth,
    pub reflectors: Vec<scene::Reflector>,
    pub interfaces: Vec<InterfaceTruth>,
    /// Scanned scenes: timing, the sample's motion per frame, vessels.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub scan: Option<ScanTruth>,
    /// Layered samples: every interface at every A-line, each layer's
    /// group index and attenuation.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub layers: Option<LayerTruth>,
}

/// Ground truth of a layered sample's geometry and optical properties.
#[derive(Debug, Clone, Serialize)]
pub struct LayerTruth {
    /// Optical depth (in air, µm, zero delay at 0) of every interface (top
    /// first, the last is the bottom of the last layer) at every A-line of
    /// every slow-axis position's first B-scan: [surface][position][A-line].
    pub surfaces_um: Vec<Vec<Vec<f64>>>,
    /// Per layer (top first).
    pub group_index: Vec<f64>,
    pub attenuation_per_mm: Vec<f64>,
    /// Geometric thickness of each layer (optical / group index), µm:
    /// [layer][position][A-line].
    pub thickness_um: Vec<Vec<Vec<f64>>>,
}

/// The layered sample's truth, as imaged (motion included).
fn layer_truth(scene: &Scene, scanned: Option<&ScannedSample>) -> Option<LayerTruth> {
    let s = scene.sample.as_ref()?;
    let positions = scene.frames / scene.repeats;
    let per_position: Vec<Vec<Vec<f64>>> = (0..positions)
        .map(|p| {
            (0..scene.alines)
                .map(|a| {
                    let (ifs, dz) = interfaces_seen(scene, a, p * scene.repeats, scanned);
                    ifs.iter().map(|i| i.0 + dz).collect()
                })
                .collect()
        })
        .collect();
    let n = s.layers.len() + 1;
    let surfaces_um: Vec<Vec<Vec<f64>>> = (0..n).map(|i| per_position.iter().map(|lines| lines.iter().map(|d| d[i]).collect()).collect()).collect();
    let thickness_um = s
        .layers
        .iter()
        .enumerate()
        .map(|(i, layer)| per_position.iter().map(|lines| lines.iter().map(|d| (d[i + 1] - d[i]) / layer.group_index).collect()).collect())
        .collect();
    Some(LayerTruth {
        surfaces_um,
        group_index: s.layers.iter().map(|l| l.group_index).collect(),
        attenuation_per_mm: s.layers.iter().map(|l| l.attenuation_per_mm).collect(),
        thickness_um,
    })
}

/// Ground truth of a scanned scene.
#[derive(Debug, Clone, Serialize)]
pub struct ScanTruth {
    pub aline_period_us: f64,
    /// Time from the first A-line of one B-scan to the next, µs.
    pub frame_period_us: f64,
    pub aline_spacing_um: f64,
    pub position_spacing_um: f64,
    /// Centre wavelength of the band (λ of the middle wavenumber), nm.
    pub band_centre_nm: f64,
    /// Per frame: the sample's displacement at the frame's first A-line
    /// (lateral µm along the fast axis, axial µm of optical depth; bulk
    /// drift included) and the same in pixels: A-lines, and depth pixels of
    /// `depth_spacing_um` (no zero-padding).
    pub frames: Vec<FrameMotion>,
    pub vessels: Vec<beam::VesselTruth>,
    /// `<stem>.truth.h5` with the axial velocity field, when there are vessels.
    pub velocity_field: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct FrameMotion {
    pub frame: usize,
    pub time_us: f64,
    pub lateral_um: f64,
    pub axial_um: f64,
    pub lateral_px: f64,
    pub axial_px: f64,
}

/// Precomputed per-pixel quantities.
struct Optics {
    k: Vec<f64>,
    spectrum: Vec<f64>,
    sigma_k: Vec<f64>,
    pixel_dk: Vec<f64>,
    chirp: Vec<f64>,
    pattern: Vec<f64>,
    /// 2·k per pixel and 2·σ_k², the fringe kernel's tables.
    two_k: Vec<f64>,
    two_sigma2: Vec<f64>,
}

impl Optics {
    fn tables(&self) -> FringeTables<'_> {
        FringeTables {
            two_k: &self.two_k,
            chirp: &self.chirp,
            two_sigma2: &self.two_sigma2,
            pixel_dk: &self.pixel_dk,
            max_pixel_dk: self.pixel_dk.iter().fold(0.0, |m: f64, &d| m.max(d)),
            max_two_sigma2: self.two_sigma2.iter().fold(0.0, |m: f64, &d| m.max(d)),
            roll_off: self.sigma_k.iter().any(|&s| s > 0.0) || self.pixel_dk.iter().any(|&d| d > 0.0),
        }
    }
}

fn source_spectrum(scene: &Scene, k: f64) -> f64 {
    let gauss = |centre_nm: f64, fwhm_nm: f64| {
        let k0 = wavenumber(centre_nm);
        let dk = 2.0 * std::f64::consts::PI * (fwhm_nm * 1e-3) / (centre_nm * 1e-3).powi(2);
        (-4.0 * std::f64::consts::LN_2 * ((k - k0) / dk).powi(2)).exp()
    };
    let s = &scene.source;
    match s.shape {
        SpectrumShape::Gaussian => gauss(s.centre_nm, s.fwhm_nm),
        SpectrumShape::Flat => 1.0,
        SpectrumShape::GaussianSum => {
            let total: f64 = s.components.iter().map(|c| c.weight).sum();
            s.components.iter().map(|c| c.weight * gauss(c.centre_nm, c.fwhm_nm)).sum::<f64>() / total
        }
    }
}

/// Fringe visibility of a path difference z at pixel p.
fn visibility(o: &Optics, p: usize, z: f64) -> f64 {
    let mut v = (-2.0 * o.sigma_k[p] * o.sigma_k[p] * z * z).exp();
    let x = z * o.pixel_dk[p];
    if x != 0.0 {
        v *= x.sin() / x;
    }
    v
}

fn optics(scene: &Scene, wl: &[f64]) -> Optics {
    let n = wl.len();
    let k: Vec<f64> = wl.iter().map(|&l| wavenumber(l)).collect();
    let spectrum = k.iter().map(|&kk| source_spectrum(scene, kk)).collect();
    let res = scene.spectrometer.resolution_nm * 1e-3;
    let fwhm_to_sigma = 1.0 / (2.0 * (2.0 * std::f64::consts::LN_2).sqrt());
    let sigma_k: Vec<f64> = wl
        .iter()
        .map(|&l| 2.0 * std::f64::consts::PI * res / (l * 1e-3).powi(2) * fwhm_to_sigma)
        .collect();
    let pixel_dk: Vec<f64> = (0..n)
        .map(|p| {
            if !scene.spectrometer.pixel_integration {
                return 0.0;
            }
            let (a, b) = (p.saturating_sub(1), (p + 1).min(n - 1));
            (k[b] - k[a]).abs() / (b - a) as f64
        })
        .collect();
    let k0 = wavenumber(scene.source.centre_nm);
    let thickness_um = scene.dispersion.fused_silica_mm * 1e3;
    let chirp = k.iter().map(|&kk| silica_chirp_rad(thickness_um, kk, k0)).collect();
    let mut rng = ChaCha8Rng::seed_from_u64(scene.seed);
    rng.set_stream(u64::MAX);
    let pattern = (0..n)
        .map(|_| scene.detector.fixed_pattern_counts * rng.sample::<f64, _>(StandardNormal))
        .collect();
    let two_k = k.iter().map(|&kk| 2.0 * kk).collect();
    let two_sigma2 = sigma_k.iter().map(|&s: &f64| 2.0 * s * s).collect();
    Optics { k, spectrum, sigma_k, pixel_dk, chirp, pattern, two_k, two_sigma2 }
}

/// Fractions (u, v) of the fast-axis and slow-axis extent (0 at the first,
/// 1 at the last A-line or position) of A-line `a` of frame `f`.
fn aline_fractions(scene: &Scene, a: usize, f: usize) -> (f64, f64) {
    let u = if scene.alines > 1 { a as f64 / (scene.alines - 1) as f64 } else { 0.5 };
    let positions = scene.frames / scene.repeats;
    let position = f / scene.repeats;
    let v = if positions > 1 { position as f64 / (positions - 1) as f64 } else { 0.5 };
    (u, v)
}

/// The interfaces (optical depth, reflectivity) seen by A-line `a` of frame
/// `f`, and the axial displacement of the sample there.
fn interfaces_seen(scene: &Scene, a: usize, f: usize, scanned: Option<&ScannedSample>) -> (Vec<(f64, f64)>, f64) {
    let Some(s) = &scene.sample else { return (Vec::new(), scanned.map_or(0.0, |sc| sc.displacement(scene, f, a)[1])) };
    match scanned {
        Some(sc) => {
            let [bx, by] = sc.beam_in_sample(scene, f, a);
            let (u, v) = scan_fractions(scene, bx, by);
            (s.interfaces_at(u, v), sc.displacement(scene, f, a)[1])
        }
        None => {
            let (u, v) = aline_fractions(scene, a, f);
            (s.interfaces_at(u, v), 0.0)
        }
    }
}

/// Fractions (u, v) of the scan of a point (x, y) µm in a scanned scene.
fn scan_fractions(scene: &Scene, x: f64, y: f64) -> (f64, f64) {
    let scan = scene.scan.as_ref().expect("scanned scene");
    let positions = scene.frames / scene.repeats;
    let u = if scene.alines > 1 { x / ((scene.alines - 1) as f64 * scan.aline_spacing_um) } else { 0.5 };
    let v = if positions > 1 { y / ((positions - 1) as f64 * scan.position_spacing_um) } else { 0.5 };
    (u, v)
}

/// Interfaces of the layered sample: (centre depth, reflectivity), top first.
fn interfaces(scene: &Scene) -> Vec<(f64, f64)> {
    let Some(s) = &scene.sample else { return Vec::new() };
    let mut out = Vec::new();
    let mut z = s.surface_um;
    for layer in &s.layers {
        out.push((z, layer.top_reflectivity));
        z += layer.thickness_um * layer.group_index;
    }
    out.push((z, s.bottom_reflectivity));
    out
}

/// One A-line's spectrum in counts, before noise and clipping.
/// `sample_arm` false gives the blocked-sample-arm background. `rng` draws
/// the scatterers: seeded by position, so repeated B-scans see the same
/// sample. In a scanned scene the scatterers come from `scanned` instead.
#[allow(clippy::too_many_arguments)]
fn clean_spectrum(scene: &Scene, o: &Optics, a: usize, f: usize, sample_arm: bool, rng: &mut ChaCha8Rng, scanned: Option<&ScannedSample>, out: &mut [f64]) {
    // Reflectors that take part in sample–sample terms (depth,
    // reflectivity), and the rest (depth, fringe amplitude 2·√R·weight).
    let mut coupled: Vec<(f64, f64)> = Vec::new();
    let mut scatterers: Vec<(f64, f64)> = Vec::new();
    let mut dc = 1.0;
    if sample_arm {
        let (ifs, dz) = interfaces_seen(scene, a, f, scanned);
        let depths: Vec<f64> = ifs.iter().map(|i| i.0).collect();
        coupled.extend(scene.reflectors.iter().map(|r| (r.depth_um + dz, r.reflectivity)));
        // Each interface weakened by the layers above it (round trip).
        if let Some(s) = &scene.sample {
            coupled.extend(ifs.iter().map(|&(z, r)| (z + dz, r * s.field_weight(&depths, z).powi(2))));
        }
        match scanned {
            Some(sc) => sc.scatterers_seen(scene, f, a, &mut scatterers),
            None => {
                if let Some(s) = &scene.sample {
                    for (i, layer) in s.layers.iter().enumerate() {
                        let (top, bottom) = (depths[i], depths[i + 1]);
                        for _ in 0..layer.scatterers {
                            let z = top + (bottom - top) * rng.random::<f64>();
                            let r = layer.scatterer_reflectivity * rng.sample::<f64, _>(Exp1);
                            scatterers.push((z, 2.0 * r.sqrt() * s.field_weight(&depths, z)));
                        }
                    }
                }
            }
        }
        dc += coupled.iter().map(|r| r.1).sum::<f64>() + scatterers.iter().map(|s| 0.25 * s.1 * s.1).sum::<f64>();
        coupled.retain(|r| r.1 > 0.0);
    }
    out.fill(dc);
    let tables = o.tables();
    for &(z, r) in &coupled {
        add_fringe(&tables, 2.0 * r.sqrt(), z, true, out);
    }
    for &(z, amplitude) in &scatterers {
        if amplitude > 0.0 {
            add_fringe(&tables, amplitude, z, true, out);
        }
    }
    for i in 0..coupled.len() {
        for j in i + 1..coupled.len() {
            let dz = coupled[j].0 - coupled[i].0;
            add_fringe(&tables, 2.0 * (coupled[i].1 * coupled[j].1).sqrt(), dz, false, out);
        }
    }
    let d = &scene.detector;
    for (v, s) in out.iter_mut().zip(o.spectrum.iter()) {
        *v *= d.reference_counts * s;
    }
}

/// Adds noise and the detector's offsets, then clips to [0, full_scale].
fn detect(scene: &Scene, o: &Optics, rng: &mut ChaCha8Rng, line: &mut [f64]) {
    let d = &scene.detector;
    let integer = !d.dtype.is_float();
    for (p, v) in line.iter_mut().enumerate() {
        let signal = v.max(0.0);
        let mut counts = signal + d.dark_counts + o.pattern[p];
        if d.electrons_per_count > 0.0 {
            counts += (signal / d.electrons_per_count).sqrt() * rng.sample::<f64, _>(StandardNormal);
        }
        if d.read_noise_counts > 0.0 {
            counts += d.read_noise_counts * rng.sample::<f64, _>(StandardNormal);
        }
        if integer {
            counts = counts.round();
        }
        *v = counts.clamp(0.0, d.full_scale);
    }
}

/// Simulates `rows` spectra of frame `f` (or background rows when `sample_arm` is false).
fn simulate_rows(scene: &Scene, o: &Optics, f: usize, rows: usize, sample_arm: bool, scanned: Option<&ScannedSample>) -> Array2<f64> {
    let pixels = o.k.len();
    let mut out = Array2::<f64>::zeros((rows, pixels));
    out.as_slice_mut()
        .unwrap()
        .par_chunks_mut(pixels)
        .enumerate()
        .for_each(|(a, line)| {
            // Separate streams: the sample's scatterers (by slow-axis position)
            // and the detector noise (by frame), for A-line a.
            let kind = if sample_arm { 0 } else { 1u64 << 62 };
            let mut sample_rng = ChaCha8Rng::seed_from_u64(scene.seed);
            sample_rng.set_stream(kind | (1 << 61) | (((f / scene.repeats) as u64) << 32) | a as u64);
            let mut noise_rng = ChaCha8Rng::seed_from_u64(scene.seed);
            noise_rng.set_stream(kind | ((f as u64) << 32) | a as u64);
            clean_spectrum(scene, o, a, f, sample_arm, &mut sample_rng, scanned, line);
            detect(scene, o, &mut noise_rng, line);
        });
    out
}

fn write_rows<T: H5Type + Copy>(ds: &hdf5::Dataset, rows: &Array2<f64>, frame: Option<usize>, convert: fn(f64) -> T) -> Result<()> {
    let data = rows.mapv(convert);
    match frame {
        Some(f) => ds.write_slice(&data, ndarray::s![f, .., ..])?,
        None => ds.write(&data)?,
    }
    Ok(())
}

macro_rules! with_dtype {
    ($dtype:expr, $f:ident, $($arg:expr),*) => {
        match $dtype {
            SampleType::U8 => $f::<u8>($($arg),*, |v| v as u8),
            SampleType::U16 => $f::<u16>($($arg),*, |v| v as u16),
            SampleType::I16 => $f::<i16>($($arg),*, |v| v as i16),
            SampleType::U32 => $f::<u32>($($arg),*, |v| v as u32),
            SampleType::F32 => $f::<f32>($($arg),*, |v| v as f32),
            SampleType::F64 => $f::<f64>($($arg),*, |v| v),
        }
    };
}

fn new_dataset<T: H5Type>(file: &hdf5::File, name: &str, shape: &[usize], chunk: &[usize], _c: fn(f64) -> T) -> Result<hdf5::Dataset> {
    Ok(file.new_dataset::<T>().shape(shape).chunk(chunk).create(name)?)
}

/// Computes the ground truth of a scene.
pub fn truth(scene: &Scene) -> Truth {
    let wl = wavelength_map(&scene.spectrometer);
    let n = wl.len();
    let (k_lo, k_hi) = (wavenumber(wl[n - 1]), wavenumber(wl[0]));
    let span = k_hi - k_lo;
    let centre_nm = optics::wavelength(0.5 * (k_lo + k_hi));
    let o = optics(scene, &wl);

    // Chirp expressed in the correction polynomial's coordinate x ∈ [−½, ½].
    let k0 = wavenumber(scene.source.centre_nm);
    let thickness_um = scene.dispersion.fused_silica_mm * 1e3;
    let xs: Vec<f64> = (0..n).map(|j| j as f64 / (n - 1) as f64 - 0.5).collect();
    let phase: Vec<f64> = xs.iter().map(|&x| silica_chirp_rad(thickness_um, k_lo + (x + 0.5) * span, k0)).collect();
    let coeffs = optics::fit_polynomial(&xs, &phase, 3);
    let gdd = 2.0 * scene.dispersion.fused_silica_mm * optics::silica_gvd_fs2_per_mm(scene.source.centre_nm * 1e-3);

    // −6 dB visibility depth at the centre pixel, by bisection.
    let mid = n / 2;
    let rolloff = if o.sigma_k[mid] > 0.0 || o.pixel_dk[mid] > 0.0 {
        let (mut lo, mut hi) = (0.0, optics::nyquist_depth_um(centre_nm, (wl[n - 1] - wl[0]) / n as f64) * 4.0);
        if visibility(&o, mid, hi) < 0.5 {
            for _ in 0..100 {
                let m = 0.5 * (lo + hi);
                if visibility(&o, mid, m) > 0.5 {
                    lo = m
                } else {
                    hi = m
                }
            }
            Some(0.5 * (lo + hi))
        } else {
            None
        }
    } else {
        None
    };

    let coherence = match scene.source.shape {
        SpectrumShape::Gaussian => Some(optics::coherence_length_um(scene.source.centre_nm, scene.source.fwhm_nm)),
        _ => None,
    };
    Truth {
        scene: scene.clone(),
        coherence_length_um: coherence,
        depth_spacing_um: optics::fft_depth_step_um(span, n),
        depth_spacing_from_span_um: centre_nm * centre_nm / (2.0 * (wl[n - 1] - wl[0])) * 1e-3,
        rolloff_6db_depth_um: rolloff,
        dispersion: DispersionTruth {
            fused_silica_mm: scene.dispersion.fused_silica_mm,
            gdd_round_trip_fs2: gdd,
            a2_rad: coeffs[2],
            a3_rad: coeffs[3],
        },
        reflectors: scene.reflectors.clone(),
        interfaces: interfaces(scene)
            .into_iter()
            .enumerate()
            .map(|(i, (z, r))| InterfaceTruth {
                reflectivity: r,
                depth_um: z,
                depth_um_frame0: (0..scene.alines).map(|a| interfaces_seen(scene, a, 0, None).0[i].0).collect(),
            })
            .collect(),
        scan: None,
        layers: None,
    }
}

/// The scanned part of the truth.
fn scan_truth(scene: &Scene, sample: &ScannedSample, depth_spacing_um: f64, band_centre_nm: f64, velocity_field: Option<String>) -> ScanTruth {
    let scan = scene.scan.as_ref().expect("scanned scene");
    ScanTruth {
        aline_period_us: scan.aline_period_us,
        frame_period_us: scene::aline_time_us(scene, scan, 1, 0),
        aline_spacing_um: scan.aline_spacing_um,
        position_spacing_um: scan.position_spacing_um,
        band_centre_nm,
        frames: (0..scene.frames)
            .map(|f| {
                let [lateral, axial] = sample.displacement(scene, f, 0);
                FrameMotion {
                    frame: f,
                    time_us: scene::aline_time_us(scene, scan, f, 0),
                    lateral_um: lateral,
                    axial_um: axial,
                    lateral_px: lateral / scan.aline_spacing_um,
                    axial_px: axial / depth_spacing_um,
                }
            })
            .collect(),
        vessels: sample.vessel_truth(),
        velocity_field,
    }
}

/// Switches the simulator's fringe kernel to the standard library's
/// cos/sin/exp (for the bench's same-run comparison) or back.
pub fn use_standard_library_math(on: bool) {
    kernels::use_standard_library(on);
}

/// Path of the velocity-field truth beside a capture: `<stem>.truth.h5`.
pub fn velocity_truth_path(capture: &Path) -> std::path::PathBuf {
    capture.with_file_name(format!("{}.truth.h5", capture.file_stem().unwrap_or_default().to_string_lossy()))
}

/// Path of the truth file beside a capture: `<stem>.truth.json`.
pub fn truth_path(capture: &Path) -> std::path::PathBuf {
    capture.with_file_name(format!("{}.truth.json", capture.file_stem().unwrap_or_default().to_string_lossy()))
}

/// Simulates `scene` into the capture file `out` (written atomically) and its
/// truth file beside it (and, with vessels, the velocity field in
/// `<stem>.truth.h5`). `progress` is called with the frames done so far.
pub fn simulate(scene: &Scene, out: &Path) -> Result<Truth> {
    simulate_with_progress(scene, out, &|_| {})
}

/// [`simulate`] reporting each finished frame.
pub fn simulate_with_progress(scene: &Scene, out: &Path, progress: &(dyn Fn(usize) + Sync)) -> Result<Truth> {
    let wl = wavelength_map(&scene.spectrometer);
    let o = optics(scene, &wl);
    let pixels = wl.len();
    let mut scanned = scene.scan.as_ref().map(|_| {
        ScannedSample::new(scene, &|x, y| {
            let (u, v) = scan_fractions(scene, x, y);
            scene.sample.as_ref().map(|s| s.interfaces_at(u, v).iter().map(|i| i.0).collect()).unwrap_or_default()
        })
    });
    write_atomically(out, |tmp| {
        let file = create_file(tmp)?;
        let fringes = with_dtype!(scene.detector.dtype, new_dataset, &file, "fringes", &[scene.frames, scene.alines, pixels], &[1, scene.alines, pixels])?;
        write_attr(&fringes, "full_scale", scene.detector.full_scale)?;
        write_attr_str(&fringes, "units", "detector counts")?;
        write_attr_str(&fringes, "axes", "frame,aline,pixel")?;
        if let Some(scan) = &scene.scan {
            write_attr(&fringes, "aline_period_us", scan.aline_period_us)?;
            write_attr(&fringes, "frame_period_us", scene::aline_time_us(scene, scan, 1, 0))?;
            write_attr(&fringes, "aline_spacing_um", scan.aline_spacing_um)?;
            write_attr(&fringes, "frame_spacing_um", scan.position_spacing_um)?;
            write_attr(&fringes, "repeats_per_position", scene.repeats as u32)?;
        }
        for f in 0..scene.frames {
            if let Some(sc) = scanned.as_mut() {
                sc.advance_to_frame(scene, f);
            }
            let rows = simulate_rows(scene, &o, f, scene.alines, true, scanned.as_ref());
            with_dtype!(scene.detector.dtype, write_rows, &fringes, &rows, Some(f))?;
            progress(f + 1);
        }
        let recorded = match scene.spectrometer.recorded_map {
            scene::RecordedMap::Exact => wl.clone(),
            scene::RecordedMap::Nominal => {
                let s = &scene.spectrometer;
                (0..pixels).map(|p| s.start_nm + (s.stop_nm - s.start_nm) * p as f64 / (pixels - 1) as f64).collect()
            }
        };
        let map = write_1d(&file, "wavelength_nm", &recorded)?;
        write_attr_str(&map, "units", "nm")?;
        if scene.background_lines > 0 {
            let rows = simulate_rows(scene, &o, 0, scene.background_lines, false, None);
            let ds = with_dtype!(scene.detector.dtype, new_dataset, &file, "background", &[scene.background_lines, pixels], &[scene.background_lines, pixels])?;
            with_dtype!(scene.detector.dtype, write_rows, &ds, &rows, None)?;
            write_attr_str(&ds, "description", "spectra recorded with the sample arm blocked")?;
        }
        write_attr_str(&file, "producer", concat!("fringeflow simulate ", env!("CARGO_PKG_VERSION")))?;
        file.close()?;
        Ok(())
    })
    .with_context(|| format!("writing {}", out.display()))?;
    let mut t = truth(scene);
    if let Some(sc) = &scanned {
        let band_centre_nm = {
            let n = wl.len();
            optics::wavelength(0.5 * (wavenumber(wl[0]) + wavenumber(wl[n - 1])))
        };
        let field = if scene.vessels.is_empty() {
            None
        } else {
            let vp = velocity_truth_path(out);
            let depth_um: Vec<f64> = (0..pixels / 2).map(|i| i as f64 * t.depth_spacing_um).collect();
            let values = sc.velocity_field(scene, &depth_um);
            write_atomically(&vp, |tmp| {
                let file = create_file(tmp)?;
                let ds = file
                    .new_dataset_builder()
                    .with_data(&ndarray::Array3::from_shape_vec((sc.positions(), depth_um.len(), scene.alines), values.clone())?)
                    .create("axial_velocity_mm_s")?;
                write_attr_str(&ds, "description", "axial flow velocity on the beam axis, mm/s, positive away from the probe; NaN outside vessels")?;
                write_attr_str(&ds, "axes", "position,depth,aline")?;
                write_1d(&file, "depth_um", &depth_um)?;
                file.close()?;
                Ok(())
            })
            .with_context(|| format!("writing {}", vp.display()))?;
            Some(vp.file_name().unwrap_or_default().to_string_lossy().into_owned())
        };
        t.scan = Some(scan_truth(scene, sc, t.depth_spacing_um, band_centre_nm, field));
    }
    t.layers = layer_truth(scene, scanned.as_ref());
    let json = serde_json::to_vec_pretty(&t)?;
    let tp = truth_path(out);
    write_atomically(&tp, |tmp| Ok(std::fs::write(tmp, &json)?)).with_context(|| format!("writing {}", tp.display()))?;
    Ok(t)
}
