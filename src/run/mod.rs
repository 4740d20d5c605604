//! Reconstructing one capture, in phases: open and check ([`open`]), plan
//! ([`plan`]), compute (frames through the plan, repeats of each position
//! through `contrast`, in [`compute`]), write (one position at a time, in
//! [`writer`]) and log ([`log`]), all staged so that a failure or an
//! interruption leaves nothing.
//!
//! The log holds everything needed to reproduce the outputs (`rerun` reads
//! it); its `timing` section is the only part that changes between
//! identical runs.

mod budget;
mod compute;
mod layers_log;
pub mod log;
pub mod open;
mod ownership;
mod plan;
pub mod writer;

use anyhow::{Context, Result};
use indicatif::ProgressBar;
use ndarray::Array2;
use rayon::prelude::*;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Instant;

use crate::io::hash;
use crate::io::staging::Staging;
use crate::io::volume::{VolumeAttributes, VolumeWriter};
use crate::pipeline::config::{DopplerPairs, PipelineConfig};
use crate::stages::log_compression::{grey_levels, grey_levels_u8};
use log::*;
pub use budget::{memory_estimate, output_bytes};
use budget::check_output_space;
pub use open::{open_capture, read_pipeline};
pub use ownership::{foreign_owner, hash_algorithm, output_name, recorded_pipeline, would_skip};
use ownership::up_to_date;
use plan::{plan, Planned};
use open::{open, Opened, Opening};
pub use writer::bscan_png_name;
use writer::{ContrastDatasets, Writer};

/// What happened to a capture.
#[derive(Debug, Clone)]
pub struct CaptureOutcome {
    pub output_dir: PathBuf,
    pub frames: usize,
    pub alines: usize,
    pub seconds: f64,
    /// Skipped by `resume`: the existing outputs are up to date, as the
    /// input digest named here showed.
    pub skipped: Option<hash::HashAlgorithm>,
    /// The warnings log.json records.
    pub warnings: Vec<String>,
    /// The background method the plan chose (`auto` resolved), when processed.
    pub background_method: Option<String>,
}

/// The run was stopped by a signal; nothing of this capture was kept.
#[derive(Debug, thiserror::Error)]
#[error("interrupted before completion; nothing written")]
pub struct Interrupted;

/// How a capture is processed beyond its pipeline.
#[derive(Default, Clone, Copy)]
pub struct RunContext<'a> {
    /// Advanced by one per frame (e.g. the batch's overall bar).
    pub progress: Option<&'a ProgressBar>,
    /// This capture's own bar: its length is set to the frame count.
    pub capture_progress: Option<&'a ProgressBar>,
    /// Checked between frames; when set, the capture is abandoned.
    pub cancel: Option<&'a AtomicBool>,
    /// Skip when the existing log matches the input's hash and the pipeline's.
    pub resume: bool,
    /// Use the plain f64 stage chain instead of the fused f32 fast path.
    pub reference_engine: bool,
    /// Called after each frame with (frames done, frames in the capture):
    /// the batch's JSON-lines progress stream.
    pub on_frame: Option<&'a (dyn Fn(usize, usize) + Sync)>,
}

/// Peak resident set size of this process, MB (Linux /proc).
pub fn peak_resident_mb() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

/// (rows × cols) → (cols × rows), in parallel over bands of 32 output rows.
pub fn transpose<T: Copy + Default + Send + Sync>(a: &Array2<T>) -> Array2<T> {
    let (rows, cols) = a.dim();
    let src = a.as_slice().expect("standard layout");
    let mut out = vec![T::default(); rows * cols];
    const BAND: usize = 32;
    out.par_chunks_mut(BAND * rows).enumerate().for_each(|(b, dst)| {
        let c0 = b * BAND;
        let width = dst.len() / rows;
        for r in 0..rows {
            let row = &src[r * cols + c0..r * cols + c0 + width];
            for (c, &v) in row.iter().enumerate() {
                dst[c * rows + r] = v;
            }
        }
    });
    Array2::from_shape_vec((cols, rows), out).expect("shape")
}

