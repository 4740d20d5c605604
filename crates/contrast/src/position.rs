//! One slow-axis position's repeated B-scans through everything beyond the
//! dB image: registration (repeats to the first, positions to the one
//! before), the averaged structure image, Doppler flow and angiography.
//! `run` hands over each position's frames as they are reconstructed and
//! gets one [`PositionOutput`] back; nothing of other positions is held
//! except the previous position's registration spectrum.
//!
//! Must agree with: the intensity-only averaging of earlier versions (the
//! structure of unshifted repeats is computed from their dB images with the
//! same sums, so the bits are the same).

use anyhow::Result;
use ndarray::Array2;
use rayon::prelude::*;
use rustfft::num_complex::Complex32;
use serde::Serialize;

use super::angiography;
use super::doppler::{DopplerScale, KasaiSums};
use super::registration::{wrapped_margin, Registrar, RegistrationSpectrum, Shift};
use crate::analysis::amplitude_from_db;
use crate::pipeline::config::{AngiographyMethod, DopplerPairs, PipelineConfig};
use crate::stages::log_compression::{noise_floor_db, to_db};

/// One reconstructed B-scan of a position.
#[derive(Default)]
pub struct RepeatFrame {
    /// Index of the frame in the capture.
    pub index: usize,
    /// dB image, depth × A-lines.
    pub db: Array2<f32>,
    /// The complex depth profile (depth × A-lines) when a stage needs it.
    pub complex: Option<Array2<Complex32>>,
    /// Split-spectrum: each sub-band's amplitude (depth × A-lines).
    pub sub_bands: Vec<Array2<f32>>,
    pub saturated: u64,
    /// |complex|, filled by the processor (a buffer kept with the frame).
    pub amplitude: Array2<f32>,
}

/// |A| of a complex image, in parallel, into `out` (resized when needed).
pub fn modulus_into(c: &Array2<Complex32>, out: &mut Array2<f32>) {
    if out.dim() != c.dim() {
        *out = Array2::zeros(c.dim());
    }
    ndarray::Zip::from(out).and(c).par_for_each(|o, v| *o = v.norm_sqr().sqrt());
}

/// What registration measured and applied for one B-scan (repeat and
/// position registration together), and how it went. Convention (also in
/// log.json as `contrast.registration_convention`): the displacement is
/// where this B-scan's content sits relative to the reference (the
/// position's first repeat, and with position registration the first
/// position), in pixels: axial positive = deeper (away from the probe),
/// lateral positive = towards higher A-line index. The correction applied
/// moves the content by the opposite amount, so it is −displacement.
#[derive(Debug, Clone, Serialize)]
pub struct FrameShift {
    pub frame: usize,
    pub displacement_axial_px: f64,
    pub displacement_lateral_px: f64,
    pub correction_axial_px: f64,
    pub correction_lateral_px: f64,
    /// Format 2's names of the displacement (the same values), kept for
    /// one format version.
    pub axial_px: f64,
    pub lateral_px: f64,
    /// Phase-correlation peak of the repeat registration (None for the
    /// first repeat, which is the reference).
    pub repeat_peak: Option<f64>,
    /// The same for the registration to the previous position.
    pub position_peak: Option<f64>,
    /// False when a registration's peak was below `min_peak` and its shift
    /// was not applied.
    pub registered: bool,
}

