//! Phase 1 of a run, open and check: the capture opened as the pipeline's
//! `[input]` describes it (`fringeflow_measure::open`), checked against the
//! pipeline, and the resume question answered.

use anyhow::{bail, Context, Result};
use std::path::Path;

use super::{hash_algorithm, output_name, up_to_date, RunContext};
use crate::io::capture::Capture;
use crate::io::hash;
use crate::pipeline::config::{DopplerPairs, PipelineConfig};
pub use fringeflow_measure::open::{capture_layout, open_capture, read_pipeline};

/// Phase 1: the opened, checked capture and what is known before planning.
pub(super) struct Opened {
    pub(super) capture: Capture,
    pub(super) name: String,
    pub(super) pipeline_sha256: String,
    /// The input's SHA-256 when it was needed up front (resume).
    pub(super) sha_now: Option<String>,
    pub(super) positions: usize,
}

/// What opening found.
pub(super) enum Opening {
    Ready(Box<Opened>),
    /// `resume` found the outputs up to date: (frames, A-lines, the input
    /// digest that showed it).
    UpToDate(usize, usize, crate::io::hash::HashAlgorithm),
}

/// Opens and checks the capture against the pipeline.
pub(super) fn open(input: &Path, config: &PipelineConfig, out_root: &Path, ctx: &RunContext<'_>) -> Result<Opening> {
    let capture = open_capture(input, &config.input)?;
    let name = output_name(input);
    if let Some(problem) = crate::io::staging::output_name_problem(&name) {
        bail!("{problem}");
    }
    crate::io::staging::check_replaceable(&out_root.join(&name))?;
    let sha_now = if ctx.resume { Some(hash::input_hash_with(input, hash_algorithm(config)).with_context(|| format!("hashing {}", input.display()))?) } else { None };
    let pipeline_sha256 = config.sha256();
    if let Some(p) = ctx.capture_progress {
        p.set_length(capture.frames as u64);
    }
    if ctx.resume {
        if let Some(digest) = up_to_date(&out_root.join(&name), input, sha_now.as_deref().unwrap_or(""), &pipeline_sha256, &capture) {
            return Ok(Opening::UpToDate(capture.frames, capture.alines, digest));
        }
    }
    let (frames, average) = (capture.frames, config.volume.average);
    if frames % average != 0 {
        bail!("the capture has {frames} frames, not a multiple of volume.average = {average} (repeated B-scans per position)");
    }
    if config.angiography.enabled() && average < 2 {
        bail!(
            "angiography needs N ≥ 2 repeated B-scans per position: set volume.average to the repeats per position (the capture has {frames} frame{})",
            if frames == 1 { "" } else { "s" }
        );
    }
    if config.doppler.enabled && config.doppler.between == DopplerPairs::Repeats && average < 2 {
        bail!("doppler.between = \"repeats\" needs repeated B-scans per position: set volume.average (now 1)");
    }
    Ok(Opening::Ready(Box::new(Opened { positions: frames / average, capture, name, pipeline_sha256, sha_now })))
}