/// 8-bit grey levels of dB values into a buffer reused from frame to frame.
pub fn grey8(db: &[f32], black: f64, white: f64, bytes: &mut Vec<u8>) {
    bytes.resize(db.len(), 0);
    grey_levels_u8(db, black, white, bytes);
}

/// Phase 3a: volume.h5 with every dataset the pipeline asks for.
fn create_volume(opened: &Opened, planned: &Planned, config: &PipelineConfig, staging: &Staging) -> Result<(Option<VolumeWriter>, ContrastDatasets)> {
    let none = ContrastDatasets { complex: None, doppler: None, angiography: Vec::new(), attenuation: None };
    if !config.output.volume {
        return Ok((None, none));
    }
    let (depth, alines) = (planned.depth_um.len(), opened.capture.alines);
    let summary = &planned.plan.summary;
    let v = VolumeWriter::create(
        &staging.path("volume.h5"),
        opened.positions,
        &planned.depth_um,
        alines,
        &VolumeAttributes {
            depth_spacing_um: summary.depth_spacing_um,
            first_depth_um: planned.depth_um[0],
            pipeline_sha256: &opened.pipeline_sha256,
            frames_averaged: config.volume.average,
            volume_type: match config.output.volume_type {
                crate::pipeline::config::VolumeType::Float32 => crate::io::volume::VolumeType::Float32,
                crate::pipeline::config::VolumeType::Uint16 => crate::io::volume::VolumeType::Uint16,
            },
            aline_spacing_um: config.input.aline_spacing_um.or(opened.capture.scan.aline_spacing_um),
            position_spacing_um: opened.capture.scan.stored_frame_spacing_um(config.volume.average),
        },
    )?;
    let complex = if config.output.complex {
        let k_centre = 0.5 * (summary.k_min_per_um + summary.k_max_per_um);
        Some(v.add_stack::<rustfft::num_complex::Complex32>(
            "complex_depth_profile",
            opened.capture.frames,
            depth,
            alines,
            &[
                ("axes", "frame,depth,aline".into()),
                ("units", "detector counts (|A| is the amplitude of /volume_db)".into()),
                ("phase_convention", format!("{PHASE_CONVENTION} (k_centre = {k_centre:.9} rad/µm)").into()),
                ("k_centre_per_um", k_centre.into()),
            ],
        )?)
    } else {
        None
    };
    let doppler = match &planned.doppler {
        Some((scale, _)) => Some(v.add_stack::<f32>(
            "doppler_velocity_mm_s",
            opened.positions,
            depth,
            alines,
            &[
                ("axes", "position,depth,aline".into()),
                ("units", "mm/s".into()),
                ("sign", DOPPLER_SIGN.into()),
                ("aliasing_limit_mm_s", scale.aliasing_limit_mm_s.into()),
                ("wavelength_nm", scale.wavelength_nm.into()),
                ("placement", match config.doppler.between {
                    DopplerPairs::Alines => DOPPLER_PLACEMENT_ALINES,
                    DopplerPairs::Repeats => DOPPLER_PLACEMENT_REPEATS,
                }
                .into()),
                ("masked", "NaN below the intensity threshold".into()),
            ],
        )?),
        None => None,
    };
    let mut angiography = Vec::new();
    for &m in &config.angiography.methods {
        let ds = v.add_stack::<f32>(
            &format!("angiography_{}", m.name()),
            opened.positions,
            depth,
            alines,
            &[
                ("axes", "position,depth,aline".into()),
                ("masked", "NaN below the noise-bias threshold or in registration's wrapped margin".into()),
                ("normalisation", if m == crate::pipeline::config::AngiographyMethod::SpeckleVariance { SPECKLE_VARIANCE_NORMALISATION } else { "see log.json contrast.angiography" }.into()),
            ],
        )?;
        angiography.push((m, ds));
    }
    let attenuation = if config.layers.enabled() && config.layers.attenuation {
        let transfer = config.layers.attenuation_resampling_correction.then(|| planned.plan.resampling_power_transfer(&planned.depth_um));
        let gain = crate::contrast::attenuation::depth_gain(&planned.depth_um, config.layers.rolloff_6db_depth_um, transfer.as_deref());
        let gain: Vec<f32> = gain.iter().map(|&g| g as f32).collect();
        v.write_1d(
            "attenuation_depth_gain",
            &gain,
            &[
                ("axes", "depth".into()),
                ("description", "what each row's linear intensity was divided by before the attenuation estimate: the k-resampling's power transfer (computed from the plan's interpolation; with layers.attenuation_resampling_correction) times the Gaussian roll-off (with layers.rolloff_6db_depth_um); 1 where neither".into()),
            ],
        )?;
        Some(v.add_stack::<f32>(
            "attenuation_per_mm",
            opened.positions,
            depth,
            alines,
            &[
                ("axes", "position,depth,aline".into()),
                ("units", "1/mm".into()),
                ("description", "depth-resolved attenuation coefficient (Vermeer et al. 2014) of the structure image, noise floor removed, averaged over neighbouring A-lines; NaN above the first surface and where a surface is missing; see log.json layers".into()),
            ],
        )?)
    } else {
        None
    };
    Ok((Some(v), ContrastDatasets { complex, doppler, angiography, attenuation }))
}