/// What a position gives the writer.
pub struct PositionOutput {
    pub position: usize,
    pub input_frames: [usize; 2],
    /// The (averaged) structure image in dB, depth × A-lines.
    pub structure_db: Array2<f32>,
    /// The position's first B-scan as reconstructed (for the averaging record).
    pub first_single_db: Option<Array2<f32>>,
    pub saturated: u64,
    /// Input frames' complex profiles (as reconstructed, before
    /// registration), when the output asks for them.
    pub complex: Vec<(usize, Array2<Complex32>)>,
    pub shifts: Vec<FrameShift>,
    /// Axial velocity, mm/s (NaN where masked), depth × A-lines.
    pub doppler: Option<Array2<f32>>,
    /// Mean bulk phase removed per pair set, rad.
    pub doppler_bulk_phase: Vec<f64>,
    /// Bright pixels of the bulk vote and those left out as flow.
    pub doppler_vote: super::phase::BulkVote,
    /// Per method: flow image (NaN where masked) and its en face row.
    pub angiography: Vec<(AngiographyMethod, Array2<f32>, Vec<f32>)>,
    /// The layer surfaces of the structure image, when `[layers]` asks.
    pub surfaces: Option<super::surfaces::BscanSurfaces>,
    /// Attenuation coefficient (mm⁻¹, depth × A-lines) and each layer's
    /// values for the medians, when `[layers] attenuation` asks.
    pub attenuation: Option<(Array2<f32>, Vec<Vec<f32>>)>,
    /// Flattening: the shift applied to each A-line, depth pixels
    /// (positive: moved deeper), the A-lines where the surface was missing
    /// (their shift interpolated), and the depth it was moved to, µm.
    pub flattening: Option<(Vec<f32>, usize, f64)>,
    /// Each `[[layers.slab]]`'s en face row.
    pub slabs: Vec<SlabOutput>,
    pub warnings: Vec<String>,
}

/// One slab's en face values at one position.
pub struct SlabOutput {
    /// Structure: the projection of the linear intensity, in dB, per A-line.
    pub structure_db: Vec<f32>,
    /// Per angiography method (in the pipeline's order): its projection.
    pub angiography: Vec<Vec<f32>>,
    /// A-lines where the slab holds no rows (a surface missing, or the
    /// bottom above the top there).
    pub empty_alines: usize,
}

/// Settings and state carried from position to position.
pub struct PositionProcessor<'a> {
    config: &'a PipelineConfig,
    depth_um: Vec<f64>,
    registrar: Option<Registrar>,
    doppler_scale: Option<DopplerScale>,
    previous: Option<RegistrationSpectrum>,
    cumulative: Shift,
    log2: crate::pipeline::fused::FastLog2,
    /// The surfaces of the previous position (the 3-D constraint).
    previous_surfaces: Option<super::surfaces::BscanSurfaces>,
    /// Flattening: the depth the surface is moved to, µm (fixed at the
    /// first position), and the column shifter.
    flatten_target_um: Option<f64>,
    flattener: Option<super::flatten::Flattener>,
    /// The k-resampling's power transfer per row (attenuation).
    resampling_power: Option<Vec<f64>>,
}

impl<'a> PositionProcessor<'a> {
    pub fn new(config: &'a PipelineConfig, depth_um: Vec<f64>, alines: usize, doppler_scale: Option<DopplerScale>) -> Self {
        let registrar = config.registration.enabled().then(|| Registrar::new(depth_um.len(), alines, config.registration.upsampling));
        PositionProcessor { config, depth_um, registrar, doppler_scale, previous: None,
            cumulative: Shift::NONE,
            log2: crate::pipeline::fused::FastLog2::new(),
            previous_surfaces: None,
            flatten_target_um: config.layers.flatten_depth_um,
            flattener: None,
            resampling_power: None,
        }
    }

    /// The k-resampling's power transfer per depth row (from the plan:
    /// `Plan::resampling_power_transfer`), divided out before the
    /// attenuation estimate.
    pub fn set_resampling_power(&mut self, transfer: Vec<f64>) {
        self.resampling_power = Some(transfer);
    }

