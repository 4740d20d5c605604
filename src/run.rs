//! Reconstructing one capture: read frames, run the plan, optionally average
//! repeated B-scans, write one PNG per frame (or position), volume.h5, an en
//! face projection and log.json, all staged so that a failure or an
//! interruption leaves nothing.
//!
//! The log holds everything needed to reproduce the outputs (`rerun` reads
//! it); its `timing` section is the only part that changes between
//! identical runs.

use anyhow::{bail, Context, Result};
use indicatif::ProgressBar;
use ndarray::Array2;
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Instant;

use crate::io::capture::{Capture, RawFrame, SampleType, WavelengthSource};
use crate::io::staging::Staging;
use crate::io::volume::{VolumeAttributes, VolumeWriter};
use crate::io::{hash, png};
use crate::pipeline::config::{AxisName, PipelineConfig, Projection};
use crate::pipeline::fused::{FusedPlan, FusedTimer};
use crate::pipeline::plan::{CaptureGeometry, Plan, PlanSummary};
use crate::stages::log_compression::{grey_levels, grey_levels_u8, noise_floor_db, peak_db, to_db, GreyMapping};
use rayon::prelude::*;

#[derive(Debug, Serialize)]
pub struct ToolInfo {
    pub name: &'static str,
    pub version: &'static str,
}

#[derive(Debug, Serialize)]
pub struct InputInfo {
    /// As given on the command line.
    pub path: String,
    /// The same made absolute (what `rerun` falls back to from elsewhere).
    pub absolute_path: String,
    pub sha256: String,
    pub fringes_dataset: String,
    pub shape: Vec<usize>,
    pub axes: Vec<AxisName>,
    pub dtype: SampleType,
    pub frames: usize,
    pub alines: usize,
    pub pixels: usize,
    pub full_scale: Option<f64>,
    pub wavelength_map: WavelengthSource,
    pub has_background: bool,
}

#[derive(Debug, Serialize)]
pub struct FrameRecord {
    /// Output frame (slow-axis position when averaging).
    pub index: usize,
    /// Input frames that made it.
    pub input_frames: [usize; 2],
    pub noise_floor_db: f64,
    pub peak_db: f64,
    pub saturated_samples: u64,
    pub grey_black_db: f64,
    pub grey_white_db: f64,
}

/// Effect of averaging repeated B-scans, measured on the first position.
#[derive(Debug, Serialize)]
pub struct AveragingRecord {
    pub frames_per_position: usize,
    /// Median dB (noise floor) of one B-scan and of the average.
    pub noise_floor_single_db: f64,
    pub noise_floor_averaged_db: f64,
    /// Standard deviation of the noise (linear amplitude over the deepest
    /// tenth of the depth range), one B-scan and averaged, and the reduction
    /// 20·log10(single/averaged); independent noise gives about 10·log10(N) dB.
    pub noise_sd_single: f64,
    pub noise_sd_averaged: f64,
    pub noise_sd_reduction_db: f64,
}

/// How en-face.png was made from `/en_face_db`.
#[derive(Debug, Serialize)]
pub struct EnFaceRecord {
    /// Depth slab projected (first and last pixel centre, µm in air).
    pub depth_um: [f64; 2],
    pub projection: Projection,
    /// dB mapped to black and to white (the 1st and 99.5th percentiles).
    pub grey_black_db: f64,
    pub grey_white_db: f64,
}

#[derive(Debug, Serialize)]
pub struct Timing {
    pub note: &'static str,
    pub read_seconds: f64,
    /// Seconds per stage, summed over worker threads.
    pub stage_thread_seconds: serde_json::Map<String, serde_json::Value>,
    pub write_seconds: f64,
    pub total_seconds: f64,
    pub alines_per_second: f64,
    pub threads: usize,
    /// Peak resident memory of the process so far (VmHWM), MB.
    pub peak_resident_mb: Option<f64>,
}

/// Contents of log.json.
#[derive(Debug, Serialize)]
pub struct ProcessingLog {
    pub tool: ToolInfo,
    pub input: InputInfo,
    pub pipeline: PipelineConfig,
    pub pipeline_sha256: String,
    /// `fused` (f32 fast path) or `reference` (f64 stage chain).
    pub engine: &'static str,
    pub derived: PlanSummary,
    /// The automatic dispersion estimate, when `dispersion.method = "auto"`.
    pub dispersion_estimate: Option<crate::calibration::dispersion::DispersionEstimate>,
    pub frames: Vec<FrameRecord>,
    pub averaging: Option<AveragingRecord>,
    /// The en face projection's grey mapping, when one was written.
    pub en_face: Option<EnFaceRecord>,
    pub outputs: Vec<String>,
    pub warnings: Vec<String>,
    pub timing: Timing,
}