const PHASE_CONVENTION: &str = "phase of a reflector at optical depth z is 2·k_centre·z: it grows with depth; motion away from the probe raises it, towards the probe lowers it";
const DOPPLER_SIGN: &str = "positive: motion away from the probe (towards larger depth)";
const REGISTRATION_CONVENTION: &str = "displacement_*: where the B-scan's content sits relative to the reference (the position's first repeat; with registration.positions, the first position), pixels: axial positive = deeper (away from the probe), lateral positive = towards higher A-line index; correction_* = −displacement, the shift applied; axial_px and lateral_px are format 2's names of the displacement";
const SPECKLE_VARIANCE_NORMALISATION: &str = "1/N: the population variance over the N repeats (Σ(x − mean)²/N), of 10·log10 intensity (scale = \"db\", dB²), or of intensity divided by the squared mean intensity (scale = \"linear\")";
const BULK_VOTE_METHOD: &str = "per pair, arg of ΣA₂·conj(A₁) over the bright pixels of the pooled pairs that a phase test leaves as static: a pixel whose local (5 pairs × 5 depth pixels) residual phase step stands more than 3 robust standard deviations from the static median is flow, widened by 3 pairs and 3 depth pixels";
const DOPPLER_PLACEMENT_ALINES: &str = "the value on A-line a sums the kernel_alines pairs (m, m+1) from m = a − ⌊kernel_alines/2⌋ (shifted inwards at the B-scan's edges): centred on a for an even kernel, half an A-line after a for an odd one; depth pixel d sums the kernel_depth_px pixels from d − ⌊(kernel_depth_px−1)/2⌋";
const DOPPLER_PLACEMENT_REPEATS: &str = "the value on A-line a sums the kernel_alines A-lines from a − ⌊(kernel_alines−1)/2⌋ (shifted inwards at the edges) over the consecutive repeat pairs of the position; depth pixel d sums the kernel_depth_px pixels from d − ⌊(kernel_depth_px−1)/2⌋";