    /// Processes the repeats of `position` (in acquisition order). The
    /// frames are left in place (their buffers are reused by the caller);
    /// registration shifts their complex profiles.
    pub fn process(&mut self, position: usize, frames: &mut [RepeatFrame]) -> Result<PositionOutput> {
        let cfg = self.config;
        let n = frames.len();
        let mut warnings = Vec::new();
        let complex_out: Vec<(usize, Array2<Complex32>)> = if cfg.output.complex {
            frames.iter().map(|f| (f.index, f.complex.clone().expect("complex profile requested"))).collect()
        } else {
            Vec::new()
        };

        // Registration: shifts per repeat, then applied.
        let (shifts, applied) = self.register(frames, &mut warnings);
        let shifted: Vec<bool> = applied.iter().map(|s| s.axial_px != 0.0 || s.lateral_px != 0.0).collect();
        let margin = applied.iter().map(|&s| wrapped_margin(s)).fold((0, 0), |m, w| (m.0.max(w.0), m.1.max(w.1)));

        // Structure: mean linear amplitude over the repeats, in dB: from
        // the complex profiles when there are any (after registration),
        // else from the dB images with the sums of the intensity-only path.
        // The averaging record is measured on the first position only.
        let first_single_db = (n > 1 && position == 0).then(|| frames[0].db.clone());
        // Amplitudes: from the complex profiles (after registration), or as
        // the pipeline wrote them (amplitude-only stages).
        if frames[0].complex.is_some() {
            for f in frames.iter_mut() {
                let c = f.complex.as_ref().expect("complex");
                modulus_into(c, &mut f.amplitude);
            }
        }
        let has_amplitude = frames.iter().all(|f| f.amplitude.dim() == f.db.dim());
        if cfg.needs_amplitude() && !has_amplitude {
            anyhow::bail!("internal: angiography needs each B-scan's amplitude");
        }
        let flattening = cfg.layers.flatten.is_some();
        let mut structure_db = self.structure(frames, shifted[0] || flattening);
        let floor_db = noise_floor_db(structure_db.as_slice().expect("standard layout"));
        let floor_power = 10f64.powf(floor_db / 10.0);

        // Layers first (on the structure as registered), so that flattening
        // reaches Doppler and angiography.
        let mut surfaces = cfg.layers.enabled().then(|| {
            let finder = super::surfaces::SurfaceFinder::new(&cfg.layers, self.depth_um.clone());
            finder.find_near(structure_db.view(), floor_db, self.previous_surfaces.as_ref())
        });
        if cfg.layers.max_step_between_positions_um.is_some() {
            self.previous_surfaces = surfaces.clone();
        }
        let mut attenuation = match &surfaces {
            Some(found) if cfg.layers.attenuation => {
                let indices = cfg.layers.layer_group_indices();
                let inputs = super::attenuation::AttenuationInputs {
                    depth_um: &self.depth_um,
                    surfaces_um: &found.depth_um,
                    group_index: &indices,
                    below_group_index: cfg.layers.group_index,
                    alines_averaged: cfg.layers.attenuation_alines,
                    rolloff_6db_um: cfg.layers.rolloff_6db_depth_um,
                    resampling_power: self.resampling_power.as_deref(),
                };
                Some(super::attenuation::attenuation(structure_db.view(), floor_db, &inputs))
            }
            _ => None,
        };
        let flattening = match surfaces.as_mut() {
            Some(found) if flattening => self.flatten(frames, found, attenuation.as_mut().map(|a| &mut a.0), position, &mut warnings),
            _ => None,
        };
        if flattening.is_some() {
            structure_db = self.structure(frames, true);
        }

        let doppler = self.doppler(frames, structure_db.dim(), floor_power);
        let angio = self.angiography(frames, structure_db.view(), floor_db, floor_power, margin);
        let slabs = match &surfaces {
            Some(found) => self.slabs(structure_db.view(), &found.depth_um, &angio),
            None => Vec::new(),
        };

        let saturated = frames.iter().map(|f| f.saturated).sum();
        let input_frames = [frames[0].index, frames[n - 1].index];
        let (doppler, doppler_bulk_phase, doppler_vote) = match doppler {
            Some((v, b, vote)) => (Some(v), b, vote),
            None => (None, Vec::new(), Default::default()),
        };
        Ok(PositionOutput {
            position,
            input_frames,
            structure_db,
            first_single_db,
            saturated,
            complex: complex_out,
            shifts: if self.registrar.is_some() { shifts } else { Vec::new() },
            doppler,
            doppler_bulk_phase,
            doppler_vote,
            angiography: angio,
            surfaces,
            attenuation,
            flattening,
            slabs,
            warnings,
        })
    }