/// What happened to a capture.
#[derive(Debug, Clone)]
pub struct CaptureOutcome {
    pub output_dir: PathBuf,
    pub frames: usize,
    pub alines: usize,
    pub seconds: f64,
    /// Skipped by `resume`: the existing outputs are up to date.
    pub skipped: bool,
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
}

/// Name of the output directory of a capture: its file stem.
pub fn output_name(capture: &Path) -> String {
    capture.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "capture".into())
}

/// Name of frame `index`'s image.
pub fn frame_png_name(index: usize) -> String {
    format!("frame-{index:04}.png")
}

/// Peak resident set size of this process, MB (Linux /proc).
pub fn peak_resident_mb() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kb: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

/// True when `dir/log.json` records this input hash and pipeline hash and
/// every output it lists exists.
fn up_to_date(dir: &Path, sha256: &str, pipeline_sha256: &str) -> bool {
    let Ok(bytes) = std::fs::read(dir.join("log.json")) else { return false };
    let Ok(log) = serde_json::from_slice::<serde_json::Value>(&bytes) else { return false };
    log["input"]["sha256"] == sha256
        && log["pipeline_sha256"] == pipeline_sha256
        && log["outputs"].as_array().is_some_and(|o| o.iter().all(|n| n.as_str().is_some_and(|n| dir.join(n).is_file())))
}