/// Reconstructs `input` with `config` into `<out_root>/<stem>/`, phase by
/// phase: open and check ([`open`]), plan ([`plan`]), compute and write
/// ([`compute`] with the [`Writer`] of [`start_writer`]), the outputs made
/// after the last frame ([`finish_outputs`]), then log.json, the report and
/// the commit of the staged folder ([`write_log`]).
pub fn process_capture(input: &Path, config: &PipelineConfig, out_root: &Path, ctx: RunContext<'_>) -> Result<CaptureOutcome> {
    let started = Instant::now();
    let opened = match open(input, config, out_root, &ctx)? {
        Opening::Ready(o) => o,
        Opening::UpToDate(frames, alines, digest) => {
            if let Some(p) = ctx.progress {
                p.inc(frames as u64);
            }
            return Ok(CaptureOutcome {
                output_dir: out_root.join(output_name(input)),
                frames,
                alines,
                seconds: 0.0,
                skipped: Some(digest),
                warnings: Vec::new(),
                background_method: None,
            });
        }
    };
    // The input's hash is computed on its own thread while the frames are
    // processed (unless resume needed it up front); on that thread only,
    // never the pool, which a batch may have blocked on this capture.
    let hasher = opened.sha_now.is_none().then(|| {
        let p = input.to_path_buf();
        let algorithm = hash_algorithm(config);
        std::thread::spawn(move || hash::input_hash_with(&p, algorithm).with_context(|| format!("hashing {}", p.display())))
    });
    let planned = plan(&opened, config)?;
    check_output_space(&opened, &planned, config, out_root)?;
    let staging = Staging::new(out_root, &opened.name)?;
    let (writer, en_face_png) = start_writer(&opened, &planned, config, &staging)?;
    let computed = compute::run(&opened.capture, config, &planned, writer, &ctx)?;
    let finished = finish_outputs(&opened, &planned, config, &staging, computed, en_face_png, hasher)?;
    write_log(input, &opened, &planned, config, staging, finished, &ctx, started)
}

/// The grey mapping's PNG settings of the en face image (made after the
/// last frame).
struct EnFacePng {
    info: crate::io::png::PngInfo,
}

/// Phase 3 setup: the staged volume.h5 and the writer of every frame's
/// outputs (PNGs, volume, the report's embedded frames).
fn start_writer<'a>(opened: &Opened, planned: &Planned, config: &'a PipelineConfig, staging: &'a Staging) -> Result<(Writer<'a>, EnFacePng)> {
    let (volume, datasets) = create_volume(opened, planned, config, staging)?;
    let capture = &opened.capture;
    let (alines, positions) = (capture.alines, opened.positions);
    let velocity_range = planned.doppler.as_ref().map_or(0.0, |(s, _)| config.doppler.velocity_range_mm_s.unwrap_or(s.aliasing_limit_mm_s));
    let mut writer = Writer::new(config, staging, volume, datasets, planned.en_face_range, alines, capture.full_scale, velocity_range);
    writer.positions = positions;
    if config.output.report && config.output.volume {
        let step = crate::report::frame_step(config.output.report_frame_step, positions, planned.depth_um.len(), alines);
        writer.report = Some(crate::report::Embedder::new(step, config.output.volume_type == crate::pipeline::config::VolumeType::Uint16));
    }
    let aline_spacing = config.input.aline_spacing_um.or(capture.scan.aline_spacing_um);
    let depth_spacing = planned.plan.summary.depth_spacing_um;
    writer.position_step_um = capture.scan.stored_frame_spacing_um(config.volume.average);
    writer.png_base = png_base_info(&opened.pipeline_sha256, depth_spacing, aline_spacing, writer.position_step_um);
    writer.png_base.effort = match config.output.png_compression {
        crate::pipeline::config::PngCompression::None => crate::io::png::Effort::Stored,
        crate::pipeline::config::PngCompression::Fast => crate::io::png::Effort::Fast,
        crate::pipeline::config::PngCompression::Small => crate::io::png::Effort::Small,
    };
    writer.bscan_pixel_um = aline_spacing.map(|a| (a, depth_spacing));
    writer.depth_um0 = planned.depth_um.first().copied().unwrap_or(0.0);
    writer.depth_step_um = if planned.depth_um.len() > 1 { planned.depth_um[1] - planned.depth_um[0] } else { depth_spacing };
    let mut info = writer.png_base.clone();
    info.pixel_um = writer.en_face_pixel_um();
    Ok((writer, EnFacePng { info }))
}

/// What the run made, ready for the log.
struct Finished {
    computed_read_seconds: f64,
    stage_seconds: serde_json::Map<String, serde_json::Value>,
    kernel: Option<(crate::pipeline::kernel::Variant, crate::pipeline::fused::tune::Choice)>,
    written: writer::Written,
    outputs: Vec<String>,
    en_face: Option<EnFaceRecord>,
    input_hash: String,
    warnings: Vec<String>,
    write_seconds: f64,
}