    /// Flattens the position to `[layers] flatten`'s surface: each A-line's
    /// complex profile (every repeat alike) and sub-bands shifted so the
    /// surface lies at the target depth; the amplitudes, the surfaces and
    /// the attenuation map follow. Returns the shifts (pixels) and the
    /// A-lines where the surface was missing; None (with a warning) when it
    /// is missing everywhere.
    fn flatten(&mut self, frames: &mut [RepeatFrame], found: &mut super::surfaces::BscanSurfaces, attenuation: Option<&mut Array2<f32>>, position: usize, warnings: &mut Vec<String>) -> Option<(Vec<f32>, usize, f64)> {
        let cfg = self.config;
        let label = cfg.layers.flatten.as_deref()?;
        let k = cfg.layers.surface_index(label)?;
        let step = if self.depth_um.len() > 1 { self.depth_um[1] - self.depth_um[0] } else { 1.0 };
        let surface = &found.depth_um[k];
        let target = *self.flatten_target_um.get_or_insert_with(|| {
            let mut known: Vec<f32> = surface.iter().copied().filter(|v| v.is_finite()).collect();
            known.sort_by(f32::total_cmp);
            known.get(known.len() / 2).map_or(f64::NAN, |&v| v as f64)
        });
        let Some(shifts) = super::flatten::shifts_px(surface, target, step).filter(|_| target.is_finite()) else {
            if !target.is_finite() {
                self.flatten_target_um = None;
            }
            warnings.push(format!("frame {}: surface \"{label}\" not found on any A-line: position {position} not flattened", frames[0].index));
            return None;
        };
        let missing = found.missing[k];
        let depth = frames[0].amplitude.nrows();
        let max_shift = shifts.iter().fold(0.0f64, |m, s| m.max(s.abs()));
        let len_needed = (depth + max_shift.ceil() as usize + 16).next_power_of_two();
        if self.flattener.as_ref().is_none_or(|f| f.len() < len_needed) {
            self.flattener = Some(super::flatten::Flattener::new(depth, max_shift));
        }
        let flattener = self.flattener.as_ref().expect("made above");
        let carrier = flattener.carrier(frames[0].complex.as_ref().expect("flattening makes the complex profile").view());
        for f in frames.iter_mut() {
            let c = f.complex.as_mut().expect("complex");
            flattener.shift_complex(c, &shifts, carrier);
            modulus_into(c, &mut f.amplitude);
            for band in f.sub_bands.iter_mut() {
                super::flatten::shift_real(band, &shifts, 0.0);
            }
        }
        if let Some(mu) = attenuation {
            super::flatten::shift_real(mu, &shifts, f32::NAN);
        }
        for d in found.depth_um.iter_mut() {
            for (v, s) in d.iter_mut().zip(&shifts) {
                *v += (s * step) as f32;
            }
        }
        Some((shifts.iter().map(|&s| s as f32).collect(), missing, target))
    }

    /// Each `[[layers.slab]]`'s en face row of the structure and of every
    /// angiography map.
    fn slabs(&self, structure_db: ndarray::ArrayView2<f32>, surfaces_um: &[Vec<f32>], angio: &[(AngiographyMethod, Array2<f32>, Vec<f32>)]) -> Vec<SlabOutput> {
        let layers = &self.config.layers;
        let labels = layers.labels();
        let alines = structure_db.ncols();
        layers
            .slabs
            .iter()
            .map(|slab| {
                let (top, bottom) = slab.edges(&labels).expect("slabs are checked when the pipeline is read");
                let rows = super::slab::rows(top, bottom, surfaces_um, &self.depth_um, alines);
                SlabOutput {
                    structure_db: super::slab::structure(structure_db, &rows, slab.projection),
                    angiography: angio.iter().map(|(_, map, _)| super::slab::flow(map.view(), &rows, slab.projection)).collect(),
                    empty_alines: rows.iter().filter(|r| r.is_none()).count(),
                }
            })
            .collect()
    }

