//! Reconstructing one capture: read frames, run the plan, write one PNG per
//! frame, volume.h5 and log.json, all staged so that a failure leaves nothing.
//!
//! The log holds everything needed to reproduce the outputs; its `timing`
//! section is the only part that changes between identical runs.

use anyhow::{Context, Result};
use indicatif::ProgressBar;
use ndarray::Array2;
use serde::Serialize;
use std::path::{Path, PathBuf};
use std::time::Instant;

use crate::io::capture::{Capture, SampleType, WavelengthSource};
use crate::io::staging::Staging;
use crate::io::volume::{VolumeAttributes, VolumeWriter};
use crate::io::{hash, png};
use crate::pipeline::config::{AxisName, PipelineConfig};
use crate::pipeline::plan::{CaptureGeometry, Plan, PlanSummary};
use crate::stages::log_compression::{grey_levels, noise_floor_db, GreyMapping};

#[derive(Debug, Serialize)]
pub struct ToolInfo {
    pub name: &'static str,
    pub version: &'static str,
}

#[derive(Debug, Serialize)]
pub struct InputInfo {
    pub path: String,
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
    pub index: usize,
    pub noise_floor_db: f64,
    pub peak_db: f64,
    pub saturated_samples: u64,
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
}

/// Contents of log.json.
#[derive(Debug, Serialize)]
pub struct ProcessingLog {
    pub tool: ToolInfo,
    pub input: InputInfo,
    pub pipeline: PipelineConfig,
    pub pipeline_sha256: String,
    pub derived: PlanSummary,
    pub frames: Vec<FrameRecord>,
    pub outputs: Vec<String>,
    pub warnings: Vec<String>,
    pub timing: Timing,
}

/// Summary of a finished capture.
#[derive(Debug, Clone)]
pub struct CaptureOutcome {
    pub output_dir: PathBuf,
    pub frames: usize,
    pub alines: usize,
    pub seconds: f64,
}

/// Name of the output directory of a capture: its file stem.
pub fn output_name(capture: &Path) -> String {
    capture.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "capture".into())
}

/// Name of frame `index`'s image.
pub fn frame_png_name(index: usize) -> String {
    format!("frame-{index:04}.png")
}

/// Reconstructs `input` with `config` into `<out_root>/<stem>/`.
pub fn process_capture(input: &Path, config: &PipelineConfig, out_root: &Path, progress: Option<&ProgressBar>) -> Result<CaptureOutcome> {
    let started = Instant::now();
    let capture = Capture::open(input, &config.input)?;
    let sha256 = hash::sha256_file(input).with_context(|| format!("hashing {}", input.display()))?;
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
    let plan = Plan::new(
        config,
        CaptureGeometry {
            wavelength_nm: &capture.wavelength_nm,
            background: capture.background.as_deref(),
            source_spectrum: source_spectrum.as_deref(),
        },
    )?;
    let pipeline_sha256 = config.sha256();
    let summary = plan.summary.clone();
    let (frames, alines, depth) = (capture.frames, capture.alines, summary.depth_pixels);

    let mut warnings = Vec::new();
    if config.background.method == crate::pipeline::config::BackgroundMethod::Auto && capture.background.is_none() {
        warnings.push(format!(
            "capture has no '{}' dataset: background estimated as the median over each frame's A-lines",
            config.input.background
        ));
    }

    let staging = Staging::new(out_root, &output_name(input))?;
    let depth_um: Vec<f64> = (0..depth).map(|i| plan.depth_um(i)).collect();
    let volume = if config.output.volume {
        Some(VolumeWriter::create(
            &staging.path("volume.h5"),
            frames,
            &depth_um,
            alines,
            &VolumeAttributes {
                depth_spacing_um: summary.depth_spacing_um,
                first_depth_um: depth_um[0],
                source_sha256: &sha256,
                pipeline_sha256: &pipeline_sha256,
            },
        )?)
    } else {
        None
    };

    let timer = plan.new_timer();
    let mut spectra = Array2::<f64>::zeros(capture.frame_shape());
    let mut db = Array2::<f32>::zeros((alines, depth));
    let (mut read_s, mut write_s) = (0.0, 0.0);
    let mut records = Vec::with_capacity(frames);
    let mut outputs = Vec::new();
    let lc = &config.log_compression;
    let max_grey = if lc.bit_depth == 8 { 255.0 } else { 65535.0 };

    for f in 0..frames {
        let t = Instant::now();
        let saturated = capture.read_frame(f, &mut spectra)?;
        read_s += t.elapsed().as_secs_f64();

        plan.process_frame(spectra.view(), &mut db, &timer);

        let t = Instant::now();
        let values = db.as_slice().expect("standard layout");
        let floor = noise_floor_db(values);
        let peak = values.iter().copied().fold(f32::NEG_INFINITY, f32::max) as f64;
        let (black, white) = match lc.mapping {
            GreyMapping::Auto => (floor + lc.floor_offset_db, floor + lc.floor_offset_db + lc.dynamic_range_db),
            GreyMapping::Fixed => (lc.db_min, lc.db_max),
        };
        if config.output.png {
            let image = db.t().as_standard_layout().into_owned();
            let levels = grey_levels(image.as_slice().unwrap(), black, white, max_grey);
            let name = frame_png_name(f);
            png::write_grey(&staging.path(&name), alines, depth, &levels, lc.bit_depth)?;
            outputs.push(name);
        }
        if let Some(v) = &volume {
            v.write_frame(f, &db)?;
        }
        write_s += t.elapsed().as_secs_f64();
        if saturated > 0 {
            warnings.push(format!(
                "frame {f}: {saturated} samples at or above full scale ({}): fringes clipped",
                capture.full_scale.unwrap_or(f64::NAN)
            ));
        }
        records.push(FrameRecord {
            index: f,
            noise_floor_db: round6(floor),
            peak_db: round6(peak),
            saturated_samples: saturated,
            grey_black_db: round6(black),
            grey_white_db: round6(white),
        });
        if let Some(p) = progress {
            p.inc(1);
        }
    }
    let t = Instant::now();
    if let Some(v) = volume {
        v.finish()?;
        outputs.push("volume.h5".into());
    }
    outputs.push("log.json".into());

    let total = started.elapsed().as_secs_f64();
    let mut stage_seconds = serde_json::Map::new();
    for (name, s) in plan.stage_names().iter().zip(timer.seconds()) {
        stage_seconds.insert(name.to_string(), serde_json::json!(s));
    }
    let log = ProcessingLog {
        tool: ToolInfo { name: "fringeflow", version: env!("CARGO_PKG_VERSION") },
        input: InputInfo {
            path: input.display().to_string(),
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
        derived: summary,
        frames: records,
        outputs,
        warnings,
        timing: Timing {
            note: "the only section that differs between identical runs",
            read_seconds: read_s,
            stage_thread_seconds: stage_seconds,
            write_seconds: write_s + t.elapsed().as_secs_f64(),
            total_seconds: total,
            alines_per_second: (frames * alines) as f64 / total,
            threads: rayon::current_num_threads(),
        },
    };
    let json = serde_json::to_vec_pretty(&log).context("serialising log")?;
    std::fs::write(staging.path("log.json"), json).context("writing log.json")?;
    let output_dir = staging.commit()?;
    Ok(CaptureOutcome { output_dir, frames, alines, seconds: total })
}

/// Rounds for the log, so that values print stably.
fn round6(v: f64) -> f64 {
    (v * 1e6).round() / 1e6
}