/// Phase 4: the outputs made after the last frame (the en face image, the
/// volume's closing attributes with the input hash, the OME-TIFF, the
/// calibration figure) and the list of every output.
fn finish_outputs(
    opened: &Opened,
    planned: &Planned,
    config: &PipelineConfig,
    staging: &Staging,
    computed: compute::Computed,
    en_face_png: EnFacePng,
    hasher: Option<std::thread::JoinHandle<Result<String>>>,
) -> Result<Finished> {
    let capture = &opened.capture;
    let (alines, positions) = (capture.alines, opened.positions);
    let mut written = computed.written;
    let mut warnings = planned.warnings.clone();
    warnings.extend(std::mem::take(&mut written.warnings));
    let t = Instant::now();
    let lc = &config.log_compression;
    let max_grey = if lc.bit_depth == 8 { 255.0 } else { 65535.0 };
    let mut en_face_record = None;
    let mut outputs = std::mem::take(&mut written.outputs);
    let volume = written.volume.take();
    if config.volume.en_face {
        let name = "en-face.png";
        let en_face = &written.en_face;
        let mut sorted: Vec<f32> = en_face.clone();
        sorted.sort_by(f32::total_cmp);
        let pick = |q: f64| sorted[((sorted.len() - 1) as f64 * q).round() as usize] as f64;
        let (black, white) = (pick(0.01), pick(0.995).max(pick(0.01) + 1e-3));
        if config.output.png {
            let info = en_face_png
                .info
                .with("Description", format!("en face {} projection, A-lines across, positions down: grey linear in dB", format!("{:?}", config.volume.en_face_projection).to_lowercase()))
                .with("black_db", format!("{black:.3}"))
                .with("white_db", format!("{white:.3}"))
                .with("grey_levels", format!("0 at black_db, {max_grey} at white_db"));
            crate::io::png::write_grey(&staging.path(name), alines, positions, &grey_levels(en_face, black, white, max_grey), lc.bit_depth, &info)?;
            outputs.push(name.into());
        }
        let (a, b) = planned.en_face_range;
        let slab = [planned.depth_um[a], planned.depth_um[b - 1]];
        if let Some(v) = &volume {
            v.write_en_face(en_face, positions, alines, slab)?;
        }
        en_face_record = Some(EnFaceRecord { depth_um: slab, projection: config.volume.en_face_projection, black_db: black, white_db: white });
    }
    let input_hash = match (&opened.sha_now, hasher) {
        (Some(s), _) => s.clone(),
        (None, Some(h)) => h.join().map_err(|_| anyhow::anyhow!("the hashing thread panicked"))??,
        (None, None) => unreachable!("hashed up front or on a thread"),
    };
    if let Some(v) = volume {
        v.finish(&input_hash)?;
        outputs.push("volume.h5".into());
    }
    if config.output.ome_tiff {
        write_ome_tiff(staging, opened)?;
        outputs.push("volume.ome.tif".into());
    }
    if let crate::io::capture::WavelengthSource::Calibration { path, .. } = &capture.wavelength_source {
        // The calibration in use, beside the images and in the report.
        let (cal, _) = crate::calibration::wavelength::WavelengthCalibration::load(std::path::Path::new(path))?;
        let figure = crate::plot::WavelengthMapFigure {
            cal: &cal,
            nominal: capture.dataset_wavelength_nm.as_deref(),
            nominal_name: "the capture's own wavelength dataset",
            pipeline_sha256: &opened.pipeline_sha256,
        };
        crate::plot::save_figure(&staging.path("wavelength-map.svg"), &figure).context("writing wavelength-map.svg")?;
        outputs.push("wavelength-map.svg".into());
    }
    if config.output.report && config.output.volume {
        outputs.push("report.html".into());
    }
    outputs.push("log.json".into());
    let write_seconds = written.write_seconds + t.elapsed().as_secs_f64();
    Ok(Finished {
        computed_read_seconds: computed.read_seconds,
        stage_seconds: computed.stage_seconds,
        kernel: computed.kernel,
        written,
        outputs,
        en_face: en_face_record,
        input_hash,
        warnings,
        write_seconds,
    })
}