    /// Registration of the repeats to the first (and of the position to
    /// the previous one): the shift records and the shifts applied, which
    /// are also applied to the frames' complex profiles and sub-bands.
    fn register(&mut self, frames: &mut [RepeatFrame], warnings: &mut Vec<String>) -> (Vec<FrameShift>, Vec<Shift>) {
        let cfg = self.config;
        let n = frames.len();
        let mut shifts: Vec<FrameShift> = frames
            .iter()
            .map(|f| FrameShift {
                frame: f.index,
                displacement_axial_px: 0.0,
                displacement_lateral_px: 0.0,
                correction_axial_px: 0.0,
                correction_lateral_px: 0.0,
                axial_px: 0.0,
                lateral_px: 0.0,
                repeat_peak: None,
                position_peak: None,
                registered: true,
            })
            .collect();
        let mut applied = vec![Shift::NONE; n];
        if let Some(reg) = &self.registrar {
            let min_peak = cfg.registration.min_peak;
            let reference = reg.spectrum(frames[0].complex.as_ref().expect("complex").view());
            if cfg.registration.repeats {
                for r in 1..n {
                    let s = reg.estimate(&reference, &reg.spectrum(frames[r].complex.as_ref().expect("complex").view()));
                    shifts[r].repeat_peak = Some(round6(s.peak));
                    if s.peak < min_peak {
                        warnings.push(format!(
                            "frame {}: registration to frame {} failed (correlation peak {:.3} < registration.min_peak {min_peak}): not shifted",
                            frames[r].index, frames[0].index, s.peak
                        ));
                        shifts[r].registered = false;
                    } else {
                        applied[r] = s;
                    }
                }
            }
            if cfg.registration.positions {
                if let Some(prev) = &self.previous {
                    let s = reg.estimate(prev, &reference);
                    for f in shifts.iter_mut() {
                        f.position_peak = Some(round6(s.peak));
                    }
                    if s.peak < min_peak {
                        warnings.push(format!(
                            "frame {}: registration to the previous position failed (correlation peak {:.3} < registration.min_peak {min_peak}): position not shifted",
                            frames[0].index, s.peak
                        ));
                        shifts[0].registered = false;
                    } else {
                        self.cumulative = self.cumulative.plus(s);
                    }
                }
                for a in applied.iter_mut() {
                    *a = a.plus(self.cumulative);
                }
            }
            for (r, f) in frames.iter_mut().enumerate() {
                let s = applied[r];
                let (axial, lateral) = (round6(s.axial_px), round6(s.lateral_px));
                let record = &mut shifts[r];
                (record.displacement_axial_px, record.displacement_lateral_px, record.axial_px, record.lateral_px) = (axial, lateral, axial, lateral);
                (record.correction_axial_px, record.correction_lateral_px) = (-axial + 0.0, -lateral + 0.0);
                if s.axial_px != 0.0 || s.lateral_px != 0.0 {
                    reg.apply(f.complex.as_mut().expect("complex"), s);
                    for band in f.sub_bands.iter_mut() {
                        reg.apply_real(band, s);
                    }
                }
            }
            self.previous = Some(reference);
        }
        (shifts, applied)
    }

    /// The structure image in dB: the single frame handed over whole, else
    /// 20·log10 of the mean amplitude over the repeats (from the complex
    /// profiles when there are any), else the mean of the dB images' linear
    /// amplitudes (the intensity-only path).
    fn structure(&self, frames: &mut [RepeatFrame], first_shifted: bool) -> Array2<f32> {
        let n = frames.len();
        let has_amplitude = frames.iter().all(|f| f.amplitude.dim() == f.db.dim());
        if n == 1 && !first_shifted {
            // Handed over whole; the caller refills the slot from the writer's returns.
            std::mem::take(&mut frames[0].db)
        } else if has_amplitude {
            // 20·log10 of the mean amplitude with the fast path's log2.
            let (depth, alines) = frames[0].amplitude.dim();
            let mut out = Array2::<f32>::zeros((depth, alines));
            let inv = 1.0 / n as f32;
            let log2 = self.log2;
            let db_per_log2 = 20.0 * std::f32::consts::LOG10_2;
            let floor = crate::stages::log_compression::AMPLITUDE_FLOOR as f32;
            let rows: Vec<&[f32]> = frames.iter().map(|f| f.amplitude.as_slice().expect("standard layout")).collect();
            out.as_slice_mut().expect("standard layout").par_chunks_mut(alines).enumerate().for_each(|(d, o)| {
                let r = d * alines..(d + 1) * alines;
                o.copy_from_slice(&rows[0][r.clone()]);
                for m in &rows[1..] {
                    for (v, &x) in o.iter_mut().zip(&m[r.clone()]) {
                        *v += x;
                    }
                }
                for v in o.iter_mut() {
                    *v = db_per_log2 * log2.log2((*v * inv).max(floor));
                }
            });
            out
        } else {
            let (depth, alines) = frames[0].db.dim();
            let mut sum = Array2::<f64>::zeros((depth, alines));
            for f in frames.iter() {
                ndarray::Zip::from(&mut sum).and(&f.db).par_for_each(|s, &d| *s += amplitude_from_db(d as f64));
            }
            sum.mapv(|s| to_db(s / n as f64) as f32)
        }
    }