/// (rows × cols) → (cols × rows), in parallel over bands of 32 output rows.
pub fn transpose(a: &Array2<f32>) -> Array2<f32> {
    let (rows, cols) = a.dim();
    let src = a.as_slice().expect("standard layout");
    let mut out = vec![0.0f32; rows * cols];
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

/// 8-bit grey levels of dB values. Sequential on purpose: it runs on the
/// writer thread, which must never wait for the rayon pool (the pool's
/// workers may be blocked handing frames to this very thread).
/// `bytes` is reused from frame to frame (no fresh pages per frame).
pub fn grey8(db: &[f32], black: f64, white: f64, bytes: &mut Vec<u8>) {
    bytes.resize(db.len(), 0);
    grey_levels_u8(db, black, white, bytes);
}

fn round6(v: f64) -> f64 {
    (v * 1e6).round() / 1e6
}

/// Reconstructs `input` with `config` into `<out_root>/<stem>/`.
pub fn process_capture(input: &Path, config: &PipelineConfig, out_root: &Path, ctx: RunContext<'_>) -> Result<CaptureOutcome> {
    let started = Instant::now();
    let capture = Capture::open(input, &config.input)?;
    // The input's SHA-256 is needed up front only to resume; otherwise it is
    // computed on its own thread while the frames are processed.
    let hash_input = |p: &Path| hash::sha256_file(p).with_context(|| format!("hashing {}", p.display()));
    let sha_now = if ctx.resume { Some(hash_input(input)?) } else { None };
    let hasher = if ctx.resume {
        None
    } else {
        let p = input.to_path_buf();
        Some(std::thread::spawn(move || hash_input(&p)))
    };
    let pipeline_sha256 = config.sha256();
    let name = output_name(input);
    let (frames, alines) = (capture.frames, capture.alines);
    if let Some(p) = ctx.capture_progress {
        p.set_length(frames as u64);
    }
    if ctx.resume && up_to_date(&out_root.join(&name), sha_now.as_deref().unwrap_or(""), &pipeline_sha256) {
        if let Some(p) = ctx.progress {
            p.inc(frames as u64);
        }
        return Ok(CaptureOutcome { output_dir: out_root.join(&name), frames, alines, seconds: 0.0, skipped: true });
    }
    let average = config.volume.average;
    if frames % average != 0 {
        bail!("the capture has {frames} frames, not a multiple of volume.average = {average}");
    }
    let positions = frames / average;

    // Shaping measures the source envelope: the background, else frame 0's mean spectrum.
    let source_spectrum = match (&capture.background, config.shaping.enabled) {
        (Some(b), _) => Some(b.clone()),
        (None, true) => {
            let mut first = Array2::<f64>::zeros(capture.frame_shape());
            capture.read_frame(0, &mut first)?;
            Some(crate::stages::background::mean_spectrum(first.view()))
        }
        (None, false) => None,
    };
    let (resolved, dispersion_estimate) = crate::calibration::resolve_dispersion(&capture, config, source_spectrum.as_deref())?;
    let plan = Plan::new(
        &resolved,
        CaptureGeometry {
            wavelength_nm: &capture.wavelength_nm,
            background: capture.background.as_deref(),
            source_spectrum: source_spectrum.as_deref(),
        },
    )?;
    let summary = plan.summary.clone();
    let depth = summary.depth_pixels;
    let depth_um: Vec<f64> = (0..depth).map(|i| plan.depth_um(i)).collect();
    let en_face_range = match config.volume.en_face_depth_um {
        Some([a, b]) => {
            let r = (depth_um.iter().position(|&z| z >= a).unwrap_or(depth), depth_um.iter().position(|&z| z >= b).unwrap_or(depth));
            if r.0 >= r.1 {
                bail!("volume.en_face_depth_um [{a}, {b}] holds no depth pixel of this capture ({:.1}–{:.1} µm)", depth_um[0], depth_um[depth - 1]);
            }
            r
        }
        None => (0, depth),
    };

    let mut warnings = Vec::new();
    if config.background.method == crate::pipeline::config::BackgroundMethod::Auto && capture.background.is_none() {
        warnings.push(format!(
            "capture has no '{}' dataset: background estimated as the median over each frame's A-lines",
            config.input.background
        ));
    }

    let staging = Staging::new(out_root, &name)?;
    let volume = if config.output.volume {
        Some(VolumeWriter::create(
            &staging.path("volume.h5"),
            positions,
            &depth_um,
            alines,
            &VolumeAttributes {
                depth_spacing_um: summary.depth_spacing_um,
                first_depth_um: depth_um[0],
                pipeline_sha256: &pipeline_sha256,
                frames_averaged: average,
                volume_type: config.output.volume_type,
            },
        )?)
    } else {
        None
    };

    let fused = (!ctx.reference_engine).then(|| FusedPlan::new(&plan));
    let timer = plan.new_timer();
    let fused_timer = FusedTimer::default();
    let lc = &config.log_compression;
    let max_grey = if lc.bit_depth == 8 { 255.0 } else { 65535.0 };
    let mut averaging_record = None;

    // Three threads overlap: the reader fetches frame f+1 while frame f is
    // reconstructed, and the writer maps, encodes and stores frame f−1.
    // Reader and writer are plain threads that never use the rayon pool:
    // this loop may run on a pool worker and block on their channels.
    let (records, en_face, mut outputs, read_s, mut write_s, frame_warnings, volume) = std::thread::scope(|scope| -> Result<_> {
        let (raw_tx, raw_rx) = std::sync::mpsc::sync_channel::<Result<(RawFrame, u64, f64)>>(2);
        let capture_ref = &capture;
        let cancel = ctx.cancel;
        scope.spawn(move || {
            for f in 0..frames {
                if cancel.is_some_and(|c| c.load(Ordering::Relaxed)) {
                    break;
                }
                let t = Instant::now();
                let r = capture_ref.read_raw_frame(f).map(|(raw, sat)| (raw, sat, t.elapsed().as_secs_f64()));
                let failed = r.is_err();
                if raw_tx.send(r).is_err() || failed {
                    break;
                }
            }
        });
        let (img_tx, img_rx) = std::sync::mpsc::sync_channel::<(usize, Array2<f32>, u64)>(2);
        let (free_tx, free_rx) = std::sync::mpsc::channel::<Array2<f32>>();
        let staging_ref = &staging;
        let depth_um_ref = &depth_um;
        let writer = scope.spawn(move || -> Result<_> {
            let mut records = Vec::with_capacity(positions);
            let mut en_face: Vec<f32> = Vec::with_capacity(positions * alines);
            let mut outputs = Vec::new();
            let mut warnings = Vec::new();
            let mut write_s = 0.0;
            let mut grey = Vec::new();
            for (position, image, saturated) in img_rx {
                // `image` is the B-scan as shown: depth down, A-lines across.
                let t = Instant::now();
                let values = image.as_slice().expect("standard layout");
                let floor = noise_floor_db(values);
                let peak = peak_db(values) as f64;
                let (black, white) = match lc.mapping {
                    GreyMapping::Auto => (floor + lc.floor_offset_db, floor + lc.floor_offset_db + lc.dynamic_range_db),
                    GreyMapping::Fixed => (lc.db_min, lc.db_max),
                };
                if config.output.png {
                    let png_name = frame_png_name(position);
                    let path = staging_ref.path(&png_name);
                    if lc.bit_depth == 8 {
                        grey8(values, black, white, &mut grey);
                        png::write_grey8(&path, alines, depth, &grey)?;
                    } else {
                        png::write_grey(&path, alines, depth, &grey_levels(values, black, white, max_grey), lc.bit_depth)?;
                    }
                    outputs.push(png_name);
                }
                if let Some(v) = &volume {
                    v.write_frame(position, &image)?;
                }
                if config.volume.en_face {
                    let rows = image.slice(ndarray::s![en_face_range.0..en_face_range.1, ..]);
                    let n = rows.nrows() as f64;
                    let mut acc = vec![match config.volume.en_face_projection {
                        Projection::Mean => 0.0f64,
                        Projection::Max => f64::NEG_INFINITY,
                    }; alines];
                    for row in rows.outer_iter() {
                        for (a, &v) in acc.iter_mut().zip(row.iter()) {
                            match config.volume.en_face_projection {
                                Projection::Mean => *a += v as f64,
                                Projection::Max => *a = a.max(v as f64),
                            }
                        }
                    }
                    en_face.extend(acc.iter().map(|&a| match config.volume.en_face_projection {
                        Projection::Mean => (a / n) as f32,
                        Projection::Max => a as f32,
                    }));
                }
                if saturated > 0 {
                    warnings.push(format!(
                        "frame {}: {saturated} samples at or above full scale ({}): fringes clipped",
                        (position + 1) * average - 1,
                        capture_ref.full_scale.unwrap_or(f64::NAN)
                    ));
                }
                records.push(FrameRecord {
                    index: position,
                    input_frames: [position * average, (position + 1) * average - 1],
                    noise_floor_db: round6(floor),
                    peak_db: round6(peak),
                    saturated_samples: saturated,
                    grey_black_db: round6(black),
                    grey_white_db: round6(white),
                });
                let _ = free_tx.send(image);
                write_s += t.elapsed().as_secs_f64();
            }
            let _ = depth_um_ref;
            Ok((records, en_face, outputs, write_s, warnings, volume))
        });

        let mut read_s = 0.0;
        let mut sum = Array2::<f64>::zeros((depth, alines));
        let mut first_single: Option<Array2<f32>> = None;
        let mut saturated_in_position = 0u64;
        let mut result: Result<()> = Ok(());
        for f in 0..frames {
            if ctx.cancel.is_some_and(|c| c.load(Ordering::Relaxed)) {
                result = Err(Interrupted.into());
                break;
            }
            let (raw, saturated, secs) = match raw_rx.recv() {
                Ok(Ok(r)) => r,
                Ok(Err(e)) => {
                    result = Err(e);
                    break;
                }
                Err(_) => {
                    result = Err(Interrupted.into());
                    break;
                }
            };
            read_s += secs;
            saturated_in_position += saturated;
            let mut db = free_rx.try_recv().unwrap_or_else(|_| Array2::<f32>::zeros((depth, alines)));
            match &fused {
                Some(fp) => fp.process_raw_image(&raw, &mut db, &fused_timer),
                None => {
                    let mut rows = Array2::<f32>::zeros((alines, depth));
                    plan.process_frame(raw.to_f64().view(), &mut rows, &timer);
                    db = transpose(&rows);
                }
            }
            drop(raw);
            for p in [ctx.progress, ctx.capture_progress].into_iter().flatten() {
                p.inc(1);
            }
            if average > 1 {
                if f == 0 {
                    first_single = Some(db.clone());
                }
                ndarray::Zip::from(&mut sum).and(&db).for_each(|s, &d| *s += crate::analysis::amplitude_from_db(d as f64));
                if (f + 1) % average != 0 {
                    continue;
                }
                ndarray::Zip::from(&mut db).and(&sum).for_each(|d, &s| *d = to_db(s / average as f64) as f32);
                sum.fill(0.0);
            }
            if let Some(single) = first_single.take() {
                averaging_record = Some(measure_averaging(&single, &db, average));
            }
            if img_tx.send((f / average, db, saturated_in_position)).is_err() {
                break; // the writer failed; its error is returned below
            }
            saturated_in_position = 0;
        }
        drop(img_tx);
        drop(raw_rx);
        let written = writer.join().map_err(|_| anyhow::anyhow!("the writer thread panicked"))?;
        result?;
        let (records, en_face, outputs, write_s, warnings, volume_back) = written?;
        Ok((records, en_face, outputs, read_s, write_s, warnings, volume_back))
    })?;
    warnings.extend(frame_warnings);
    let t = Instant::now();
    let mut en_face_record = None;
    if config.volume.en_face {
        let name = "en-face.png";
        let mut sorted: Vec<f32> = en_face.clone();
        sorted.sort_by(f32::total_cmp);
        let pick = |q: f64| sorted[((sorted.len() - 1) as f64 * q).round() as usize] as f64;
        let (black, white) = (pick(0.01), pick(0.995).max(pick(0.01) + 1e-3));
        png::write_grey(&staging.path(name), alines, positions, &grey_levels(&en_face, black, white, max_grey), lc.bit_depth)?;
        outputs.push(name.into());
        let slab = [depth_um[en_face_range.0], depth_um[en_face_range.1 - 1]];
        if let Some(v) = &volume {
            v.write_en_face(&en_face, positions, alines, slab)?;
        }
        en_face_record = Some(EnFaceRecord { depth_um: slab, projection: config.volume.en_face_projection, grey_black_db: black, grey_white_db: white });
    }
    let sha256 = match (sha_now, hasher) {
        (Some(s), _) => s,
        (None, Some(h)) => h.join().map_err(|_| anyhow::anyhow!("the hashing thread panicked"))??,
        (None, None) => unreachable!("hashed up front or on a thread"),
    };
    if let Some(v) = volume {
        v.finish(&sha256)?;
        outputs.push("volume.h5".into());
    }
    outputs.push("log.json".into());
    write_s += t.elapsed().as_secs_f64();

    let total = started.elapsed().as_secs_f64();
    let mut stage_seconds = serde_json::Map::new();
    if fused.is_some() {
        for (part, s) in FusedTimer::PARTS.iter().zip(fused_timer.seconds()) {
            stage_seconds.insert(format!("fused:{part}"), serde_json::json!(s));
        }
    } else {
        for (stage, s) in plan.stage_names().iter().zip(timer.seconds()) {
            stage_seconds.insert(stage.to_string(), serde_json::json!(s));
        }
    }
    let log = ProcessingLog {
        tool: ToolInfo { name: "fringeflow", version: env!("CARGO_PKG_VERSION") },
        input: InputInfo {
            path: input.display().to_string(),
            absolute_path: std::path::absolute(input).unwrap_or_else(|_| input.to_path_buf()).display().to_string(),
            sha256: sha256.clone(),
            fringes_dataset: capture.fringes_path.clone(),
            shape: capture.shape.clone(),
            axes: capture.axes.clone(),
            dtype: capture.sample_type,
            frames,
            alines,
            pixels: capture.pixels,
            full_scale: capture.full_scale,
            wavelength_map: capture.wavelength_source.clone(),
            has_background: capture.background.is_some(),
        },
        pipeline: config.clone(),
        pipeline_sha256,
        engine: if fused.is_some() { "fused" } else { "reference" },
        derived: summary,
        dispersion_estimate,
        frames: records,
        averaging: averaging_record,
        en_face: en_face_record,
        outputs,
        warnings,
        timing: Timing {
            note: "the only section that differs between identical runs",
            read_seconds: read_s,
            stage_thread_seconds: stage_seconds,
            write_seconds: write_s,
            total_seconds: total,
            alines_per_second: (frames * alines) as f64 / total,
            threads: rayon::current_num_threads(),
            peak_resident_mb: peak_resident_mb(),
        },
    };
    let json = serde_json::to_vec_pretty(&log).context("serialising log")?;
    std::fs::write(staging.path("log.json"), json).context("writing log.json")?;
    if ctx.cancel.is_some_and(|c| c.load(Ordering::Relaxed)) {
        return Err(Interrupted.into());
    }
    let output_dir = staging.commit()?;
    Ok(CaptureOutcome { output_dir, frames, alines, seconds: total, skipped: false })
}

/// Noise statistics of one B-scan against the average of its position, on
/// the deepest tenth of the depth range (chosen by position, not by value,
/// so the selection does not bias either side).
fn measure_averaging(single: &Array2<f32>, averaged: &Array2<f32>, n: usize) -> AveragingRecord {
    // Images are depth × A-lines: the deepest tenth of the rows.
    let depth = single.nrows();
    let region = (depth - depth / 10).min(depth - 1)..depth;
    let values = |a: &Array2<f32>| -> Vec<f64> {
        a.slice(ndarray::s![region.clone(), ..]).iter().map(|&d| crate::analysis::amplitude_from_db(d as f64)).collect()
    };
    let sd = |v: &[f64]| {
        let mean = v.iter().sum::<f64>() / v.len() as f64;
        (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
    };
    let (sd_one, sd_avg) = (sd(&values(single)), sd(&values(averaged)));
    AveragingRecord {
        frames_per_position: n,
        noise_floor_single_db: round6(noise_floor_db(single.as_slice().unwrap())),
        noise_floor_averaged_db: round6(noise_floor_db(averaged.as_slice().unwrap())),
        noise_sd_single: round6(sd_one),
        noise_sd_averaged: round6(sd_avg),
        noise_sd_reduction_db: round6(20.0 * (sd_one / sd_avg).log10()),
    }
}