/// Phase 5: log.json (everything needed to reproduce the outputs), the
/// report drawn from what was written, and the commit of the staged folder.
#[allow(clippy::too_many_arguments)]
fn write_log(input: &Path, opened: &Opened, planned: &Planned, config: &PipelineConfig, staging: Staging, finished: Finished, ctx: &RunContext<'_>, started: Instant) -> Result<CaptureOutcome> {
    let capture = &opened.capture;
    let (frames, alines) = (capture.frames, capture.alines);
    let Finished { computed_read_seconds, stage_seconds, kernel, mut written, outputs, en_face, input_hash, warnings, write_seconds } = finished;
    let report = config.output.report && config.output.volume;
    let mut report_frames = written.report.take();
    let background_method = serde_json::to_value(planned.plan.summary.background_method).ok().and_then(|v| v.as_str().map(String::from));
    let contrast = contrast_record(config, planned, &mut written);
    let layers = layers_log::layers_record(config, &written);
    let total = started.elapsed().as_secs_f64();
    let log = ProcessingLog {
        format_version: LOG_FORMAT_VERSION,
        tool: ToolInfo { name: "fringeflow", version: env!("CARGO_PKG_VERSION") },
        input: InputInfo {
            path: input.display().to_string(),
            absolute_path: std::path::absolute(input).unwrap_or_else(|_| input.to_path_buf()).display().to_string(),
            fringes_dataset: capture.fringes_path.clone(),
            shape: capture.shape.clone(),
            axes: capture.axes.clone(),
            dtype: capture.sample_type,
            frames,
            alines,
            pixels: capture.pixels,
            full_scale: capture.full_scale,
            wavelength_map: capture.wavelength_source.clone(),
            format: capture.format_detail.clone(),
            background_file: capture.background_file.clone().map(|(path, file_hash)| FileRecord { path, file_hash }),
            sidecar: capture.sidecar.clone().map(|(path, file_hash)| FileRecord { path, file_hash }),
            given_by_pipeline: capture.given_by_pipeline.clone(),
            has_background: capture.background.is_some(),
            scan: capture.scan.clone(),
        },
        input_hash,
        pipeline: config.clone(),
        pipeline_sha256: opened.pipeline_sha256.clone(),
        engine: if ctx.reference_engine { "reference" } else { "fused" },
        kernel: kernel.as_ref().map(|(v, _)| v.name()),
        derived: planned.plan.summary.clone(),
        dispersion_estimate: planned.dispersion_estimate.clone(),
        frames: std::mem::take(&mut written.records),
        averaging: written.averaging.take(),
        en_face,
        contrast,
        layers,
        outputs,
        warnings: warnings.clone(),
        timing: Timing {
            note: "the only section that differs between identical runs",
            read_seconds: computed_read_seconds,
            stage_thread_seconds: stage_seconds,
            write_seconds,
            total_seconds: total,
            alines_per_second: (frames * alines) as f64 / total,
            threads: rayon::current_num_threads(),
            peak_resident_mb: peak_resident_mb(),
            kernel_choice: kernel.map(|(_, c)| c),
        },
    };
    let json = serde_json::to_vec_pretty(&log).context("serialising log")?;
    std::fs::write(staging.path("log.json"), json).context("writing log.json")?;
    if report {
        // Drawn from what was just written (log.json, volume.h5, the PNGs).
        // The frames were embedded while the run wrote them (no read-back).
        let embedded = report_frames.take().expect("embedded during the write").finish()?;
        crate::report::write_report_embedded(&staging.path(""), &staging.path("report.html"), embedded).context("writing report.html")?;
    }
    if ctx.cancel.is_some_and(|c| c.load(Ordering::Relaxed)) {
        return Err(Interrupted.into());
    }
    let output_dir = staging.commit()?;
    Ok(CaptureOutcome { output_dir, frames, alines, seconds: total, skipped: None, warnings, background_method })
}