    /// Doppler velocity (Kasai sums between A-lines or repeats), the bulk
    /// phases removed and the vote of the bulk-phase estimate; `None` when
    /// Doppler is off.
    fn doppler(&self, frames: &[RepeatFrame], (depth, alines): (usize, usize), floor_power: f64) -> Option<(Array2<f32>, Vec<f64>, super::phase::BulkVote)> {
        let cfg = self.config;
        match (cfg.doppler.enabled, &self.doppler_scale) {
            (true, Some(scale)) => {
                let mut sums = KasaiSums::new(&cfg.doppler, depth, alines, floor_power);
                match cfg.doppler.between {
                    DopplerPairs::Alines => frames.iter().for_each(|f| sums.add_frame(f.complex.as_ref().expect("complex").view())),
                    DopplerPairs::Repeats => {
                        for w in frames.windows(2) {
                            sums.add_repeat_pair(w[0].complex.as_ref().expect("complex").view(), w[1].complex.as_ref().expect("complex").view());
                        }
                    }
                }
                let threshold = floor_power * 10f64.powf(cfg.doppler.threshold_db / 10.0);
                Some((sums.velocity(&cfg.doppler, scale, threshold, alines), sums.bulk_phases.iter().map(|&p| round6(p)).collect(), sums.vote))
            }
            _ => None,
        }

    }

    /// Every angiography method's map (masked below the threshold and in
    /// the wrapped margins of registration) and its en face row.
    fn angiography(&self, frames: &[RepeatFrame], structure_db: ndarray::ArrayView2<f32>, floor_db: f64, floor_power: f64, margin: (usize, usize)) -> Vec<(AngiographyMethod, Array2<f32>, Vec<f32>)> {
        let cfg = self.config;
        let mut angio = Vec::new();
        if cfg.angiography.enabled() {
            let a = &cfg.angiography;
            let views: Vec<_> = frames.iter().map(|f| f.amplitude.view()).collect();
            let threshold = floor_db + a.threshold_db;
            let surface = angiography::surface(structure_db, floor_db + a.surface_threshold_db);
            let slabs = angiography::slabs(a, &self.depth_um, &surface);
            for &method in &a.methods {
                let mut map = match method {
                    AngiographyMethod::Decorrelation => angiography::decorrelation(&views),
                    AngiographyMethod::SpeckleVariance => angiography::speckle_variance(&views, a.speckle_variance_scale),
                    AngiographyMethod::ComplexDifference => {
                        let c: Vec<_> = frames.iter().map(|f| f.complex.as_ref().expect("complex").view()).collect();
                        angiography::complex_difference(&c, (floor_power * 10f64.powf(a.threshold_db / 10.0)) as f32, a.bulk_pool_alines)
                    }
                    AngiographyMethod::SplitSpectrum => {
                        let bands = frames[0].sub_bands.len();
                        let mut mean = Array2::<f32>::zeros(structure_db.dim());
                        for b in 0..bands {
                            let v: Vec<_> = frames.iter().map(|f| f.sub_bands[b].view()).collect();
                            mean += &angiography::decorrelation(&v);
                        }
                        mean / bands as f32
                    }
                };
                angiography::mask(&mut map, structure_db, threshold, margin);
                let row = angiography::en_face(map.view(), &slabs, a.en_face_projection);
                angio.push((method, map, row));
            }
        }

        angio
    }

}

fn round6(v: f64) -> f64 {
    (v * 1e6).round() / 1e6
}