/// volume.ome.tif from the staged volume.h5, one frame at a time.
fn write_ome_tiff(staging: &Staging, opened: &Opened) -> Result<()> {
    let h5 = crate::io::volume::DbReader::open(&staging.path("volume.h5"))?;
    let [frames, depth, alines] = h5.shape;
    let axes = h5.axes()?;
    let scale = crate::io::ome_tiff::OmeScale { name: opened.name.clone(), depth_spacing_um: axes.depth_spacing_um, aline_spacing_um: axes.aline_spacing_um, frame_spacing_um: axes.position_spacing_um };
    let tmp = staging.path("volume.ome.tif");
    crate::io::ome_tiff::write_ome_tiff(&tmp, frames, depth, alines, &scale, |f| h5.frame(f)).context("writing volume.ome.tif")?;
    Ok(())
}

/// The tEXt chunks every image of a capture carries.
fn png_base_info(pipeline_sha256: &str, depth_spacing_um: f64, aline_spacing_um: Option<f64>, position_spacing_um: Option<f64>) -> crate::io::png::PngInfo {
    let known = |v: Option<f64>| v.map_or_else(|| "unknown".to_string(), |v| format!("{v}"));
    crate::io::png::PngInfo::new("")
        .with("pipeline_sha256", pipeline_sha256)
        .with("depth_spacing_um", format!("{depth_spacing_um}"))
        .with("depth_axis", "optical path in air, 0 at zero delay, increasing downwards")
        .with("aline_spacing_um", known(aline_spacing_um))
        .with("position_spacing_um", known(position_spacing_um))
}

/// The log's contrast section, when any contrast stage ran.
fn contrast_record(config: &PipelineConfig, planned: &Planned, written: &mut writer::Written) -> Option<ContrastRecord> {
    if !config.has_contrast() {
        return None;
    }
    let s = &planned.plan.summary;
    let a = &config.angiography;
    Some(ContrastRecord {
        complex_output: config.output.complex.then_some(ComplexRecord {
            dataset: "/complex_depth_profile",
            k_centre_per_um: 0.5 * (s.k_min_per_um + s.k_max_per_um),
            phase_convention: PHASE_CONVENTION,
        }),
        registration_convention: (!written.shifts.is_empty()).then_some(REGISTRATION_CONVENTION),
        registration: std::mem::take(&mut written.shifts),
        doppler: planned.doppler.as_ref().map(|(scale, source)| DopplerRecord {
            between: config.doppler.between,
            scale: *scale,
            period_source: source.clone(),
            velocity_range_mm_s: config.doppler.velocity_range_mm_s.unwrap_or(scale.aliasing_limit_mm_s),
            sign: DOPPLER_SIGN,
            bulk_phase_rad: std::mem::take(&mut written.doppler_bulk),
            bulk_vote: config.doppler.bulk_correction.then(|| BulkVoteRecord {
                method: BULK_VOTE_METHOD,
                bright_pixels: written.doppler_vote.bright,
                flow_pixels_left_out: written.doppler_vote.flow,
            }),
            placement: match config.doppler.between {
                DopplerPairs::Alines => DOPPLER_PLACEMENT_ALINES,
                DopplerPairs::Repeats => DOPPLER_PLACEMENT_REPEATS,
            },
        }),
        angiography: a.enabled().then(|| AngiographyRecord {
            methods: a.methods.clone(),
            repeats_per_position: config.volume.average,
            noise_bias_threshold_db: a.threshold_db,
            noise_bias_note: "static pixels decorrelate through noise (D ≈ 1/(2·SNR)); pure noise reads like fully decorrelated speckle (D = 1 − π/4 ≈ 0.215), so pixels below the structure's noise floor + threshold are masked",
            noise_floor_db: std::mem::take(&mut written.angiography_floor_db),
            white: std::mem::take(&mut written.angiography_white),
            speckle_variance_normalisation: a.methods.contains(&crate::pipeline::config::AngiographyMethod::SpeckleVariance).then_some(SPECKLE_VARIANCE_NORMALISATION),
            en_face_depth_um: a.en_face_depth_um,
            en_face_from_surface: a.en_face_from_surface,
            en_face_projection: a.en_face_projection,
        }),
    })
}
